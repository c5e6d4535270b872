//! Report frame version 2: per watched line a state that is never confused
//! with "not detected", the physical size of each finding and how sure it
//! is, gear meshes, up to 8 bearings.
//!
//! A v2 full frame is the v1 header (one more byte: the mesh count) followed
//! by 18 bytes per bearing (four 36-bit line fields) and 4 bytes per mesh:
//! `21 + 18 * bearings + 4 * meshes` bytes ([`full_frame_len_v2`]). The v2
//! reduced frame is the v1 reduced frame with a 3-bit bearing index. Status
//! frames stay version 1. docs/frame-format.md describes every bit; v1
//! frames stay decodable ([`super::decode_any`] reads both).
//!
//! Line field (36 bits, MSB first):
//!
//! | bits | field | v2 meaning |
//! |---|---|---|
//! | 2 | state | 0 not searched, 1 searched / not detected, 2 detected, 3 detected and shared with another bearing's line |
//! | 6 | score | state 1-3: score dB (v1 code); state 0: reason code ([`NotSearchedCode`]) |
//! | 8 | amplitude | state 1-3: summed amplitude (v1 log code); state 0: log2 of the `samples_per_rev` that would reach the line, 0 none |
//! | 4 | found | harmonics counted, 0..=searched |
//! | 4 | searched | harmonics searched, 1..=10 (0 in state 0) |
//! | 2 | sidebands | harmonics with a sideband pair, 0..=min(found, 3) |
//! | 5 | margin | 2 dB steps 0..=60 dB, 31 = nothing counted |
//! | 3 | link bearing | state 3: the other bearing's index, else 0 |
//! | 2 | link kind | state 3: the other line's kind, else 0 |

use serde::{Deserialize, Serialize};

use super::layout::{BitReader, BitWriter, CRC_LEN, MAX_BEARINGS, MAX_MESHES};
use super::quantisation::{self as q, Linear};
use super::DefectKind;

/// Bytes before the bearing fields of a v2 full frame (v1's 18 + mesh count).
pub const HEADER_LEN_V2: usize = 19;
/// Byte offset of the mesh-count byte.
pub const OFF_MESH_COUNT: usize = 18;
/// Bits of one line field.
pub const LINE_BITS: usize = 36;
/// Bytes of one bearing (four line fields).
pub const BEARING_LEN_V2: usize = 18;
/// Bytes of one mesh field.
pub const MESH_LEN: usize = 4;

/// Length of a v2 full frame with `bearings` bearings and `meshes` meshes.
///
/// ```
/// use wire::frame::v2::full_frame_len_v2;
/// assert_eq!(full_frame_len_v2(4, 0), 93);
/// assert_eq!(full_frame_len_v2(8, 4), 181);
/// ```
pub const fn full_frame_len_v2(bearings: usize, meshes: usize) -> usize {
    HEADER_LEN_V2 + bearings * BEARING_LEN_V2 + meshes * MESH_LEN + CRC_LEN
}

/// Margin over the floor: 2 dB steps, 0..=60 dB, 31 = nothing counted.
pub const MARGIN_DB: Linear = Linear {
    step: 2.0,
    max_code: 30,
    invalid: 31,
};

/// The state of one watched line.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum LineState {
    /// Not searched: no harmonic of the line could be looked at (code 0);
    /// the reason is in [`LineDetail::reason`]. Never "not detected".
    #[default]
    NotSearched,
    /// Searched, not detected (code 1).
    Searched,
    /// Detected (code 2).
    Detected,
    /// Detected, but the evidence coincides with another bearing's line
    /// ([`LineDetail::shared_with`]): either bearing may be the faulty one (code 3).
    Shared,
}

impl LineState {
    fn code(self) -> u32 {
        match self {
            LineState::NotSearched => 0,
            LineState::Searched => 1,
            LineState::Detected => 2,
            LineState::Shared => 3,
        }
    }

    fn from_code(c: u32) -> Self {
        match c & 3 {
            0 => LineState::NotSearched,
            1 => LineState::Searched,
            2 => LineState::Detected,
            _ => LineState::Shared,
        }
    }

    /// Whether the state is a detection (detected or shared).
    pub fn is_detection(self) -> bool {
        matches!(self, LineState::Detected | LineState::Shared)
    }
}

