//! Compact report frames for the radio link, and their JSON form for a
//! serial/debug link.
//!
//! [`FrameReport`] is plain data in physical units, filled from the pipeline
//! report. [`encode`] packs it into a full frame (49 bytes for 3 bearings, so
//! it fits the 51-byte LoRaWAN EU868 DR0-DR2 payload), [`encode_reduced`] into
//! an 11-byte frame with the worst defect only (US915 DR0). The node's own
//! state (configuration origin, downlink results, envelope band) travels in
//! the 27-byte status frame of [`status`]. [`decode`], [`decode_reduced`],
//! [`status::decode_status`] and [`decode_any`] validate length, version,
//! CRC and reserved bits and never panic. docs/frame-format.md describes
//! every bit.
//!
//! ```
//! use wire::frame::{decode, encode, FrameReport, BearingResult};
//! let mut r = FrameReport { node_id: 7, seq: 41, speed_rpm: 1480.0, ..FrameReport::default() };
//! r.bearings.push(BearingResult::default()).unwrap();
//! let mut buf = [0u8; 64];
//! let n = encode(&r, &mut buf).unwrap();
//! assert_eq!(n, 30);
//! let back = decode(&buf[..n]).unwrap();
//! assert_eq!(back.seq, 41);
//! assert_eq!(back.speed_rpm, 1480.0);
//! ```

use crate::crc;
pub mod from_report;
pub mod layout;
pub mod quantisation;
pub mod status;
pub mod v2;

use core::fmt;
use heapless::Vec;
use serde::{Deserialize, Serialize};

use layout::{
    full_frame_len, BitReader, BitWriter, CRC_LEN, DEFECTS_PER_BEARING, DEFECT_BITS,
    FORMAT_VERSION, FORMAT_VERSION_2, FULL_HEADER_LEN, MAX_BEARINGS, MAX_MESHES, OFF_COUNT_ZONE,
    OFF_FLAGS, REDUCED_LEN, STATUS_LEN, TYPE_FULL, TYPE_REDUCED, TYPE_STATUS, V1_MAX_BEARINGS,
};
use quantisation as q;
pub use status::StatusReport;
pub use v2::{LineDetail, LineLink, LineState, MeshResult, NotSearchedCode};

/// Bearing defect kinds, in their fixed frame order (BPFO, BPFI, FTF, BSF):
/// the core's own kinds, coded in frames by [`dsp_core::DefectKind::index`].
pub use dsp_core::DefectKind;

/// The 2-bit frame code of a kind.
fn kind_code(k: DefectKind) -> u8 {
    u8::try_from(k.index()).unwrap_or(0) & 3
}

/// The kind of a 2-bit frame code (only the low two bits are used).
fn kind_from_code(c: u8) -> DefectKind {
    DefectKind::from_index(usize::from(c & 3)).unwrap_or(DefectKind::Bsf)
}

/// ISO 20816 evaluation zones (A best .. D worst).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum IsoZone {
    /// Newly commissioned machines.
    A,
    /// Acceptable for long-term operation.
    B,
    /// Unsatisfactory for long-term operation.
    C,
    /// Severe enough to cause damage.
    D,
}

/// The flag field of a report or status frame. In the frame they are bits
/// 0..=6 of a big-endian u16; bits 7..=15 are spare and must be zero in
/// version 1.
///
/// Not a second set of quality flags but the field's on-air form: the
/// measurement's conditions are `dsp_core::QualityFlags` (12 of them),
/// which [`FrameFlags::from_quality`] folds onto these seven fixed bits. It
/// is a type of its own because its bit order is frozen by the frame format
/// and its serde form (named booleans) is what decoded frames show in JSON.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FrameFlags {
    /// No tach pulses during the acquisition (bit 0).
    pub tach_missing: bool,
    /// Tach pulse intervals too irregular for order tracking (bit 1).
    pub tach_irregular: bool,
    /// Shaft speed outside the configured range (bit 2).
    pub speed_out_of_range: bool,
    /// ADC clipping seen in the block (bit 3).
    pub clipping: bool,
    /// Sensor fault, e.g. bias out of range (bit 4).
    pub sensor_fault: bool,
    /// Processing did not finish in its time budget (bit 5).
    pub processing_overrun: bool,
    /// Battery below its warning level (bit 6).
    pub low_battery: bool,
}

/// Mask of the flag bits defined in version 1.
pub const FLAGS_DEFINED_MASK: u16 = 0x007F;

impl FrameFlags {
    /// Bit form as carried in the frame.
    pub fn to_bits(self) -> u16 {
        u16::from(self.tach_missing)
            | u16::from(self.tach_irregular) << 1
            | u16::from(self.speed_out_of_range) << 2
            | u16::from(self.clipping) << 3
            | u16::from(self.sensor_fault) << 4
            | u16::from(self.processing_overrun) << 5
            | u16::from(self.low_battery) << 6
    }

