//! Band-pass design vs scipy goldens (tests/reference/frontend_golden.py:
//! scipy.signal.butter(N, [lo, hi], btype='bandpass', fs=fs, output='sos'),
//! sosfreqz and group_delay).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic,
    clippy::cast_possible_truncation
)]

mod common;

use common::frontend::data_path;
use dsp_core::frontend::design::{bandpass_centre_hz, butter_bandpass};
use serde::Deserialize;

#[derive(Deserialize)]
struct Case {
    fs: f64,
    lo: f64,
    hi: f64,
    poles: u8,
    freq_hz: Vec<f64>,
    mag_db: Vec<f64>,
    centre_hz: f64,
    group_delay_centre: f64,
}

#[derive(Deserialize)]
struct Golden {
    cases: Vec<Case>,
}

fn golden() -> Golden {
    let s = std::fs::read_to_string(data_path("design_golden.json")).expect("design_golden.json");
    serde_json::from_str(&s).unwrap()
}

/// Source: scipy.signal.butter + sosfreqz magnitude. Tolerance 0.05 dB wherever
/// scipy's response is above -40 dB.
#[test]
fn bandpass_magnitude_matches_scipy_within_0p05_db() {
    let g = golden();
    assert_eq!(g.cases.len(), 26, "all fs/band/poles combinations present");
    let mut worst = 0.0f64;
    for c in &g.cases {
        let sos = butter_bandpass(c.lo as f32, c.hi as f32, c.fs as f32, c.poles).unwrap();
        assert_eq!(sos.len(), usize::from(c.poles / 2));
        let mut checked = 0;
        for (&f, &want) in c.freq_hz.iter().zip(&c.mag_db) {
            if want < -40.0 {
                continue;
            }
            let got = 20.0 * sos.magnitude(f, c.fs).log10();
            let err = (got - want).abs();
            worst = worst.max(err);
            assert!(
                err <= 0.05,
                "fs {} band {}-{} poles {} f {f}: {got} dB vs scipy {want} dB",
                c.fs,
                c.lo,
                c.hi,
                c.poles
            );
            checked += 1;
        }
        assert!(checked > 10, "too few points above -40 dB");
    }
    println!("band-pass design: max |dB error| vs scipy above -40 dB = {worst:.2e} dB");
}

/// Source: scipy.signal.group_delay summed over the scipy sections, at the
/// centre computed by the script; our centre frequency must agree too.
#[test]
fn group_delay_at_centre_matches_scipy() {
    let mut worst = 0.0f64;
    for c in &golden().cases {
        let fc = f64::from(bandpass_centre_hz(c.lo as f32, c.hi as f32, c.fs as f32));
        assert!((fc - c.centre_hz).abs() < 1e-3 * c.centre_hz);
        let sos = butter_bandpass(c.lo as f32, c.hi as f32, c.fs as f32, c.poles).unwrap();
        let gd = sos.group_delay(c.centre_hz, c.fs);
        let rel = (gd - c.group_delay_centre).abs() / c.group_delay_centre;
        worst = worst.max(rel);
        assert!(rel < 1e-3, "{gd} vs scipy {}", c.group_delay_centre);
    }
    println!("group delay at centre: max relative error vs scipy = {worst:.2e}");
}
