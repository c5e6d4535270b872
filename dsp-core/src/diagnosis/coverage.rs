//! Coverage: which spectrum searches which bearing, so that every watched
//! line of every bearing is searched at a resolution that fits its own shaft.
//!
//! One order spectrum of `N` points at `S` samples per tach revolution has a
//! resolution of `S / N` tach orders per bin and reaches `S / 4` orders
//! (see [`crate::pipeline`]). A bearing on a shaft turning `r` times as fast
//! as the tach shaft needs
//! * **range**: its highest watched line (BPFO, BPFI or 2 x BSF, in tach
//!   orders, plus the slip window and the window's main lobe) below `S / 4`;
//! * **resolution**: at least [`MIN_BINS_PER_SHAFT_ORDER`] bins per order of
//!   its own shaft (`r N / S`), so that its shaft-harmonic mask (a main lobe
//!   each side of every running-speed harmonic) leaves most of the spectrum,
//!   the shaft-rate sidebands of an inner-race line stand clear of it, and
//!   the floor has bins to rest on.
//!
//! On a gearbox with a 13:1 reduction no single `S` gives both to the input
//! and to the output bearings within a 4096-point spectrum. The point's own
//! `samples_per_rev` makes the first **pass**; each bearing it cannot serve
//! gets a later pass at the largest power of two `S` that resolves its shaft
//! (as many segments as fit in the first pass's revolutions, at least two,
//! at most as many as the first pass; its record is longer in revolutions). The passes run one after
//! the other on the node, in the same buffers (time-multiplexed: the RAM of
//! one pipeline), each a fresh record: see [`crate::pipeline::Pipeline::next_pass`].
//! Every bearing is searched in every pass (cross-bearing attribution then
//! sees all of them), but reported from its own pass.
//!
//! A line that no pass can serve gets its own state, [`NotSearched`], with the
//! reason and the setting that would serve it; it is never "not detected".

use core::fmt;

use heapless::Vec;

use crate::config::{Bearing, PointConfig, MAX_BEARINGS};
use crate::diagnosis::kinematics::{BearingOrders, DefectKind, ShaftRatio};

/// Most passes (speed classes) one point may need: a three-stage gearbox
/// with the tach on the input shaft has four shaft speeds, of which the
/// input and the first intermediate usually share the first pass.
pub const MAX_PASSES: usize = 3;

/// Fewest spectrum bins per order of a bearing's own shaft (common practice
/// for envelope spectra: a tenth to a twentieth of the running speed per
/// line; here 16 so that the +-2-bin Hann main-lobe mask of each running-speed
/// harmonic leaves about 70 % of the spectrum).
pub const MIN_BINS_PER_SHAFT_ORDER: f32 = 16.0;

/// Smallest samples per revolution a later pass may use (the order
/// tracker's lower limit).
pub const MIN_PASS_SAMPLES_PER_REV: u16 = 8;

/// One pass: a record at `samples_per_rev` over `revolutions` tach revolutions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Pass {
    /// Angle-domain samples per tach revolution.
    pub samples_per_rev: u16,
    /// Record length in tach revolutions (whole segments).
    pub revolutions: u16,
}

/// Why a watched line cannot be searched in any pass of a point.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum NotSearched {
    /// The line lies above the highest order any allowed pass reaches:
    /// `samples_per_rev` at least `needed` would.
    AboveRange {
        /// Samples per revolution that would reach it.
        needed: u16,
    },
    /// The bearing's shaft is too slow for a spectrum of this size even at
    /// the fewest samples per revolution (the record would be longer than
    /// 65,535 tach revolutions, or `S` below 8): a tach on a slower shaft
    /// would serve it.
    TooSlow,
    /// More speed classes than [`MAX_PASSES`]: `samples_per_rev` `needed`
    /// would serve it in a point of its own.
    TooManyPasses {
        /// Samples per revolution of the pass it would need.
        needed: u16,
    },
    /// The record was not analysable (see the report's quality flags).
    NotAnalysed,
    /// The pass that serves the bearing was not completed.
    PassMissing,
}