    /// Flags of a bit form; spare bits are ignored here (the decoder rejects them).
    pub fn from_bits(b: u16) -> Self {
        Self {
            tach_missing: b & 1 != 0,
            tach_irregular: b & 2 != 0,
            speed_out_of_range: b & 4 != 0,
            clipping: b & 8 != 0,
            sensor_fault: b & 16 != 0,
            processing_overrun: b & 32 != 0,
            low_battery: b & 64 != 0,
        }
    }
}

/// Overall (broadband) indicators of the acceleration block.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct OverallIndicators {
    /// Acceleration RMS in g.
    pub accel_rms_g: f32,
    /// Acceleration peak (absolute) in g.
    pub peak_g: f32,
    /// Crest factor (peak / RMS).
    pub crest_factor: f32,
    /// Kurtosis (3 for Gaussian noise).
    pub kurtosis: f32,
    /// Velocity RMS in mm/s.
    pub velocity_rms_mm_s: f32,
    /// ISO 20816 zone, when the node evaluates one.
    pub iso_zone: Option<IsoZone>,
}

/// Result for one defect kind of one bearing.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DefectResult {
    /// Defect score in dB over the local spectral floor (NaN when not searched).
    pub score_db: f32,
    /// Envelope amplitude at the 1x defect order, in g (v1 only; v2 carries
    /// [`LineDetail::amplitude_g`] instead and decodes this as NaN).
    pub amplitude_1x_g: f32,
    /// Harmonics of the defect order found above the floor (0..=10).
    pub harmonics: u8,
    /// The node's detection decision (v2: state detected or shared).
    pub detected: bool,
    /// Version 2: the line's state, size and certainty; `None` in v1 frames.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub line: Option<LineDetail>,
}

/// Results of one bearing, indexed by [`DefectKind::index`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingResult {
    /// BPFO, BPFI, FTF, BSF in that order.
    pub defects: [DefectResult; DEFECTS_PER_BEARING],
}

/// Everything a full frame carries, in physical units.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FrameReport {
    /// Frame format version; [`encode`] accepts only [`FORMAT_VERSION`].
    pub version: u8,
    /// Node identifier.
    pub node_id: u16,
    /// Report sequence number (wraps at 65535 -> 0).
    pub seq: u16,
    /// Quality flags.
    pub flags: FrameFlags,
    /// Shaft speed in rpm (NaN when unknown).
    pub speed_rpm: f32,
    /// Overall indicators.
    pub overall: OverallIndicators,
    /// Per-bearing results (v1: 0..=4 bearings, v2: 0..=8).
    pub bearings: Vec<BearingResult, MAX_BEARINGS>,
    /// Version 2: watched gear meshes (0..=4); always empty in v1.
    #[serde(default, skip_serializing_if = "no_meshes")]
    pub meshes: Vec<MeshResult, MAX_MESHES>,
}

fn no_meshes(m: &Vec<MeshResult, MAX_MESHES>) -> bool {
    m.is_empty()
}

impl Default for FrameReport {
    fn default() -> Self {
        Self {
            version: FORMAT_VERSION,
            node_id: 0,
            seq: 0,
            flags: FrameFlags::default(),
            speed_rpm: 0.0,
            overall: OverallIndicators::default(),
            bearings: Vec::new(),
            meshes: Vec::new(),
        }
    }
}

/// The worst defect of a report, as a reduced frame carries it.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WorstDefect {
    /// Bearing index in the full report (v1: 0..=3, v2: 0..=7).
    pub bearing: u8,
    /// Defect kind.
    pub kind: DefectKind,
    /// Score in dB (1 dB steps, 0..=62, NaN when invalid).
    pub score_db: f32,
    /// Detection decision.
    pub detected: bool,
}

/// Everything a reduced frame carries.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReducedReport {
    /// Frame format version.
    pub version: u8,
    /// Node identifier.
    pub node_id: u16,
    /// Report sequence number.
    pub seq: u16,
    /// Quality flags.
    pub flags: FrameFlags,
    /// Worst defect; `None` when the report has no bearings.
    pub worst: Option<WorstDefect>,
}

impl ReducedReport {
    /// Reduces a full report: the worst defect is the highest score among
    /// detected defects if any is detected, else the highest score overall;
    /// NaN scores rank below every number; ties keep the first in frame order.
    pub fn from_report(r: &FrameReport) -> Self {
        let mut worst: Option<WorstDefect> = None;
        for (b, bearing) in (0u8..).zip(r.bearings.iter()) {
            for (kind, d) in DefectKind::ALL.iter().zip(bearing.defects.iter()) {
                let cand = WorstDefect {
                    bearing: b,
                    kind: *kind,
                    score_db: d.score_db,
                    detected: d.detected,
                };
                let better = match &worst {
                    None => true,
                    Some(w) => rank(&cand) > rank(w),
                };
                if better {
                    worst = Some(cand);
                }
            }
        }
        Self {
            version: r.version,
            node_id: r.node_id,
            seq: r.seq,
            flags: r.flags,
            worst,
        }
    }
}

/// Ranking key for the worst defect: (detected, score with NaN lowest).
fn rank(w: &WorstDefect) -> (bool, f32) {
    let s = if w.score_db.is_nan() {
        f32::NEG_INFINITY
    } else {
        w.score_db
    };
    (w.detected, s)
}

