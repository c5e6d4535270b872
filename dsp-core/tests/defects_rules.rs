//! Decision rules of the defect search on synthetic order spectra: a
//! Rayleigh-distributed floor (amplitude of narrow-band Gaussian noise,
//! common practice) with lines drawn by the Hann kernel sinc(d)/(1-d^2)
//! (Harris 1978, Proc. IEEE 66(1)).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::cast_sign_loss,
    clippy::panic
)]

use dsp_core::diagnosis::defects::{DefectSearch, DefectSearchConfig, SearchError};
use dsp_core::diagnosis::kinematics::{BearingOrders, DefectKind, DefectMultiples, ShaftRatio};
use dsp_core::spectrum::{SpectrumError, SpectrumView, Window};

const OPB: f32 = 1.0 / 64.0;
const BINS: usize = 2048; // orders 0..32

struct Rng(u64);
impl Rng {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
}

fn floor(seed: u64, sigma: f32) -> Vec<f32> {
    let mut rng = Rng(seed);
    (0..BINS)
        .map(|_| sigma * (-2.0 * rng.uniform().ln()).sqrt() as f32)
        .collect()
}

fn hann_kernel(d: f32) -> f32 {
    let d = d.abs();
    if d < 1e-6 {
        1.0
    } else if (d - 1.0).abs() < 1e-4 {
        0.5
    } else {
        let x = std::f32::consts::PI * d;
        (x.sin() / x) / (1.0 - d * d)
    }
}

fn add_line(s: &mut [f32], order: f32, amp: f32) {
    let p = order / OPB;
    let k0 = p.round() as i64;
    for k in (k0 - 2).max(0)..=(k0 + 2) {
        if let Some(v) = s.get_mut(k as usize) {
            *v += amp * hann_kernel(k as f32 - p).abs();
        }
    }
}

/// CWRU drive-end multiples (kinematics_published.rs), tach shaft.
fn cwru() -> BearingOrders {
    DefectMultiples::new(3.5848, 5.4152, 0.39828, 4.7135 / 2.0)
        .unwrap()
        .orders(ShaftRatio::TACH)
}

fn run(s: &[f32], cfg: DefectSearchConfig) -> dsp_core::diagnosis::defects::BearingDiagnosis {
    DefectSearch::new(cfg)
        .unwrap()
        .search(&SpectrumView::new(s, OPB, Window::Hann).unwrap(), &cwru())
        .unwrap()
}

/// BPFO family with 1 % slip (actual line 0.99 x nominal) is found at the
/// slipped orders, with interpolated amplitudes close to the drawn ones.
#[test]
fn slipped_bpfo_family_is_found() {
    let mut s = floor(1, 1e-4);
    for h in 1..=4 {
        add_line(&mut s, 0.99 * 3.5848 * h as f32, 0.1 / (h as f32).sqrt());
    }
    let d = run(&s, DefectSearchConfig::default());
    let r = d.get(DefectKind::Bpfo).unwrap();
    assert!(r.detected);
    assert_eq!(r.harmonics_found, 4);
    for h in r.harmonics.iter().take(4) {
        let want = 0.99 * 3.5848 * f32::from(h.harmonic);
        assert!((h.found_order - want).abs() < 0.3 * OPB, "{h:?}");
        let amp = 0.1 / f32::from(h.harmonic).sqrt();
        // Log-parabolic position + Hann kernel correction; the floor here is
        // added in amplitude (not in phase), so keep it tiny to isolate the interpolation.
        let err_db = 20.0 * (h.amplitude / amp).log10();
        println!(
            "h{} at bin offset {:.2}: amplitude error {err_db:.3} dB",
            h.harmonic,
            want / OPB - (want / OPB).round()
        );
        assert!(err_db.abs() < 0.2, "{h:?}");
    }
    assert!(!r.harmonics[4].counted);
    assert!(r.score_db > 15.0);
    for k in [DefectKind::Bpfi, DefectKind::Ftf, DefectKind::Bsf] {
        assert!(!d.get(k).unwrap().detected, "{k}");
    }
}

/// One isolated peak at BPFO is not a detection (needs two consistent
/// harmonics, or fundamental + sideband pair for BPFI/BSF).
#[test]
fn single_peak_is_not_a_detection() {
    let mut s = floor(2, 0.01);
    add_line(&mut s, 3.5848, 0.2);
    let r = run(&s, DefectSearchConfig::default()).results[0].clone();
    assert_eq!(r.kind, DefectKind::Bpfo);
    assert!(r.harmonics[0].counted);
    assert_eq!(r.harmonics_found, 1);
    assert!(!r.detected);
}

