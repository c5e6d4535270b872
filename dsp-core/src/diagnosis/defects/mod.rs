//! Defect extraction: harmonics of the bearing lines in an envelope order
//! spectrum, with a robust local noise floor, harmonic consistency, peak
//! attribution between coinciding lines, sidebands, a score and a decision.
//!
//! # Search (per defect kind, line order `L`, harmonic `h = 1..=harmonics`)
//! 1. **Wide search**: expected order `h·L`, window half-width
//!    `max(slip_tolerance · h · L, min_window_bins · Δ)` (`Δ` = orders per
//!    bin); slip scales every harmonic by the same factor, so the window grows
//!    with `h`. A harmonic whose window (plus the window main lobe) reaches
//!    past the last bin, or below bin 1, is reported with `searched = false`.
//! 2. **Peak**: the largest bin in the window that is a local maximum and not
//!    masked. Bins within one main-lobe half-width of a harmonic of the
//!    bearing's shaft are masked when `mask_shaft_harmonics` is set and a
//!    running-speed line is present there (the bin nearest the harmonic is a
//!    local maximum): running speed lines are common in envelope spectra and
//!    would otherwise be taken for, e.g., the 5th cage harmonic, but where
//!    none is present the bins stay, so that a defect line beside a shaft
//!    harmonic is not deleted. Position by parabolic interpolation
//!    of the log magnitude; amplitude corrected by the window kernel at that
//!    offset (Hann; flat-top needs none).
//! 3. **Floor**: median of the bins in `±(w + lobe + floor_band_orders)`
//!    around `h·L`, excluding the search window widened by the main lobe and
//!    masked bins (at most 256 bins on a stack array; wider bands are
//!    sampled with a stride). Prominence = `20·log10(amplitude / floor)`.
//! 4. **Harmonic consistency**: the *anchor* is the most prominent harmonic
//!    among the first `anchor_harmonics` whose prominence reaches
//!    `prominence_threshold_db`. It fixes the actual line `L' = f_a / h_a`
//!    (slip included). Every other harmonic is searched again in a narrow
//!    window at `h·L'` of half-width `(refine_bins + h / (4·h_a)) · Δ` (the
//!    anchor's position error scales with `h/h_a`). A harmonic is `found`
//!    when its peak in that window reaches the threshold. Without an anchor
//!    nothing is found. Random noise peaks rarely line up this way, which is
//!    what keeps the false-alarm rate low.
//! 5. **Attribution**: a found peak that another kind also found (peaks
//!    within `refine_bins`), or that sits on any integer multiple `m` of
//!    another family's anchored line (e.g. BPFO's 6th harmonic inside a BPFI
//!    window; that family needing two found harmonics; not the cage family,
//!    since BPFO = Z·FTF makes every outer-race line a cage harmonic by
//!    kinematics alone), or on a modulation
//!    sideband `m·L' ± k·s` of it (`k` = 1..=3; `s` = the shaft order for
//!    BPFI, whose race turns through the load zone; FTF for BSF, whose
//!    element turns with the cage; FTF and the shaft order for BPFO, whose
//!    defect is struck by elements that return once per cage turn, under a
//!    load that may turn with the shaft; the tolerance widened by `k·s`
//!    times the family's relative deviation from nominal), is shared. It is
//!    counted for the family with the stronger *other* evidence: the power
//!    over the floor of its found harmonics other than the contested peak
//!    (so a family anchored on that peak cannot take it with a few weak
//!    lines, and a stray one-peak anchor has none), then for the lower
//!    harmonic number (a peak at BPFO is more plausibly BPFO's fundamental
//!    than the n-th cage harmonic, since BPFO = n·FTF); on a full tie it
//!    counts for neither. `shared_with` reports the other kind, so one peak
//!    never supports two detections.
//! 6. **Sidebands**: BPFI at ± the bearing shaft's order, the 2×BSF line at ±
//!    FTF, searched (±`refine_bins`, ± slip for FTF) beside each counted
//!    harmonic among the first three; a pair's value is the weaker side's
//!    prominence over that harmonic's floor, and `sideband_db` is the best pair.
//!
//! # Decision
//! With `n` counted harmonics, `M = min_harmonics` (default 2) and a
//! sideband pair reaching `sideband_threshold_db`:
//! * BPFO: `n >= M`.
//! * BPFI: a sideband pair with the fundamental counted or `n >= M`, or
//!   `n >= M + 1` (the shaft-rate modulation is the inner-race hallmark;
//!   without it one more harmonic is needed, so a fundamental plus a 2nd
//!   harmonic that is really 3 x BPFO is not enough).
//! * BSF: as BPFI with the cage in place of the shaft: a cage (FTF)
//!   sideband pair with the fundamental counted or `n >= M`, or `n >= M + 1`.
//!   A damaged element is carried through the load zone once per cage turn,
//!   so its impacts are modulated at FTF (common practice); without that
//!   modulation one more harmonic is needed. Two stray lines in the 2 x BSF
//!   windows of a healthy machine are then not enough (the CWRU normal
//!   record showed such a pair in 3 of its 38 survey bands,
//!   docs/validation.md).
//! * FTF: `n >= M + 1` with the fundamental counted, and only when no other
//!   kind of the same bearing is detected: beside a detected race or
//!   rolling-element family, cage lines are that family's modulation (the
//!   same elements return once per cage turn), and cage lines are rarely a
//!   primary envelope finding (common practice).
//!
//! # Across bearings
//! [`DefectSearch::attribute_bearings`] runs after every bearing of a point
//! has been searched (the pipeline calls it): a counted peak that lies on
//! the comb of a *detected* family of another bearing (a harmonic of its
//! anchored line or one of its modulation sidebands, as in step 5) counts
//! for only one of them. The more complete series keeps them (then the one
//! explaining the larger share of the other's peaks, then the stronger);
//! the other loses them (`shared_bearing`) and is decided again.
//! Where two watched lines coincide within the slip window and the evidence
//! is the same, one finding is reported naming both bearings
//! ([`DefectResult::shared_finding`]). Lines of different bearings on one
//! shaft train can coincide, and a race fault's sidebands otherwise make up
//! a line family for a healthy bearing (`envord validate --decoy` measures
//! this on open data, docs/validation.md).
//!
//! These rules were checked on open bearing data (`envord validate`,
//! docs/validation.md).
//!
//! # Memory
//! No heap. [`BearingDiagnosis`] is 1280 bytes (returned by value); the
//! search uses about 1.5 KiB more stack (the 256-entry floor scratch and a
//! 40-entry list of found peaks).
//!
//! # Score
//! `score_db = 10·log10(Σ A_h² / Σ F_h²)` over the counted harmonics
//! (amplitude `A`, floor `F`): the power of the defect's harmonic family over
//! the local floor at the same orders. 0 dB when nothing is counted.

