//! The node status frame (type 2): what the node's configuration and
//! downlink handling look like from the gateway.
//!
//! A node sends it after a commissioning (band survey) cycle, with the first
//! report after boot, and with the next report after any downlink, so the
//! operator sees whether a configuration was applied or refused (and why),
//! the replay counter the node stores, and the envelope band it uses with its
//! origin. Layout (27 bytes, big-endian, docs/frame-format.md):
//!
//! ```text
//!  0  u8   0x12 (version 1, type 2)
//!  1  u16  node id
//!  3  u16  status sequence number (its own counter, not the reports')
//!  5  u16  quality flags of the cycle that sent it (bits as in reports)
//!  7  u8   bits 1..0 band source, bits 3..2 configuration at boot,
//!          bit 4 key provisioned, bits 7..5 reserved (zero)
//!  8  u32  downlink counter stored with the configuration
//! 12  u8   result of the last downlink since boot
//! 13  u8   downlinks refused since boot (saturating at 255)
//! 14  u8   result of the last band survey since boot
//! 15  f32  band lower edge, Hz (IEEE 754 binary32)
//! 19  f32  band upper edge, Hz
//! 23  i16  spectral kurtosis of a survey-chosen band, 0.01 steps; 0x8000 none
//! 25  u16  CRC-16/CCITT-FALSE of bytes 0..25
//! ```

use serde::{Deserialize, Serialize};

use super::layout::{FORMAT_VERSION, STATUS_LEN, TYPE_STATUS};
use super::{get_u16, seal, DecodeError, EncodeError, FrameFlags};
use dsp_core::num::f32_to_i32_sat;

pub use crate::band::BandSource;

/// Which configuration the node started with at its last boot.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum BootConfig {
    /// The stored configuration (code 0).
    Stored,
    /// Storage was empty: the built-in default (code 1).
    DefaultEmpty,
    /// The stored record was unreadable or invalid: the built-in default (code 2).
    DefaultInvalid,
}

/// Result of the last downlink the node received since boot.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum DownlinkResult {
    /// No downlink since boot (code 0).
    None,
    /// Configuration verified, stored and in use (1).
    ConfigApplied,
    /// Measure-now request accepted (2).
    MeasureNow,
    /// Baseline accepted and stored (3).
    BaselineApplied,
    /// Band survey requested; it runs in the next cycle (4).
    SurveyRequested,
    /// Authentic and valid, but storing it failed: nothing changed (5).
    NotStored,
    /// Refused: shorter than the authentication header and tag (16).
    Truncated,
    /// Refused: unknown authentication version (17).
    UnknownVersion,
    /// Refused: addressed to another node (18).
    WrongNode,
    /// Refused: the tag does not verify under the node's key (19).
    BadTag,
    /// Refused: the counter is not newer than the stored one (20).
    Replayed,
    /// Refused: the node has no provisioned key (21).
    NotProvisioned,
    /// Refused: authentic but empty (22).
    EmptyCommand,
    /// Refused: authentic, unknown command byte (23).
    UnknownCommand,
    /// Refused: authentic, the configuration record is invalid (24).
    InvalidConfig,
    /// Refused: authentic, the baseline is empty, too long or refused (25).
    InvalidBaseline,
}

const DOWNLINK_CODES: [(DownlinkResult, u8); 16] = [
    (DownlinkResult::None, 0),
    (DownlinkResult::ConfigApplied, 1),
    (DownlinkResult::MeasureNow, 2),
    (DownlinkResult::BaselineApplied, 3),
    (DownlinkResult::SurveyRequested, 4),
    (DownlinkResult::NotStored, 5),
    (DownlinkResult::Truncated, 16),
    (DownlinkResult::UnknownVersion, 17),
    (DownlinkResult::WrongNode, 18),
    (DownlinkResult::BadTag, 19),
    (DownlinkResult::Replayed, 20),
    (DownlinkResult::NotProvisioned, 21),
    (DownlinkResult::EmptyCommand, 22),
    (DownlinkResult::UnknownCommand, 23),
    (DownlinkResult::InvalidConfig, 24),
    (DownlinkResult::InvalidBaseline, 25),
];

impl DownlinkResult {
    /// The frame code.
    pub fn code(self) -> u8 {
        DOWNLINK_CODES
            .iter()
            .find(|(r, _)| *r == self)
            .map_or(0, |(_, c)| *c)
    }

    /// The result of a frame code, if defined.
    pub fn from_code(c: u8) -> Option<Self> {
        DOWNLINK_CODES
            .iter()
            .find(|(_, code)| *code == c)
            .map(|(r, _)| *r)
    }