/// A decoded frame of any type (serialises with a `"frame": "full"` /
/// `"reduced"` / `"status"` tag).
// No heap to box the full report into; the enum lives on the stack briefly.
#[allow(clippy::large_enum_variant)]
#[derive(Clone, Debug, PartialEq, Serialize)]
#[serde(tag = "frame", rename_all = "lowercase")]
pub enum Frame {
    /// A full frame.
    Full(FrameReport),
    /// A reduced frame.
    Reduced(ReducedReport),
    /// A node status frame.
    Status(StatusReport),
}

/// Why encoding failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum EncodeError {
    /// The output buffer is shorter than the frame.
    BufferTooSmall {
        /// Frame length in bytes.
        needed: usize,
        /// Buffer length.
        got: usize,
    },
    /// More bearings than the version carries (4 in v1, 8 in v2), or a
    /// worst-defect bearing index beyond the reduced frame's field.
    TooManyBearings(usize),
    /// Meshes in a v1 report (v1 has no mesh fields).
    MeshesInV1(usize),
    /// A v2 line whose fields contradict each other (or that has no
    /// [`LineDetail`]).
    InconsistentLine {
        /// Bearing index.
        bearing: u8,
        /// Defect kind.
        kind: DefectKind,
        /// The field at fault.
        field: v2::LineField,
    },
    /// A harmonics count above 10.
    HarmonicsOutOfRange {
        /// Bearing index.
        bearing: u8,
        /// Defect kind.
        kind: DefectKind,
        /// The offending count.
        value: u8,
    },
    /// `FrameReport::version` is not [`FORMAT_VERSION`].
    UnsupportedVersion(u8),
    /// A status frame's band is not finite with 0 < lo < hi.
    BandOutOfRange,
}

impl fmt::Display for EncodeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            EncodeError::BufferTooSmall { needed, got } => {
                write!(
                    f,
                    "buffer too small: frame needs {needed} bytes, buffer has {got}"
                )
            }
            EncodeError::TooManyBearings(n) => write!(
                f,
                "{n} bearings, at most 4 fit a version 1 frame and 8 a version 2 frame"
            ),
            EncodeError::MeshesInV1(n) => {
                write!(f, "{n} meshes: version 1 frames carry none, use version 2")
            }
            EncodeError::InconsistentLine {
                bearing,
                kind,
                field,
            } => write!(
                f,
                "bearing {bearing} {}: inconsistent {} for a version 2 frame",
                kind.name(),
                field.name()
            ),
            EncodeError::HarmonicsOutOfRange {
                bearing,
                kind,
                value,
            } => write!(
                f,
                "bearing {bearing} {}: {value} harmonics, at most 10",
                kind.name()
            ),
            EncodeError::UnsupportedVersion(v) => {
                write!(
                    f,
                    "report version {v}, this encoder writes {FORMAT_VERSION} and {FORMAT_VERSION_2}"
                )
            }
            EncodeError::BandOutOfRange => {
                f.write_str("status band must be finite with 0 < lo < hi")
            }
        }
    }
}

impl core::error::Error for EncodeError {}

/// Why decoding failed. Each kind of damage has its own variant.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DecodeError {
    /// Shorter than the length its header implies (or empty).
    Truncated {
        /// Bytes the frame needs.
        needed: usize,
        /// Bytes received.
        got: usize,
    },
    /// Longer than the length its header implies.
    BadLength {
        /// Bytes the header implies.
        expected: usize,
        /// Bytes received.
        got: usize,
    },
    /// Version nibble not defined for the frame type (1 for every type, 2
    /// for full and reduced frames).
    UnknownVersion(u8),
    /// Frame type nibble not defined in this version.
    UnknownFrameType(u8),
    /// The CRC does not match the content.
    BadCrc {
        /// CRC computed over the received content.
        computed: u16,
        /// CRC carried by the frame.
        received: u16,
    },
    /// Bearing count field above 4 (v1) or 8 (v2), or mesh count above 4.
    TooManyBearings(u8),
    /// A reserved or spare bit is set (byte offset of the field).
    ReservedBits {
        /// Byte offset of the field holding the bit.
        offset: usize,
    },
    /// A field holds a code that version 1 does not define.
    InvalidField {
        /// Field name.
        field: &'static str,
        /// The code found.
        code: u32,
    },
}

impl fmt::Display for DecodeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            DecodeError::Truncated { needed, got } => {
                write!(f, "truncated: {got} bytes, frame needs {needed}")
            }
            DecodeError::BadLength { expected, got } => {
                write!(f, "bad length: {got} bytes, header implies {expected}")
            }
            DecodeError::UnknownVersion(v) => write!(f, "unknown format version {v}"),
            DecodeError::UnknownFrameType(t) => write!(f, "unknown frame type {t}"),
            DecodeError::BadCrc { computed, received } => write!(
                f,
                "bad CRC: computed 0x{computed:04X}, frame carries 0x{received:04X}"
            ),
            DecodeError::TooManyBearings(n) => {
                write!(
                    f,
                    "bearing or mesh count {n}, more than the version carries"
                )
            }
            DecodeError::ReservedBits { offset } => {
                write!(f, "reserved bits set in byte {offset}")
            }
            DecodeError::InvalidField { field, code } => {
                write!(f, "field {field}: undefined code {code}")
            }
        }
    }
}

