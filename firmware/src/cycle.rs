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
//!
//! A cycle is a measurement or a commissioning survey ([`CycleKind`]). A
//! survey cycle runs when the configuration has no band (once per boot and
//! configuration) or when an authenticated `0x04` downlink asks for one: the
//! same states, but the blocks feed the core's band survey, `Finish` stores
//! the chosen band in the configuration, and the uplink is the status frame
//! ([`dsp_core::frame::status`]) that reports it.
//!
//! A measurement's report goes out as a full frame or, when nothing changed
//! beyond the margin since the last full frame, as the reduced frame
//! ([`crate::exception`], [`Node::set_report_policy`]; reports from a core
//! whose frames are not dsp-core full frames go out as they are).
//!
//! Downlinks are verified before they are parsed ([`downlink::open`]); a
//! refused one changes nothing and is counted. The node sends a status
//! frame after the report of the first cycle after boot and of the cycle
//! after any downlink, so the gateway sees what became of it.

use crate::commission::{CommissionError, SurveyChoice};
use crate::config::{BandSource, PointRecord, StoredConfig, MAX_STORED_LEN};
use crate::crc::crc32;
use crate::downlink::{self, Command, DownlinkError, MAX_BASELINE_LEN};
use crate::downlink_auth::AuthError;
use crate::exception::{Choice, ExceptionState, ReportPolicy};
use crate::hal::{
    Alarm, Battery, BlockSource, MeasurementCore, PulseCapture, RadioLink, Slot, Storage,
    WakeReason, Watchdog,
};
use crate::identity::{Identity, IDENTITY_LEN};
use crate::log::{log_info, log_warn};
use crate::quality::{QualityFlags, SignalHealth};
use dsp_core::frame::status::{
    encode_status, BandSource as FrameBandSource, BootConfig, DownlinkResult, StatusReport,
    SurveyStatus,
};
use dsp_core::frame::QualityFlags as FrameFlags;
use dsp_core::survey::SurveyError;
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;

/// Capacity of the uplink frame buffer: the longest v2 report frame (8
/// bearings, 4 meshes: 181 bytes; status frames are 27).
pub const FRAME_CAPACITY: usize = dsp_core::frame::v2::full_frame_len_v2(
    dsp_core::frame::layout::MAX_BEARINGS,
    dsp_core::frame::layout::MAX_MESHES,
);
/// Largest downlink accepted (authentication header and tag, command byte,
/// largest record).
pub const DOWNLINK_CAPACITY: usize = crate::downlink_auth::HEADER_LEN
    + crate::downlink_auth::TAG_LEN
    + 1
    + if crate::config::MAX_RECORD_LEN > MAX_BASELINE_LEN {
        crate::config::MAX_RECORD_LEN
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
    /// The status frame could not be encoded.
    Status,
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

/// What a cycle does with its blocks.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CycleKind {
    /// A measurement: report frame (and a status frame when one is due).
    Measure,
    /// A commissioning band survey: status frame with the chosen band.
    Survey,
}

/// What became of a downlink.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DownlinkOutcome {
    /// No downlink in the last receive window.
    None,
    /// New configuration validated, stored with its counter and in use.
    ConfigApplied,
    /// Measure-now request accepted.
    MeasureNow,
    /// Band survey request accepted: it runs in the next cycle.
    SurveyRequested,
    /// New baseline accepted by the core and stored.
    BaselineApplied,
    /// Refused; everything kept as it was.
    Refused(DownlinkError),
    /// Authentic and valid, but storage or the core failed; old values kept.
    NotStored,
}