/// Why a line was not searched (the frame's reason codes; the report's
/// `dsp_core::diagnosis::coverage::NotSearched` plus a line of a searched bearing with
/// no searchable harmonic).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum NotSearchedCode {
    /// The record was not analysable; the quality flags say why (code 0).
    NotAnalysed,
    /// The pass that serves the bearing was not completed (code 1).
    PassMissing,
    /// Above the search range of every pass (code 2); `needed_samples_per_rev` would reach it.
    AboveRange,
    /// The bearing's shaft is too slow for a spectrum of this size (code 3).
    TooSlow,
    /// More speed classes than passes (code 4); `needed_samples_per_rev` in a point of its own.
    TooManyPasses,
    /// The bearing was searched but no harmonic of this line could be: masked
    /// by shaft harmonics, or outside the spectrum (code 5).
    NoHarmonic,
}

impl NotSearchedCode {
    const ALL: [NotSearchedCode; 6] = [
        NotSearchedCode::NotAnalysed,
        NotSearchedCode::PassMissing,
        NotSearchedCode::AboveRange,
        NotSearchedCode::TooSlow,
        NotSearchedCode::TooManyPasses,
        NotSearchedCode::NoHarmonic,
    ];

    fn code(self) -> u32 {
        match self {
            NotSearchedCode::NotAnalysed => 0,
            NotSearchedCode::PassMissing => 1,
            NotSearchedCode::AboveRange => 2,
            NotSearchedCode::TooSlow => 3,
            NotSearchedCode::TooManyPasses => 4,
            NotSearchedCode::NoHarmonic => 5,
        }
    }

    fn from_code(c: u32) -> Option<Self> {
        Self::ALL.get(usize::try_from(c).ok()?).copied()
    }

    /// Whether the code carries the `samples_per_rev` that would serve the line.
    pub fn has_needed(self) -> bool {
        matches!(
            self,
            NotSearchedCode::AboveRange | NotSearchedCode::TooManyPasses
        )
    }

    /// A short text for tables and logs.
    pub fn text(self) -> &'static str {
        match self {
            NotSearchedCode::NotAnalysed => "record not analysable",
            NotSearchedCode::PassMissing => "its pass was not completed",
            NotSearchedCode::AboveRange => "above the search range",
            NotSearchedCode::TooSlow => "shaft too slow for the spectrum",
            NotSearchedCode::TooManyPasses => "more speed classes than passes",
            NotSearchedCode::NoHarmonic => "no harmonic searchable (masked or outside)",
        }
    }
}

/// The other bearing's line a shared finding coincides with.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineLink {
    /// Index of the other bearing in the frame (0..=7).
    pub bearing: u8,
    /// Its line's kind.
    pub kind: DefectKind,
}

/// What a v2 frame carries for one line beyond the v1 fields.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineDetail {
    /// State of the line.
    pub state: LineState,
    /// Why not searched (state `NotSearched` only).
    pub reason: Option<NotSearchedCode>,
    /// `samples_per_rev` that would serve the line (reasons `AboveRange` and
    /// `TooManyPasses`; a power of two 8..=2048, rounded up to one).
    pub needed_samples_per_rev: Option<u16>,
    /// Envelope amplitude summed over the counted harmonics, g (g² with the
    /// `square` rectifier); 0 when nothing counted, NaN when not searched.
    /// Log-quantised like v1's amplitude: 1e-5 ..= 21.1 g in 0.5 dB steps.
    pub amplitude_g: f32,
    /// Harmonics that could be searched (1..=10; 0 when not searched).
    pub harmonics_searched: u8,
    /// Counted harmonics (of the first three) with a sideband pair (0..=3).
    pub sidebands: u8,
    /// Strongest counted harmonic over its floor, dB (2 dB steps, 0..=60);
    /// NaN when nothing is counted.
    pub margin_db: f32,
    /// The coinciding line of another bearing (state `Shared` only).
    pub shared_with: Option<LineLink>,
}

/// One watched gear mesh in a v2 frame.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MeshResult {
    /// The mesh order was searched.
    pub searched: bool,
    /// Envelope amplitude at the mesh order, g (NaN when not searched).
    pub amplitude_g: f32,
    /// Mesh peak over its local floor, dB (1 dB steps 0..=62; NaN when not
    /// searched or no peak).
    pub prominence_db: f32,
    /// Stronger of the two first sidebands at mesh ± 1 x the gear's own
    /// shaft order, g (NaN when not measured).
    pub sideband_gear_g: f32,
    /// Stronger of the two first sidebands at mesh ± 1 x the mating shaft's
    /// order, g (NaN when not measured).
    pub sideband_mate_g: f32,
}