    /// True for the refusals (codes 16 and up).
    pub fn is_refusal(self) -> bool {
        self.code() >= 16
    }
}

/// Result of the last band survey (commissioning) since boot.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum SurveyStatus {
    /// No survey since boot (code 0).
    NotRun,
    /// Band chosen, stored and in use (1).
    Stored,
    /// Band chosen but storing it failed; the old band stays (2).
    NotStored,
    /// Capture clipped, flat or overrun: result discarded (3).
    SignalFault,
    /// Every band's output was zero (4).
    Flat,
    /// Too few samples for the survey (5).
    TooFewSamples,
    /// No band fits the sample rate and minimum bandwidth (6).
    NoBand,
    /// The survey settings derived from the configuration are invalid (7).
    Config,
    /// The node's measurement core has no band survey (8).
    Unsupported,
}

const SURVEY_CODES: [(SurveyStatus, u8); 9] = [
    (SurveyStatus::NotRun, 0),
    (SurveyStatus::Stored, 1),
    (SurveyStatus::NotStored, 2),
    (SurveyStatus::SignalFault, 3),
    (SurveyStatus::Flat, 4),
    (SurveyStatus::TooFewSamples, 5),
    (SurveyStatus::NoBand, 6),
    (SurveyStatus::Config, 7),
    (SurveyStatus::Unsupported, 8),
];

impl SurveyStatus {
    /// The frame code.
    pub fn code(self) -> u8 {
        SURVEY_CODES
            .iter()
            .find(|(r, _)| *r == self)
            .map_or(0, |(_, c)| *c)
    }

    /// The status of a frame code, if defined.
    pub fn from_code(c: u8) -> Option<Self> {
        SURVEY_CODES
            .iter()
            .find(|(_, code)| *code == c)
            .map(|(r, _)| *r)
    }
}

/// Everything a status frame carries.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StatusReport {
    /// Frame format version.
    pub version: u8,
    /// Node identifier.
    pub node_id: u16,
    /// Status sequence number (wraps 65535 -> 0), counted apart from reports.
    pub seq: u16,
    /// Quality flags of the cycle that sent the frame.
    pub flags: FrameFlags,
    /// Origin of the band in use.
    pub band_source: BandSource,
    /// Configuration at the last boot.
    pub boot_config: BootConfig,
    /// Whether the node has a provisioned downlink key.
    pub provisioned: bool,
    /// Replay counter stored with the configuration.
    pub downlink_counter: u32,
    /// Result of the last downlink since boot.
    pub last_downlink: DownlinkResult,
    /// Downlinks refused since boot (saturating at 255).
    pub refused_downlinks: u8,
    /// Result of the last band survey since boot.
    pub survey: SurveyStatus,
    /// Envelope band in use, Hz (finite, 0 < lo < hi).
    pub band_hz: [f32; 2],
    /// Spectral kurtosis of a survey-chosen band (NaN when none), 0.01 steps.
    pub band_kurtosis: f32,
}

impl Default for StatusReport {
    fn default() -> Self {
        Self {
            version: FORMAT_VERSION,
            node_id: 0,
            seq: 0,
            flags: FrameFlags::default(),
            band_source: BandSource::Configured,
            boot_config: BootConfig::Stored,
            provisioned: false,
            downlink_counter: 0,
            last_downlink: DownlinkResult::None,
            refused_downlinks: 0,
            survey: SurveyStatus::NotRun,
            band_hz: [1.0, 2.0],
            band_kurtosis: f32::NAN,
        }
    }
}

/// Kurtosis code meaning "none".
pub const KURTOSIS_NONE: i16 = i16::MIN;

/// Kurtosis in 0.01 steps: NaN gives [`KURTOSIS_NONE`], others round and
/// saturate to +-327.67.
pub fn kurtosis_encode(k: f32) -> i16 {
    if k.is_nan() {
        return KURTOSIS_NONE;
    }
    let c = f32_to_i32_sat(libm::roundf(k * 100.0)).clamp(-32_767, 32_767);
    i16::try_from(c).unwrap_or(0)
}

/// Kurtosis of a code ([`KURTOSIS_NONE`] gives NaN).
pub fn kurtosis_decode(c: i16) -> f32 {
    if c == KURTOSIS_NONE {
        f32::NAN
    } else {
        f32::from(c) / 100.0
    }
}

fn band_ok(b: [f32; 2]) -> bool {
    b[0].is_finite() && b[1].is_finite() && b[0] > 0.0 && b[1] > b[0]
}

fn source_code(s: BandSource) -> u8 {
    match s {
        BandSource::Configured => 0,
        BandSource::Survey => 1,
        BandSource::Unset => 2,
    }
}