/// Harmonic consistency: peaks inside the wide slip windows but at
/// inconsistent slips (+1.5 % at h1, -1.5 % at h2) do not make a family.
#[test]
fn inconsistent_harmonics_are_rejected() {
    let mut s = floor(3, 0.01);
    add_line(&mut s, 1.015 * 3.5848, 0.2);
    add_line(&mut s, 0.985 * 2.0 * 3.5848, 0.2);
    let r = run(&s, DefectSearchConfig::default()).results[0].clone();
    assert!(!r.detected, "{r:?}");
    assert_eq!(r.harmonics_found, 1);
}

/// Running-speed harmonics alone (1x..30x, strong) detect nothing: they are
/// masked, so the cage's 5th and 10th harmonics (1.99, 3.98, near 2x and 4x)
/// cannot make a family out of them.
#[test]
fn shaft_harmonics_alone_detect_nothing() {
    let mut s = floor(4, 0.01);
    for k in 1..=30 {
        add_line(&mut s, k as f32, 0.3);
    }
    let mut cfg = DefectSearchConfig::default();
    cfg.harmonics = 10;
    let d = run(&s, cfg);
    assert_eq!(
        d.detected().count(),
        0,
        "{:?}",
        d.detected().collect::<Vec<_>>()
    );
    // Without the mask the 2x/4x lines are taken for FTF harmonics 5 and 10.
    cfg.mask_shaft_harmonics = false;
    let d = run(&s, cfg);
    let ftf = d.get(DefectKind::Ftf).unwrap();
    assert!(
        ftf.harmonics.iter().any(|h| h.prominence_db > 20.0),
        "{ftf:?}"
    );
}

/// BPFO = 9 x FTF for this bearing (BPFO = n x FTF from the formulas), so
/// FTF's 9th harmonic falls on BPFO's fundamental. A cage family (h1, h2)
/// together with a BPFO family (h1..h3): the shared peak is reported on both
/// and counted once, for BPFO (equal family size, 3 found each; the lower
/// harmonic number wins). The cage family itself is not a detection: beside a
/// detected race family, cage lines are read as that family's modulation
/// (cage lines are rarely a primary envelope finding: common practice).
#[test]
fn coinciding_peak_counts_once() {
    let mut s = floor(5, 0.01);
    for h in 1..=3 {
        add_line(&mut s, 3.5848 * h as f32, 0.2);
    }
    let ftf = 0.39828f32;
    for h in [1, 2] {
        add_line(&mut s, ftf * h as f32, 0.1);
    }
    let mut cfg = DefectSearchConfig::default();
    cfg.harmonics = 10;
    let d = run(&s, cfg);
    let bpfo = d.get(DefectKind::Bpfo).unwrap();
    let f = d.get(DefectKind::Ftf).unwrap();
    assert!(bpfo.detected && !f.detected);
    assert!(f.harmonics_found >= 2, "{f:?}");
    let h9 = &f.harmonics[8];
    assert!(h9.found, "{h9:?}");
    assert_eq!(h9.shared_with, Some(DefectKind::Bpfo));
    assert!(!h9.counted);
    assert_eq!(bpfo.harmonics[0].shared_with, Some(DefectKind::Ftf));
    assert!(bpfo.harmonics[0].counted);
}

/// BPFI fundamental with +-1x sidebands and no second harmonic: detected by
/// the fundamental + sideband-pair rule; sideband_db reports the weaker side.
#[test]
fn bpfi_with_shaft_sidebands() {
    let mut s = floor(6, 0.01);
    add_line(&mut s, 5.4152, 0.2);
    add_line(&mut s, 4.4152, 0.05);
    add_line(&mut s, 6.4152, 0.08);
    let r = run(&s, DefectSearchConfig::default()).results[1].clone();
    assert_eq!(r.kind, DefectKind::Bpfi);
    assert_eq!(r.harmonics_found, 1);
    let sb = r.sideband_db.unwrap();
    // Weaker sideband 0.05 over a Rayleigh(0.01) median 0.0118: about 12.6 dB.
    assert!(sb > 10.0 && sb < 15.0, "{sb}");
    assert!(r.detected);
    // Without the sidebands: not detected.
    let mut s = floor(6, 0.01);
    add_line(&mut s, 5.4152, 0.2);
    assert!(!run(&s, DefectSearchConfig::default()).results[1].detected);
}