impl DownlinkOutcome {
    /// The code the status frame carries.
    pub fn result(self) -> DownlinkResult {
        match self {
            Self::None => DownlinkResult::None,
            Self::ConfigApplied => DownlinkResult::ConfigApplied,
            Self::MeasureNow => DownlinkResult::MeasureNow,
            Self::SurveyRequested => DownlinkResult::SurveyRequested,
            Self::BaselineApplied => DownlinkResult::BaselineApplied,
            Self::NotStored => DownlinkResult::NotStored,
            Self::Refused(e) => match e {
                DownlinkError::NotProvisioned => DownlinkResult::NotProvisioned,
                DownlinkError::Auth(a) => match a {
                    AuthError::TooShort { .. } => DownlinkResult::Truncated,
                    AuthError::UnknownVersion(_) => DownlinkResult::UnknownVersion,
                    AuthError::WrongNode { .. } => DownlinkResult::WrongNode,
                    AuthError::BadTag => DownlinkResult::BadTag,
                    AuthError::Replayed { .. } => DownlinkResult::Replayed,
                },
                DownlinkError::Empty => DownlinkResult::EmptyCommand,
                DownlinkError::UnknownCommand(_) => DownlinkResult::UnknownCommand,
                DownlinkError::Config(_) => DownlinkResult::InvalidConfig,
                DownlinkError::BadBaseline => DownlinkResult::InvalidBaseline,
            },
        }
    }
}

/// What became of the last band survey.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SurveyOutcome {
    /// No survey since boot.
    NotRun,
    /// Band chosen, stored in the configuration and in use.
    Stored(SurveyChoice),
    /// Band chosen but storing it failed: the configuration is unchanged.
    NotStored(SurveyChoice),
    /// The capture was clipped, flat or overrun (these flags): discarded.
    SignalFault(QualityFlags),
    /// The survey could not run or choose.
    Failed(CommissionError),
}

impl SurveyOutcome {
    /// The code the status frame carries.
    pub fn status(self) -> SurveyStatus {
        match self {
            Self::NotRun => SurveyStatus::NotRun,
            Self::Stored(_) => SurveyStatus::Stored,
            Self::NotStored(_) => SurveyStatus::NotStored,
            Self::SignalFault(_) => SurveyStatus::SignalFault,
            Self::Failed(e) => match e {
                CommissionError::Unsupported | CommissionError::NotStarted => {
                    SurveyStatus::Unsupported
                }
                CommissionError::Point(_) => SurveyStatus::Config,
                CommissionError::Survey(s) => match s {
                    SurveyError::Flat => SurveyStatus::Flat,
                    SurveyError::TooFewSamples => SurveyStatus::TooFewSamples,
                    SurveyError::NoBand => SurveyStatus::NoBand,
                    SurveyError::SampleRate | SurveyError::Config => SurveyStatus::Config,
                },
            },
        }
    }
}

/// Figures of the last completed (or aborted) cycle.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CycleSummary {
    /// Why the cycle ran.
    pub reason: WakeReason,
    /// Measurement or band survey.
    pub kind: CycleKind,
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
    /// A status frame went out in this cycle (after the report, or as the
    /// survey cycle's only frame).
    pub status_sent: bool,
    /// Battery voltage read under load, mV.
    pub battery_mv: u16,
    /// Full or reduced report frame, when the report was a dsp-core full
    /// frame the policy could read ([`crate::exception`]).
    pub report_frame: Option<Choice>,
    /// The fault that aborted the cycle, if any.
    pub fault: Option<CycleError>,
    /// Whether the watchdog was fed.
    pub fed_watchdog: bool,
}