use core::fmt;

use crate::diagnosis::kinematics::DefectKind;

mod attribution;
mod bearings;
mod decision;
mod peaks;
mod search;

pub use bearings::attribute_across_passes;

/// Maximum harmonics per defect.
pub const MAX_HARMONICS: usize = 10;

/// Capacity of the stack scratch used for the floor median.
pub const FLOOR_SCRATCH: usize = 256;

/// Detected families compared by [`DefectSearch::attribute_bearings`] (4 kinds x 8 bearings).
const MAX_FAMILIES: usize = 32;

/// Fewest bins a floor estimate may rest on; otherwise the harmonic is not searched.
const MIN_FLOOR_BINS: usize = 8;

/// Defect search thresholds and windows.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct DefectSearchConfig {
    /// Harmonics per defect, 1..=10. Default 5.
    pub harmonics: u8,
    /// Relative slip tolerance of the wide search, (0, 0.2]. Default 0.02
    /// (rolling elements slip 1-2 %, common practice).
    pub slip_tolerance: f32,
    /// Minimum half-width of the wide window in bins, >= 0.5. Default 1.5.
    pub min_window_bins: f32,
    /// Prominence over the local floor a harmonic needs, dB, > 0. Default 10.
    pub prominence_threshold_db: f32,
    /// Counted harmonics required for a detection, 1..=harmonics. Default 2.
    pub min_harmonics: u8,
    /// Harmonics (from the first) that may serve as anchor, 1..=harmonics. Default 3.
    pub anchor_harmonics: u8,
    /// Floor band beyond the excluded window on each side, orders, > 0. Default 0.5.
    pub floor_band_orders: f32,
    /// Half-width of the consistency window in bins, >= 0.5. Default 1.5.
    pub refine_bins: f32,
    /// Prominence each sideband needs for a sideband pair, dB, > 0. Default 8.
    pub sideband_threshold_db: f32,
    /// Mask bins near harmonics of the bearing's shaft. Default true.
    pub mask_shaft_harmonics: bool,
}