impl fmt::Display for NotSearched {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            NotSearched::AboveRange { needed } => write!(
                f,
                "above the search range; samples_per_rev = {needed} would reach it"
            ),
            NotSearched::TooSlow => f.write_str(
                "shaft too slow for the spectrum (record over 65535 revolutions); put the tach on a slower shaft",
            ),
            NotSearched::TooManyPasses { needed } => write!(
                f,
                "a {}th speed class; a point of its own with samples_per_rev = {needed} would serve it",
                MAX_PASSES + 1
            ),
            NotSearched::NotAnalysed => f.write_str("record not analysable"),
            NotSearched::PassMissing => f.write_str("its pass was not completed"),
        }
    }
}

/// The coverage of one point: its passes and, per bearing, the pass that
/// reports it or why it is not searched.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Coverage {
    /// Passes in the order they run; the first is the point's own setting.
    pub passes: Vec<Pass, MAX_PASSES>,
    /// Per bearing (point order): index into `passes`, or why not searched.
    pub bearings: Vec<Result<u8, NotSearched>, MAX_BEARINGS>,
}

/// Highest order the pass at `s` searches (`S / 4`).
pub(crate) fn search_limit(s: u16) -> f32 {
    0.25 * f32::from(s)
}

/// The highest order a bearing's fundamental lines reach with the slip
/// window and a main lobe of guard, for a spectrum of `n` points at `s`.
fn top_line(o: &BearingOrders, slip: f32, s: u16, n: usize, lobe_bins: f32) -> f32 {
    let opb = f32::from(s) / crate::num::usize_to_f32(n.max(1));
    let top = [DefectKind::Bpfo, DefectKind::Bpfi, DefectKind::Bsf]
        .iter()
        .map(|&k| o.line(k))
        .fold(0.0f32, f32::max);
    top * (1.0 + slip) + (lobe_bins + 1.5) * opb
}

/// Whether the pass at `s` serves a bearing with orders `o`.
pub(crate) fn serves(o: &BearingOrders, slip: f32, s: u16, n: usize, lobe_bins: f32) -> bool {
    let bins_per_shaft_order = o.shaft_order() * crate::num::usize_to_f32(n) / f32::from(s);
    bins_per_shaft_order >= MIN_BINS_PER_SHAFT_ORDER
        && top_line(o, slip, s, n, lobe_bins) <= search_limit(s)
}

/// The bearing's watched lines in tach orders (`None` when its shaft or
/// kinematics are invalid; [`PointConfig::validate`] reports those).
pub fn bearing_orders(point: &PointConfig, b: &Bearing) -> Option<BearingOrders> {
    let ratio = point.shafts.get(usize::from(b.shaft))?.ratio;
    let ratio = ShaftRatio::new(ratio).ok()?;
    Some(b.multiples().ok()?.orders(ratio))
}

/// The power of two `S` in `8..=1024` for a pass of its own that serves
/// `o`: the largest one up to the point's `s0` (a slower shaft: the most
/// harmonics in range at the finest resolution it needs), else the smallest
/// one above (a faster shaft: the fewest samples per revolution, so the
/// resampler ring still holds its revolutions).
fn best_samples_per_rev(
    o: &BearingOrders,
    slip: f32,
    n: usize,
    lobe_bins: f32,
    s0: u16,
) -> Option<u16> {
    let mut s = s0.min(1024);
    while s >= MIN_PASS_SAMPLES_PER_REV {
        if serves(o, slip, s, n, lobe_bins) {
            return Some(s);
        }
        s /= 2;
    }
    let mut s = s0.saturating_mul(2);
    while s <= 1024 {
        if serves(o, slip, s, n, lobe_bins) {
            return Some(s);
        }
        s = s.saturating_mul(2);
    }
    None
}

