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

use crate::diagnosis::kinematics::{BearingOrders, DefectKind};
use crate::num::{amplitude_db, f32_to_usize_sat, usize_to_f32};
use crate::spectrum::{SpectrumView, Window};

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

/// Geometry of one harmonic's search.
#[derive(Clone, Copy)]
struct Window1 {
    expected: f32,
    half: f32,
}

/// A peak taken in a window.
#[derive(Clone, Copy)]
struct Peak {
    order: f32,
    amplitude: f32,
}

struct Ctx<'a> {
    amps: &'a [f32],
    opb: f32,
    lobe_bins: f32,
    window: Window,
    shaft_order: f32,
    ftf_order: f32,
    mask: bool,
}

impl Ctx<'_> {
    fn amp(&self, k: usize) -> f32 {
        self.amps.get(k).copied().unwrap_or(0.0)
    }

    /// Scalloping correction at `delta` bins off-bin (|delta| <= 0.5).
    fn kernel(&self, delta: f32) -> f32 {
        self.window.kernel_gain(delta).max(0.1)
    }

    /// Whether bin `k` is masked: within one main-lobe half-width of a
    /// harmonic `j` of the bearing's shaft where a running-speed line is
    /// present, i.e. the bin nearest `j` x shaft is a local maximum. A
    /// defect line a bin or more beside `j` x shaft, whose own peak makes
    /// that bin its flank, is kept (at 16-20 bins per shaft order the fixed
    /// mask deleted such lines, e.g. a 6203's BPFI 4.947 x shaft).
    fn masked(&self, k: usize) -> bool {
        if !self.mask {
            return false;
        }
        let o = usize_to_f32(k) * self.opb;
        let j = libm::roundf(o / self.shaft_order);
        if !(j >= 1.0 && libm::fabsf(o - j * self.shaft_order) <= self.lobe_bins * self.opb) {
            return false;
        }
        let c = f32_to_usize_sat(libm::roundf(j * self.shaft_order / self.opb));
        let v = self.amp(c);
        c >= 1 && v > 0.0 && v >= self.amp(c - 1) && v >= self.amp(c + 1)
    }

    /// Bin range `[lo, hi]` covering orders `[a, b]`, clipped to the spectrum.
    fn bins(&self, a: f32, b: f32) -> Option<(usize, usize)> {
        let lo = f32_to_usize_sat(libm::ceilf(a / self.opb));
        let hi =
            f32_to_usize_sat(libm::floorf(b / self.opb)).min(self.amps.len().saturating_sub(1));
        (b >= 0.0 && lo <= hi).then_some((lo, hi))
    }

    /// Whether a window (plus main lobe on both sides) lies within bins 1..len-1.
    fn fits(&self, w: Window1) -> bool {
        let guard = self.lobe_bins * self.opb;
        let lowest = w.expected - w.half - guard;
        let highest = w.expected + w.half + guard;
        lowest >= self.opb && highest <= usize_to_f32(self.amps.len().saturating_sub(1)) * self.opb
    }

    /// Largest unmasked local maximum in the orders `[a, b]`, interpolated.
    fn peak(&self, a: f32, b: f32) -> Option<Peak> {
        let (lo, hi) = self.bins(a, b)?;
        let mut best: Option<(usize, f32)> = None;
        for k in lo..=hi {
            let v = self.amp(k);
            let left = if k == 0 { 0.0 } else { self.amp(k - 1) };
            let right = self.amp(k + 1);
            if self.masked(k) || v <= 0.0 || v < left || v < right {
                continue;
            }
            if best.is_none_or(|(_, bv)| v > bv) {
                best = Some((k, v));
            }
        }
        let (k, v) = best?;
        let (l, r) = (self.amp(k.saturating_sub(1)), self.amp(k + 1));
        // Parabola through the log magnitudes (exact for a Gaussian kernel,
        // close for Hann); offset clamped to half a bin.
        let delta = if l > 0.0 && r > 0.0 {
            let (ll, lc, lr) = (libm::logf(l), libm::logf(v), libm::logf(r));
            let den = ll - 2.0 * lc + lr;
            if den < 0.0 {
                (0.5 * (ll - lr) / den).clamp(-0.5, 0.5)
            } else {
                0.0
            }
        } else {
            0.0
        };
        Some(Peak {
            order: (usize_to_f32(k) + delta) * self.opb,
            amplitude: v,
        })
    }

    /// Median of the bins around `w`, excluding `w` widened by the main lobe.
    fn floor(&self, w: Window1, band_orders: f32) -> Option<f32> {
        let excl = w.half + self.lobe_bins * self.opb;
        let extra = band_orders.max(usize_to_f32(MIN_FLOOR_BINS) * self.opb);
        let (lo, hi) = self.bins(
            (w.expected - excl - extra).max(self.opb),
            w.expected + excl + extra,
        )?;
        let (xlo, xhi) = (w.expected - excl, w.expected + excl);
        let candidates = |k: &usize| {
            let o = usize_to_f32(*k) * self.opb;
            (o < xlo || o > xhi) && !self.masked(*k)
        };
        let count = (lo..=hi).filter(candidates).count();
        if count < MIN_FLOOR_BINS {
            return None;
        }
        let stride = count.div_ceil(FLOOR_SCRATCH).max(1);
        let mut scratch = [0.0f32; FLOOR_SCRATCH];
        let mut n = 0usize;
        for (slot, k) in scratch
            .iter_mut()
            .zip((lo..=hi).filter(candidates).step_by(stride))
        {
            *slot = self.amp(k);
            n += 1;
        }
        let used = scratch.get_mut(..n)?;
        // Not `select_nth_unstable_by`: core's selection keeps bounds-check
        // panics that the optimiser cannot remove (no-panic link check).
        heap_sort_total(used);
        used.get(n / 2).copied()
    }
}

/// Sorts by `f32::total_cmp` (heapsort: O(n log n), no panic path).
fn heap_sort_total(v: &mut [f32]) {
    let n = v.len();
    for start in (0..n / 2).rev() {
        sift_down(v, start, n);
    }
    for end in (1..n).rev() {
        if end < v.len() {
            v.swap(0, end);
        }
        sift_down(v, 0, end);
    }
}

