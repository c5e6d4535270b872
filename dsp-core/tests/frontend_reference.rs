//! Whole front end vs a scipy reference on a committed excerpt of a real
//! recording (CWRU record 106, drive end, 12 kHz; see dsp-core/tests/data/frontend/README.md).
//! Reference (tests/reference/frontend_golden.py): scipy.signal.butter + sosfilt in
//! f64, square or abs, then per decimator stage lfilter(h, 1, x)[M-1::M] with taps
//! re-derived by scipy (odd stages kaiserord + firwin, half-bands remez via
//! tests/reference/halfband_tables.py); overall indicators by numpy and
//! scipy.stats.kurtosis(fisher=False).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic,
    clippy::cast_possible_truncation
)]

mod common;

use common::frontend::{data_path, read_f32_le};
use dsp_core::frontend::rectify::Rectifier;
use dsp_core::frontend::{FrontEnd, FrontEndConfig};
use serde::Deserialize;

#[derive(Deserialize)]
struct Stage {
    factor: u16,
    taps: Vec<f64>,
}

#[derive(Deserialize)]
struct Case {
    rectifier: String,
    fs: f32,
    band_hz: [f32; 2],
    poles: u8,
    decimation: u16,
    envelope: Vec<f64>,
}

#[derive(Deserialize)]
struct OverallRef {
    count: u32,
    mean: f64,
    rms_ac: f64,
    peak: f64,
    peak_to_peak: f64,
    crest_factor: f64,
    kurtosis: f64,
}

#[derive(Deserialize)]
struct Golden {
    delay_input_samples: f64,
    stages: Vec<Stage>,
    cases: Vec<Case>,
    overall: OverallRef,
}

fn golden() -> Golden {
    let s =
        std::fs::read_to_string(data_path("frontend_golden.json")).expect("frontend_golden.json");
    serde_json::from_str(&s).unwrap()
}

fn excerpt() -> Vec<f32> {
    let x = read_f32_le("cwru_ir007_1hp_de_excerpt.f32").expect("committed excerpt");
    assert_eq!(x.len(), 6000, "excerpt truncated");
    x
}

fn config(c: &Case) -> FrontEndConfig {
    let mut cfg = FrontEndConfig::default();
    cfg.sample_rate_hz = c.fs;
    cfg.band_hz = c.band_hz;
    cfg.poles = c.poles;
    cfg.decimation = c.decimation;
    cfg.rectifier = match c.rectifier.as_str() {
        "square" => Rectifier::Square,
        "abs" => Rectifier::Abs,
        other => panic!("unknown rectifier {other}"),
    };
    cfg
}

/// Source: scipy taps (kaiserord/firwin for odd stages, remez half-bands for
/// factor-2 stages). Our stage structure and taps must match (f32 rounding only).
#[test]
fn decimator_taps_match_scipy() {
    let g = golden();
    let fe = FrontEnd::new(&config(&g.cases[0])).unwrap();
    let stages: Vec<(u16, usize)> = fe.decimator().stages().collect();
    assert_eq!(stages.len(), g.stages.len());
    let mut worst = 0.0f64;
    for (i, (s, r)) in stages.iter().zip(&g.stages).enumerate() {
        assert_eq!((s.0, s.1), (r.factor, r.taps.len()), "stage {i}");
        // Stored oldest-first, i.e. reversed.
        for (a, b) in fe.decimator().stage_taps(i).rev().zip(&r.taps) {
            worst = worst.max((f64::from(a) - b).abs());
        }
    }
    println!("decimator taps: max |error| vs scipy = {worst:.2e}; stages {stages:?}");
    assert!(worst < 1e-7);
}

/// Source: scipy sosfilt + rectifier + FIR/downsample. Relative RMS error <= 1e-4.
#[test]
fn envelope_matches_scipy_reference() {
    let g = golden();
    let x = excerpt();
    for c in &g.cases {
        let mut fe = FrontEnd::new(&config(c)).unwrap();
        let mut y = Vec::new();
        fe.push_f32(&x, |v| y.push(f64::from(v)));
        assert_eq!(y.len(), c.envelope.len());
        let num: f64 = y
            .iter()
            .zip(&c.envelope)
            .map(|(a, b)| (a - b) * (a - b))
            .sum();
        let den: f64 = c.envelope.iter().map(|b| b * b).sum();
        let rel = (num / den).sqrt();
        println!(
            "envelope ({}): relative RMS error vs scipy = {rel:.2e}",
            c.rectifier
        );
        assert!(rel <= 1e-4, "{}: {rel}", c.rectifier);
    }
}

/// Source: numpy mean/std/ptp, scipy.stats.kurtosis(fisher=False).
#[test]
fn overall_indicators_match_numpy() {
    let g = golden();
    let x = excerpt();
    let mut fe = FrontEnd::new(&config(&g.cases[0])).unwrap();
    fe.push_f32(&x, |_| {});
    let o = fe.overall();
    let r = &g.overall;
    assert_eq!(o.count, r.count);
    let rel = |a: f32, b: f64| (f64::from(a) - b).abs() / b.abs();
    println!(
        "overall: mean {} (numpy {}), rms {} ({}), peak {} ({}), p2p {} ({}), crest {} ({}), kurtosis {} ({})",
        o.mean, r.mean, o.rms_ac, r.rms_ac, o.peak, r.peak, o.peak_to_peak, r.peak_to_peak,
        o.crest_factor, r.crest_factor, o.kurtosis, r.kurtosis
    );
    assert!((f64::from(o.mean) - r.mean).abs() < 1e-6 * r.rms_ac.max(1.0));
    assert!(rel(o.rms_ac, r.rms_ac) < 1e-5);
    assert!(rel(o.peak, r.peak) < 1e-5);
    assert!(rel(o.peak_to_peak, r.peak_to_peak) < 1e-6);
    assert!(rel(o.crest_factor, r.crest_factor) < 1e-5);
    assert!(rel(o.kurtosis, r.kurtosis) < 1e-4);
    assert_eq!((o.clipped, o.non_finite), (0, 0));
}

/// Source: scipy.signal.group_delay of the scipy band-pass at the band centre
/// plus group_delay of each FIR stage, scaled to input samples.
#[test]
fn envelope_delay_matches_scipy_group_delay() {
    let g = golden();
    let fe = FrontEnd::new(&config(&g.cases[0])).unwrap();
    let d = f64::from(fe.delay_input_samples());
    println!(
        "envelope delay: {d:.4} input samples vs scipy {:.4}",
        g.delay_input_samples
    );
    assert!((d - g.delay_input_samples).abs() < 1e-3 * g.delay_input_samples);
}