fn boot_code(b: BootConfig) -> u8 {
    match b {
        BootConfig::Stored => 0,
        BootConfig::DefaultEmpty => 1,
        BootConfig::DefaultInvalid => 2,
    }
}

/// Encodes a status frame ([`STATUS_LEN`] bytes) into `out`.
///
/// ```
/// use wire::frame::status::{encode_status, decode_status, StatusReport};
/// let r = StatusReport { node_id: 7, band_hz: [2000.0, 4000.0], ..StatusReport::default() };
/// let mut buf = [0u8; 32];
/// let n = encode_status(&r, &mut buf).unwrap();
/// assert_eq!(n, 27);
/// assert_eq!(decode_status(&buf[..n]).unwrap().band_hz, [2000.0, 4000.0]);
/// ```
pub fn encode_status(r: &StatusReport, out: &mut [u8]) -> Result<usize, EncodeError> {
    if r.version != FORMAT_VERSION {
        return Err(EncodeError::UnsupportedVersion(r.version));
    }
    if !band_ok(r.band_hz) {
        return Err(EncodeError::BandOutOfRange);
    }
    let got = out.len();
    let frame = out
        .get_mut(..STATUS_LEN)
        .ok_or(EncodeError::BufferTooSmall {
            needed: STATUS_LEN,
            got,
        })?;
    frame.fill(0);
    let state =
        source_code(r.band_source) | boot_code(r.boot_config) << 2 | u8::from(r.provisioned) << 4;
    let mut bytes = [0u8; STATUS_LEN - 2];
    let [n0, n1] = r.node_id.to_be_bytes();
    let [s0, s1] = r.seq.to_be_bytes();
    let [f0, f1] = r.flags.to_bits().to_be_bytes();
    let [c0, c1, c2, c3] = r.downlink_counter.to_be_bytes();
    let [l0, l1, l2, l3] = r.band_hz[0].to_be_bytes();
    let [h0, h1, h2, h3] = r.band_hz[1].to_be_bytes();
    let [k0, k1] = kurtosis_encode(r.band_kurtosis).to_be_bytes();
    let fields = [
        FORMAT_VERSION << 4 | TYPE_STATUS,
        n0,
        n1,
        s0,
        s1,
        f0,
        f1,
        state,
        c0,
        c1,
        c2,
        c3,
        r.last_downlink.code(),
        r.refused_downlinks,
        r.survey.code(),
        l0,
        l1,
        l2,
        l3,
        h0,
        h1,
        h2,
        h3,
        k0,
        k1,
    ];
    bytes.copy_from_slice(&fields);
    if let Some(dst) = frame.get_mut(..STATUS_LEN - 2) {
        dst.copy_from_slice(&bytes);
    }
    seal(frame);
    Ok(STATUS_LEN)
}

fn be_u32(b: &[u8], off: usize) -> u32 {
    match b.get(off..off + 4) {
        Some(&[a, b, c, d]) => u32::from_be_bytes([a, b, c, d]),
        _ => 0,
    }
}

/// Decodes the body of a status frame whose envelope (version, type,
/// length, CRC) was already checked.
pub(super) fn decode_status_checked(bytes: &[u8]) -> Result<StatusReport, DecodeError> {
    let flags = super::decode_flags(bytes)?;
    let state = bytes.get(7).copied().unwrap_or(0);
    if state & 0xE0 != 0 {
        return Err(DecodeError::ReservedBits { offset: 7 });
    }
    let band_source = match state & 0x03 {
        0 => BandSource::Configured,
        1 => BandSource::Survey,
        2 => BandSource::Unset,
        c => {
            return Err(DecodeError::InvalidField {
                field: "band_source",
                code: u32::from(c),
            })
        }
    };
    let boot_config = match (state >> 2) & 0x03 {
        0 => BootConfig::Stored,
        1 => BootConfig::DefaultEmpty,
        2 => BootConfig::DefaultInvalid,
        c => {
            return Err(DecodeError::InvalidField {
                field: "boot_config",
                code: u32::from(c),
            })
        }
    };
    let dl = bytes.get(12).copied().unwrap_or(0);
    let last_downlink = DownlinkResult::from_code(dl).ok_or(DecodeError::InvalidField {
        field: "last_downlink",
        code: u32::from(dl),
    })?;
    let sv = bytes.get(14).copied().unwrap_or(0);
    let survey = SurveyStatus::from_code(sv).ok_or(DecodeError::InvalidField {
        field: "survey",
        code: u32::from(sv),
    })?;
    let band_hz = [
        f32::from_bits(be_u32(bytes, 15)),
        f32::from_bits(be_u32(bytes, 19)),
    ];
    if !band_ok(band_hz) {
        return Err(DecodeError::InvalidField {
            field: "band_hz",
            code: be_u32(bytes, 15),
        });
    }
    let k = i16::from_be_bytes(get_u16(bytes, 23).to_be_bytes());
    Ok(StatusReport {
        version: FORMAT_VERSION,
        node_id: get_u16(bytes, 1),
        seq: get_u16(bytes, 3),
        flags,
        band_source,
        boot_config,
        provisioned: state & 0x10 != 0,
        downlink_counter: be_u32(bytes, 8),
        last_downlink,
        refused_downlinks: bytes.get(13).copied().unwrap_or(0),
        survey,
        band_hz,
        band_kurtosis: kurtosis_decode(k),
    })
}