/// Restores the max-heap property below `root` within `v[..end]`.
fn sift_down(v: &mut [f32], mut root: usize, end: usize) {
    let end = end.min(v.len());
    let greater = |v: &[f32], a: usize, b: usize| match (v.get(a), v.get(b)) {
        (Some(x), Some(y)) => x.total_cmp(y).is_gt(),
        _ => false,
    };
    loop {
        let mut child = root.saturating_mul(2).saturating_add(1);
        if child >= end {
            return;
        }
        let right = child.saturating_add(1);
        if right < end && greater(v, right, child) {
            child = right;
        }
        if !greater(v, child, root) {
            return;
        }
        if root < end {
            v.swap(root, child);
        }
        root = child;
    }
}

/// Sideband orders `k` (`1 <= |k| <= MAX_SIDEBAND_ORDER`) of a modulated
/// family that attribution explains (inner-race load-zone modulation shows
/// several orders of shaft sidebands: common practice).
const MAX_SIDEBAND_ORDER: i8 = 3;

/// Whether order `o` lies on harmonic `m` of a family with anchored line
/// `line` (anchor harmonic `ha`, nominal line `nominal`), or on one of its
/// modulation sidebands `m·line + k·spacing` (`spacing` 0: none). The
/// sideband spacing is known to within the line's own relative deviation
/// from nominal (speed error or slip), which widens the tolerance. Returns `m`.
fn on_family(
    o: f32,
    line: f32,
    ha: u8,
    nominal: f32,
    spacing: f32,
    cfg: &DefectSearchConfig,
    opb: f32,
) -> Option<u8> {
    let ks = if spacing > 0.0 { MAX_SIDEBAND_ORDER } else { 0 };
    let dev = if nominal > 0.0 {
        libm::fabsf(line / nominal - 1.0)
    } else {
        0.0
    };
    (-ks..=ks).find_map(|k| {
        let kf = f32::from(k);
        let c = o - kf * spacing;
        let m = libm::roundf(c / line);
        let tol =
            (cfg.refine_bins + m / (4.0 * f32::from(ha))) * opb + libm::fabsf(kf) * spacing * dev;
        (m >= 1.0 && libm::fabsf(c - m * line) <= tol)
            .then(|| u8::try_from(f32_to_usize_sat(m)).unwrap_or(u8::MAX))
    })
}

/// Modulation spacings of a family (0 = none): BPFI at the shaft order (the
/// inner race turns through the load zone), BSF at FTF (the element turns
/// with the cage), BPFO at FTF (the elements that strike the defect return
/// once per cage turn) and at the shaft order (a load that turns with the
/// shaft); FTF none.
fn modulation_spacing(kind: DefectKind, shaft_order: f32, ftf_order: f32) -> [f32; 2] {
    match kind {
        DefectKind::Bpfi => [shaft_order, 0.0],
        DefectKind::Bsf => [ftf_order, 0.0],
        DefectKind::Bpfo => [ftf_order, shaft_order],
        DefectKind::Ftf => [0.0; 2],
    }
}

/// The decision of the module doc from a result's counted harmonics and
/// whether a sideband pair reaches the threshold.
fn detection_rule(r: &DefectResult, sideband_pair: bool, cfg: &DefectSearchConfig) -> bool {
    let fundamental_counted = r.harmonics.first().is_some_and(|h| h.counted);
    let family = r.harmonics_found >= cfg.min_harmonics;
    let strong_family = r.harmonics_found > cfg.min_harmonics;
    match r.kind {
        // Inner race and rolling element pass through the load zone (at
        // shaft and cage rate): their modulation sidebands are the
        // hallmark; without them, one more harmonic is required.
        DefectKind::Bpfi | DefectKind::Bsf => {
            ((family || fundamental_counted) && sideband_pair) || strong_family
        }
        DefectKind::Bpfo => family,
        // Cage: one more harmonic and the fundamental (cage lines are
        // rarely a primary envelope finding); see `cage_as_modulation`.
        DefectKind::Ftf => strong_family && fundamental_counted,
    }
}

/// How one detected family stands to another's evidence (cross-bearing
/// attribution).
#[derive(Clone, Copy, PartialEq, Eq)]
enum Relation {
    /// No shared peaks, or the other family keeps them.
    None,
    /// This family takes the shared peaks.
    Takes,
    /// The nominal lines coincide and the evidence is the same: one finding
    /// shared by both bearings, reported on this family.
    Shares,
}

/// A detected family of one bearing, for cross-bearing attribution.
struct Family {
    bearing: usize,
    kind: DefectKind,
    /// Anchored actual line `L'`.
    line: f32,
    anchor: u8,
    /// Summed prominence of the counted harmonics (dB).
    strength: f32,
    /// Nominal line (for the slip-widened sideband tolerance).
    nominal: f32,
    spacing: [f32; 2],
    /// Counted harmonics and the highest counted harmonic number.
    counted: u8,
    highest: u8,
    /// Harmonics below the highest counted one that sit on a present
    /// running-speed line of the bearing's own shaft (masked bins): they
    /// cannot be seen, so they are no gap in the series.
    hidden: u8,
}

impl Family {
    /// The family of `r` (bearing `bearing`, its orders `o`), when anchored.
    fn of(bearing: usize, r: &DefectResult, o: &BearingOrders, hidden: u8) -> Option<Self> {
        let anchor = r.anchor.filter(|_| r.line_actual > 0.0)?;
        let counted = r.harmonics.iter().filter(|h| h.counted);
        Some(Family {
            bearing,
            kind: r.kind,
            line: r.line_actual,
            anchor,
            strength: counted.clone().map(|h| h.prominence_db.max(0.0)).sum(),
            nominal: r.line_order,
            spacing: modulation_spacing(r.kind, o.shaft_order(), o.ftf_order()),
            counted: u8::try_from(counted.clone().count()).unwrap_or(u8::MAX),
            highest: counted.map(|h| h.harmonic).max().unwrap_or(0),
            hidden,
        })
    }

