//! Defect extraction end to end on synthetic angle-domain signals: a defect
//! impulse train exciting a structural resonance (the classical bearing
//! fault model, McFadden & Smith 1984, "Model for the vibration produced by a
//! single point defect in a rolling element bearing", J. Sound Vib. 96(1)),
//! band-pass, rectification, decimation, order spectrum, defect search.
//! Fictional machine: a test-rig shaft whose resonance sits at order 50.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::panic
)]

use dsp_core::diagnosis::defects::{BearingDiagnosis, DefectSearch, DefectSearchConfig};
use dsp_core::diagnosis::kinematics::{BearingGeometry, BearingOrders, DefectKind, ShaftRatio};
use dsp_core::spectrum::{OrderSpectrum4096, SpectrumConfig};

const S_HI: usize = 256; // raw angular sampling, samples per revolution
const DECIM: usize = 4; // envelope decimation -> 64 samples/rev
const RES_ORDER: f64 = 50.0;

/// SplitMix64 with Box-Muller normals.
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
    fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

/// CWRU drive-end geometry (see kinematics_published.rs), on the tach shaft.
fn orders() -> BearingOrders {
    BearingGeometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    }
    .multiples()
    .unwrap()
    .orders(ShaftRatio::TACH)
}

struct Fault {
    order: f64,
    jitter: f64,
    amplitude: f64,
    /// Depth of amplitude modulation at the shaft's 1x (inner race turning through the load zone).
    shaft_modulation: f64,
}

/// RBJ audio-EQ-cookbook band-pass (constant 0 dB peak gain), f64.
struct BandPass {
    b: [f64; 3],
    a: [f64; 2],
    z: [f64; 2],
}
impl BandPass {
    fn new(f_norm: f64, q: f64) -> Self {
        let w0 = 2.0 * std::f64::consts::PI * f_norm;
        let alpha = w0.sin() / (2.0 * q);
        let a0 = 1.0 + alpha;
        Self {
            b: [alpha / a0, 0.0, -alpha / a0],
            a: [-2.0 * w0.cos() / a0, (1.0 - alpha) / a0],
            z: [0.0; 2],
        }
    }
    fn run(&mut self, x: f64) -> f64 {
        let y = self.b[0] * x + self.z[0];
        self.z[0] = self.b[1] * x - self.a[0] * y + self.z[1];
        self.z[1] = self.b[2] * x - self.a[1] * y;
        y
    }
}

/// Envelope samples at 64 per revolution for `revs` revolutions.
fn envelope(fault: Option<&Fault>, noise_g: f64, revs: usize, seed: u64) -> Vec<f32> {
    let mut rng = Rng(seed);
    let n_hi = revs * S_HI;
    let mut raw = vec![0.0f64; n_hi];
    if let Some(f) = fault {
        let period = S_HI as f64 / f.order; // samples between strikes
        let mut pos = rng.uniform() * period;
        let tau = period / 6.0;
        let w = 2.0 * std::f64::consts::PI * RES_ORDER / S_HI as f64;
        while pos < n_hi as f64 {
            let rev = pos / S_HI as f64;
            let a =
                f.amplitude * (1.0 + f.shaft_modulation * (2.0 * std::f64::consts::PI * rev).cos());
            let start = pos.round() as usize;
            for (i, r) in raw
                .iter_mut()
                .skip(start)
                .take((6.0 * tau) as usize)
                .enumerate()
            {
                let t = i as f64;
                *r += a * (-t / tau).exp() * (w * t).sin();
            }
            pos += period * (1.0 + f.jitter * rng.normal());
        }
    }
    for r in raw.iter_mut() {
        *r += noise_g * rng.normal();
    }
    let mut bp = BandPass::new(RES_ORDER / S_HI as f64, 4.0);
    let rect: Vec<f64> = raw.iter().map(|&x| bp.run(x).abs()).collect();
    rect.chunks_exact(DECIM)
        .map(|c| (c.iter().sum::<f64>() / DECIM as f64) as f32)
        .collect()
}

fn diagnose(env: &[f32]) -> BearingDiagnosis {
    diagnose_with(env, DefectSearchConfig::default())
}

fn diagnose_with(env: &[f32], config: DefectSearchConfig) -> BearingDiagnosis {
    let mut s = OrderSpectrum4096::new(SpectrumConfig::with_samples_per_rev((S_HI / DECIM) as u32))
        .unwrap();
    s.push_slice(env);
    assert!(s.segments() >= 1);
    let search = DefectSearch::new(config).unwrap();
    search.search(&s.view().unwrap(), &orders()).unwrap()
}

fn print(d: &BearingDiagnosis) {
    for r in &d.results {
        let h: Vec<String> = r
            .harmonics
            .iter()
            .map(|h| {
                if !h.searched {
                    "-".into()
                } else {
                    format!(
                        "{}{:.1}",
                        if h.counted {
                            "+"
                        } else if h.found {
                            "~"
                        } else {
                            ""
                        },
                        h.prominence_db
                    )
                }
            })
            .collect();
        println!(
            "{:4} L={:.4} found {}/{} score {:.1} dB sb {:?} det {} [{}]",
            r.kind.name(),
            r.line_order,
            r.harmonics_found,
            r.harmonics_searched,
            r.score_db,
            r.sideband_db.map(|v| (v * 10.0).round() / 10.0),
            r.detected,
            h.join(" ")
        );
    }
}