impl Default for DefectSearchConfig {
    fn default() -> Self {
        Self {
            harmonics: 5,
            slip_tolerance: 0.02,
            min_window_bins: 1.5,
            prominence_threshold_db: 10.0,
            min_harmonics: 2,
            anchor_harmonics: 3,
            floor_band_orders: 0.5,
            refine_bins: 1.5,
            sideband_threshold_db: 8.0,
            mask_shaft_harmonics: true,
        }
    }
}

/// Error of [`DefectSearch::new`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum DefectConfigError {
    /// `harmonics` not in 1..=10.
    Harmonics,
    /// `slip_tolerance` not in (0, 0.2].
    SlipTolerance,
    /// A window width (`min_window_bins`, `refine_bins`, `floor_band_orders`) out of range or not finite.
    WindowWidth,
    /// A dB threshold not finite and positive.
    Threshold,
    /// `min_harmonics` or `anchor_harmonics` not in 1..=harmonics.
    HarmonicCount,
}

impl fmt::Display for DefectConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            DefectConfigError::Harmonics => "harmonics must be in 1..=10",
            DefectConfigError::SlipTolerance => "slip tolerance must be in (0, 0.2]",
            DefectConfigError::WindowWidth => "search or floor window width out of range",
            DefectConfigError::Threshold => "dB thresholds must be finite and positive",
            DefectConfigError::HarmonicCount => {
                "min_harmonics and anchor_harmonics must be in 1..=harmonics"
            }
        })
    }
}

impl core::error::Error for DefectConfigError {}

/// Error of [`DefectSearch::search`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum SearchError {
    /// A line, shaft or cage order is not finite and positive.
    InvalidOrders,
}

impl fmt::Display for SearchError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("bearing line orders must be finite and positive")
    }
}

impl core::error::Error for SearchError {}

/// One harmonic of one defect line.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct HarmonicResult {
    /// Harmonic number, 1-based.
    pub harmonic: u8,
    /// Expected order `h · L`.
    pub expected_order: f32,
    /// Interpolated order of the peak taken (0 if none or not searched).
    pub found_order: f32,
    /// Interpolated peak amplitude (spectrum unit; 0 if none).
    pub amplitude: f32,
    /// Median local floor (0 if not searched).
    pub floor: f32,
    /// `20·log10(amplitude / floor)` (-200 dB if no peak).
    pub prominence_db: f32,
    /// The window lay inside the spectrum and the floor had enough bins.
    pub searched: bool,
    /// Peak reaches the threshold and is consistent with the anchor.
    pub found: bool,
    /// Found and attributed to this kind (counts for the decision).
    pub counted: bool,
    /// Another kind whose harmonic window also contains this peak.
    pub shared_with: Option<DefectKind>,
    /// Index (in the point's bearing list) of another bearing whose stronger
    /// detected family explains this peak (see
    /// [`DefectSearch::attribute_bearings`]); `None` within one bearing.
    pub shared_bearing: Option<u8>,
}

