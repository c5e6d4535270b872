//! What became of a cycle, a downlink and a band survey: the figures and
//! codes the status frame and the boards read.

use super::state::CycleError;
use crate::commission::{CommissionError, SurveyChoice};
use crate::downlink::DownlinkError;
use crate::downlink_auth::AuthError;
use crate::exception::Choice;
use crate::hal::WakeReason;
use dsp_core::survey::SurveyError;
use dsp_core::QualityFlags;
use wire::frame::status::{DownlinkResult, SurveyStatus};

/// Where the configuration in use came from at boot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
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
#[non_exhaustive]
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
#[non_exhaustive]
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
    pub(super) const fn new(reason: WakeReason, kind: CycleKind) -> Self {
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