impl core::error::Error for DecodeError {}

/// Max harmonics count a frame carries.
pub const MAX_HARMONICS: u8 = 10;

fn zone_code(z: Option<IsoZone>) -> u8 {
    match z {
        None => 0,
        Some(IsoZone::A) => 1,
        Some(IsoZone::B) => 2,
        Some(IsoZone::C) => 3,
        Some(IsoZone::D) => 4,
    }
}

fn put_u16(buf: &mut [u8], off: usize, v: u16) {
    if let Some(dst) = buf.get_mut(off..off + 2) {
        dst.copy_from_slice(&v.to_be_bytes());
    }
}

fn get_u16(buf: &[u8], off: usize) -> u16 {
    match buf.get(off..off + 2) {
        Some(&[a, b]) => u16::from_be_bytes([a, b]),
        _ => 0,
    }
}

fn code16(c: u32) -> u16 {
    u16::try_from(c).unwrap_or(u16::MAX)
}

fn code8(c: u32) -> u8 {
    u8::try_from(c).unwrap_or(u8::MAX)
}

/// Appends the CRC of `frame[..len - 2]` into its last two bytes.
fn seal(frame: &mut [u8]) {
    let body_len = frame.len().saturating_sub(CRC_LEN);
    let crc = frame.get(..body_len).map_or(0, crc::crc16);
    put_u16(frame, body_len, crc);
}

/// Length of the full frame for `r` (in its version).
pub fn encoded_len(r: &FrameReport) -> usize {
    if r.version == FORMAT_VERSION_2 {
        v2::full_frame_len_v2(r.bearings.len(), r.meshes.len())
    } else {
        full_frame_len(r.bearings.len())
    }
}

/// Encodes `r` as a full frame of its version (1 or 2) into `out`,
/// returning the frame length. Non-finite and out-of-range values saturate
/// as documented in [`quantisation`]; bytes of `out` past the frame are left
/// untouched. A v1 frame drops the v2 line details; a v2 frame needs every
/// line's [`LineDetail`], consistent ([`EncodeError::InconsistentLine`]).
pub fn encode(r: &FrameReport, out: &mut [u8]) -> Result<usize, EncodeError> {
    let most = match r.version {
        FORMAT_VERSION => V1_MAX_BEARINGS,
        FORMAT_VERSION_2 => MAX_BEARINGS,
        v => return Err(EncodeError::UnsupportedVersion(v)),
    };
    let nb = r.bearings.len();
    if nb > most {
        return Err(EncodeError::TooManyBearings(nb));
    }
    if r.version == FORMAT_VERSION && !r.meshes.is_empty() {
        return Err(EncodeError::MeshesInV1(r.meshes.len()));
    }
    for (b, bearing) in (0u8..).zip(r.bearings.iter()) {
        for (kind, d) in DefectKind::ALL.iter().zip(bearing.defects.iter()) {
            if d.harmonics > MAX_HARMONICS {
                return Err(EncodeError::HarmonicsOutOfRange {
                    bearing: b,
                    kind: *kind,
                    value: d.harmonics,
                });
            }
        }
    }
    let len = encoded_len(r);
    let got = out.len();
    let frame = out
        .get_mut(..len)
        .ok_or(EncodeError::BufferTooSmall { needed: len, got })?;
    frame.fill(0);
    if let Some(b0) = frame.first_mut() {
        *b0 = r.version << 4 | TYPE_FULL;
    }
    put_u16(frame, 1, r.node_id);
    put_u16(frame, 3, r.seq);
    put_u16(frame, OFF_FLAGS, r.flags.to_bits());
    // nb <= 4 (v1) or 8 (v2) checked above.
    let count = u8::try_from(nb).unwrap_or(0);
    if let Some(b) = frame.get_mut(OFF_COUNT_ZONE) {
        *b = if r.version == FORMAT_VERSION_2 {
            count | zone_code(r.overall.iso_zone) << 4
        } else {
            count | zone_code(r.overall.iso_zone) << 3
        };
    }
    let o = &r.overall;
    put_u16(frame, 8, code16(q::SPEED_RPM.encode(r.speed_rpm)));
    put_u16(frame, 10, code16(q::ACCEL_RMS_G.encode(o.accel_rms_g)));
    put_u16(frame, 12, code16(q::PEAK_G.encode(o.peak_g)));
    if let Some(b) = frame.get_mut(14) {
        *b = code8(q::CREST.encode(o.crest_factor));
    }
    if let Some(b) = frame.get_mut(15) {
        *b = code8(q::KURTOSIS.encode(o.kurtosis));
    }
    put_u16(
        frame,
        16,
        code16(q::VELOCITY_MM_S.encode(o.velocity_rms_mm_s)),
    );
    if r.version == FORMAT_VERSION_2 {
        if let Some(b) = frame.get_mut(v2::OFF_MESH_COUNT) {
            // At most MAX_MESHES (4) by the Vec's capacity.
            *b = u8::try_from(r.meshes.len()).unwrap_or(0);
        }
        if let Some(body) = frame.get_mut(v2::HEADER_LEN_V2..len - CRC_LEN) {
            v2::put_body(r, body)?;
        }
    } else if let Some(body) = frame.get_mut(FULL_HEADER_LEN..len - CRC_LEN) {
        let mut w = BitWriter::new(body);
        for bearing in r.bearings.iter() {
            for d in bearing.defects.iter() {
                w.put(q::SCORE_DB.encode(d.score_db), 6);
                w.put(q::amp_encode(d.amplitude_1x_g), 8);
                w.put(u32::from(d.harmonics), 4);
                w.put(u32::from(d.detected), 1);
            }
        }
    }
    seal(frame);
    Ok(len)
}