impl Default for MeshResult {
    fn default() -> Self {
        Self {
            searched: false,
            amplitude_g: f32::NAN,
            prominence_db: f32::NAN,
            sideband_gear_g: f32::NAN,
            sideband_mate_g: f32::NAN,
        }
    }
}

/// Which part of a line or mesh field is inconsistent (encoder and decoder).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LineField {
    /// The line has no [`LineDetail`] (a v1 report encoded as v2).
    Missing,
    /// `detected` disagrees with the state.
    Detected,
    /// State not searched without a reason, or a reason in another state.
    Reason,
    /// `needed_samples_per_rev` not a power of two 8..=2048, or given for a
    /// reason that has none.
    Needed,
    /// Harmonics counted above those searched, or searched out of range.
    Harmonics,
    /// Sidebands above min(found, 3).
    Sidebands,
    /// Margin given with nothing counted, or missing with harmonics counted.
    Margin,
    /// Shared without a link, a link outside the frame or to itself, or a
    /// link in another state.
    Link,
    /// A not-searched line or mesh with values in its unused fields.
    Unused,
}

impl LineField {
    /// Field name for error texts.
    pub fn name(self) -> &'static str {
        match self {
            LineField::Missing => "line detail",
            LineField::Detected => "detected",
            LineField::Reason => "reason",
            LineField::Needed => "needed_samples_per_rev",
            LineField::Harmonics => "harmonics",
            LineField::Sidebands => "sidebands",
            LineField::Margin => "margin",
            LineField::Link => "link",
            LineField::Unused => "unused field",
        }
    }
}

/// Code of a `samples_per_rev` (log2, 3..=11), rounded up to a power of two.
fn needed_code(s: u16) -> Option<u32> {
    (8..=2048)
        .contains(&s)
        .then(|| s.next_power_of_two().trailing_zeros())
}

/// One line as the frame carries it (codes), checked.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
struct LineCodes {
    state: u32,
    score: u32,
    amp: u32,
    found: u32,
    searched: u32,
    sidebands: u32,
    margin: u32,
    link_bearing: u32,
    link_kind: u32,
}

/// Codes of one line of bearing `own` in a frame of `nb` bearings.
fn line_codes(d: &super::DefectResult, own: usize, nb: usize) -> Result<LineCodes, LineField> {
    let l = d.line.as_ref().ok_or(LineField::Missing)?;
    if d.detected != l.state.is_detection() {
        return Err(LineField::Detected);
    }
    if l.state == LineState::NotSearched {
        let reason = l.reason.ok_or(LineField::Reason)?;
        let amp = match (reason.has_needed(), l.needed_samples_per_rev) {
            (true, Some(s)) => needed_code(s).ok_or(LineField::Needed)?,
            (_, None) => 0,
            (false, Some(_)) => return Err(LineField::Needed),
        };
        if d.harmonics != 0 || l.harmonics_searched != 0 || l.sidebands != 0 {
            return Err(LineField::Unused);
        }
        if l.shared_with.is_some() {
            return Err(LineField::Link);
        }
        return Ok(LineCodes {
            score: reason.code(),
            amp,
            margin: MARGIN_DB.invalid,
            ..LineCodes::default()
        });
    }
    if l.reason.is_some() {
        return Err(LineField::Reason);
    }
    if l.needed_samples_per_rev.is_some() {
        return Err(LineField::Needed);
    }
    if l.harmonics_searched == 0
        || l.harmonics_searched > super::MAX_HARMONICS
        || d.harmonics > l.harmonics_searched
    {
        return Err(LineField::Harmonics);
    }
    if l.sidebands > d.harmonics.min(3) {
        return Err(LineField::Sidebands);
    }
    let margin = match (d.harmonics, l.margin_db.is_nan()) {
        (0, true) => MARGIN_DB.invalid,
        (0, false) | (_, true) => return Err(LineField::Margin),
        // A counted harmonic always has a finite margin; saturate in range.
        (_, false) => MARGIN_DB.encode(l.margin_db).min(MARGIN_DB.max_code),
    };
    let (link_bearing, link_kind) = match (l.state, l.shared_with) {
        (LineState::Shared, Some(k))
            if usize::from(k.bearing) < nb && usize::from(k.bearing) != own =>
        {
            (
                u32::from(k.bearing),
                u32::try_from(k.kind.index()).unwrap_or(0),
            )
        }
        (LineState::Shared, _) | (_, Some(_)) => return Err(LineField::Link),
        _ => (0, 0),
    };
    Ok(LineCodes {
        state: l.state.code(),
        score: q::SCORE_DB.encode(d.score_db),
        amp: q::amp_encode(l.amplitude_g),
        found: u32::from(d.harmonics),
        searched: u32::from(l.harmonics_searched),
        sidebands: u32::from(l.sidebands),
        margin,
        link_bearing,
        link_kind,
    })
}

