//! The measurement cycle as an explicit state machine.
//!
//! ```text
//! Sleep ─► Wake ─► PowerSensor ─► Settle ─► Acquire ⟲ (one block per step)
//!   ▲                                          │
//!   └── Listen ◄── Transmit ◄── Encode ◄── Finish
//! ```
//!
//! Each [`Node::step`] performs one transition, so host tests can check every
//! state with mock hardware. Blocks go to the core as they arrive; no raw
//! record is kept. Any hardware or core error powers the sensor down, stops
//! the drivers and returns to `Sleep` without feeding the watchdog.

use crate::config::{PointRecord, MAX_RECORD_LEN};
use crate::crc::crc32;
use crate::downlink::{self, Command, DownlinkError, MAX_BASELINE_LEN};
use crate::hal::{
    Alarm, Battery, BlockSource, MeasurementCore, PulseCapture, RadioLink, Slot, Storage,
    WakeReason, Watchdog,
};
use crate::log::{log_info, log_warn};
use crate::quality::{QualityFlags, SignalHealth};
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;

/// Capacity of the uplink frame buffer (frames are at most 51 bytes).
pub const FRAME_CAPACITY: usize = 64;
/// Largest downlink accepted (command byte + largest record).
pub const DOWNLINK_CAPACITY: usize = 1 + if MAX_RECORD_LEN > MAX_BASELINE_LEN {
    MAX_RECORD_LEN
} else {
    MAX_BASELINE_LEN
};
/// Upper bound on blocks per record whatever the configuration says.
pub const MAX_RECORD_BLOCKS: u32 = 4_096;

/// Where the cycle is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum State {
    /// Waiting for the alarm or a command, sensor off.
    Sleep,
    /// Woken; per-cycle state is reset here.
    Wake(WakeReason),
    /// Switching the sensor supply on.
    PowerSensor,
    /// Waiting for the sensor to settle, then starting the drivers.
    Settle,
    /// Streaming blocks and edges into the core.
    Acquire,
    /// The core computes its report.
    Finish,
    /// The report becomes a frame.
    Encode,
    /// The frame goes to the radio.
    Transmit,
    /// Receive window for a downlink; then the watchdog is fed if healthy.
    Listen,
}

/// What failed in a cycle.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Fault {
    /// The sensor power pin could not be driven.
    PowerPin,
    /// The block source (ADC/DMA) failed.
    Source,
    /// The pulse capture failed.
    Capture,
    /// The core refused the configuration or failed to finish or encode.
    Core,
    /// The radio failed to send or receive.
    Radio,
}

/// A cycle aborted in `state` because of `fault`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CycleError {
    /// State in which it happened.
    pub state: State,
    /// What failed.
    pub fault: Fault,
}

impl core::fmt::Display for CycleError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(
            f,
            "cycle aborted in {:?}: {:?} fault",
            self.state, self.fault
        )
    }
}

impl core::error::Error for CycleError {}

/// Where the configuration in use came from at boot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConfigSource {
    /// Loaded from storage and valid.
    Stored,
    /// Storage empty: the built-in default is in use.
    DefaultEmpty,
    /// Stored record invalid or unreadable: the built-in default is in use.
    DefaultInvalid,
}

/// What became of the last downlink.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DownlinkOutcome {
    /// No downlink in the last receive window.
    None,
    /// New configuration validated, stored and in use.
    ConfigApplied,
    /// Measure-now request accepted.
    MeasureNow,
    /// New baseline accepted by the core and stored.
    BaselineApplied,
    /// Refused; everything kept as it was.
    Refused(DownlinkError),
    /// Valid, but storage or the core failed; old values kept.
    NotStored,
}

/// Figures of the last completed (or aborted) cycle.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CycleSummary {
    /// Why the cycle ran.
    pub reason: WakeReason,
    /// Quality flags put into the frame.
    pub flags: QualityFlags,
    /// Blocks pushed to the core.
    pub blocks: u32,
    /// Blocks that arrived after an overrun.
    pub overruns: u32,
    /// Tach edges pushed to the core.
    pub edges: u32,
    /// Bytes of the frame sent (0 if none).
    pub frame_len: usize,
    /// Battery voltage read under load, mV.
    pub battery_mv: u16,
    /// The fault that aborted the cycle, if any.
    pub fault: Option<CycleError>,
    /// Whether the watchdog was fed.
    pub fed_watchdog: bool,
}