    /// Harmonics of `r` below its highest counted one, not counted, whose
    /// order `h·L'` falls on a masked bin of `ctx` (a present running-speed
    /// line of the bearing's shaft).
    fn hidden_in(ctx: &Ctx<'_>, r: &DefectResult) -> u8 {
        let highest = r
            .harmonics
            .iter()
            .filter(|h| h.counted)
            .map(|h| h.harmonic)
            .max()
            .unwrap_or(0);
        let n = r
            .harmonics
            .iter()
            .filter(|h| h.harmonic < highest && !h.counted)
            .filter(|h| {
                let o = f32::from(h.harmonic) * r.line_actual;
                ctx.masked(f32_to_usize_sat(libm::roundf(o / ctx.opb)))
            })
            .count();
        u8::try_from(n).unwrap_or(u8::MAX)
    }

    /// Whether the order `o` lies on this family's comb: a harmonic of the
    /// anchored line or one of its modulation sidebands (step 5 of the module
    /// doc).
    fn explains(&self, o: f32, cfg: &DefectSearchConfig, opb: f32) -> bool {
        self.spacing
            .iter()
            .any(|&sp| on_family(o, self.line, self.anchor, self.nominal, sp, cfg, opb).is_some())
    }

    /// Whether this family takes a shared peak from `other` (of another
    /// bearing): the more complete series wins (counted harmonics over the
    /// highest counted harmonic number, compared exactly), then the
    /// stronger. A series with every other harmonic missing is more
    /// plausibly the even harmonics of a line at twice its order, and a
    /// series built from another family's sidebands is rarely complete.
    fn dominates(&self, other: &Family) -> bool {
        match self.completeness_cmp(other) {
            core::cmp::Ordering::Greater => true,
            core::cmp::Ordering::Less => false,
            core::cmp::Ordering::Equal => self.strength > other.strength,
        }
    }

    /// Compares the completeness of two series: counted harmonics over the
    /// harmonics up to the highest counted one that could be seen (not
    /// hidden by a running-speed line), exactly.
    fn completeness_cmp(&self, other: &Family) -> core::cmp::Ordering {
        let seen = |f: &Family| u16::from(f.highest.saturating_sub(f.hidden).max(1));
        let (a, b) = (u16::from(self.counted), seen(self));
        let (c, d) = (u16::from(other.counted), seen(other));
        (a * d).cmp(&(c * b))
    }

    /// How family `self` (`j`) stands to family `fi` (`i`) of another
    /// bearing, given `e_i` counted peaks of `fi` on this comb and `e_j` of
    /// this family on `fi`'s comb; `j_first` breaks a full tie (see
    /// [`DefectSearch::attribute_bearings`]).
    fn relation_to(
        &self,
        fi: &Family,
        e_i: u16,
        e_j: u16,
        j_first: bool,
        cfg: &DefectSearchConfig,
    ) -> Relation {
        let fj = self;
        if fi.bearing == fj.bearing || (e_i == 0 && e_j == 0) {
            return Relation::None;
        }
        let (n_i, n_j) = (u16::from(fi.counted.max(1)), u16::from(fj.counted.max(1)));
        let coincide =
            libm::fabsf(fi.nominal - fj.nominal) <= cfg.slip_tolerance * fi.nominal.max(fj.nominal);
        let first = fj.dominates(fi) || (!fi.dominates(fj) && j_first);
        if coincide && 2 * e_i >= n_i && 2 * e_j >= n_j {
            return if first {
                Relation::Shares
            } else {
                Relation::None
            };
        }
        let tie = if j_first {
            core::cmp::Ordering::Greater
        } else {
            core::cmp::Ordering::Less
        };
        let takes = fj
            .completeness_cmp(fi)
            .then((e_i * n_j).cmp(&(e_j * n_i)))
            .then(fj.strength.total_cmp(&fi.strength))
            .then(tie);
        if takes == core::cmp::Ordering::Greater {
            Relation::Takes
        } else {
            Relation::None
        }
    }
}

/// Most families one cross-pass step compares, and most (victim, owner) pairs it applies.
const MAX_PASS_PAIRS: usize = 32;