/// Encodes the reduced (11-byte) frame of `r` (see [`ReducedReport::from_report`]).
pub fn encode_reduced(r: &FrameReport, out: &mut [u8]) -> Result<usize, EncodeError> {
    if r.version != FORMAT_VERSION && r.version != FORMAT_VERSION_2 {
        return Err(EncodeError::UnsupportedVersion(r.version));
    }
    encode_reduced_report(&ReducedReport::from_report(r), out)
}

/// Encodes an already reduced report into an 11-byte frame (v1: bearing
/// index 0..=3 in 2 bits; v2: 0..=7 in 3 bits, the other fields one bit lower).
pub fn encode_reduced_report(r: &ReducedReport, out: &mut [u8]) -> Result<usize, EncodeError> {
    let most = match r.version {
        FORMAT_VERSION => V1_MAX_BEARINGS,
        FORMAT_VERSION_2 => MAX_BEARINGS,
        v => return Err(EncodeError::UnsupportedVersion(v)),
    };
    if let Some(w) = &r.worst {
        if usize::from(w.bearing) >= most {
            return Err(EncodeError::TooManyBearings(usize::from(w.bearing) + 1));
        }
    }
    let got = out.len();
    let frame = out
        .get_mut(..REDUCED_LEN)
        .ok_or(EncodeError::BufferTooSmall {
            needed: REDUCED_LEN,
            got,
        })?;
    frame.fill(0);
    if let Some(b0) = frame.first_mut() {
        *b0 = r.version << 4 | TYPE_REDUCED;
    }
    put_u16(frame, 1, r.node_id);
    put_u16(frame, 3, r.seq);
    put_u16(frame, OFF_FLAGS, r.flags.to_bits());
    if let Some(w) = &r.worst {
        if let Some(b) = frame.get_mut(7) {
            *b = if r.version == FORMAT_VERSION_2 {
                0x80 | (w.bearing & 7) << 4 | kind_code(w.kind) << 2 | u8::from(w.detected) << 1
            } else {
                0x80 | (w.bearing & 3) << 5 | kind_code(w.kind) << 3 | u8::from(w.detected) << 2
            };
        }
        if let Some(b) = frame.get_mut(8) {
            *b = code8(q::SCORE_DB.encode(w.score_db)) << 2;
        }
    }
    seal(frame);
    Ok(REDUCED_LEN)
}

/// The length of the frame starting at `bytes[0]` as its header implies
/// (version/type nibble and count bytes), `None` when the prefix is too
/// short or not a frame start; for splitting concatenated frames. No CRC
/// check: [`decode_any`] does that.
///
/// ```
/// use wire::frame::frame_len;
/// assert_eq!(frame_len(&[0x12]), Some(27));
/// assert_eq!(frame_len(&[0x20, 0, 0, 0, 0, 0, 0, 0x04, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x01]), Some(97));
/// ```
pub fn frame_len(bytes: &[u8]) -> Option<usize> {
    let b0 = *bytes.first()?;
    match (b0 >> 4, b0 & 0x0F) {
        (FORMAT_VERSION, TYPE_FULL) => bytes
            .get(OFF_COUNT_ZONE)
            .map(|c| usize::from(c & 0x07))
            .filter(|&n| n <= V1_MAX_BEARINGS)
            .map(full_frame_len),
        (FORMAT_VERSION_2, TYPE_FULL) => {
            let nb = usize::from(bytes.get(OFF_COUNT_ZONE)? & 0x0F);
            let nm = usize::from(bytes.get(v2::OFF_MESH_COUNT)? & 0x07);
            (nb <= MAX_BEARINGS && nm <= MAX_MESHES).then(|| v2::full_frame_len_v2(nb, nm))
        }
        (FORMAT_VERSION | FORMAT_VERSION_2, TYPE_REDUCED) => Some(REDUCED_LEN),
        (FORMAT_VERSION, TYPE_STATUS) => Some(STATUS_LEN),
        _ => None,
    }
}