/// Harmonics beyond the spectrum are reported as not searched, not dropped.
#[test]
fn harmonics_beyond_spectrum_are_reported() {
    let s = floor(7, 0.01);
    let short = &s[..640]; // orders up to 10
    let mut cfg = DefectSearchConfig::default();
    cfg.harmonics = 10;
    let d = DefectSearch::new(cfg)
        .unwrap()
        .search(
            &SpectrumView::new(short, OPB, Window::Hann).unwrap(),
            &cwru(),
        )
        .unwrap();
    let bpfo = d.get(DefectKind::Bpfo).unwrap();
    assert_eq!(bpfo.harmonics.len(), 10);
    assert_eq!(bpfo.harmonics_searched, 2); // 3.58, 7.17; 10.75 is past order 10
    assert!(bpfo
        .harmonics
        .iter()
        .skip(2)
        .all(|h| !h.searched && !h.found));
}

/// Bad input: NaN spectrum, zero resolution and overflowing orders are typed errors.
#[test]
fn bad_input_is_typed() {
    let mut s = floor(8, 0.01);
    s[100] = f32::NAN;
    assert_eq!(
        SpectrumView::new(&s, OPB, Window::Hann).err(),
        Some(SpectrumError::InvalidAmplitudes)
    );
    assert_eq!(
        SpectrumView::new(&s[..10], 0.0, Window::Hann).err(),
        Some(SpectrumError::OrdersPerBin)
    );
    let ok = floor(8, 0.01);
    let huge = DefectMultiples::new(3.0, 5.0, 0.4, 2.0)
        .unwrap()
        .orders(ShaftRatio::new(1e38).unwrap());
    let e = DefectSearch::new(DefectSearchConfig::default())
        .unwrap()
        .search(&SpectrumView::new(&ok, OPB, Window::Hann).unwrap(), &huge);
    assert_eq!(e.err(), Some(SearchError::InvalidOrders));
}

/// A peak on a higher harmonic of a strong family (BPFO's 6th, 21.509, not
/// among the 5 searched BPFO harmonics) that also fits a weak BPFI "family"
/// (a stray line at 21.509 / 4) is explained by BPFO and does not make BPFI
/// a detection.
#[test]
fn higher_harmonic_of_strong_family_is_not_reused() {
    let mut s = floor(9, 0.01);
    for h in 1..=6 {
        add_line(&mut s, 3.5848 * h as f32, 0.3);
    }
    add_line(&mut s, 6.0 * 3.5848 / 4.0, 0.05);
    let d = run(&s, DefectSearchConfig::default());
    assert!(d.get(DefectKind::Bpfo).unwrap().detected);
    let bpfi = d.get(DefectKind::Bpfi).unwrap();
    let h4 = &bpfi.harmonics[3];
    assert!(h4.found && !h4.counted, "{h4:?}");
    assert_eq!(h4.shared_with, Some(DefectKind::Bpfo));
    assert!(!bpfi.detected, "{bpfi:?}");
}

/// A cage family alone (no race or element family) needs one harmonic more
/// than the others and its fundamental: FTF h1..h3 is a detection, h2..h3
/// is not (cage lines are rarely a primary envelope finding: common practice).
#[test]
fn cage_family_needs_stronger_evidence() {
    let ftf = 0.39828f32;
    let mut s = floor(10, 0.01);
    for h in 1..=3 {
        add_line(&mut s, ftf * h as f32, 0.2);
    }
    assert!(run(&s, DefectSearchConfig::default()).results[2].detected);
    let mut s = floor(10, 0.01);
    for h in 2..=3 {
        add_line(&mut s, ftf * h as f32, 0.2);
    }
    let r = run(&s, DefectSearchConfig::default()).results[2].clone();
    assert_eq!(r.kind, DefectKind::Ftf);
    assert!(r.harmonics_found >= 2 && !r.detected, "{r:?}");
}

/// A BPFI fundamental and second harmonic without shaft sidebands are not an
/// inner-race detection (the load-zone modulation is the hallmark of an
/// inner-race defect: common practice); with a +-1x pair they are.
#[test]
fn bpfi_needs_sidebands_or_three_harmonics() {
    let mut s = floor(11, 0.01);
    add_line(&mut s, 5.4152, 0.2);
    add_line(&mut s, 2.0 * 5.4152, 0.2);
    let r = run(&s, DefectSearchConfig::default()).results[1].clone();
    assert_eq!(r.harmonics_found, 2);
    assert!(!r.detected, "{r:?}");
    add_line(&mut s, 4.4152, 0.08);
    add_line(&mut s, 6.4152, 0.08);
    assert!(run(&s, DefectSearchConfig::default()).results[1].detected);
}