/// Cross-pass attribution: the step of [`DefectSearch::attribute_bearings`]
/// between bearings reported from *different* passes of one measurement
/// ([`crate::diagnosis::coverage`]), run when the passes' reports are merged
/// ([`crate::report::Report::merge_pass`]).
///
/// A pass searches every bearing, but a bearing whose shaft is too slow for
/// that pass's resolution (its own pass is a later one) cannot show its
/// family there: its running-speed mask and windows do not fit. Its high
/// harmonics and sidebands can then make up a family of a faster bearing in
/// the first pass (a 7th and 14th outer-race harmonic of an intermediate
/// bearing read as a 6203's BPFO on the input), with no detected family in
/// that pass to explain them. Each bearing's result here is from its own
/// pass; families are compared by their anchored lines (tach orders, the same
/// in every pass), with the tolerance of the coarser pass, by the same rules
/// as within a pass: the more complete series keeps shared peaks, then the
/// one explaining the larger share, then the stronger; coinciding lines with
/// the same evidence give one shared finding. The losing line is decided again
/// from what it keeps: its sideband pairs at the lost harmonics (among the
/// first three) are dropped, as the spectrum is no longer at hand.
///
/// `pass_opb[i]` is bearing `i`'s pass and that pass's orders per bin (`None`:
/// not searched).
pub fn attribute_across_passes(
    cfg: &DefectSearchConfig,
    orders: &[BearingOrders],
    pass_opb: &[Option<(u8, f32)>],
    diagnoses: &mut [&mut Option<BearingDiagnosis>],
) {
    // Detected families with their pass and resolution (snapshot).
    let mut fams: heapless::Vec<(Family, u8, f32), MAX_PASS_PAIRS> = heapless::Vec::new();
    for (bi, (d, o)) in diagnoses.iter().zip(orders.iter()).enumerate() {
        let (Some(d), Some(Some((pass, opb)))) = (&**d, pass_opb.get(bi)) else {
            continue;
        };
        for fam in d
            .results
            .iter()
            .filter(|r| r.detected)
            .filter_map(|r| Family::of(bi, r, o, 0))
        {
            let _ = fams.push((fam, *pass, *opb));
        }
    }
    let counted_on = |d: &[&mut Option<BearingDiagnosis>], f: &Family, g: &Family, opb: f32| {
        let n = d
            .get(f.bearing)
            .and_then(|d| d.as_ref())
            .and_then(|d| d.get(f.kind))
            .map_or(0, |r| {
                r.harmonics
                    .iter()
                    .filter(|h| h.counted && g.explains(h.found_order, cfg, opb))
                    .count()
            });
        u16::try_from(n).unwrap_or(u16::MAX)
    };
    // (victim, owner, shared finding) from the snapshot.
    let mut pairs: heapless::Vec<(u8, u8, bool), MAX_PASS_PAIRS> = heapless::Vec::new();
    for (i, (fi, pi, oi)) in fams.iter().enumerate() {
        for (j, (fj, pj, oj)) in fams.iter().enumerate() {
            if pi == pj || fi.bearing == fj.bearing {
                continue;
            }
            let opb = oi.max(*oj);
            let (e_i, e_j) = (
                counted_on(diagnoses, fi, fj, opb),
                counted_on(diagnoses, fj, fi, opb),
            );
            if e_i == 0 {
                continue;
            }
            let rel = fj.relation_to(fi, e_i, e_j, j < i, cfg);
            if rel != Relation::None {
                let (Ok(a), Ok(b)) = (u8::try_from(i), u8::try_from(j)) else {
                    continue;
                };
                let _ = pairs.push((a, b, rel == Relation::Shares));
            }
        }
    }
    for &(i, j, shares) in &pairs {
        let (Some((fi, _, oi)), Some((fj, _, oj))) =
            (fams.get(usize::from(i)), fams.get(usize::from(j)))
        else {
            continue;
        };
        let opb = oi.max(*oj);
        if let Some(r) = diagnoses
            .get_mut(fi.bearing)
            .and_then(|d| d.as_mut())
            .and_then(|d| d.results.get_mut(fi.kind.index()))
        {
            let mut lost_early = 0u8;
            for h in r.harmonics.iter_mut().filter(|h| h.counted) {
                if fj.explains(h.found_order, cfg, opb) {
                    h.counted = false;
                    h.shared_with = Some(fj.kind);
                    h.shared_bearing = u8::try_from(fj.bearing).ok();
                    if h.harmonic <= 3 {
                        lost_early = lost_early.saturating_add(1);
                    }
                }
            }
            decide_from_counts(r, lost_early, cfg);
        }
        if shares {
            let line = LineRef {
                bearing: u8::try_from(fi.bearing).unwrap_or(u8::MAX),
                kind: fi.kind,
            };
            if let Some(r) = diagnoses
                .get_mut(fj.bearing)
                .and_then(|d| d.as_mut())
                .and_then(|d| d.results.get_mut(fj.kind.index()))
            {
                if r.shared_finding.is_none() {
                    r.shared_finding = Some(line);
                }
            }
        }
    }
}

/// Decides `r` again after it lost counted harmonics without the spectrum:
/// harmonics found and score from the counted ones, sideband pairs less the
/// `lost_early` lost harmonics among the first three (where pairs are sought).
fn decide_from_counts(r: &mut DefectResult, lost_early: u8, cfg: &DefectSearchConfig) {
    let counted = r.harmonics.iter().filter(|h| h.counted);
    let (sa, sf) = counted.clone().fold((0.0f32, 0.0f32), |(a, f), h| {
        (a + h.amplitude * h.amplitude, f + h.floor * h.floor)
    });
    r.harmonics_found = u8::try_from(counted.count()).unwrap_or(u8::MAX);
    r.score_db = if r.harmonics_found == 0 {
        0.0
    } else if sf > 0.0 {
        10.0 * crate::num::log10f(sa / sf)
    } else {
        200.0
    };
    r.sidebands = r.sidebands.saturating_sub(lost_early);
    if r.sidebands == 0
        && r.sideband_db
            .is_some_and(|s| s >= cfg.sideband_threshold_db)
    {
        r.sideband_db = None;
    }
    r.detected = detection_rule(r, r.sidebands > 0, cfg);
}

/// Attribution rank: the family's other evidence (dB), then lower harmonic number.
#[derive(Clone, Copy)]
struct Rank(f32, u8);

impl Rank {
    fn cmp_rank(&self, other: &Rank) -> core::cmp::Ordering {
        self.0.total_cmp(&other.0).then(other.1.cmp(&self.1))
    }
}