/// Checks version/type nibble, exact length and CRC; returns the frame type.
fn check_envelope(bytes: &[u8]) -> Result<u8, DecodeError> {
    let b0 = *bytes.first().ok_or(DecodeError::Truncated {
        needed: REDUCED_LEN,
        got: 0,
    })?;
    let version = b0 >> 4;
    if version != FORMAT_VERSION && version != FORMAT_VERSION_2 {
        return Err(DecodeError::UnknownVersion(version));
    }
    let ftype = b0 & 0x0F;
    let got = bytes.len();
    let expected = match (ftype, version) {
        (TYPE_FULL, FORMAT_VERSION) => {
            let min = full_frame_len(0);
            let count = *bytes
                .get(OFF_COUNT_ZONE)
                .ok_or(DecodeError::Truncated { needed: min, got })?
                & 0x07;
            if usize::from(count) > V1_MAX_BEARINGS {
                return Err(DecodeError::TooManyBearings(count));
            }
            full_frame_len(usize::from(count))
        }
        (TYPE_FULL, _) => {
            let min = v2::full_frame_len_v2(0, 0);
            let count = *bytes
                .get(OFF_COUNT_ZONE)
                .ok_or(DecodeError::Truncated { needed: min, got })?
                & 0x0F;
            let meshes = *bytes
                .get(v2::OFF_MESH_COUNT)
                .ok_or(DecodeError::Truncated { needed: min, got })?
                & 0x07;
            if usize::from(count) > MAX_BEARINGS {
                return Err(DecodeError::TooManyBearings(count));
            }
            if usize::from(meshes) > MAX_MESHES {
                return Err(DecodeError::TooManyBearings(meshes));
            }
            v2::full_frame_len_v2(usize::from(count), usize::from(meshes))
        }
        (TYPE_REDUCED, _) => REDUCED_LEN,
        (TYPE_STATUS, FORMAT_VERSION) => STATUS_LEN,
        (TYPE_STATUS, v) => return Err(DecodeError::UnknownVersion(v)),
        (t, _) => return Err(DecodeError::UnknownFrameType(t)),
    };
    if got < expected {
        return Err(DecodeError::Truncated {
            needed: expected,
            got,
        });
    }
    if got > expected {
        return Err(DecodeError::BadLength { expected, got });
    }
    let body = bytes.get(..expected - CRC_LEN).unwrap_or(&[]);
    let computed = crc::crc16(body);
    let received = get_u16(bytes, expected - CRC_LEN);
    if computed != received {
        return Err(DecodeError::BadCrc { computed, received });
    }
    Ok(ftype)
}

fn decode_flags(bytes: &[u8]) -> Result<FrameFlags, DecodeError> {
    let bits = get_u16(bytes, OFF_FLAGS);
    if bits & !FLAGS_DEFINED_MASK != 0 {
        return Err(DecodeError::ReservedBits { offset: OFF_FLAGS });
    }
    Ok(FrameFlags::from_bits(bits))
}

fn byte(bytes: &[u8], off: usize) -> u8 {
    bytes.get(off).copied().unwrap_or(0)
}