/// Outer-race impulse train at BPFO 3.5848 with 1 % jitter: BPFO detected with
/// several harmonics, each near h x 3.5848; the other kinds not.
#[test]
fn outer_race_train_detects_bpfo_only() {
    let f = Fault {
        order: 3.5848,
        jitter: 0.01,
        amplitude: 1.0,
        shaft_modulation: 0.0,
    };
    let d = diagnose(&envelope(Some(&f), 0.5, 4 * 64, 7));
    print(&d);
    let bpfo = d.get(DefectKind::Bpfo).unwrap();
    assert!(bpfo.detected);
    assert!(bpfo.harmonics_found >= 3, "{}", bpfo.harmonics_found);
    for h in bpfo.harmonics.iter().filter(|h| h.counted) {
        let expected = 3.5848 * f32::from(h.harmonic);
        assert!((h.found_order - expected).abs() < 2.0 / 64.0, "{h:?}");
    }
    // 64 samples/rev: orders up to 32, so all 5 harmonics (up to 17.9) are searched.
    assert_eq!(bpfo.harmonics_searched, 5);
    for k in [DefectKind::Bpfi, DefectKind::Ftf, DefectKind::Bsf] {
        assert!(!d.get(k).unwrap().detected, "{k} falsely detected");
    }
    assert_eq!(d.get(DefectKind::Ftf).unwrap().harmonics_found, 0);
}

/// Inner-race train at BPFI 5.4152, modulated by the shaft 1x: BPFI detected
/// and sidebands at +-1 order present above the sideband threshold.
#[test]
fn inner_race_train_shows_shaft_sidebands() {
    let f = Fault {
        order: 5.4152,
        jitter: 0.01,
        amplitude: 1.0,
        shaft_modulation: 0.8,
    };
    let d = diagnose(&envelope(Some(&f), 0.6, 4 * 64, 21));
    print(&d);
    let bpfi = d.get(DefectKind::Bpfi).unwrap();
    assert!(bpfi.detected);
    let sb = bpfi.sideband_db.unwrap();
    assert!(sb >= 8.0, "sidebands {sb} dB");
    assert!(!d.get(DefectKind::Bpfo).unwrap().detected);
    assert!(!d.get(DefectKind::Ftf).unwrap().detected);
}

/// Noise only (same front end, no impulses) over 500 seeds: count spectra
/// with any detection. The bound (at most 1 % of spectra) is the design goal
/// for the default thresholds; the measured count is printed.
#[test]
fn noise_only_false_alarms() {
    let mut false_alarms = [0u32; 4];
    let mut spectra_with_alarm = 0u32;
    let seeds = 500u64;
    for seed in 0..seeds {
        let d = diagnose(&envelope(None, 0.6, 4 * 64, 1000 + seed));
        let mut any = false;
        for r in &d.results {
            if r.detected {
                false_alarms[r.kind.index()] += 1;
                any = true;
            }
        }
        spectra_with_alarm += u32::from(any);
    }
    println!("noise only, {seeds} seeds x 4 averaged segments: spectra with a detection {spectra_with_alarm}; per kind BPFO/BPFI/FTF/BSF {false_alarms:?}");
    assert!(
        spectra_with_alarm <= 5,
        "{spectra_with_alarm} false alarms in {seeds}"
    );
}

/// Harsher: one segment (64 revolutions, no averaging, so the floor varies
/// more), with 5 and with 10 harmonics, 500 seeds each. Printed figures;
/// bound 5 % of spectra (measured when written: 5 h -> 9/500, 10 h -> 15/500).
#[test]
fn noise_only_false_alarms_single_segment() {
    for harmonics in [5u8, 10] {
        let mut cfg = DefectSearchConfig::default();
        cfg.harmonics = harmonics;
        let seeds = 500u64;
        let mut per_kind = [0u32; 4];
        let mut spectra = 0u32;
        for seed in 0..seeds {
            let d = diagnose_with(&envelope(None, 0.6, 64, 5000 + seed), cfg);
            let mut any = false;
            for r in d.results.iter().filter(|r| r.detected) {
                per_kind[r.kind.index()] += 1;
                any = true;
            }
            spectra += u32::from(any);
        }
        println!(
            "noise only, {seeds} seeds x 1 segment, {harmonics} harmonics: spectra with a detection {spectra}; per kind BPFO/BPFI/FTF/BSF {per_kind:?}"
        );
        assert!(
            spectra <= 25,
            "{harmonics} harmonics: {spectra} false alarms in {seeds}"
        );
    }
}

/// Two averaged segments (the fewest `envord validate` averages when a record
/// allows, docs/validation.md), 5 and 10 harmonics, 500 seeds each: the
/// floor's spread shrinks with averaging (a power average of M exponential
/// bins is Gamma(M)/M distributed, common statistics), so noise peaks that
/// pass the 10 dB threshold become rare. Printed figures; bound 1 % of
/// spectra, the design goal of the averaged case above.
#[test]
fn noise_only_false_alarms_two_segments() {
    for harmonics in [5u8, 10] {
        let mut cfg = DefectSearchConfig::default();
        cfg.harmonics = harmonics;
        let seeds = 500u64;
        let mut per_kind = [0u32; 4];
        let mut spectra = 0u32;
        for seed in 0..seeds {
            let d = diagnose_with(&envelope(None, 0.6, 2 * 64, 9000 + seed), cfg);
            let mut any = false;
            for r in d.results.iter().filter(|r| r.detected) {
                per_kind[r.kind.index()] += 1;
                any = true;
            }
            spectra += u32::from(any);
        }
        println!(
            "noise only, {seeds} seeds x 2 segments, {harmonics} harmonics: spectra with a detection {spectra}; per kind BPFO/BPFI/FTF/BSF {per_kind:?}"
        );
        assert!(
            spectra <= 5,
            "{harmonics} harmonics: {spectra} false alarms in {seeds}"
        );
    }
}