fn put_line(w: &mut BitWriter<'_>, c: &LineCodes) {
    w.put(c.state, 2);
    w.put(c.score, 6);
    w.put(c.amp, 8);
    w.put(c.found, 4);
    w.put(c.searched, 4);
    w.put(c.sidebands, 2);
    w.put(c.margin, 5);
    w.put(c.link_bearing, 3);
    w.put(c.link_kind, 2);
}

fn take_line(r: &mut BitReader<'_>) -> LineCodes {
    LineCodes {
        state: r.take(2),
        score: r.take(6),
        amp: r.take(8),
        found: r.take(4),
        searched: r.take(4),
        sidebands: r.take(2),
        margin: r.take(5),
        link_bearing: r.take(3),
        link_kind: r.take(2),
    }
}

/// The line of decoded codes, or the field that is inconsistent.
fn line_of(c: &LineCodes, own: usize, nb: usize) -> Result<super::DefectResult, LineField> {
    let state = LineState::from_code(c.state);
    let narrow = |v: u32| u8::try_from(v).unwrap_or(u8::MAX);
    if state == LineState::NotSearched {
        let reason = NotSearchedCode::from_code(c.score).ok_or(LineField::Reason)?;
        let needed = match (reason.has_needed(), c.amp) {
            (_, 0) => None,
            (true, 3..=11) => Some(1u16 << c.amp),
            _ => return Err(LineField::Needed),
        };
        let unused = c.found | c.searched | c.sidebands | c.link_bearing | c.link_kind;
        if unused != 0 || c.margin != MARGIN_DB.invalid {
            return Err(LineField::Unused);
        }
        return Ok(super::DefectResult {
            score_db: f32::NAN,
            amplitude_1x_g: f32::NAN,
            harmonics: 0,
            detected: false,
            line: Some(LineDetail {
                state,
                reason: Some(reason),
                needed_samples_per_rev: needed,
                amplitude_g: f32::NAN,
                margin_db: f32::NAN,
                ..LineDetail::default()
            }),
        });
    }
    if c.searched == 0 || c.searched > u32::from(super::MAX_HARMONICS) || c.found > c.searched {
        return Err(LineField::Harmonics);
    }
    if c.sidebands > c.found.min(3) {
        return Err(LineField::Sidebands);
    }
    if (c.found == 0) != (c.margin == MARGIN_DB.invalid) {
        return Err(LineField::Margin);
    }
    let shared_with = if state == LineState::Shared {
        let b = usize::try_from(c.link_bearing).unwrap_or(usize::MAX);
        if b >= nb || b == own {
            return Err(LineField::Link);
        }
        Some(LineLink {
            bearing: narrow(c.link_bearing),
            kind: DefectKind::from_index(usize::try_from(c.link_kind).unwrap_or(0))
                .unwrap_or(DefectKind::Bpfo),
        })
    } else {
        if c.link_bearing != 0 || c.link_kind != 0 {
            return Err(LineField::Link);
        }
        None
    };
    Ok(super::DefectResult {
        score_db: q::SCORE_DB.decode(c.score),
        amplitude_1x_g: f32::NAN,
        harmonics: narrow(c.found),
        detected: state.is_detection(),
        line: Some(LineDetail {
            state,
            reason: None,
            needed_samples_per_rev: None,
            amplitude_g: q::amp_decode(c.amp),
            harmonics_searched: narrow(c.searched),
            sidebands: narrow(c.sidebands),
            margin_db: MARGIN_DB.decode(c.margin),
            shared_with,
        }),
    })
}