/// Outcome for one defect kind.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DefectResult {
    /// Defect kind.
    pub kind: DefectKind,
    /// Watched line order `L` (2 × BSF for BSF).
    pub line_order: f32,
    /// Harmonics 1..=harmonics, in order, searched or not.
    pub harmonics: heapless::Vec<HarmonicResult, MAX_HARMONICS>,
    /// Harmonics counted for this kind.
    pub harmonics_found: u8,
    /// Harmonics that could be searched.
    pub harmonics_searched: u8,
    /// Harmonic number of the anchor, if one was found.
    pub anchor: Option<u8>,
    /// Actual line `L' = f_a / h_a` fixed by the anchor (slip included); 0 without one.
    pub line_actual: f32,
    /// Amplitude of the first harmonic's peak (0 if not searched).
    pub fundamental_amplitude: f32,
    /// Best sideband pair (weaker side) in dB over the floor; BPFI and BSF only.
    pub sideband_db: Option<f32>,
    /// Counted harmonics (of the first three) with a sideband pair reaching
    /// the sideband threshold; BPFI and BSF only (0 otherwise).
    pub sidebands: u8,
    /// Harmonic-family power over floor, dB (see module doc).
    pub score_db: f32,
    /// Decision by the documented rule.
    pub detected: bool,
    /// A watched line of another bearing of the point that coincides with
    /// this one (within the slip window) and is explained by exactly the same
    /// peaks: the finding is shared by both bearings (ambiguous by physics),
    /// reported once, here (see [`DefectSearch::attribute_bearings`]).
    pub shared_finding: Option<LineRef>,
}

/// One watched line of a point: a bearing (index in the point's list) and
/// a kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineRef {
    /// Index of the bearing in the point's bearing list.
    pub bearing: u8,
    /// Defect kind of the line.
    pub kind: DefectKind,
}

impl DefectResult {
    /// The physical size of the finding: envelope amplitude summed over the
    /// counted harmonics (g for `abs` rectification, g² for `square`); 0
    /// when nothing is counted.
    pub fn amplitude_sum(&self) -> f32 {
        self.harmonics
            .iter()
            .filter(|h| h.counted)
            .map(|h| h.amplitude)
            // A fold from +0.0: `Iterator::sum` of floats starts at -0.0, which
            // printed "-0.00e0" for an empty sum.
            .fold(0.0, |acc, a| acc + a)
    }

    /// Margin over the floor: the prominence of the strongest counted
    /// harmonic over its local floor, dB; `None` when nothing is counted.
    pub fn margin_db(&self) -> Option<f32> {
        self.harmonics
            .iter()
            .filter(|h| h.counted)
            .map(|h| h.prominence_db)
            .max_by(f32::total_cmp)
    }

    /// Whether any harmonic of the line could be searched.
    pub fn searched(&self) -> bool {
        self.harmonics_searched > 0
    }
}

/// Results for all four kinds, in [`DefectKind::index`] order.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingDiagnosis {
    /// BPFO, BPFI, FTF, BSF.
    pub results: [DefectResult; 4],
}

impl BearingDiagnosis {
    /// Result of one kind.
    pub fn get(&self, kind: DefectKind) -> Option<&DefectResult> {
        self.results.get(kind.index())
    }

    /// Kinds detected.
    pub fn detected(&self) -> impl Iterator<Item = DefectKind> + '_ {
        self.results.iter().filter(|r| r.detected).map(|r| r.kind)
    }

    // --- issue 20 hook: the kind call lives in `crate::diagnosis::kind_call` ---
    /// Whether the detections name one kind or say "damaged, kind
    /// uncertain" ([`crate::diagnosis::kind_call`]).
    pub fn kind_call(&self) -> crate::diagnosis::kind_call::KindCall {
        crate::diagnosis::kind_call::kind_call(self)
    }
}