impl CycleSummary {
    const fn new(reason: WakeReason) -> Self {
        Self {
            reason,
            flags: QualityFlags::empty(),
            blocks: 0,
            overruns: 0,
            edges: 0,
            frame_len: 0,
            battery_mv: 0,
            fault: None,
            fed_watchdog: false,
        }
    }
}

/// The node's devices, one small trait each.
pub struct Devices<S, P, R, A, St, B, W, Pw, D> {
    /// ADC blocks (DMA double buffer).
    pub source: S,
    /// Tach edge capture.
    pub capture: P,
    /// Radio link.
    pub radio: R,
    /// Sleep and wake-up alarm.
    pub alarm: A,
    /// Persistent storage.
    pub storage: St,
    /// Supply monitor.
    pub battery: B,
    /// Watchdog.
    pub watchdog: W,
    /// Sensor supply switch (high = on).
    pub power: Pw,
    /// Delay for sensor settling.
    pub delay: D,
}

/// The node: devices, core, configuration and the cycle state.
pub struct Node<S, P, R, A, St, B, W, Pw, D, C> {
    dev: Devices<S, P, R, A, St, B, W, Pw, D>,
    core: C,
    config: PointRecord,
    config_source: ConfigSource,
    state: State,
    health: SignalHealth,
    summary: CycleSummary,
    blocks_wanted: u32,
    measure_now: bool,
    downlink: DownlinkOutcome,
    frame: [u8; FRAME_CAPACITY],
}