impl CycleSummary {
    const fn new(reason: WakeReason, kind: CycleKind) -> Self {
        Self {
            reason,
            kind,
            flags: QualityFlags::empty(),
            blocks: 0,
            overruns: 0,
            edges: 0,
            frame_len: 0,
            status_sent: false,
            battery_mv: 0,
            report_frame: None,
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

/// Downlink and survey bookkeeping since boot, for the status frame.
#[derive(Clone, Copy, Debug)]
struct LinkState {
    /// Result of the last downlink since boot.
    last_downlink: DownlinkOutcome,
    /// Downlinks refused since boot.
    refused: u8,
    /// Result of the last survey since boot.
    survey: SurveyOutcome,
    /// A survey was asked for by a downlink.
    survey_requested: bool,
    /// A survey already ran for the present (unset) band since boot or the
    /// last configuration change: not retried every cycle.
    survey_tried: bool,
    /// A status frame goes out with the next uplink.
    status_pending: bool,
    /// Sequence number of the next status frame.
    status_seq: u16,
}

/// The node: devices, core, configuration and the cycle state.
pub struct Node<S, P, R, A, St, B, W, Pw, D, C> {
    dev: Devices<S, P, R, A, St, B, W, Pw, D>,
    core: C,
    config: PointRecord,
    counter: u32,
    identity: Option<Identity>,
    config_source: ConfigSource,
    state: State,
    kind: CycleKind,
    health: SignalHealth,
    summary: CycleSummary,
    blocks_wanted: u32,
    measure_now: bool,
    downlink: DownlinkOutcome,
    link: LinkState,
    frame: [u8; FRAME_CAPACITY],
    policy: ReportPolicy,
    exception: ExceptionState,
    /// The report of this cycle's frame, for the exception state once sent.
    pending: Option<(Choice, dsp_core::frame::FrameReport)>,
}

/// Firmware flags as the frame's flag field.
pub fn frame_flags(f: QualityFlags) -> FrameFlags {
    FrameFlags {
        tach_missing: f.contains(QualityFlags::TACH_MISSING),
        clipping: f.contains(QualityFlags::CLIPPING),
        sensor_fault: f.contains(QualityFlags::SENSOR_FAULT),
        processing_overrun: f.contains(QualityFlags::PROCESSING_OVERRUN),
        low_battery: f.contains(QualityFlags::LOW_BATTERY),
        ..FrameFlags::default()
    }
}

/// The band a record measures with: its own, or dsp-core's default band for
/// its sample rate when it has none.
pub fn band_in_use(config: &PointRecord) -> [f32; 2] {
    match config.band_hz() {
        Some(b) => b,
        None => {
            let mut p = dsp_core::config::PointConfig::default();
            // validated range 1 kHz..200 kHz: exact in f32
            p.sample_rate_hz = f32::from(u16::try_from(config.sample_rate_hz / 10).unwrap_or(0))
                * 10.0
                + f32::from(u8::try_from(config.sample_rate_hz % 10).unwrap_or(0));
            p.default_band_hz()
        }
    }
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
    /// Boots: reads the provisioned identity (without one every downlink is
    /// refused), loads and checks the stored configuration and its replay
    /// counter (falling back to the built-in default, counter 0, when it is
    /// missing or invalid) and the stored baseline, switches the sensor off
    /// and starts in `Sleep`.
    pub fn new(mut dev: Devices<S, P, R, A, St, B, W, Pw, D>, mut core: C) -> Self {
        // Sensor off first: a failing pin shows up again at PowerSensor.
        let _ = dev.power.set_low();
        let mut idb = [0u8; IDENTITY_LEN];
        let identity = match dev.storage.load(Slot::Identity, &mut idb) {
            Ok(0) => None,
            Ok(n) => idb.get(..n).and_then(|b| Identity::decode(b).ok()),
            Err(_) => None,
        };
        if let Some(id) = &identity {
            core.set_node_id(id.node_id());
        } else {
            log_warn!("no valid identity: downlinks will be refused");
        }
        let mut buf = [0u8; MAX_STORED_LEN];
        let (stored, config_source) = match dev.storage.load(Slot::Config, &mut buf) {
            Ok(0) => (None, ConfigSource::DefaultEmpty),
            Ok(n) => match buf.get(..n).map(StoredConfig::decode) {
                Some(Ok(c)) => (Some(c), ConfigSource::Stored),
                _ => (None, ConfigSource::DefaultInvalid),
            },
            Err(_) => (None, ConfigSource::DefaultInvalid),
        };
        let StoredConfig {
            counter,
            record: config,
        } = stored.unwrap_or(StoredConfig {
            counter: 0,
            record: PointRecord::default(),
        });
        let mut bl = [0u8; MAX_BASELINE_LEN + 4];
        if let Ok(n) = dev.storage.load(Slot::Baseline, &mut bl) {
            if let Some(payload) = bl.get(..n).and_then(unseal) {
                if core.load_baseline(payload).is_err() {
                    log_warn!("stored baseline refused by the core");
                }
            }
        }
        log_info!("boot: config {}, counter {}", config_source, counter);
        Self {
            dev,
            core,
            config,
            counter,
            identity,
            config_source,
            state: State::Sleep,
            kind: CycleKind::Measure,
            health: SignalHealth::new(),
            summary: CycleSummary::new(WakeReason::Schedule, CycleKind::Measure),
            blocks_wanted: 0,
            measure_now: false,
            downlink: DownlinkOutcome::None,
            link: LinkState {
                last_downlink: DownlinkOutcome::None,
                refused: 0,
                survey: SurveyOutcome::NotRun,
                survey_requested: false,
                survey_tried: false,
                // the gateway learns of every boot
                status_pending: true,
                status_seq: 0,
            },
            frame: [0; FRAME_CAPACITY],
            policy: ReportPolicy::default(),
            exception: ExceptionState::new(),
            pending: None,
        }
    }

    /// Sets when full report frames are sent (default
    /// [`ReportPolicy::default`]; [`ReportPolicy::EVERY_CYCLE`] sends no
    /// reduced frames). An invalid policy is refused and the present kept.
    pub fn set_report_policy(
        &mut self,
        policy: ReportPolicy,
    ) -> Result<(), crate::exception::PolicyError> {
        policy.validate()?;
        self.policy = policy;
        Ok(())
    }

    /// The policy in use.
    pub fn report_policy(&self) -> ReportPolicy {
        self.policy
    }

    /// Present state.
    pub fn state(&self) -> State {
        self.state
    }

    /// Configuration in use.
    pub fn config(&self) -> &PointRecord {
        &self.config
    }

    /// Replay counter stored with the configuration.
    pub fn counter(&self) -> u32 {
        self.counter
    }

    /// Node id of the provisioned identity, if any.
    pub fn node_id(&self) -> Option<u16> {
        self.identity.as_ref().map(Identity::node_id)
    }

    /// Where the configuration came from at boot.
    pub fn config_source(&self) -> ConfigSource {
        self.config_source
    }

    /// Figures of the last or current cycle.
    pub fn summary(&self) -> &CycleSummary {
        &self.summary
    }

    /// What became of the downlink of the last receive window.
    pub fn downlink(&self) -> DownlinkOutcome {
        self.downlink
    }

    /// Downlinks refused since boot (saturating).
    pub fn refused_downlinks(&self) -> u8 {
        self.link.refused
    }

    /// What became of the last band survey since boot.
    pub fn survey(&self) -> SurveyOutcome {
        self.link.survey
    }

    /// The last frame the cycle built (report, or status in a survey
    /// cycle; empty before the first).
    pub fn frame(&self) -> &[u8] {
        self.frame.get(..self.summary.frame_len).unwrap_or(&[])
    }

    /// Blocks the present configuration records per cycle.
    pub fn blocks_wanted(&self) -> u32 {
        // Every pass of the point (dsp_core::coverage) at the node's
        // 4096-point spectrum, one after the other.
        let mut rec = self.config.clone();
        if let Ok(p) = crate::point::point_config(&self.config) {
            let total: u32 = dsp_core::coverage::plan(&p, 4096)
                .passes
                .iter()
                .map(|p| u32::from(p.revolutions))
                .sum();
            rec.record_revs = u16::try_from(total).unwrap_or(u16::MAX);
        }
        rec.record_blocks(self.dev.source.block_len(), MAX_RECORD_BLOCKS)
    }

    /// The devices (for tests and board diagnostics).
    pub fn devices(&self) -> &Devices<S, P, R, A, St, B, W, Pw, D> {
        &self.dev
    }

    /// Gives the devices back (tests: a reboot over the same storage).
    pub fn into_devices(self) -> Devices<S, P, R, A, St, B, W, Pw, D> {
        self.dev
    }

    /// The core.
    pub fn core(&self) -> &C {
        &self.core
    }

    /// The status the next status frame would carry (sequence number
    /// included; the flags are those of the last cycle).
    pub fn status(&self) -> StatusReport {
        let (band_source, band_kurtosis) = match self.config.band_source {
            BandSource::Configured => (FrameBandSource::Configured, f32::NAN),
            BandSource::Survey { kurtosis } => (FrameBandSource::Survey, kurtosis),
            BandSource::Unset => (FrameBandSource::Unset, f32::NAN),
        };
        StatusReport {
            node_id: self.node_id().unwrap_or(0),
            seq: self.link.status_seq,
            flags: frame_flags(self.summary.flags),
            band_source,
            boot_config: match self.config_source {
                ConfigSource::Stored => BootConfig::Stored,
                ConfigSource::DefaultEmpty => BootConfig::DefaultEmpty,
                ConfigSource::DefaultInvalid => BootConfig::DefaultInvalid,
            },
            provisioned: self.identity.is_some(),
            downlink_counter: self.counter,
            last_downlink: self.link.last_downlink.result(),
            refused_downlinks: self.link.refused,
            survey: self.link.survey.status(),
            band_hz: band_in_use(&self.config),
            band_kurtosis,
            ..StatusReport::default()
        }
    }

    /// Encodes the status frame into `out` and advances its sequence number.
    #[inline(never)] // keeps its buffers out of the frame of every step
    fn encode_status_frame(&mut self, out: &mut [u8]) -> Result<usize, Fault> {
        let n = encode_status(&self.status(), out).map_err(|_| Fault::Status)?;
        self.link.status_seq = self.link.status_seq.wrapping_add(1);
        self.link.status_pending = false;
        Ok(n)
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
                let now = core::mem::take(&mut self.measure_now) || self.link.survey_requested;
                let reason = if now {
                    WakeReason::Command
                } else {
                    self.dev.alarm.sleep(self.config.interval_s)
                };
                State::Wake(reason)
            }
            State::Wake(reason) => {
                let unset = self.config.band_source == BandSource::Unset;
                self.kind = if core::mem::take(&mut self.link.survey_requested)
                    || (unset && !self.link.survey_tried)
                {
                    CycleKind::Survey
                } else {
                    CycleKind::Measure
                };
                self.summary = CycleSummary::new(reason, self.kind);
                self.health = SignalHealth::new();
                self.downlink = DownlinkOutcome::None;
                self.blocks_wanted = self.blocks_wanted();
                log_info!(
                    "wake {}: {} of {} blocks",
                    reason,
                    self.kind,
                    self.blocks_wanted
                );
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
                match self.kind {
                    CycleKind::Measure => {
                        self.core.start(&self.config).map_err(|_| Fault::Core)?;
                        self.dev.capture.start().map_err(|_| Fault::Capture)?;
                    }
                    CycleKind::Survey => {
                        if let Err(e) = self.core.start_survey(&self.config) {
                            // nothing to capture: report why, sensor off
                            self.dev.power.set_low().map_err(|_| Fault::PowerPin)?;
                            self.end_survey(SurveyOutcome::Failed(e));
                            return Ok(State::Encode);
                        }
                    }
                }
                self.dev.source.start().map_err(|_| Fault::Source)?;
                State::Acquire
            }
            State::Acquire => {
                let block = self.dev.source.next_block().map_err(|_| Fault::Source)?;
                if block.overrun {
                    self.summary.overruns = self.summary.overruns.saturating_add(1);
                    self.summary.flags.insert(QualityFlags::PROCESSING_OVERRUN);
                }
                if self.kind == CycleKind::Measure {
                    // edges captured up to now happened during or before this
                    // block: the core gets them first (as the host simulator does)
                    while let Some(tick) = self.dev.capture.next_edge() {
                        self.core.push_edge(tick);
                        self.summary.edges = self.summary.edges.saturating_add(1);
                    }
                }
                self.health
                    .observe(block.samples, self.config.health.clip_level);
                self.core.push_block(block.samples);
                self.summary.blocks = self.summary.blocks.saturating_add(1);
                let early = self.kind == CycleKind::Measure && self.core.complete();
                if self.summary.blocks >= self.blocks_wanted || early {
                    self.dev.source.stop();
                    if self.kind == CycleKind::Measure {
                        self.dev.capture.stop();
                    }
                    self.dev.power.set_low().map_err(|_| Fault::PowerPin)?;
                    State::Finish
                } else {
                    State::Acquire
                }
            }
            State::Finish => {
                let f = self.health.flags(&self.config.health);
                self.summary.flags.insert(f);
                match self.kind {
                    CycleKind::Measure => {
                        // one edge gives no period: speed unknown (tach loss)
                        if self.summary.edges < 2 {
                            self.summary.flags.insert(QualityFlags::TACH_MISSING);
                        }
                        self.core
                            .finish(self.summary.flags)
                            .map_err(|_| Fault::Core)?;
                    }
                    CycleKind::Survey => {
                        let outcome = self.survey_outcome();
                        self.end_survey(outcome);
                    }
                }
                State::Encode
            }
            State::Encode => {
                self.pending = None;
                let n = match self.kind {
                    CycleKind::Measure => {
                        let n = self.core.encode(&mut self.frame).map_err(|_| Fault::Core)?;
                        self.by_exception(n)
                    }
                    CycleKind::Survey => {
                        let mut buf = [0u8; FRAME_CAPACITY];
                        let n = self.encode_status_frame(&mut buf)?;
                        self.frame = buf;
                        self.summary.status_sent = true;
                        n
                    }
                };
                self.summary.frame_len = n.min(FRAME_CAPACITY);
                State::Transmit
            }
            State::Transmit => {
                let frame = self.frame.get(..self.summary.frame_len).unwrap_or(&[]);
                self.dev.radio.send(frame).map_err(|_| Fault::Radio)?;
                log_info!("sent {} bytes, flags {}", frame.len(), self.summary.flags);
                if let Some((choice, report)) = self.pending.take() {
                    self.exception.sent(choice, &report);
                }
                if self.link.status_pending {
                    let mut buf = [0u8; FRAME_CAPACITY];
                    let n = self.encode_status_frame(&mut buf)?;
                    let status = buf.get(..n).unwrap_or(&[]);
                    self.dev.radio.send(status).map_err(|_| Fault::Radio)?;
                    self.summary.status_sent = true;
                }
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

    /// Replaces the full frame of `n` bytes in `self.frame` by the reduced
    /// frame when the policy says so; returns the length to send. A frame
    /// that does not decode as a dsp-core full frame is sent as it is.
    #[inline(never)] // keeps the decoded report out of the frame of every step
    fn by_exception(&mut self, n: usize) -> usize {
        let Some(report) = self
            .frame
            .get(..n)
            .and_then(|b| dsp_core::frame::decode(b).ok())
        else {
            return n;
        };
        let mut choice = self.exception.choose(&self.policy, &report);
        let mut len = n;
        if choice == Choice::Reduced {
            let mut buf = [0u8; FRAME_CAPACITY];
            match dsp_core::frame::encode_reduced(&report, &mut buf) {
                Ok(m) => {
                    self.frame = buf;
                    len = m;
                }
                // cannot happen for a decoded report; the full frame goes out
                Err(_) => choice = Choice::Full(crate::exception::FullReason::Periodic),
            }
        }
        log_info!("report frame {}", choice);
        self.summary.report_frame = Some(choice);
        self.pending = Some((choice, report));
        len
    }

    /// The survey's choice, unless the capture was unhealthy.
    #[inline(never)] // keeps its buffers out of the frame of every step
    fn survey_outcome(&mut self) -> SurveyOutcome {
        let choice = match self.core.finish_survey() {
            Ok(c) => c,
            Err(e) => return SurveyOutcome::Failed(e),
        };
        // a clipped, dead or gapped capture makes its kurtosis meaningless
        let mut bad = QualityFlags::empty();
        for f in [
            QualityFlags::CLIPPING,
            QualityFlags::SENSOR_FAULT,
            QualityFlags::PROCESSING_OVERRUN,
        ] {
            if self.summary.flags.contains(f) {
                bad.insert(f);
            }
        }
        if !bad.is_empty() {
            return SurveyOutcome::SignalFault(bad);
        }
        match self
            .config
            .with_survey_band(choice.band_hz, choice.kurtosis)
        {
            Ok(rec) if self.store_config(self.counter, &rec) => {
                self.config = rec;
                SurveyOutcome::Stored(choice)
            }
            Ok(_) => SurveyOutcome::NotStored(choice),
            Err(_) => SurveyOutcome::Failed(CommissionError::Survey(SurveyError::NoBand)),
        }
    }

    fn end_survey(&mut self, outcome: SurveyOutcome) {
        log_info!("survey {}", outcome);
        self.link.survey = outcome;
        self.link.survey_tried = true;
        self.link.status_pending = true;
    }

    /// Writes the configuration with its counter in one record.
    #[inline(never)] // keeps its buffers out of the frame of every step
    fn store_config(&mut self, counter: u32, record: &PointRecord) -> bool {
        let mut buf = [0u8; MAX_STORED_LEN];
        let stored = StoredConfig {
            counter,
            record: record.clone(),
        };
        stored
            .encode(&mut buf)
            .ok()
            .and_then(|n| buf.get(..n))
            .is_some_and(|bytes| self.dev.storage.store(Slot::Config, bytes).is_ok())
    }

    /// Advances the stored counter (same record, new counter) before a
    /// command that changes no configuration takes effect, so it cannot be
    /// replayed after a power cycle either.
    fn commit_counter(&mut self, counter: u32) -> bool {
        let record = self.config.clone();
        let ok = self.store_config(counter, &record);
        if ok {
            self.counter = counter;
        }
        ok
    }

    /// Applies one received downlink: verified under the node's key first
    /// ([`downlink::open`]), then parsed. A refused one changes nothing and
    /// is counted; either way a status frame goes out with the next uplink.
    #[inline(never)] // keeps its buffers out of the frame of every step
    pub fn apply_downlink(&mut self, msg: &[u8]) -> DownlinkOutcome {
        let outcome = self.apply_verified(msg);
        if let DownlinkOutcome::Refused(_e) = outcome {
            log_warn!("downlink refused: {}", _e);
            self.link.refused = self.link.refused.saturating_add(1);
        }
        self.link.last_downlink = outcome;
        self.link.status_pending = true;
        outcome
    }

    fn apply_verified(&mut self, msg: &[u8]) -> DownlinkOutcome {
        let (counter, cmd) = match downlink::open(self.identity.as_ref(), self.counter, msg) {
            Ok(x) => x,
            Err(e) => return DownlinkOutcome::Refused(e),
        };
        match cmd {
            Command::SetConfig(rec) => {
                if self.store_config(counter, &rec) {
                    self.config = rec;
                    self.counter = counter;
                    // a new configuration without a band gets its survey
                    self.link.survey_tried = false;
                    DownlinkOutcome::ConfigApplied
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::MeasureNow => {
                if self.commit_counter(counter) {
                    self.measure_now = true;
                    DownlinkOutcome::MeasureNow
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::Survey => {
                if self.commit_counter(counter) {
                    self.link.survey_requested = true;
                    DownlinkOutcome::SurveyRequested
                } else {
                    DownlinkOutcome::NotStored
                }
            }
            Command::SetBaseline(data) => {
                if self.core.load_baseline(data).is_err() {
                    return DownlinkOutcome::Refused(DownlinkError::BadBaseline);
                }
                if !self.commit_counter(counter) {
                    return DownlinkOutcome::NotStored;
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
