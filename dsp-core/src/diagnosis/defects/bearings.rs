//! Attribution across the bearings of a point and across the passes of
//! one measurement (module doc, "Across bearings").

use crate::diagnosis::kinematics::{BearingOrders, DefectKind};
use crate::num::f32_to_usize_sat;
use crate::spectrum::SpectrumView;

use super::attribution::{modulation_spacing, on_family};
use super::decision::decide_from_counts;
use super::peaks::Ctx;
use super::*;

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

impl DefectSearch {
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
    pub(super) fn claim(
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
}