/// Revolutions of a later pass at `s` for a first pass of `segments`
/// segments over `revs0` revolutions: as many segments as fit in `revs0`,
/// at least two (one segment's floor is too noisy) and at most `segments`;
/// `None` when even one segment exceeds 65,535 revolutions.
fn pass_revolutions(segments: u32, revs0: u16, s: u16, n: usize) -> Option<u16> {
    let per_seg = u32::try_from(n / usize::from(s.max(1))).ok()?.max(1);
    let max_segs = u32::from(u16::MAX) / per_seg;
    let fit = u32::from(revs0) / per_seg;
    let segs = segments.min(fit.max(2)).min(max_segs);
    if segs == 0 {
        return None;
    }
    u16::try_from(segs.saturating_mul(per_seg)).ok()
}

/// Plans the passes of `point` for an `n`-point spectrum (the node's 4096).
/// The point should be valid ([`PointConfig::validate`]); bearings with an
/// invalid shaft or kinematics are reported [`NotSearched::TooSlow`].
///
/// ```
/// use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, Shaft};
/// use dsp_core::diagnosis::coverage::plan;
/// let mut p = PointConfig::default(); // 64 samples/rev, 256 revolutions
/// p.shafts.push(Shaft { name: name_from("output"), ratio: 1.0 / 13.12 }).unwrap();
/// let k = BearingKinematics::Multiples { bpfo_x: 3.58, bpfi_x: 5.42, ftf_x: 0.40, bsf_x: 2.36 };
/// p.bearings.push(Bearing { name: name_from("in"), shaft: 0, kinematics: k }).unwrap();
/// p.bearings.push(Bearing { name: name_from("out"), shaft: 1, kinematics: k }).unwrap();
/// let c = plan(&p, 4096);
/// assert_eq!(c.passes.len(), 2);
/// assert_eq!(c.passes[1].samples_per_rev, 16); // 19.5 bins per output-shaft order
/// assert_eq!(c.bearings.as_slice(), &[Ok(0), Ok(1)]);
/// ```
pub fn plan(point: &PointConfig, n: usize) -> Coverage {
    let slip = point.search.slip_tolerance;
    let lobe = point.window.main_lobe_half_width_bins();
    let s0 = point.samples_per_rev;
    let per_seg0 = u32::try_from(n / usize::from(s0.max(1))).unwrap_or(u32::MAX);
    let segments = (u32::from(point.revolutions) / per_seg0.max(1)).max(1);
    let mut passes: Vec<Pass, MAX_PASSES> = Vec::new();
    let _ = passes.push(Pass {
        samples_per_rev: s0,
        revolutions: point.revolutions,
    });
    let mut bearings: Vec<Result<u8, NotSearched>, MAX_BEARINGS> = Vec::new();
    for b in &point.bearings {
        let res = match bearing_orders(point, b) {
            None => Err(NotSearched::TooSlow),
            Some(o) => {
                // An existing pass that serves it, the first (finest) first.
                let found = passes
                    .iter()
                    .position(|p| serves(&o, slip, p.samples_per_rev, n, lobe));
                match found {
                    Some(i) => Ok(u8::try_from(i).unwrap_or(0)),
                    None => match best_samples_per_rev(&o, slip, n, lobe, s0) {
                        None => Err(if top_line(&o, slip, 1024, n, lobe) > search_limit(1024) {
                            NotSearched::AboveRange { needed: 2048 }
                        } else {
                            NotSearched::TooSlow
                        }),
                        Some(s) => match pass_revolutions(segments, point.revolutions, s, n) {
                            None => Err(NotSearched::TooSlow),
                            Some(revolutions) => {
                                let pass = Pass {
                                    samples_per_rev: s,
                                    revolutions,
                                };
                                match passes.push(pass) {
                                    Ok(()) => Ok(u8::try_from(passes.len() - 1).unwrap_or(0)),
                                    Err(_) => Err(NotSearched::TooManyPasses { needed: s }),
                                }
                            }
                        },
                    },
                }
            }
        };
        // Same capacity as the point's bearing list.
        let _ = bearings.push(res);
    }
    Coverage { passes, bearings }
}

