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
//! ([`wire::frame::status`]) that reports it.
//!
//! A measurement's report goes out as a full frame or, when nothing changed
//! beyond the margin since the last full frame, as the reduced frame
//! ([`crate::exception`], [`Node::set_report_policy`]; reports from a core
//! whose frames are not dsp-core full frames go out as they are).
//!
//! Downlinks are verified before they are parsed ([`crate::downlink::open`]); a
//! refused one changes nothing and is counted. The node sends a status
//! frame after the report of the first cycle after boot and of the cycle
//! after any downlink, so the gateway sees what became of it.
//!
//! Files: this one holds the node and its state machine
//! ([`Node::step`]); `state.rs` where a cycle is and what failed;
//! `outcome.rs` what became of a cycle, a downlink and a survey;
//! `report.rs` the uplink (report by exception, status frame); `survey.rs`
//! the end of a band survey; `apply.rs` the application of a downlink and
//! the records it stores.

use crate::config::{BandSource, PointRecord, StoredConfig, MAX_STORED_LEN};
use crate::downlink::MAX_BASELINE_LEN;
use crate::exception::{Choice, ExceptionState, ReportPolicy};
use crate::hal::{
    Alarm, Battery, BlockSource, Board, MeasurementCore, PulseCapture, RadioLink, Slot, Storage,
    WakeReason, Watchdog,
};
use crate::identity::{Identity, IDENTITY_LEN};
use crate::log::{log_info, log_warn};
use crate::quality::SignalHealth;
use apply::unseal;
use dsp_core::QualityFlags;
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;

mod apply;
mod outcome;
mod report;
mod state;
mod survey;

pub use outcome::{ConfigSource, CycleKind, CycleSummary, DownlinkOutcome, SurveyOutcome};
pub use report::band_in_use;
pub use state::{CycleError, Fault, State};

/// Capacity of the uplink frame buffer: the longest v2 report frame (8
/// bearings, 4 meshes: 181 bytes; status frames are 27).
pub const FRAME_CAPACITY: usize = wire::frame::v2::full_frame_len_v2(
    wire::frame::layout::MAX_BEARINGS,
    wire::frame::layout::MAX_MESHES,
);
/// Largest downlink accepted (authentication header and tag, command
/// byte, largest record): [`crate::downlink::MAX_DOWNLINK_LEN`].
pub const DOWNLINK_CAPACITY: usize = crate::downlink::MAX_DOWNLINK_LEN;
/// Upper bound on blocks per record whatever the configuration says.
pub const MAX_RECORD_BLOCKS: u32 = 4_096;

/// The node's devices: the drivers of board `B`, one small trait each.
pub struct Devices<B: Board> {
    /// ADC blocks (DMA double buffer).
    pub source: B::Source,
    /// Tach edge capture.
    pub capture: B::Capture,
    /// Radio link.
    pub radio: B::Radio,
    /// Sleep and wake-up alarm.
    pub alarm: B::Alarm,
    /// Persistent storage.
    pub storage: B::Storage,
    /// Supply monitor.
    pub battery: B::Battery,
    /// Watchdog.
    pub watchdog: B::Watchdog,
    /// Sensor supply switch (high = on).
    pub power: B::Power,
    /// Delay for sensor settling.
    pub delay: B::Delay,
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

/// The node on board `B` with measurement core `C`: devices, core,
/// configuration and the cycle state.
pub struct Node<B: Board, C> {
    dev: Devices<B>,
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
    pending: Option<(Choice, wire::frame::FrameReport)>,
}

impl<B: Board, C: MeasurementCore> Node<B, C> {
    /// Boots: reads the provisioned identity (without one every downlink is
    /// refused), loads and checks the stored configuration and its replay
    /// counter (falling back to the built-in default, counter 0, when it is
    /// missing or invalid) and the stored baseline, switches the sensor off
    /// and starts in `Sleep`.
    pub fn new(mut dev: Devices<B>, mut core: C) -> Self {
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
        // Every pass of the point (dsp_core::diagnosis::coverage) at the node's
        // 4096-point spectrum, one after the other.
        let mut rec = self.config.clone();
        if let Ok(p) = crate::point::point_config(&self.config) {
            let total: u32 = dsp_core::diagnosis::coverage::plan(&p, 4096)
                .passes
                .iter()
                .map(|p| u32::from(p.revolutions))
                .sum();
            rec.record_revs = u16::try_from(total).unwrap_or(u16::MAX);
        }
        rec.record_blocks(self.dev.source.block_len(), MAX_RECORD_BLOCKS)
    }

    /// The devices (for tests and board diagnostics).
    pub fn devices(&self) -> &Devices<B> {
        &self.dev
    }

    /// Gives the devices back (tests: a reboot over the same storage).
    pub fn into_devices(self) -> Devices<B> {
        self.dev
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
                    self.summary.flags.insert(QualityFlags::OVERRUN);
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
                self.listen()?;
                // healthy: every state passed and no block was lost
                if !self.summary.flags.contains(QualityFlags::OVERRUN) {
                    self.dev.watchdog.feed();
                    self.summary.fed_watchdog = true;
                }
                State::Sleep
            }
        })
    }

    /// One receive window: a downlink, if any, is applied. Not inlined: the
    /// receive buffer (the longest downlink, 288 bytes with record v3) stays
    /// out of the frame of every other step, the measurement's included.
    #[inline(never)]
    fn listen(&mut self) -> Result<(), Fault> {
        let mut buf = [0u8; DOWNLINK_CAPACITY];
        let got = self.dev.radio.receive(&mut buf).map_err(|_| Fault::Radio)?;
        if let Some(n) = got {
            let msg = buf.get(..n.min(DOWNLINK_CAPACITY)).unwrap_or(&[]);
            self.downlink = self.apply_downlink(msg);
            log_info!("downlink {}", self.downlink);
        }
        Ok(())
    }
}