fn not_searched(h: u8, expected: f32) -> HarmonicResult {
    HarmonicResult {
        harmonic: h,
        expected_order: expected,
        found_order: 0.0,
        amplitude: 0.0,
        floor: 0.0,
        prominence_db: -200.0,
        searched: false,
        found: false,
        counted: false,
        shared_with: None,
        shared_bearing: None,
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

impl DefectSearch {
    /// Validates the configuration.
    pub fn new(config: DefectSearchConfig) -> Result<Self, DefectConfigError> {
        config.validate()?;
        Ok(Self { config })
    }

    /// The configuration.
    pub fn config(&self) -> &DefectSearchConfig {
        &self.config
    }

    fn wide(&self, line: f32, h: u8, opb: f32) -> Window1 {
        let expected = f32::from(h) * line;
        Window1 {
            expected,
            half: (self.config.slip_tolerance * expected).max(self.config.min_window_bins * opb),
        }
    }

    /// Measures one watched line at `order` (see [`LineMeasurement`]).
    ///
    /// ```
    /// use dsp_core::diagnosis::defects::{DefectSearch, DefectSearchConfig};
    /// use dsp_core::spectrum::{SpectrumView, Window};
    /// let mut amps = [0.01f32; 1024];
    /// amps[320] = 0.5; // a line at order 5.0 with 64 bins per order
    /// let view = SpectrumView::new(&amps, 1.0 / 64.0, Window::Hann).unwrap();
    /// let m = DefectSearch::new(DefectSearchConfig::default()).unwrap().measure_line(&view, 5.0);
    /// assert!(m.searched && (m.found_order - 5.0).abs() < 0.02);
    /// assert!((m.prominence_db - 33.98).abs() < 0.1); // 20 log10(0.5 / 0.01)
    /// ```
    pub fn measure_line(&self, spectrum: &SpectrumView<'_>, order: f32) -> LineMeasurement {
        let w = self.wide(order, 1, spectrum.orders_per_bin());
        self.measure_line_within(spectrum, order, w.half)
    }

    /// Measures one watched line at `order` as [`Self::measure_line`], in a
    /// window of half-width `half` orders (a line that does not slip, such as
    /// a gear mesh, gets a narrow one).
    pub fn measure_line_within(
        &self,
        spectrum: &SpectrumView<'_>,
        order: f32,
        half: f32,
    ) -> LineMeasurement {
        let opb = spectrum.orders_per_bin();
        let ctx = Ctx {
            amps: spectrum.amplitudes(),
            opb,
            lobe_bins: spectrum.window().main_lobe_half_width_bins(),
            window: spectrum.window(),
            shaft_order: 1.0,
            ftf_order: 1.0,
            mask: false,
        };
        let mut m = LineMeasurement::not_searched(order);
        if !(order.is_finite() && order > 0.0 && half.is_finite() && half > 0.0) {
            return m;
        }
        let w = Window1 {
            expected: order,
            half,
        };
        if !ctx.fits(w) {
            return m;
        }
        let Some(floor) = ctx.floor(w, self.config.floor_band_orders) else {
            return m;
        };
        m.searched = true;
        m.floor = floor;
        if let Some(p) = ctx.peak(w.expected - w.half, w.expected + w.half) {
            m.found_order = p.order;
            m.amplitude = p.amplitude;
            m.prominence_db = if floor > 0.0 {
                amplitude_db(p.amplitude / floor)
            } else {
                200.0
            };
        }
        m
    }

    /// Searches all four defect kinds of one bearing in a spectrum.
    pub fn search(
        &self,
        spectrum: &SpectrumView<'_>,
        orders: &BearingOrders,
    ) -> Result<BearingDiagnosis, SearchError> {
        let pos = |v: f32| v.is_finite() && v > 0.0;
        if !(orders.lines().iter().all(|&l| pos(l))
            && pos(orders.shaft_order())
            && pos(orders.ftf_order()))
        {
            return Err(SearchError::InvalidOrders);
        }
        let cfg = &self.config;
        let ctx = Ctx {
            amps: spectrum.amplitudes(),
            opb: spectrum.orders_per_bin(),
            lobe_bins: spectrum.window().main_lobe_half_width_bins(),
            window: spectrum.window(),
            shaft_order: orders.shaft_order(),
            ftf_order: orders.ftf_order(),
            mask: cfg.mask_shaft_harmonics,
        };
        let mut results = DefectKind::ALL.map(|k| self.search_kind(&ctx, k, orders.line(k)));
        self.attribute(&ctx, &mut results);
        for r in results.iter_mut() {
            self.decide(&ctx, r, orders);
        }
        Self::cage_as_modulation(&mut results);
        Ok(BearingDiagnosis { results })
    }

    /// Cross-bearing attribution, run once every bearing of a point has been
    /// searched in the same spectrum (`diagnoses[i]` from `orders[i]`).
    ///
    /// Lines of different bearings can coincide (a 4th outer-race harmonic of
    /// one bearing within 2 % of another bearing's BPFI), and the shaft-rate
    /// sidebands of an inner-race fault can line up as a harmonic series of
    /// another bearing's line. A peak explained by one detected family is
    /// never also evidence for another bearing's line:
    /// * Comb: a family's comb is every harmonic `m >= 1` of its anchored line
    ///   `L'` and its modulation sidebands (tolerances as in step 5 of the
    ///   module doc).
    /// * Who keeps shared peaks: of two detected families of different
    ///   bearings whose combs hold some of each other's counted peaks, the
    ///   more complete series (counted harmonics over the highest counted
    ///   harmonic number), then the one that explains the larger share of the
    ///   other's counted peaks (a family whose whole evidence is part of
    ///   another's is that one's echo), then the larger summed prominence.
    /// * Order: families that no other takes from are settled first; each
    ///   settled family that is still detected claims the peaks on its comb,
    ///   and every later line (detected or not) of another bearing loses
    ///   them (`shared_bearing`, `shared_with` name the owner) and is decided
    ///   again.
    /// * Shared finding: when the two families' nominal lines coincide
    ///   within the slip window (1:1) and each explains at least half of the
    ///   other's counted peaks, the evidence cannot tell the bearings apart: one finding is kept, on the
    ///   dominating family, with [`DefectResult::shared_finding`] naming the
    ///   other bearing's line (ambiguous by physics), never two detections.
    ///
    /// Relations are taken from the results before any change, so the order
    /// of the bearings does not matter (except to break a full tie).
    pub fn attribute_bearings(
        &self,
        spectrum: &SpectrumView<'_>,
        orders: &[BearingOrders],
        diagnoses: &mut [&mut Option<BearingDiagnosis>],
    ) {
        let opb = spectrum.orders_per_bin();
        let cfg = &self.config;
        // Detected families of every bearing before any change (snapshot).
        let mut fams: heapless::Vec<Family, MAX_FAMILIES> = heapless::Vec::new();
        for (bi, (d, o)) in diagnoses.iter().zip(orders.iter()).enumerate() {
            let Some(d) = &**d else { continue };
            let ctx = Ctx {
                amps: spectrum.amplitudes(),
                opb,
                lobe_bins: spectrum.window().main_lobe_half_width_bins(),
                window: spectrum.window(),
                shaft_order: o.shaft_order(),
                ftf_order: o.ftf_order(),
                mask: cfg.mask_shaft_harmonics,
            };
            for fam in d
                .results
                .iter()
                .filter(|r| r.detected)
                .filter_map(|r| Family::of(bi, r, o, Family::hidden_in(&ctx, r)))
            {
                // Capacity 4 kinds x 8 bearings; more are not compared.
                let _ = fams.push(fam);
            }
        }
        let result = |d: &[&mut Option<BearingDiagnosis>], f: &Family| {
            d.get(f.bearing)
                .and_then(|d| d.as_ref())
                .and_then(|d| d.get(f.kind))
                .cloned()
        };
        // explained[i][j]: counted peaks of family i on family j's comb.
        let mut explained = [[0u8; MAX_FAMILIES]; MAX_FAMILIES];
        for (i, fi) in fams.iter().enumerate() {
            let Some(ri) = result(diagnoses, fi) else {
                continue;
            };
            for (j, fj) in fams.iter().enumerate() {
                if fj.bearing == fi.bearing {
                    continue;
                }
                let n = ri
                    .harmonics
                    .iter()
                    .filter(|h| h.counted && fj.explains(h.found_order, cfg, opb))
                    .count();
                if let Some(slot) = explained.get_mut(i).and_then(|row| row.get_mut(j)) {
                    *slot = u8::try_from(n).unwrap_or(u8::MAX);
                }
            }
        }
        let ex = |i: usize, j: usize| {
            u16::from(
                explained
                    .get(i)
                    .and_then(|row| row.get(j))
                    .copied()
                    .unwrap_or(0),
            )
        };
        // j takes the shared peaks from i: when the two nominal lines
        // coincide (1:1 within the slip window) and each explains at least
        // half of the other's peaks, the evidence is shared by both (one
        // finding, on the dominating family); otherwise the more complete
        // series (counted harmonics over the highest counted harmonic
        // number), then the one explaining the larger share of the other's
        // peaks (a family whose whole evidence is part of another's is that
        // one's echo), then the stronger.
        let relation = |j: usize, i: usize| -> Relation {
            let (Some(fi), Some(fj)) = (fams.get(i), fams.get(j)) else {
                return Relation::None;
            };
            fj.relation_to(fi, ex(i, j), ex(j, i), j < i, cfg)
        };
        // Order: a family no unprocessed family takes from comes first
        // (ties: the dominating one); in a cycle, the dominating one.
        let mut order: heapless::Vec<usize, MAX_FAMILIES> = heapless::Vec::new();
        let mut done = [false; MAX_FAMILIES];
        for _ in 0..fams.len() {
            let open = || (0..fams.len()).filter(|&i| !done.get(i).copied().unwrap_or(true));
            let free = |i: usize| open().all(|j| j == i || relation(j, i) == Relation::None);
            let better = |a: usize, b: usize| match (fams.get(a), fams.get(b)) {
                (Some(fa), Some(fb)) => fa.dominates(fb),
                _ => false,
            };
            let pick = |only_free: bool| {
                open()
                    .filter(|&i| !only_free || free(i))
                    .fold(None, |best: Option<usize>, i| match best {
                        Some(b) if !better(i, b) => Some(b),
                        _ => Some(i),
                    })
            };
            let Some(next) = pick(true).or_else(|| pick(false)) else {
                break;
            };
            if let Some(d) = done.get_mut(next) {
                *d = true;
            }
            let _ = order.push(next);
        }
        // Accepted families claim the peaks on their combs, in that order.
        let mut accepted: heapless::Vec<usize, MAX_FAMILIES> = heapless::Vec::new();
        for &i in &order {
            let Some(fi) = fams.get(i) else { continue };
            let mut shared_by: Option<usize> = None;
            let still = self.claim(
                spectrum,
                orders,
                diagnoses,
                fi.bearing,
                Some(fi.kind),
                |o| {
                    accepted.iter().find_map(|&a| {
                        let fa = fams.get(a)?;
                        fa.explains(o, cfg, opb).then(|| {
                            if relation(a, i) == Relation::Shares {
                                shared_by = Some(a);
                            }
                            (fa.bearing, fa.kind)
                        })
                    })
                },
            );
            if let Some(fa) = shared_by.and_then(|a| fams.get(a)) {
                let line = LineRef {
                    bearing: u8::try_from(fi.bearing).unwrap_or(u8::MAX),
                    kind: fi.kind,
                };
                if let Some(r) = diagnoses
                    .get_mut(fa.bearing)
                    .and_then(|d| d.as_mut())
                    .and_then(|d| d.results.get_mut(fa.kind.index()))
                {
                    if r.shared_finding.is_none() {
                        r.shared_finding = Some(line);
                    }
                }
            }
            if still {
                let _ = accepted.push(i);
            }
        }
        // Lines not detected lose the peaks an accepted family explains too.
        for bi in 0..diagnoses.len() {
            for kind in DefectKind::ALL {
                if fams.iter().any(|f| f.bearing == bi && f.kind == kind) {
                    continue;
                }
                self.claim(spectrum, orders, diagnoses, bi, Some(kind), |o| {
                    accepted.iter().find_map(|&a| {
                        let fa = fams.get(a)?;
                        (fa.bearing != bi && fa.explains(o, cfg, opb))
                            .then_some((fa.bearing, fa.kind))
                    })
                });
            }
            if let Some(d) = diagnoses.get_mut(bi).and_then(|d| d.as_mut()) {
                Self::cage_as_modulation(&mut d.results);
            }
        }
    }

    /// Uncounts the counted peaks of bearing `bi`'s `kind` line for which
    /// `owner` names another bearing's family, marks them shared with it and
    /// decides again. Returns whether the line is still detected.
    fn claim(
        &self,
        spectrum: &SpectrumView<'_>,
        orders: &[BearingOrders],
        diagnoses: &mut [&mut Option<BearingDiagnosis>],
        bi: usize,
        kind: Option<DefectKind>,
        mut owner: impl FnMut(f32) -> Option<(usize, DefectKind)>,
    ) -> bool {
        let (Some(kind), Some(o)) = (kind, orders.get(bi)) else {
            return false;
        };
        let Some(r) = diagnoses
            .get_mut(bi)
            .and_then(|d| d.as_mut())
            .and_then(|d| d.results.get_mut(kind.index()))
        else {
            return false;
        };
        let mut changed = false;
        for hr in r.harmonics.iter_mut().filter(|h| h.counted) {
            if let Some((ob, ok)) = owner(hr.found_order) {
                if ob != bi {
                    hr.counted = false;
                    hr.shared_with = Some(ok);
                    hr.shared_bearing = u8::try_from(ob).ok();
                    changed = true;
                }
            }
        }
        if changed {
            let ctx = Ctx {
                amps: spectrum.amplitudes(),
                opb: spectrum.orders_per_bin(),
                lobe_bins: spectrum.window().main_lobe_half_width_bins(),
                window: spectrum.window(),
                shaft_order: o.shaft_order(),
                ftf_order: o.ftf_order(),
                mask: self.config.mask_shaft_harmonics,
            };
            self.decide(&ctx, r, o);
        }
        r.detected
    }

    fn search_kind(&self, ctx: &Ctx<'_>, kind: DefectKind, line: f32) -> DefectResult {
        let cfg = &self.config;
        let thr = cfg.prominence_threshold_db;
        let mut harmonics: heapless::Vec<HarmonicResult, MAX_HARMONICS> = heapless::Vec::new();
        // Stage 1: wide windows.
        for h in 1..=cfg.harmonics {
            let w = self.wide(line, h, ctx.opb);
            let floor = if ctx.fits(w) {
                ctx.floor(w, cfg.floor_band_orders)
            } else {
                None
            };
            let hr = match floor {
                None => not_searched(h, w.expected),
                Some(floor) => {
                    let peak = ctx.peak(w.expected - w.half, w.expected + w.half);
                    let (found_order, amplitude) = peak.map_or((0.0, 0.0), |p| {
                        let delta = p.order / ctx.opb - libm::roundf(p.order / ctx.opb);
                        (p.order, p.amplitude / ctx.kernel(delta))
                    });
                    HarmonicResult {
                        harmonic: h,
                        expected_order: w.expected,
                        found_order,
                        amplitude,
                        floor,
                        prominence_db: if floor > 0.0 {
                            amplitude_db(amplitude / floor)
                        } else if amplitude > 0.0 {
                            200.0
                        } else {
                            -200.0
                        },
                        searched: true,
                        found: false,
                        counted: false,
                        shared_with: None,
                        shared_bearing: None,
                    }
                }
            };
            // Capacity MAX_HARMONICS >= harmonics (validated).
            let _ = harmonics.push(hr);
        }
        // Anchor: most prominent of the first anchor_harmonics above threshold.
        let anchor = harmonics
            .iter()
            .take(usize::from(cfg.anchor_harmonics))
            .filter(|r| r.searched && r.prominence_db >= thr)
            .max_by(|a, b| a.prominence_db.total_cmp(&b.prominence_db))
            .map(|r| (r.harmonic, r.found_order));
        // Stage 2: narrow windows at h · L'.
        if let Some((ha, fa)) = anchor {
            let line_actual = fa / f32::from(ha);
            for r in harmonics.iter_mut().filter(|r| r.searched) {
                if r.harmonic == ha {
                    r.found = true;
                    continue;
                }
                let wide = self.wide(line, r.harmonic, ctx.opb);
                let c = f32::from(r.harmonic) * line_actual;
                let half =
                    (cfg.refine_bins + f32::from(r.harmonic) / (4.0 * f32::from(ha))) * ctx.opb;
                let a = (c - half).max(wide.expected - wide.half);
                let b = (c + half).min(wide.expected + wide.half);
                match ctx.peak(a, b) {
                    Some(p) => {
                        let delta = p.order / ctx.opb - libm::roundf(p.order / ctx.opb);
                        r.found_order = p.order;
                        r.amplitude = p.amplitude / ctx.kernel(delta);
                        r.prominence_db = if r.floor > 0.0 {
                            amplitude_db(r.amplitude / r.floor)
                        } else {
                            200.0
                        };
                        r.found = r.prominence_db >= thr;
                    }
                    None => {
                        r.found_order = 0.0;
                        r.amplitude = 0.0;
                        r.prominence_db = -200.0;
                    }
                }
            }
        }
        let harmonics_searched =
            u8::try_from(harmonics.iter().filter(|r| r.searched).count()).unwrap_or(u8::MAX);
        DefectResult {
            kind,
            line_order: line,
            fundamental_amplitude: harmonics.first().map_or(0.0, |r| r.amplitude),
            harmonics,
            harmonics_found: 0,
            harmonics_searched,
            anchor: anchor.map(|(h, _)| h),
            line_actual: anchor.map_or(0.0, |(h, f)| f / f32::from(h)),
            sideband_db: None,
            sidebands: 0,
            score_db: 0.0,
            detected: false,
            shared_finding: None,
        }
    }

    /// Resolves peaks claimed by two kinds: a found harmonic whose peak is
    /// within `refine_bins` of a found harmonic of another kind, or on any
    /// integer multiple (or modulation sideband) of another kind's anchored
    /// line (that kind having at least two found harmonics), is shared. It
    /// counts for the kind whose other found harmonics carry more power over
    /// the floor, then for the lower harmonic number; on a full tie for
    /// neither (module doc, step 5).
    fn attribute(&self, ctx: &Ctx<'_>, results: &mut [DefectResult; 4]) {
        // Snapshot of all found peaks: (kind index, harmonic, order, power
        // over the floor); 12 bytes each on the node, as before the power was added.
        let mut claims: heapless::Vec<(u8, u8, f32, f32), { 4 * MAX_HARMONICS }> =
            heapless::Vec::new();
        for (ki, r) in results.iter().enumerate() {
            for h in r.harmonics.iter().filter(|h| h.found) {
                let ratio = if h.floor > 0.0 {
                    h.amplitude / h.floor
                } else {
                    0.0
                };
                // Capacity 4 x MAX_HARMONICS holds every harmonic.
                let k = u8::try_from(ki).unwrap_or(u8::MAX);
                let _ = claims.push((k, h.harmonic, h.found_order, ratio * ratio));
            }
        }
        let same_peak = self.config.refine_bins * ctx.opb;
        let found_count = |k: usize| claims.iter().filter(|c| usize::from(c.0) == k).count();
        // A family's evidence for a contested peak at `o`: the power over the
        // floor of its other found harmonics (dB), so that the peak itself
        // never decides who explains it.
        let evidence = |k: usize, o: f32| {
            let p: f32 = claims
                .iter()
                .filter(|c| usize::from(c.0) == k && libm::fabsf(c.2 - o) > same_peak)
                .map(|c| c.3)
                .sum();
            if p > 0.0 {
                10.0 * crate::num::log10f(p)
            } else {
                -200.0
            }
        };
        let rank = |k: usize, h: u8, o: f32| Rank(evidence(k, o), h);
        // Modulation spacings of each kind's family (`modulation_spacing`).
        let spacing: [[f32; 2]; 4] = core::array::from_fn(|k| {
            DefectKind::from_index(k).map_or([0.0; 2], |kind| {
                modulation_spacing(kind, ctx.shaft_order, ctx.ftf_order)
            })
        });
        let nominal: [f32; 4] =
            core::array::from_fn(|k| results.get(k).map_or(0.0, |r| r.line_order));
        // Anchored actual line L' = f_a / h_a and anchor harmonic of each kind.
        let families: [Option<(f32, u8)>; 4] = core::array::from_fn(|k| {
            let r = results.get(k)?;
            let ha = r.anchor?;
            let h = r.harmonics.iter().find(|h| h.harmonic == ha)?;
            (h.found_order > 0.0).then_some((h.found_order / f32::from(ha), ha))
        });
        for (ki, r) in results.iter_mut().enumerate() {
            for hr in r.harmonics.iter_mut() {
                hr.counted = hr.found;
                if !hr.found {
                    continue;
                }
                let o = hr.found_order;
                let mine = rank(ki, hr.harmonic, o);
                // (a) another kind found the same peak.
                let same = claims
                    .iter()
                    .filter(|c| usize::from(c.0) != ki && libm::fabsf(c.2 - o) <= same_peak)
                    .map(|&(kj, h2, _, _)| (usize::from(kj), rank(usize::from(kj), h2, o)));
                // (b) the peak sits on a harmonic m of another kind's family
                // (anchored line L'), including harmonics beyond the searched
                // ones. Not the cage family: BPFO = Z x FTF, so every outer-race
                // line is a cage harmonic by kinematics, which says nothing.
                let family = families.iter().enumerate().filter_map(|(kj, f)| {
                    let (line, ha) = (*f)?;
                    if kj == ki || kj == DefectKind::Ftf.index() || found_count(kj) < 2 {
                        return None;
                    }
                    let nominal = nominal.get(kj).copied().unwrap_or(line);
                    let sp = spacing.get(kj).copied().unwrap_or([0.0; 2]);
                    let m_u8 = sp.iter().find_map(|&sp| {
                        on_family(o, line, ha, nominal, sp, &self.config, ctx.opb)
                    })?;
                    Some((kj, rank(kj, m_u8, o)))
                });
                let rival = same.chain(family).max_by(|a, b| a.1.cmp_rank(&b.1));
                if let Some((kj, rank)) = rival {
                    hr.shared_with = DefectKind::from_index(kj);
                    hr.counted = mine.cmp_rank(&rank) == core::cmp::Ordering::Greater;
                }
            }
        }
    }

    fn decide(&self, ctx: &Ctx<'_>, r: &mut DefectResult, orders: &BearingOrders) {
        let cfg = &self.config;
        let counted = r.harmonics.iter().filter(|h| h.counted);
        let (sa, sf) = counted.clone().fold((0.0f32, 0.0f32), |(a, f), h| {
            (a + h.amplitude * h.amplitude, f + h.floor * h.floor)
        });
        r.harmonics_found = u8::try_from(counted.count()).unwrap_or(u8::MAX);
        r.score_db = if r.harmonics_found == 0 {
            0.0
        } else if sf > 0.0 {
            10.0 * crate::num::log10f(sa / sf)
        } else {
            200.0
        };
        let spacing = match r.kind {
            DefectKind::Bpfi => Some((orders.shaft_order(), 0.0)),
            DefectKind::Bsf => Some((orders.ftf_order(), cfg.slip_tolerance * orders.ftf_order())),
            DefectKind::Bpfo | DefectKind::Ftf => None,
        };
        r.sidebands = 0;
        if let Some((sp, slip)) = spacing {
            let half = (cfg.refine_bins * ctx.opb).max(slip);
            let pairs = r
                .harmonics
                .iter()
                .take(3)
                .filter(|h| h.counted)
                .filter_map(|h| {
                    let side = |c: f32| {
                        ctx.peak(c - half, c + half)
                            .map_or(-200.0, |p| amplitude_db(p.amplitude / h.floor))
                    };
                    let lower = side(h.found_order - sp);
                    let upper = side(h.found_order + sp);
                    (h.found_order - sp - half > 0.0).then_some(lower.min(upper))
                });
            r.sideband_db = pairs.clone().max_by(f32::total_cmp);
            r.sidebands = u8::try_from(pairs.filter(|&p| p >= cfg.sideband_threshold_db).count())
                .unwrap_or(u8::MAX);
        }
        let sideband_pair = r
            .sideband_db
            .is_some_and(|s| s >= cfg.sideband_threshold_db);
        r.detected = detection_rule(r, sideband_pair, cfg);
    }

    /// Cage lines beside a detected race or rolling-element family of the
    /// same bearing are read as that family's modulation (the same elements
    /// return once per cage turn), not as a cage defect (common practice).
    fn cage_as_modulation(results: &mut [DefectResult; 4]) {
        let other = results
            .iter()
            .any(|r| r.kind != DefectKind::Ftf && r.detected);
        if other {
            for r in results.iter_mut().filter(|r| r.kind == DefectKind::Ftf) {
                r.detected = false;
            }
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