impl<S, P, R, A, St, B, W, Pw, D, C> Node<S, P, R, A, St, B, W, Pw, D, C>
where
    S: BlockSource,
    P: PulseCapture,
    R: RadioLink,
    A: Alarm,
    St: Storage,
    B: Battery,
    W: Watchdog,
    Pw: OutputPin,
    D: DelayNs,
    C: MeasurementCore,
{
    /// Boots: loads and checks the stored configuration (falling back to the
    /// built-in default when it is missing or invalid) and the stored
    /// baseline, switches the sensor off and starts in `Sleep`.
    pub fn new(mut dev: Devices<S, P, R, A, St, B, W, Pw, D>, mut core: C) -> Self {
        // Sensor off first: a failing pin shows up again at PowerSensor.
        let _ = dev.power.set_low();
        let mut buf = [0u8; MAX_RECORD_LEN];
        let (config, config_source) = match dev.storage.load(Slot::Config, &mut buf) {
            Ok(0) => (PointRecord::default(), ConfigSource::DefaultEmpty),
            Ok(n) => match buf.get(..n).map(PointRecord::decode) {
                Some(Ok(c)) => (c, ConfigSource::Stored),
                _ => (PointRecord::default(), ConfigSource::DefaultInvalid),
            },
            Err(_) => (PointRecord::default(), ConfigSource::DefaultInvalid),
        };
        let mut bl = [0u8; MAX_BASELINE_LEN + 4];
        if let Ok(n) = dev.storage.load(Slot::Baseline, &mut bl) {
            if let Some(payload) = bl.get(..n).and_then(unseal) {
                if core.load_baseline(payload).is_err() {
                    log_warn!("stored baseline refused by the core");
                }
            }
        }
        log_info!("boot: config {}", config_source);
        Self {
            dev,
            core,
            config,
            config_source,
            state: State::Sleep,
            health: SignalHealth::new(),
            summary: CycleSummary::new(WakeReason::Schedule),
            blocks_wanted: 0,
            measure_now: false,
            downlink: DownlinkOutcome::None,
            frame: [0; FRAME_CAPACITY],
        }
    }

    /// Present state.
    pub fn state(&self) -> State {
        self.state
    }

    /// Configuration in use.
    pub fn config(&self) -> &PointRecord {
        &self.config
    }

    /// Where the configuration came from at boot.
    pub fn config_source(&self) -> ConfigSource {
        self.config_source
    }

    /// Figures of the last or current cycle.
    pub fn summary(&self) -> &CycleSummary {
        &self.summary
    }

    /// What became of the last downlink.
    pub fn downlink(&self) -> DownlinkOutcome {
        self.downlink
    }

    /// The last frame sent (empty before the first).
    pub fn frame(&self) -> &[u8] {
        self.frame.get(..self.summary.frame_len).unwrap_or(&[])
    }

    /// Blocks the present configuration records per cycle.
    pub fn blocks_wanted(&self) -> u32 {
        self.config
            .record_blocks(self.dev.source.block_len(), MAX_RECORD_BLOCKS)
    }

    /// The devices (for tests and board diagnostics).
    pub fn devices(&self) -> &Devices<S, P, R, A, St, B, W, Pw, D> {
        &self.dev
    }

    /// The core.
    pub fn core(&self) -> &C {
        &self.core
    }

    /// Performs one transition and returns the new state. On a fault the
    /// node is already back in `Sleep` (sensor off, drivers stopped).
    pub fn step(&mut self) -> Result<State, CycleError> {
        let from = self.state;
        match self.transition(from) {
            Ok(next) => {
                self.state = next;
                Ok(next)
            }
            Err(fault) => {
                let err = CycleError { state: from, fault };
                log_warn!("cycle fault {}", err);
                self.dev.source.stop();
                self.dev.capture.stop();
                let _ = self.dev.power.set_low();
                self.summary.fault = Some(err);
                self.state = State::Sleep;
                Err(err)
            }
        }
    }

    /// Runs from `Sleep` through one whole cycle back to `Sleep`.
    pub fn run_cycle(&mut self) -> Result<CycleSummary, CycleError> {
        loop {
            if self.step()? == State::Sleep {
                return Ok(self.summary);
            }
        }
    }

    fn transition(&mut self, from: State) -> Result<State, Fault> {
        Ok(match from {
            State::Sleep => {
                let reason = if core::mem::take(&mut self.measure_now) {
                    WakeReason::Command
                } else {
                    self.dev.alarm.sleep(self.config.interval_s)
                };
                State::Wake(reason)
            }
            State::Wake(reason) => {
                self.summary = CycleSummary::new(reason);
                self.health = SignalHealth::new();
                self.downlink = DownlinkOutcome::None;
                self.blocks_wanted = self.blocks_wanted();
                log_info!("wake {}: {} blocks", reason, self.blocks_wanted);
                State::PowerSensor
            }
            State::PowerSensor => {
                self.dev.power.set_high().map_err(|_| Fault::PowerPin)?;
                State::Settle
            }
            State::Settle => {
                self.dev.delay.delay_ms(u32::from(self.config.settle_ms));
                // read under load (sensor powered): common practice for primary cells
                let mv = self.dev.battery.millivolts();
                self.summary.battery_mv = mv;
                if mv < self.config.low_battery_mv {
                    self.summary.flags.insert(QualityFlags::LOW_BATTERY);
                }
                self.core.start(&self.config).map_err(|_| Fault::Core)?;
                self.dev.capture.start().map_err(|_| Fault::Capture)?;
                self.dev.source.start().map_err(|_| Fault::Source)?;
                State::Acquire
            }
            State::Acquire => {
                let block = self.dev.source.next_block().map_err(|_| Fault::Source)?;
                if block.overrun {
                    self.summary.overruns = self.summary.overruns.saturating_add(1);
                    self.summary.flags.insert(QualityFlags::PROCESSING_OVERRUN);
                }
                // edges captured up to now happened during or before this
                // block: the core gets them first (as the host simulator does)
                while let Some(tick) = self.dev.capture.next_edge() {
                    self.core.push_edge(tick);
                    self.summary.edges = self.summary.edges.saturating_add(1);
                }
                self.health
                    .observe(block.samples, self.config.health.clip_level);
                self.core.push_block(block.samples);
                self.summary.blocks = self.summary.blocks.saturating_add(1);
                if self.summary.blocks >= self.blocks_wanted || self.core.complete() {
                    self.dev.source.stop();
                    self.dev.capture.stop();
                    self.dev.power.set_low().map_err(|_| Fault::PowerPin)?;
                    State::Finish
                } else {
                    State::Acquire
                }
            }
            State::Finish => {
                let f = self.health.flags(&self.config.health);
                self.summary.flags.insert(f);
                // one edge gives no period: speed unknown (tach loss)
                if self.summary.edges < 2 {
                    self.summary.flags.insert(QualityFlags::TACH_MISSING);
                }
                self.core
                    .finish(self.summary.flags)
                    .map_err(|_| Fault::Core)?;
                State::Encode
            }
            State::Encode => {
                let n = self.core.encode(&mut self.frame).map_err(|_| Fault::Core)?;
                self.summary.frame_len = n.min(FRAME_CAPACITY);
                State::Transmit
            }
            State::Transmit => {
                let frame = self.frame.get(..self.summary.frame_len).unwrap_or(&[]);
                self.dev.radio.send(frame).map_err(|_| Fault::Radio)?;
                log_info!("sent {} bytes, flags {}", frame.len(), self.summary.flags);
                State::Listen
            }
            State::Listen => {
                let mut buf = [0u8; DOWNLINK_CAPACITY];
                let got = self.dev.radio.receive(&mut buf).map_err(|_| Fault::Radio)?;
                if let Some(n) = got {
                    let msg = buf.get(..n.min(DOWNLINK_CAPACITY)).unwrap_or(&[]);
                    self.downlink = self.apply_downlink(msg);
                    log_info!("downlink {}", self.downlink);
                }
                // healthy: every state passed and no block was lost
                if !self
                    .summary
                    .flags
                    .contains(QualityFlags::PROCESSING_OVERRUN)
                {
                    self.dev.watchdog.feed();
                    self.summary.fed_watchdog = true;
                }
                State::Sleep
            }
        })
    }

    /// Applies one downlink message; a refused one changes nothing.
    pub fn apply_downlink(&mut self, msg: &[u8]) -> DownlinkOutcome {
        match downlink::parse(msg) {
            Err(e) => DownlinkOutcome::Refused(e),
            Ok(Command::MeasureNow) => {
                self.measure_now = true;
                DownlinkOutcome::MeasureNow
            }
            Ok(Command::SetConfig(rec)) => {
                let mut buf = [0u8; MAX_RECORD_LEN];
                let stored = rec
                    .encode(&mut buf)
                    .ok()
                    .and_then(|n| buf.get(..n))
                    .map(|bytes| self.dev.storage.store(Slot::Config, bytes).is_ok());
                if stored == Some(true) {
                    self.config = rec;
                    DownlinkOutcome::ConfigApplied
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Ok(Command::SetBaseline(data)) => {
                if self.core.load_baseline(data).is_err() {
                    return DownlinkOutcome::Refused(DownlinkError::BadBaseline);
                }
                let mut buf = [0u8; MAX_BASELINE_LEN + 4];
                match seal(data, &mut buf) {
                    Some(sealed) if self.dev.storage.store(Slot::Baseline, sealed).is_ok() => {
                        DownlinkOutcome::BaselineApplied
                    }
                    _ => DownlinkOutcome::NotStored,
                }
            }
        }
    }
}

/// Appends a CRC-32 to `data` in `buf`.
fn seal<'a>(data: &[u8], buf: &'a mut [u8]) -> Option<&'a [u8]> {
    let n = data.len();
    buf.get_mut(..n)?.copy_from_slice(data);
    buf.get_mut(n..n + 4)?
        .copy_from_slice(&crc32(data).to_le_bytes());
    buf.get(..n + 4)
}

/// Checks and strips the CRC-32 trailer written by [`seal`].
fn unseal(data: &[u8]) -> Option<&[u8]> {
    let (payload, crc) = data.split_at_checked(data.len().checked_sub(4)?)?;
    let mut c = [0u8; 4];
    c.copy_from_slice(crc);
    (!payload.is_empty() && crc32(payload) == u32::from_le_bytes(c)).then_some(payload)
}
