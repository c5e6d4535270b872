//! Defect search on open bearing datasets in ../shared/data: the CWRU Bearing
//! Data Center recordings and the MFPT fault data sets (fault labels, speeds
//! and bearing data from each folder's manifest): a plain
//! test-side envelope front end (RBJ band-pass 2-5 kHz, rectify, low-pass,
//! resample to 64 samples/rev at the recorded constant speed), then the
//! bearing multiples from the drive-end 6205 geometry (kinematics), the
//! dsp-core order spectrum and defect search with default thresholds.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::cast_sign_loss
)]

use std::path::{Path, PathBuf};

use dsp_core::defects::{DefectSearch, DefectSearchConfig};
use dsp_core::kinematics::{DefectKind, ShaftRatio};
use dsp_core::spectrum::{OrderSpectrum4096, SpectrumConfig};

const S: u32 = 64;

fn data_dir() -> PathBuf {
    data_set("cwru")
}

fn data_set(name: &str) -> PathBuf {
    // Worktrees sit beside the main checkout; the data lives in /work/shared/data.
    let here = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    for up in here.ancestors() {
        let p = up.join("shared/data").join(name);
        if p.join("manifest.toml").exists() {
            return p;
        }
    }
    panic!("dataset {name} not found above {here:?} (expected shared/data/{name})");
}

struct Rec {
    file: String,
    rate: f64,
    rpm: f64,
    fault: String,
    channel: String,
}

fn manifest(dir: &Path) -> Vec<Rec> {
    let text = std::fs::read_to_string(dir.join("manifest.toml")).unwrap();
    let mut out = Vec::new();
    for block in text.split("[[recording]]").skip(1) {
        let get = |k: &str| {
            block.lines().find_map(|l| {
                l.strip_prefix(&format!("{k} = "))
                    .map(|v| v.trim().trim_matches('"').to_string())
            })
        };
        out.push(Rec {
            file: get("file").unwrap(),
            rate: get("sample_rate_hz").unwrap().parse().unwrap(),
            rpm: get("shaft_rpm").unwrap().parse().unwrap(),
            fault: get("fault_location").unwrap(),
            channel: get("channel").unwrap_or_default(),
        });
    }
    out
}

/// Minimal RIFF/WAVE reader for 32-bit float mono.
fn read_wav(path: &Path) -> Vec<f32> {
    let b = std::fs::read(path).unwrap();
    assert_eq!(&b[0..4], b"RIFF");
    let mut i = 12;
    let mut fmt_ok = false;
    while i + 8 <= b.len() {
        let id = &b[i..i + 4];
        let len = u32::from_le_bytes(b[i + 4..i + 8].try_into().unwrap()) as usize;
        let body = &b[i + 8..(i + 8 + len).min(b.len())];
        if id == b"fmt " {
            let tag = u16::from_le_bytes([body[0], body[1]]);
            let ch = u16::from_le_bytes([body[2], body[3]]);
            let bits = u16::from_le_bytes([body[14], body[15]]);
            fmt_ok = (tag == 3 || tag == 0xFFFE) && ch == 1 && bits == 32;
        }
        if id == b"data" {
            assert!(fmt_ok, "{path:?}: not 32-bit float mono");
            return body
                .chunks_exact(4)
                .map(|c| f32::from_le_bytes(c.try_into().unwrap()))
                .collect();
        }
        i += 8 + len + (len & 1);
    }
    panic!("{path:?}: no data chunk");
}