/// Decodes a status frame. Other frame types give `UnknownFrameType`.
pub fn decode_status(bytes: &[u8]) -> Result<StatusReport, DecodeError> {
    match super::check_envelope(bytes)? {
        TYPE_STATUS => decode_status_checked(bytes),
        t => Err(DecodeError::UnknownFrameType(t)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> StatusReport {
        StatusReport {
            node_id: 0x0A17,
            seq: 3,
            flags: FrameFlags {
                low_battery: true,
                ..FrameFlags::default()
            },
            band_source: BandSource::Survey,
            boot_config: BootConfig::DefaultInvalid,
            provisioned: true,
            downlink_counter: 0x0102_0304,
            last_downlink: DownlinkResult::Replayed,
            refused_downlinks: 2,
            survey: SurveyStatus::Stored,
            band_hz: [2519.842, 5039.684],
            band_kurtosis: 12.345,
            ..StatusReport::default()
        }
    }

    #[test]
    fn round_trip_and_layout() {
        let r = sample();
        let mut buf = [0u8; 32];
        let n = encode_status(&r, &mut buf).unwrap();
        assert_eq!(n, STATUS_LEN);
        assert_eq!(buf[0], 0x12);
        assert_eq!(&buf[1..5], &[0x0A, 0x17, 0, 3]);
        assert_eq!(&buf[5..7], &[0, 0x40]);
        assert_eq!(buf[7], 1 | 2 << 2 | 1 << 4);
        assert_eq!(&buf[8..12], &[1, 2, 3, 4]);
        assert_eq!((buf[12], buf[13], buf[14]), (20, 2, 1));
        // IEEE 754 bits, big-endian: the band crosses the link unchanged.
        assert_eq!(&buf[15..19], &2519.842f32.to_be_bytes());
        assert_eq!(i16::from_be_bytes([buf[23], buf[24]]), 1235);
        let back = decode_status(&buf[..n]).unwrap();
        assert_eq!(back.band_hz[0].to_bits(), r.band_hz[0].to_bits());
        assert_eq!(back.band_kurtosis, 12.35);
        assert_eq!(
            StatusReport {
                band_kurtosis: 12.35,
                ..r
            },
            back
        );
    }

    #[test]
    fn codes_are_unique_and_round_trip() {
        for (r, c) in DOWNLINK_CODES {
            assert_eq!(DownlinkResult::from_code(c), Some(r));
            assert_eq!(r.code(), c);
            assert_eq!(r.is_refusal(), c >= 16);
        }
        for (r, c) in SURVEY_CODES {
            assert_eq!(SurveyStatus::from_code(c), Some(r));
        }
        assert_eq!(DownlinkResult::from_code(6), None);
        assert_eq!(SurveyStatus::from_code(9), None);
    }

    #[test]
    fn kurtosis_saturates_and_none_is_reserved() {
        assert_eq!(kurtosis_encode(f32::NAN), KURTOSIS_NONE);
        assert_eq!(kurtosis_encode(1e9), 32_767);
        assert_eq!(kurtosis_encode(f32::NEG_INFINITY), -32_767);
        assert_eq!(kurtosis_encode(-1.5), -150);
        assert!(kurtosis_decode(KURTOSIS_NONE).is_nan());
    }

    #[test]
    fn bad_band_is_refused_both_ways() {
        let mut r = sample();
        r.band_hz = [3000.0, 2000.0];
        let mut buf = [0u8; 32];
        assert_eq!(
            encode_status(&r, &mut buf),
            Err(EncodeError::BandOutOfRange)
        );
        r.band_hz = [f32::NAN, 2000.0];
        assert_eq!(
            encode_status(&r, &mut buf),
            Err(EncodeError::BandOutOfRange)
        );
    }
}