/// A peak on a shaft sideband of a strong BPFI family is explained by BPFI:
/// 3 x BPFI - 2x = 14.246 lies in BPFO's 4th-harmonic window (14.339 +- 2 %),
/// and a line at 14.246 / 4 = 3.561 (0.65 % slip) would make a consistent
/// two-harmonic BPFO "family" of them (BPFO's summed prominence stays below
/// the three-harmonic BPFI family's). The sideband is counted for
/// BPFI's family, so BPFO is not detected (inner-race defects carry shaft
/// sidebands of several orders: common practice).
#[test]
fn sideband_of_strong_bpfi_is_not_reused() {
    let bpfi = 5.4152f32;
    let mut s = floor(12, 0.01);
    for h in 1..=3 {
        let c = bpfi * h as f32;
        add_line(&mut s, c, 0.3);
        for k in [-2.0f32, -1.0, 1.0, 2.0] {
            add_line(&mut s, c + k, 0.1);
        }
    }
    // Stronger than any BPFI line, so it anchors BPFO at h1 (not 2 x BPFI in h3's window).
    add_line(&mut s, (3.0 * bpfi - 2.0) / 4.0, 0.5);
    let d = run(&s, DefectSearchConfig::default());
    assert!(d.get(DefectKind::Bpfi).unwrap().detected);
    let bpfo = d.get(DefectKind::Bpfo).unwrap();
    let h4 = &bpfo.harmonics[3];
    assert!(h4.found && !h4.counted, "{h4:?}");
    assert_eq!(h4.shared_with, Some(DefectKind::Bpfi));
    assert!(!bpfo.detected, "{bpfo:?}");
}

/// An outer-race family modulated at the cage rate: the elements that strike
/// the defect return once per cage turn, so BPFO harmonics carry FTF
/// sidebands (common practice; seen in the CWRU 0.007 in outer-race records,
/// docs/validation.md). BPFO + 3 FTF = 4.780 lies in the 2 x BSF window
/// (4.714 +- 2 %) and its neighbours BPFO + 2 FTF and BPFO + 4 FTF look like
/// a cage sideband pair around it. Explained as BPFO's sidebands, they do not
/// make a rolling-element detection.
#[test]
fn cage_sidebands_of_strong_bpfo_are_not_reused() {
    let (bpfo, ftf) = (3.5848f32, 0.39828f32);
    let mut s = floor(13, 0.01);
    for h in 1..=4 {
        add_line(&mut s, bpfo * h as f32, 0.3);
    }
    for k in 1..=4 {
        add_line(&mut s, bpfo + k as f32 * ftf, 0.08);
    }
    let d = run(&s, DefectSearchConfig::default());
    assert!(d.get(DefectKind::Bpfo).unwrap().detected);
    let bsf = d.get(DefectKind::Bsf).unwrap();
    let h1 = &bsf.harmonics[0];
    assert!(
        h1.found && (h1.found_order - (bpfo + 3.0 * ftf)).abs() < 0.02,
        "{h1:?}"
    );
    assert!(!h1.counted, "{h1:?}");
    assert_eq!(h1.shared_with, Some(DefectKind::Bpfo));
    assert!(!bsf.detected, "{bsf:?}");
}