/// A validated search configuration.
///
/// ```
/// use dsp_core::diagnosis::defects::{DefectSearch, DefectSearchConfig};
/// use dsp_core::diagnosis::kinematics::{DefectMultiples, ShaftRatio, DefectKind};
/// use dsp_core::spectrum::{SpectrumView, Window};
/// // Invented flat spectrum with BPFO-like lines at 3.1, 6.2, 9.3 orders.
/// let mut amps = [0.01f32; 1024];
/// let opb = 1.0 / 64.0;
/// for h in 1..=3 {
///     let k = (3.1 * h as f32 / opb).round() as usize;
///     amps[k] = 0.2;
/// }
/// let view = SpectrumView::new(&amps, opb, Window::Hann).unwrap();
/// let m = DefectMultiples::new(3.1, 4.9, 0.387, 2.0).unwrap();
/// let search = DefectSearch::new(DefectSearchConfig::default()).unwrap();
/// let d = search.search(&view, &m.orders(ShaftRatio::TACH)).unwrap();
/// assert!(d.get(DefectKind::Bpfo).unwrap().detected);
/// assert!(!d.get(DefectKind::Bpfi).unwrap().detected);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DefectSearch {
    config: DefectSearchConfig,
}

impl DefectSearchConfig {
    /// Checks every field's range.
    pub fn validate(&self) -> Result<(), DefectConfigError> {
        let h = self.harmonics;
        if !(1..=10).contains(&h) {
            return Err(DefectConfigError::Harmonics);
        }
        if !(self.slip_tolerance > 0.0 && self.slip_tolerance <= 0.2) {
            return Err(DefectConfigError::SlipTolerance);
        }
        let in_range = |v: f32, lo: f32| v.is_finite() && v >= lo && v <= 1000.0;
        if !(in_range(self.min_window_bins, 0.5)
            && in_range(self.refine_bins, 0.5)
            && in_range(self.floor_band_orders, f32::MIN_POSITIVE))
        {
            return Err(DefectConfigError::WindowWidth);
        }
        let db_ok = |v: f32| v.is_finite() && v > 0.0;
        if !(db_ok(self.prominence_threshold_db) && db_ok(self.sideband_threshold_db)) {
            return Err(DefectConfigError::Threshold);
        }
        if !(1..=h).contains(&self.min_harmonics) || !(1..=h).contains(&self.anchor_harmonics) {
            return Err(DefectConfigError::HarmonicCount);
        }
        Ok(())
    }
}

/// One watched line that is not a bearing defect (a gear-mesh order, for
/// example) measured in a spectrum: the largest local maximum within the
/// slip window of its order and its prominence over the local median floor,
/// found as for a defect harmonic (no shaft masking, no window-kernel
/// correction: `amplitude` is the bin value).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineMeasurement {
    /// Expected order of the line.
    pub order: f32,
    /// The window and its floor band fit inside the spectrum.
    pub searched: bool,
    /// Interpolated order of the peak (0 when none).
    pub found_order: f32,
    /// Peak amplitude, spectrum units (0 when none).
    pub amplitude: f32,
    /// Median floor around the window (0 when not searched).
    pub floor: f32,
    /// `20 log10(amplitude / floor)`; -200 dB when nothing was found.
    pub prominence_db: f32,
}

impl LineMeasurement {
    /// A line at `order` that was not searched.
    pub const fn not_searched(order: f32) -> Self {
        LineMeasurement {
            order,
            searched: false,
            found_order: 0.0,
            amplitude: 0.0,
            floor: 0.0,
            prominence_db: -200.0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn config_validation() {
        assert!(DefectSearch::new(DefectSearchConfig::default()).is_ok());
        let c = DefectSearchConfig {
            harmonics: 11,
            ..Default::default()
        };
        assert_eq!(DefectSearch::new(c), Err(DefectConfigError::Harmonics));
        let c = DefectSearchConfig {
            slip_tolerance: f32::NAN,
            ..Default::default()
        };
        assert_eq!(DefectSearch::new(c), Err(DefectConfigError::SlipTolerance));
        let c = DefectSearchConfig {
            min_harmonics: 6,
            ..Default::default()
        };
        assert_eq!(DefectSearch::new(c), Err(DefectConfigError::HarmonicCount));
    }
}
