//! The decision of the module doc and the deciding of a line again.

use crate::diagnosis::kinematics::{BearingOrders, DefectKind};
use crate::num::amplitude_db;

use super::peaks::Ctx;
use super::*;

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

/// Harmonics found and the score (dB, counted amplitude over counted floor,
/// both as power sums) from `r`'s counted harmonics.
fn count_and_score(r: &mut DefectResult) {
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
}

/// Decides `r` again after it lost counted harmonics without the spectrum:
/// harmonics found and score from the counted ones, sideband pairs less the
/// `lost_early` lost harmonics among the first three (where pairs are sought).
pub(super) fn decide_from_counts(r: &mut DefectResult, lost_early: u8, cfg: &DefectSearchConfig) {
    count_and_score(r);
    r.sidebands = r.sidebands.saturating_sub(lost_early);
    if r.sidebands == 0
        && r.sideband_db
            .is_some_and(|s| s >= cfg.sideband_threshold_db)
    {
        r.sideband_db = None;
    }
    r.detected = detection_rule(r, r.sidebands > 0, cfg);
}

impl DefectSearch {
    pub(super) fn decide(&self, ctx: &Ctx<'_>, r: &mut DefectResult, orders: &BearingOrders) {
        let cfg = &self.config;
        count_and_score(r);
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
    pub(super) fn cage_as_modulation(results: &mut [DefectResult; 4]) {
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