fn decode_full_checked(bytes: &[u8]) -> Result<FrameReport, DecodeError> {
    let flags = decode_flags(bytes)?;
    let version = byte(bytes, 0) >> 4;
    let cz = byte(bytes, OFF_COUNT_ZONE);
    let (reserved, nb, zone) = if version == FORMAT_VERSION_2 {
        (0x80, cz & 0x0F, (cz >> 4) & 0x07)
    } else {
        (0xC0, cz & 0x07, (cz >> 3) & 0x07)
    };
    if cz & reserved != 0 {
        return Err(DecodeError::ReservedBits {
            offset: OFF_COUNT_ZONE,
        });
    }
    let nb = usize::from(nb);
    let iso_zone = match zone {
        0 => None,
        1 => Some(IsoZone::A),
        2 => Some(IsoZone::B),
        3 => Some(IsoZone::C),
        4 => Some(IsoZone::D),
        z => {
            return Err(DecodeError::InvalidField {
                field: "iso_zone",
                code: u32::from(z),
            })
        }
    };
    let overall = OverallIndicators {
        accel_rms_g: q::ACCEL_RMS_G.decode(u32::from(get_u16(bytes, 10))),
        peak_g: q::PEAK_G.decode(u32::from(get_u16(bytes, 12))),
        crest_factor: q::CREST.decode(u32::from(byte(bytes, 14))),
        kurtosis: q::KURTOSIS.decode(u32::from(byte(bytes, 15))),
        velocity_rms_mm_s: q::VELOCITY_MM_S.decode(u32::from(get_u16(bytes, 16))),
        iso_zone,
    };
    let mut bearings: Vec<BearingResult, MAX_BEARINGS> = Vec::new();
    let mut meshes: Vec<MeshResult, MAX_MESHES> = Vec::new();
    if version == FORMAT_VERSION_2 {
        let mc = byte(bytes, v2::OFF_MESH_COUNT);
        if mc & 0xF8 != 0 {
            return Err(DecodeError::ReservedBits {
                offset: v2::OFF_MESH_COUNT,
            });
        }
        let body = bytes
            .get(v2::HEADER_LEN_V2..bytes.len().saturating_sub(CRC_LEN))
            .unwrap_or(&[]);
        // Bearing and mesh fields fill the body exactly: no padding.
        v2::take_body(body, nb, usize::from(mc), &mut bearings, &mut meshes)?;
        return Ok(FrameReport {
            version,
            node_id: get_u16(bytes, 1),
            seq: get_u16(bytes, 3),
            flags,
            speed_rpm: q::SPEED_RPM.decode(u32::from(get_u16(bytes, 8))),
            overall,
            bearings,
            meshes,
        });
    }
    let body = bytes
        .get(FULL_HEADER_LEN..bytes.len().saturating_sub(CRC_LEN))
        .unwrap_or(&[]);
    let mut rd = BitReader::new(body);
    for _ in 0..nb {
        let mut br = BearingResult::default();
        for d in br.defects.iter_mut() {
            let score = rd.take(6);
            let amp = rd.take(8);
            let harmonics = rd.take(4);
            let detected = rd.take(1) == 1;
            if harmonics > u32::from(MAX_HARMONICS) {
                return Err(DecodeError::InvalidField {
                    field: "harmonics",
                    code: harmonics,
                });
            }
            *d = DefectResult {
                score_db: q::SCORE_DB.decode(score),
                amplitude_1x_g: q::amp_decode(amp),
                harmonics: code8(harmonics),
                detected,
                line: None,
            };
        }
        // nb <= 4 was checked by check_envelope, so the push cannot fail.
        if bearings.push(br).is_err() {
            return Err(DecodeError::TooManyBearings(cz & 0x07));
        }
    }
    // Padding bits up to the CRC must be zero.
    let used = nb * DEFECTS_PER_BEARING * DEFECT_BITS;
    let pad = body.len() * 8 - used;
    if pad > 0 && rd.take(u32::try_from(pad).unwrap_or(8)) != 0 {
        return Err(DecodeError::ReservedBits {
            offset: bytes.len() - CRC_LEN - 1,
        });
    }
    Ok(FrameReport {
        version: FORMAT_VERSION,
        node_id: get_u16(bytes, 1),
        seq: get_u16(bytes, 3),
        flags,
        speed_rpm: q::SPEED_RPM.decode(u32::from(get_u16(bytes, 8))),
        overall,
        bearings,
        meshes,
    })
}

fn decode_reduced_checked(bytes: &[u8]) -> Result<ReducedReport, DecodeError> {
    let flags = decode_flags(bytes)?;
    let version = byte(bytes, 0) >> 4;
    let v2 = version == FORMAT_VERSION_2;
    let b7 = byte(bytes, 7);
    let b8 = byte(bytes, 8);
    let present = b7 & 0x80 != 0;
    let reserved7 = if v2 { 0x01 } else { 0x03 };
    if b7 & reserved7 != 0 || !present && b7 != 0 {
        return Err(DecodeError::ReservedBits { offset: 7 });
    }
    if b8 & 0x03 != 0 || !present && b8 != 0 {
        return Err(DecodeError::ReservedBits { offset: 8 });
    }
    let worst = present.then(|| {
        let (bearing, kind, detected) = if v2 {
            ((b7 >> 4) & 7, b7 >> 2, b7 & 0x02 != 0)
        } else {
            ((b7 >> 5) & 3, b7 >> 3, b7 & 0x04 != 0)
        };
        WorstDefect {
            bearing,
            kind: kind_from_code(kind),
            score_db: q::SCORE_DB.decode(u32::from(b8 >> 2)),
            detected,
        }
    });
    Ok(ReducedReport {
        version,
        node_id: get_u16(bytes, 1),
        seq: get_u16(bytes, 3),
        flags,
        worst,
    })
}

/// Decodes a full frame. Reduced frames give `UnknownFrameType(1)`; use
/// [`decode_any`] to accept both.
pub fn decode(bytes: &[u8]) -> Result<FrameReport, DecodeError> {
    match check_envelope(bytes)? {
        TYPE_FULL => decode_full_checked(bytes),
        t => Err(DecodeError::UnknownFrameType(t)),
    }
}

/// Decodes a reduced frame. Full frames give `UnknownFrameType(0)`.
pub fn decode_reduced(bytes: &[u8]) -> Result<ReducedReport, DecodeError> {
    match check_envelope(bytes)? {
        TYPE_REDUCED => decode_reduced_checked(bytes),
        t => Err(DecodeError::UnknownFrameType(t)),
    }
}

/// Decodes a frame of any type.
pub fn decode_any(bytes: &[u8]) -> Result<Frame, DecodeError> {
    match check_envelope(bytes)? {
        TYPE_FULL => decode_full_checked(bytes).map(Frame::Full),
        TYPE_REDUCED => decode_reduced_checked(bytes).map(Frame::Reduced),
        TYPE_STATUS => status::decode_status_checked(bytes).map(Frame::Status),
        t => Err(DecodeError::UnknownFrameType(t)),
    }
}