/// Writes the bearing and mesh fields of a v2 frame into `body` (zeroed,
/// sized by [`full_frame_len_v2`]); the error names bearing/line or mesh.
pub(super) fn put_body(r: &super::FrameReport, body: &mut [u8]) -> Result<(), super::EncodeError> {
    let nb = r.bearings.len();
    let mut codes = [[LineCodes::default(); 4]; MAX_BEARINGS];
    for ((b, bearing), slot) in (0u8..).zip(r.bearings.iter()).zip(codes.iter_mut()) {
        for ((kind, d), c) in DefectKind::ALL
            .iter()
            .zip(bearing.defects.iter())
            .zip(slot.iter_mut())
        {
            *c = line_codes(d, usize::from(b), nb).map_err(|field| {
                super::EncodeError::InconsistentLine {
                    bearing: b,
                    kind: *kind,
                    field,
                }
            })?;
        }
    }
    let mut w = BitWriter::new(body);
    for slot in codes.iter().take(nb) {
        for c in slot {
            put_line(&mut w, c);
        }
    }
    for m in r.meshes.iter() {
        if m.searched {
            w.put(1, 2);
            w.put(q::SCORE_DB.encode(m.prominence_db), 6);
            w.put(q::amp_encode(m.amplitude_g), 8);
            w.put(q::amp_encode(m.sideband_gear_g), 8);
            w.put(q::amp_encode(m.sideband_mate_g), 8);
        } else {
            // State 0, every other field zero.
            w.put(0, 32);
        }
    }
    Ok(())
}

/// Reads the bearing and mesh fields of a checked v2 frame body.
pub(super) fn take_body(
    body: &[u8],
    nb: usize,
    nm: usize,
    bearings: &mut heapless::Vec<super::BearingResult, MAX_BEARINGS>,
    meshes: &mut heapless::Vec<MeshResult, MAX_MESHES>,
) -> Result<(), super::DecodeError> {
    let mut rd = BitReader::new(body);
    for b in 0..nb {
        let mut br = super::BearingResult::default();
        for d in br.defects.iter_mut() {
            let c = take_line(&mut rd);
            *d = line_of(&c, b, nb).map_err(|f| super::DecodeError::InvalidField {
                field: f.name(),
                code: u32::try_from(b).unwrap_or(0),
            })?;
        }
        bearings
            .push(br)
            .map_err(|_| super::DecodeError::TooManyBearings(u8::try_from(nb).unwrap_or(0)))?;
    }
    for _ in 0..nm {
        let state = rd.take(2);
        let prom = rd.take(6);
        let amp = rd.take(8);
        let sg = rd.take(8);
        let sm = rd.take(8);
        let m = match state {
            0 if prom | amp | sg | sm == 0 => MeshResult::default(),
            0 => {
                return Err(super::DecodeError::InvalidField {
                    field: "mesh",
                    code: prom << 24 | amp << 16 | sg << 8 | sm,
                })
            }
            1 => MeshResult {
                searched: true,
                amplitude_g: q::amp_decode(amp),
                prominence_db: q::SCORE_DB.decode(prom),
                sideband_gear_g: q::amp_decode(sg),
                sideband_mate_g: q::amp_decode(sm),
            },
            s => {
                return Err(super::DecodeError::InvalidField {
                    field: "mesh state",
                    code: s,
                })
            }
        };
        meshes
            .push(m)
            .map_err(|_| super::DecodeError::InvalidField {
                field: "mesh count",
                code: u32::try_from(nm).unwrap_or(0),
            })?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes() {
        assert_eq!(full_frame_len_v2(0, 0), 21);
        assert_eq!(full_frame_len_v2(1, 0), 39);
        assert_eq!(full_frame_len_v2(4, 0), 93);
        assert_eq!(full_frame_len_v2(8, 0), 165);
        assert_eq!(BEARING_LEN_V2 * 8, 4 * LINE_BITS);
    }

    #[test]
    fn needed_codes() {
        assert_eq!(needed_code(8), Some(3));
        assert_eq!(needed_code(100), Some(7));
        assert_eq!(needed_code(2048), Some(11));
        assert_eq!(needed_code(4), None);
        assert_eq!(needed_code(4096), None);
    }
}
