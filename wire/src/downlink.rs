//! Downlink commands from the gateway.
//!
//! Every downlink is an authenticated frame ([`crate::downlink_auth`]: node
//! id, replay counter, HMAC tag); [`open`] verifies it under the node's key
//! *before* the payload is parsed, so nothing of an unauthenticated,
//! misaddressed or replayed message reaches the parser. The payload is one
//! command byte, then its data:
//!
//! | byte 0 | data                                     |
//! |--------|------------------------------------------|
//! | 0x01   | a complete configuration record ([`crate::config`], version 3 written, 1-3 read) |
//! | 0x02   | none: measure again right away            |
//! | 0x03   | baseline bytes for the core (1..=[`MAX_BASELINE_LEN`]) |
//! | 0x04   | none: run the band survey (commissioning) right away |

use crate::config::{ConfigError, PointRecord};
use crate::downlink_auth::{verify, AuthError};
use crate::identity::Identity;

/// Largest baseline payload accepted.
pub const MAX_BASELINE_LEN: usize = 128;

/// Longest signed downlink a node accepts: authentication header, command
/// byte, the largest configuration record (version 3: 272 bytes), tag; 288
/// bytes. Longer than one EU868 downlink (222 bytes at DR4 and faster,
/// RP002-1.0.x, from memory): the gateway refuses a configuration downlink
/// over 222 bytes unless told otherwise (`--accept-oversize`, for another
/// link); a record is never split over several downlinks.
pub const MAX_DOWNLINK_LEN: usize = crate::downlink_auth::HEADER_LEN
    + 1
    + if crate::config::MAX_RECORD_LEN > MAX_BASELINE_LEN {
        crate::config::MAX_RECORD_LEN
    } else {
        MAX_BASELINE_LEN
    }
    + crate::downlink_auth::TAG_LEN;

/// A parsed downlink.
#[derive(Clone, Debug, PartialEq)]
// No heap to box the record in (no_std); a parsed command lives for one
// call and the record is moved into the node's configuration.
#[allow(clippy::large_enum_variant)]
pub enum Command<'a> {
    /// Replace the measuring-point configuration.
    SetConfig(PointRecord),
    /// Measure now instead of sleeping out the interval.
    MeasureNow,
    /// Replace the stored baseline.
    SetBaseline(&'a [u8]),
    /// Run the band survey and store the band it chooses.
    Survey,
}

/// Why a downlink was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DownlinkError {
    /// The node has no provisioned key: every downlink is refused.
    NotProvisioned,
    /// Authentication failed: truncated, wrong version or node, bad tag,
    /// or a replayed counter.
    Auth(AuthError),
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
            Self::NotProvisioned => f.write_str("node not provisioned: no downlink key"),
            Self::Auth(e) => write!(f, "{e}"),
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
/// Command byte: run the band survey.
pub const CMD_SURVEY: u8 = 0x04;

/// Parses and validates one downlink payload (already authenticated).
///
/// ```
/// use wire::downlink::{parse, Command, DownlinkError};
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
        CMD_SURVEY => Ok(Command::Survey),
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

/// Verifies a received downlink for this node (key, node id, counter newer
/// than `stored_counter`), then parses its payload. Returns the frame's
/// counter, to be stored with the state the command changes.
///
/// ```
/// use wire::downlink::{open, Command, DownlinkError};
/// use wire::downlink_auth::{sign, AuthError, DownlinkKey};
/// use wire::identity::{encode, Identity, IDENTITY_LEN};
/// let mut rec = [0u8; IDENTITY_LEN];
/// encode(9, &[3; 32], &mut rec).unwrap();
/// let id = Identity::decode(&rec).unwrap();
/// let mut frame = [0u8; 32];
/// let n = sign(&DownlinkKey::new([3; 32]), 9, 5, &[0x02], &mut frame).unwrap();
/// assert_eq!(open(Some(&id), 4, &frame[..n]), Ok((5, Command::MeasureNow)));
/// assert!(matches!(open(Some(&id), 5, &frame[..n]), Err(DownlinkError::Auth(AuthError::Replayed { .. }))));
/// assert_eq!(open(None, 0, &frame[..n]), Err(DownlinkError::NotProvisioned));
/// // An unauthenticated command is refused before it is parsed.
/// assert!(matches!(open(Some(&id), 0, &[0x02]), Err(DownlinkError::Auth(_))));
/// ```
pub fn open<'a>(
    identity: Option<&Identity>,
    stored_counter: u32,
    msg: &'a [u8],
) -> Result<(u32, Command<'a>), DownlinkError> {
    let id = identity.ok_or(DownlinkError::NotProvisioned)?;
    let auth = verify(id.key(), id.node_id(), stored_counter, msg).map_err(DownlinkError::Auth)?;
    Ok((auth.counter, parse(auth.payload)?))
}