/// A buffer size that holds the JSON form of any report ([`to_json`]): a
/// v2 report of 8 bearings and 4 meshes with long float texts everywhere
/// takes less (test `json_of_largest_v2_report_fits`).
pub const JSON_MAX_LEN: usize = 12 * 1024;

/// Writes the JSON form of `r` into `out` (serde-json-core; NaN becomes
/// `null`), returning the number of bytes written. A v1 4-bearing report with
/// long float texts takes 1766 bytes (test `json_of_four_bearings_fits_2k`);
/// [`JSON_MAX_LEN`] holds any report; a short buffer gives an error, not a panic.
pub fn to_json(r: &FrameReport, out: &mut [u8]) -> Result<usize, serde_json_core::ser::Error> {
    serde_json_core::to_slice(r, out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(nb: usize) -> FrameReport {
        let mut r = FrameReport {
            node_id: 0x1234,
            seq: 0xFFFF,
            speed_rpm: 1500.25,
            ..FrameReport::default()
        };
        for b in 0..nb {
            let mut br = BearingResult::default();
            for (k, d) in br.defects.iter_mut().enumerate() {
                d.score_db = (b * 4 + k) as f32;
                d.amplitude_1x_g = 0.01;
                d.harmonics = 10;
                d.detected = k % 2 == 0;
                d.line = None;
            }
            r.bearings.push(br).unwrap();
        }
        r
    }

    #[test]
    fn round_trip_each_count() {
        for nb in 0..=4 {
            let r = sample(nb);
            let mut buf = [0u8; 64];
            let n = encode(&r, &mut buf).unwrap();
            assert_eq!(n, full_frame_len(nb));
            let back = decode(&buf[..n]).unwrap();
            assert_eq!(back.bearings.len(), nb);
            assert_eq!(back.seq, 0xFFFF);
        }
    }

    #[test]
    fn reduced_picks_detected_then_score() {
        let r = sample(3);
        let red = ReducedReport::from_report(&r);
        // Highest detected score: bearing 2, kind index 2 (score 10).
        let w = red.worst.unwrap();
        assert_eq!((w.bearing, w.kind, w.score_db), (2, DefectKind::Ftf, 10.0));
        let mut buf = [0u8; 11];
        assert_eq!(encode_reduced(&r, &mut buf), Ok(11));
        assert_eq!(decode_reduced(&buf).unwrap(), red);
    }

    #[test]
    fn json_of_four_bearings_fits_2k() {
        // Worst case for length: long float texts everywhere.
        let mut r = sample(4);
        r.speed_rpm = 12345.678;
        for b in r.bearings.iter_mut() {
            for d in b.defects.iter_mut() {
                d.score_db = 61.999_99;
                d.amplitude_1x_g = 0.000_123_456_79;
            }
        }
        let mut buf = [0u8; 2048];
        let n = to_json(&r, &mut buf).unwrap();
        assert!(n > 1200 && n < 2048, "{n}");
        let mut small = [0u8; 64];
        assert!(to_json(&r, &mut small).is_err());
    }

    #[test]
    fn json_of_largest_v2_report_fits() {
        let mut r = sample(0);
        r.version = FORMAT_VERSION_2;
        r.speed_rpm = 12345.678;
        for b in 0..MAX_BEARINGS {
            let mut br = BearingResult::default();
            for d in br.defects.iter_mut() {
                *d = DefectResult {
                    score_db: 61.999_99,
                    amplitude_1x_g: 0.000_123_456_79,
                    harmonics: 10,
                    detected: true,
                    line: Some(LineDetail {
                        state: LineState::Shared,
                        reason: Some(NotSearchedCode::TooManyPasses),
                        needed_samples_per_rev: Some(1024),
                        amplitude_g: 0.000_123_456_79,
                        harmonics_searched: 10,
                        sidebands: 3,
                        margin_db: 0.000_123_456_79,
                        shared_with: Some(LineLink {
                            bearing: u8::try_from(b).unwrap(),
                            kind: DefectKind::Bpfo,
                        }),
                    }),
                };
            }
            r.bearings.push(br).unwrap();
        }
        for _ in 0..MAX_MESHES {
            let x = 0.000_123_456_79;
            r.meshes
                .push(MeshResult {
                    searched: true,
                    amplitude_g: x,
                    prominence_db: x,
                    sideband_gear_g: x,
                    sideband_mate_g: x,
                })
                .unwrap();
        }
        let mut buf = [0u8; JSON_MAX_LEN];
        let n = to_json(&r, &mut buf).unwrap();
        assert!(n > 8000 && n < JSON_MAX_LEN, "{n}");
    }

    #[test]
    fn json_has_fields() {
        let r = sample(1);
        let mut buf = [0u8; 2048];
        let n = to_json(&r, &mut buf).unwrap();
        let s = core::str::from_utf8(&buf[..n]).unwrap();
        assert!(s.contains("\"seq\":65535"));
        assert!(s.contains("\"harmonics\":10"));
    }
}