/// A peak two families claim goes to the family whose *other* harmonics are
/// the stronger evidence, so a family anchored on the contested peak itself
/// cannot take it with a few weak lines. 2 x BPFI (10.80) also lies in
/// BPFO's 3rd-harmonic window; weak lines at 1, 2 and 4 x 10.80 / 3 make a
/// consistent four-harmonic BPFO "family" around it (as in the CWRU 48 kHz
/// record 109 FE channel, docs/validation.md). Summed prominences in dB would
/// favour BPFO's four peaks; the power of the other harmonics favours BPFI
/// (a 34 dB fundamental with shaft sidebands against three lines of 11 dB).
#[test]
fn contested_peak_goes_to_the_family_with_stronger_other_evidence() {
    let bpfi = 5.40f32;
    let mut s = floor(14, 0.01);
    add_line(&mut s, bpfi, 0.6);
    add_line(&mut s, bpfi - 1.0, 0.15);
    add_line(&mut s, bpfi + 1.0, 0.15);
    add_line(&mut s, 2.0 * bpfi, 0.4);
    let l = 2.0 * bpfi / 3.0;
    for h in [1.0f32, 2.0, 4.0] {
        add_line(&mut s, h * l, 0.042);
    }
    let d = run(&s, DefectSearchConfig::default());
    let (o, i) = (
        d.get(DefectKind::Bpfo).unwrap(),
        d.get(DefectKind::Bpfi).unwrap(),
    );
    assert!(o.harmonics[2].found && !o.harmonics[2].counted, "{o:?}");
    assert_eq!(o.harmonics[2].shared_with, Some(DefectKind::Bpfi));
    assert!(i.harmonics[1].counted, "{i:?}");
    assert!(i.detected && i.score_db > o.score_db + 10.0, "{i:?} {o:?}");
}

/// A rolling-element family needs its cage (FTF) sidebands, or one harmonic
/// more, as BPFI needs its shaft sidebands: the damaged element passes
/// through the load zone once per cage turn (common practice). Two lines at
/// 2 x BSF and 4 x BSF alone are not a detection; with a +-FTF pair around
/// the fundamental, or with a third harmonic, they are.
#[test]
fn bsf_needs_cage_sidebands_or_three_harmonics() {
    let (l, ftf) = (4.7135f32, 0.39828f32);
    let mut s = floor(15, 0.01);
    add_line(&mut s, l, 0.2);
    add_line(&mut s, 2.0 * l, 0.2);
    let r = run(&s, DefectSearchConfig::default()).results[3].clone();
    assert_eq!(r.kind, DefectKind::Bsf);
    assert_eq!(r.harmonics_found, 2);
    assert!(!r.detected, "{r:?}");
    let mut with_pair = s.clone();
    add_line(&mut with_pair, l - ftf, 0.08);
    add_line(&mut with_pair, l + ftf, 0.08);
    let r = run(&with_pair, DefectSearchConfig::default()).results[3].clone();
    assert!(r.sideband_db.unwrap() >= 8.0 && r.detected, "{r:?}");
    add_line(&mut s, 3.0 * l, 0.2);
    assert!(run(&s, DefectSearchConfig::default()).results[3].detected);
}

/// BPFO = Z x FTF (Z = 9 here), so an outer-race fundamental is always the
/// cage family's 9th harmonic: that coincidence comes from the kinematics and
/// does not let a strong cage family take the race line. A strong cage
/// family (h1..h4) beside a BPFO fundamental and a weak second harmonic: the
/// fundamental stays BPFO's, and BPFO is detected (CWRU 0.014 in outer-race
/// records lost BPFO this way in several survey bands, docs/validation.md).
#[test]
fn cage_family_does_not_explain_race_lines() {
    let (bpfo, ftf) = (3.5848f32, 0.39828f32);
    let mut s = floor(16, 0.01);
    for h in 1..=4 {
        add_line(&mut s, ftf * h as f32, 0.3);
    }
    add_line(&mut s, bpfo, 0.2);
    add_line(&mut s, 2.0 * bpfo, 0.06);
    let d = run(&s, DefectSearchConfig::default());
    let o = d.get(DefectKind::Bpfo).unwrap();
    assert!(o.harmonics[0].counted, "{o:?}");
    assert_eq!(o.harmonics_found, 2, "{o:?}");
    assert!(o.detected, "{o:?}");
}

