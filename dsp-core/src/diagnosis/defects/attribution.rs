//! Attribution of peaks between coinciding lines of one bearing (step 5
//! of the module doc).

use crate::diagnosis::kinematics::DefectKind;
use crate::num::f32_to_usize_sat;

use super::peaks::Ctx;
use super::*;

/// Sideband orders `k` (`1 <= |k| <= MAX_SIDEBAND_ORDER`) of a modulated
/// family that attribution explains (inner-race load-zone modulation shows
/// several orders of shaft sidebands: common practice).
pub(super) const MAX_SIDEBAND_ORDER: i8 = 3;

/// Whether order `o` lies on harmonic `m` of a family with anchored line
/// `line` (anchor harmonic `ha`, nominal line `nominal`), or on one of its
/// modulation sidebands `m·line + k·spacing` (`spacing` 0: none). The
/// sideband spacing is known to within the line's own relative deviation
/// from nominal (speed error or slip), which widens the tolerance. Returns `m`.
pub(super) fn on_family(
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
pub(super) fn modulation_spacing(kind: DefectKind, shaft_order: f32, ftf_order: f32) -> [f32; 2] {
    match kind {
        DefectKind::Bpfi => [shaft_order, 0.0],
        DefectKind::Bsf => [ftf_order, 0.0],
        DefectKind::Bpfo => [ftf_order, shaft_order],
        DefectKind::Ftf => [0.0; 2],
    }
}

/// Attribution rank: the family's other evidence (dB), then lower harmonic number.
#[derive(Clone, Copy)]
struct Rank(f32, u8);

impl Rank {
    fn cmp_rank(&self, other: &Rank) -> core::cmp::Ordering {
        self.0.total_cmp(&other.0).then(other.1.cmp(&self.1))
    }
}

impl DefectSearch {
    /// Resolves peaks claimed by two kinds: a found harmonic whose peak is
    /// within `refine_bins` of a found harmonic of another kind, or on any
    /// integer multiple (or modulation sideband) of another kind's anchored
    /// line (that kind having at least two found harmonics), is shared. It
    /// counts for the kind whose other found harmonics carry more power over
    /// the floor, then for the lower harmonic number; on a full tie for
    /// neither (module doc, step 5).
    pub(super) fn attribute(&self, ctx: &Ctx<'_>, results: &mut [DefectResult; 4]) {
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
}