/// RBJ cookbook biquad (band-pass constant 0 dB peak, or low-pass), f64.
struct Biquad {
    b: [f64; 3],
    a: [f64; 2],
    z: [f64; 2],
}
impl Biquad {
    fn bandpass(fc: f64, q: f64, fs: f64) -> Self {
        let w0 = 2.0 * std::f64::consts::PI * fc / fs;
        let alpha = w0.sin() / (2.0 * q);
        let a0 = 1.0 + alpha;
        Self {
            b: [alpha / a0, 0.0, -alpha / a0],
            a: [-2.0 * w0.cos() / a0, (1.0 - alpha) / a0],
            z: [0.0; 2],
        }
    }
    fn lowpass(fc: f64, fs: f64) -> Self {
        let w0 = 2.0 * std::f64::consts::PI * fc / fs;
        let alpha = w0.sin() / (2.0 * std::f64::consts::FRAC_1_SQRT_2);
        let a0 = 1.0 + alpha;
        let c = w0.cos();
        Self {
            b: [(1.0 - c) / 2.0 / a0, (1.0 - c) / a0, (1.0 - c) / 2.0 / a0],
            a: [-2.0 * c / a0, (1.0 - alpha) / a0],
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

fn envelope_angle(x: &[f32], fs: f64, rpm: f64) -> Vec<f32> {
    let f_rot = rpm / 60.0;
    let (fc, q) = (
        (2000.0f64 * 5000.0).sqrt(),
        (2000.0f64 * 5000.0).sqrt() / 3000.0,
    );
    let mut bp = [Biquad::bandpass(fc, q, fs), Biquad::bandpass(fc, q, fs)];
    let cutoff = 0.4 * f64::from(S) * f_rot;
    let mut lp = [Biquad::lowpass(cutoff, fs), Biquad::lowpass(cutoff, fs)];
    let env: Vec<f64> = x
        .iter()
        .map(|&v| {
            let y = bp.iter_mut().fold(f64::from(v), |acc, f| f.run(acc)).abs();
            lp.iter_mut().fold(y, |acc, f| f.run(acc))
        })
        .collect();
    let step = fs / (f64::from(S) * f_rot); // input samples per angle sample
    let skip = (0.05 * fs) as usize; // filter settling
    let mut out = Vec::new();
    let mut t = skip as f64;
    while (t as usize) + 1 < env.len() {
        let i = t as usize;
        let fr = t - i as f64;
        out.push((env[i] * (1.0 - fr) + env[i + 1] * fr) as f32);
        t += step;
    }
    out
}

#[test]
fn cwru_drive_end_channel() {
    let dir = data_dir();
    let de = dsp_core::kinematics::BearingGeometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    }
    .multiples()
    .unwrap()
    .orders(ShaftRatio::TACH);
    let search = DefectSearch::new(DefectSearchConfig::default()).unwrap();
    let mut rows = Vec::new();
    let mut too_short = Vec::new();
    let records: Vec<Rec> = manifest(&dir)
        .into_iter()
        .filter(|r| r.channel == "DE")
        .collect();
    assert!(
        records.len() >= 20,
        "manifest lists {} DE records",
        records.len()
    );
    for r in &records {
        let x = read_wav(&dir.join(&r.file));
        let env = envelope_angle(&x, r.rate, r.rpm);
        let mut s = OrderSpectrum4096::new(SpectrumConfig::with_samples_per_rev(S)).unwrap();
        s.push_slice(&env);
        let Some(view) = s.view() else {
            // Shorter than one 64-revolution segment: reported, not analysed.
            println!(
                "{:34} {:11} shorter than one segment ({} angle samples < 4096)",
                r.file,
                r.fault,
                env.len()
            );
            too_short.push(r.file.clone());
            continue;
        };
        let d = search.search(&view, &de).unwrap();
        let det: Vec<&str> = d.detected().map(DefectKind::name).collect();
        let sc: Vec<String> = d
            .results
            .iter()
            .map(|r| format!("{}:{}/{:.0}", r.kind.name(), r.harmonics_found, r.score_db))
            .collect();
        println!(
            "{:34} {:11} seg {} -> {:?} {}",
            r.file,
            r.fault,
            s.segments(),
            det,
            sc.join(" ")
        );
        if std::env::var("CWRU_DEBUG").is_ok_and(|v| r.file.contains(&v)) {
            for x in &d.results {
                let f: Vec<String> = x
                    .harmonics
                    .iter()
                    .filter(|h| h.found)
                    .map(|h| {
                        format!(
                            "h{}@{:.3}({:.0}dB{})",
                            h.harmonic,
                            h.found_order,
                            h.prominence_db,
                            if h.counted { "" } else { ",shared" }
                        )
                    })
                    .collect();
                println!("    {} {}", x.kind.name(), f.join(" "));
            }
        }
        rows.push((
            r.fault.clone(),
            det.iter().map(|s| s.to_string()).collect::<Vec<_>>(),
        ));
    }
    let mut rate = std::collections::HashMap::new();
    for (fault, kind) in [
        ("outer_race", "BPFO"),
        ("inner_race", "BPFI"),
        ("ball", "BSF"),
        ("none", ""),
    ] {
        let n = rows.iter().filter(|(f, _)| f == fault).count();
        let hit = rows
            .iter()
            .filter(|(f, d)| f == fault && d.iter().any(|k| k == kind))
            .count();
        let other = rows
            .iter()
            .filter(|(f, d)| f == fault && d.iter().any(|k| k != kind))
            .count();
        println!(
            "{fault}: {n} records, expected kind detected {hit}, another kind detected {other}"
        );
        rate.insert(fault, (hit, n));
    }
    println!("records shorter than one segment: {too_short:?}");
    assert!(too_short.len() <= 2, "{too_short:?}");
    // Regression floor, not a tuned target: inner-race faults on this rig are
    // the clearest in the literature (Smith & Randall 2015 classify nearly all
    // DE inner-race records as clearly diagnosable), outer-race at 6 o'clock
    // mostly so (several 0.014 in records are not). Ball faults are largely
    // not diagnosable by envelope analysis there, so no bound is set on them.
    let (ih, inn) = rate["inner_race"];
    assert!(
        inn >= 5 && ih * 10 >= inn * 8,
        "BPFI detected in {ih}/{inn} inner-race records"
    );
    let (oh, on) = rate["outer_race"];
    assert!(
        on >= 5 && oh * 2 >= on,
        "BPFO detected in {oh}/{on} outer-race records"
    );
}

/// MFPT baseline rig (8 rollers, d = 0.235 in, D = 1.245 in, 0 deg, 25 Hz;
/// MFPT documentation via the manifest). Records are 3 s (75 revolutions), so
/// one 64-revolution segment each: the harsher, unaveraged case.
#[test]
fn mfpt_rig_records() {
    let dir = data_set("mfpt");
    let orders = dsp_core::kinematics::BearingGeometry {
        rollers: 8,
        roller_diameter: 0.235,
        pitch_diameter: 1.245,
        contact_angle_deg: 0.0,
    }
    .multiples()
    .unwrap()
    .orders(ShaftRatio::TACH);
    let search = DefectSearch::new(DefectSearchConfig::default()).unwrap();
    let mut hits = [(0usize, 0usize, 0usize); 2];
    for r in manifest(&dir)
        .iter()
        .filter(|r| r.fault == "inner_race" || r.fault == "outer_race")
    {
        let x = read_wav(&dir.join(&r.file));
        let env = envelope_angle(&x, r.rate, r.rpm);
        let mut s = OrderSpectrum4096::new(SpectrumConfig::with_samples_per_rev(S)).unwrap();
        s.push_slice(&env);
        let view = s
            .view()
            .unwrap_or_else(|| panic!("{}: shorter than one segment", r.file));
        let d = search.search(&view, &orders).unwrap();
        let det: Vec<&str> = d.detected().map(DefectKind::name).collect();
        let sc: Vec<String> = d
            .results
            .iter()
            .map(|r| format!("{}:{}/{:.0}", r.kind.name(), r.harmonics_found, r.score_db))
            .collect();
        println!(
            "{:24} {:11} seg {} -> {:?} {}",
            r.file,
            r.fault,
            s.segments(),
            det,
            sc.join(" ")
        );
        let (i, want) = if r.fault == "inner_race" {
            (0, "BPFI")
        } else {
            (1, "BPFO")
        };
        hits[i].0 += 1;
        hits[i].1 += usize::from(det.contains(&want));
        hits[i].2 += usize::from(det.iter().any(|k| *k != want));
    }
    println!("MFPT inner race: {:?}, outer race: {:?} (records, expected kind detected, another kind detected)", hits[0], hits[1]);
    assert_eq!((hits[0].0, hits[1].0), (4, 4));
    // Regression floor (measured when written: 4/4 each); MFPT's baseline
    // inner- and outer-race records are clearly diagnosable by envelope
    // analysis (common practice; the manifest's scipy sanity labels agree).
    assert!(hits[0].1 >= 3 && hits[1].1 >= 3, "{hits:?}");
}
