//! Downlink commands from the gateway.
//!
//! Format: one command byte, then its payload.
//!
//! | byte 0 | payload                                  |
//! |--------|------------------------------------------|
//! | 0x01   | a complete configuration record ([`crate::config`]) |
//! | 0x02   | none: measure again right away            |
//! | 0x03   | baseline bytes for the core (1..=[`MAX_BASELINE_LEN`]) |

use crate::config::{ConfigError, PointRecord};

/// Largest baseline payload accepted.
pub const MAX_BASELINE_LEN: usize = 128;

/// A parsed downlink.
#[derive(Clone, Debug, PartialEq)]
pub enum Command<'a> {
    /// Replace the measuring-point configuration.
    SetConfig(PointRecord),
    /// Measure now instead of sleeping out the interval.
    MeasureNow,
    /// Replace the stored baseline.
    SetBaseline(&'a [u8]),
}

/// Why a downlink was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DownlinkError {
    /// Empty message.
    Empty,
    /// Unknown command byte.
    UnknownCommand(u8),
    /// The configuration record is invalid (kept the old one).
    Config(ConfigError),
    /// Baseline payload empty or too long.
    BadBaseline,
}

impl core::fmt::Display for DownlinkError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Empty => f.write_str("empty downlink"),
            Self::UnknownCommand(c) => write!(f, "unknown downlink command 0x{c:02x}"),
            Self::Config(e) => write!(f, "configuration refused: {e}"),
            Self::BadBaseline => f.write_str("baseline payload empty or too long"),
        }
    }
}

impl core::error::Error for DownlinkError {}

/// Command byte: replace configuration.
pub const CMD_SET_CONFIG: u8 = 0x01;
/// Command byte: measure now.
pub const CMD_MEASURE_NOW: u8 = 0x02;
/// Command byte: replace baseline.
pub const CMD_SET_BASELINE: u8 = 0x03;

/// Parses and validates one downlink.
///
/// ```
/// use firmware::downlink::{parse, Command, DownlinkError};
/// assert_eq!(parse(&[0x02]), Ok(Command::MeasureNow));
/// assert_eq!(parse(&[0x7f]), Err(DownlinkError::UnknownCommand(0x7f)));
/// ```
pub fn parse(msg: &[u8]) -> Result<Command<'_>, DownlinkError> {
    let (&cmd, payload) = msg.split_first().ok_or(DownlinkError::Empty)?;
    match cmd {
        CMD_SET_CONFIG => PointRecord::decode(payload)
            .map(Command::SetConfig)
            .map_err(DownlinkError::Config),
        CMD_MEASURE_NOW => Ok(Command::MeasureNow),
        CMD_SET_BASELINE => {
            if payload.is_empty() || payload.len() > MAX_BASELINE_LEN {
                Err(DownlinkError::BadBaseline)
            } else {
                Ok(Command::SetBaseline(payload))
            }
        }
        other => Err(DownlinkError::UnknownCommand(other)),
    }
}