/// Two bearings on one shaft. Bearing 0 (CWRU drive end) has an inner-race
/// fault: BPFI harmonics with shaft sidebands at +-1 and +-2 orders (the
/// race turns through the load zone, common practice). Bearing 1 is healthy;
/// its BPFI (0.8153 x bearing 0's: 4.415 orders) falls on the lower sideband
/// BPFI - 1, its 2nd harmonic on 2 BPFI - 2, and its own shaft "sidebands"
/// on BPFI - 2 and BPFI. Searched alone, bearing 1 shows an inner-race
/// detection made entirely of bearing 0's sidebands; across bearings those
/// peaks lie on bearing 0's comb (step 5 sidebands), which is the stronger
/// family, so bearing 1 detects nothing and bearing 0 keeps its finding.
/// Before cross-bearing attribution looked at sidebands (harmonics only),
/// bearing 1 kept the detection.
#[test]
fn sidebands_of_another_bearings_fault_are_not_a_family() {
    let bpfi = 5.4152f32;
    let mut s = floor(21, 0.01);
    for h in 1..=3 {
        let c = bpfi * h as f32;
        add_line(&mut s, c, 0.3);
        for k in [-2.0f32, -1.0, 1.0, 2.0] {
            add_line(&mut s, c + k, 0.1);
        }
    }
    let k = (bpfi - 1.0) / bpfi;
    let healthy = DefectMultiples::new(3.5848 * k, 5.4152 * k, 0.39828 * k, 4.7135 / 2.0 * k)
        .unwrap()
        .orders(ShaftRatio::TACH);
    let view = SpectrumView::new(&s, OPB, Window::Hann).unwrap();
    let search = DefectSearch::new(DefectSearchConfig::default()).unwrap();
    let mut faulty = Some(search.search(&view, &cwru()).unwrap());
    let mut other = Some(search.search(&view, &healthy).unwrap());
    let alone = other
        .as_ref()
        .unwrap()
        .get(DefectKind::Bpfi)
        .unwrap()
        .clone();
    assert!(
        alone.detected,
        "alone, the sidebands look like a family: {alone:?}"
    );
    search.attribute_bearings(&view, &[cwru(), healthy], &mut [&mut faulty, &mut other]);
    let faulty = faulty.unwrap();
    let other = other.unwrap();
    assert!(faulty.get(DefectKind::Bpfi).unwrap().detected);
    assert_eq!(other.detected().count(), 0, "{other:?}");
    let h1 = &other.get(DefectKind::Bpfi).unwrap().harmonics[0];
    assert!(h1.found && !h1.counted, "{h1:?}");
    assert_eq!(
        (h1.shared_bearing, h1.shared_with),
        (Some(0), Some(DefectKind::Bpfi))
    );
}

/// A more complete series keeps its peaks against a stronger but gappy one.
/// Bearing 1's line is half of bearing 0's outer-race line: its even
/// harmonics (2, 4) sit on bearing 0's complete series (1-4), its 3rd finds
/// nothing, and a strong line of its own at harmonic 1 (0.5 x BPFO, on no
/// comb of bearing 0) makes its summed prominence the larger. By strength
/// alone bearing 1 would take bearing 0's 1st and 2nd harmonics (its 2nd
/// and 4th); by completeness (4 of 4 against 3 of 4) bearing 0 keeps all
/// four, and bearing 1, left with one line, detects nothing.
#[test]
fn a_complete_series_keeps_its_peaks_against_a_gappy_stronger_one() {
    let bpfo = 3.5848f32;
    let mut s = floor(22, 0.01);
    for h in 1..=4 {
        add_line(&mut s, bpfo * h as f32, 0.1);
    }
    add_line(&mut s, 0.5 * bpfo, 3.0);
    let half = DefectMultiples::new(bpfo / 2.0, 7.9, 0.2, 1.7)
        .unwrap()
        .orders(ShaftRatio::TACH);
    let view = SpectrumView::new(&s, OPB, Window::Hann).unwrap();
    let search = DefectSearch::new(DefectSearchConfig::default()).unwrap();
    let mut a = Some(search.search(&view, &cwru()).unwrap());
    let mut b = Some(search.search(&view, &half).unwrap());
    let strength = |r: &dsp_core::diagnosis::defects::DefectResult| -> f32 {
        r.harmonics
            .iter()
            .filter(|h| h.counted)
            .map(|h| h.prominence_db)
            .sum()
    };
    let (sa, sb) = (
        strength(a.as_ref().unwrap().get(DefectKind::Bpfo).unwrap()),
        strength(b.as_ref().unwrap().get(DefectKind::Bpfo).unwrap()),
    );
    assert!(
        sb > sa,
        "bearing 1 must be the stronger for this test: {sb} vs {sa}"
    );
    search.attribute_bearings(&view, &[cwru(), half], &mut [&mut a, &mut b]);
    let (a, b) = (a.unwrap(), b.unwrap());
    let bpfo_a = a.get(DefectKind::Bpfo).unwrap();
    assert!(bpfo_a.detected, "{bpfo_a:?}");
    assert_eq!(
        bpfo_a.harmonics.iter().filter(|h| h.counted).count(),
        4,
        "{bpfo_a:?}"
    );
    assert!(!b.get(DefectKind::Bpfo).unwrap().detected, "{b:?}");
}