/// One line (bearing, kind) that a point cannot search, for the point check.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Gap {
    /// Index into the point's bearings.
    pub bearing: u8,
    /// The watched kind.
    pub kind: DefectKind,
    /// Why.
    pub reason: NotSearched,
}

/// Every watched line of `point` that no pass searches (an empty list: every
/// line of every bearing is searched). Cage lines are included: they are
/// searched with their bearing.
pub fn gaps(point: &PointConfig, n: usize) -> Vec<Gap, { 4 * MAX_BEARINGS }> {
    let c = plan(point, n);
    let mut out = Vec::new();
    for (i, r) in c.bearings.iter().enumerate() {
        if let Err(reason) = r {
            for kind in DefectKind::ALL {
                let _ = out.push(Gap {
                    bearing: u8::try_from(i).unwrap_or(u8::MAX),
                    kind,
                    reason: *reason,
                });
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::{name_from, BearingKinematics, Shaft};

    const K: BearingKinematics = BearingKinematics::Multiples {
        bpfo_x: 3.58,
        bpfi_x: 5.42,
        ftf_x: 0.40,
        bsf_x: 2.36,
    };

    fn point(ratios: &[f32]) -> PointConfig {
        let mut p = PointConfig::default();
        for (i, &r) in ratios.iter().enumerate() {
            if i > 0 {
                p.shafts
                    .push(Shaft {
                        name: name_from(["a", "b", "c", "d"][i]),
                        ratio: r,
                    })
                    .unwrap();
            }
            p.bearings
                .push(Bearing {
                    name: name_from(["w", "x", "y", "z"][i]),
                    shaft: u8::try_from(i).unwrap(),
                    kinematics: K,
                })
                .unwrap();
        }
        p
    }

    #[test]
    fn one_pass_when_the_setting_serves_every_bearing() {
        let c = plan(&point(&[1.0, 0.5]), 4096);
        assert_eq!(c.passes.len(), 1);
        assert_eq!(c.bearings.as_slice(), &[Ok(0), Ok(0)]);
        assert!(gaps(&point(&[1.0, 0.5]), 4096).is_empty());
    }

    #[test]
    fn slow_shafts_get_passes_of_their_own_and_a_fourth_class_is_a_gap() {
        // 1 : 1/3 : 1/12 : 1/24
        let p = point(&[1.0, 1.0 / 3.0, 1.0 / 12.0, 1.0 / 24.0]);
        let c = plan(&p, 4096);
        assert_eq!(c.passes.len(), 3);
        for (b, pass) in c.bearings.iter().zip([0u8, 0, 1, 2]) {
            assert_eq!(*b, Ok(pass));
        }
        assert_eq!(c.passes[1].samples_per_rev, 16);
        assert_eq!(c.passes[2].samples_per_rev, 8);
        // Two segments (the first pass's 256 revolutions hold none of 512).
        assert_eq!(c.passes[2].revolutions, 2 * 512);
        // Too slow for S = 8 (1.3 bins per shaft order would need S = 1).
        let p = point(&[1.0, 1.0 / 12.0, 1.0 / 24.0, 1.0 / 200.0]);
        let g = gaps(&p, 4096);
        assert_eq!(g.len(), 4);
        assert!(g
            .iter()
            .all(|g| g.bearing == 3 && g.reason == NotSearched::TooSlow));
        // A fourth speed class.
        let p = point(&[1.0, 1.0 / 6.0, 1.0 / 12.0, 1.0 / 24.0]);
        let c = plan(&p, 4096);
        assert_eq!(c.bearings[3], Err(NotSearched::TooManyPasses { needed: 8 }));
    }

    #[test]
    fn a_fast_shaft_above_the_range_gets_a_finer_pass() {
        // Tach on the output, bearing on a shaft 8x as fast: lines up to
        // 44 orders (with slip and guard) need S = 256.
        let p = point(&[1.0, 8.0]);
        let c = plan(&p, 4096);
        assert_eq!(c.bearings[1], Ok(1));
        assert_eq!(c.passes[1].samples_per_rev, 256);
    }
}
