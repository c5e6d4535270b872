//! Decimator alias rejection and passband flatness measured with tones.
//! Requirement (project spec, common practice for anti-alias filters): anything
//! that folds into [0, 0.4 fs_out] attenuated by >= 60 dB. Reference: single-bin
//! DFT amplitude of the output (integer cycles), computed in f64 here.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic,
    clippy::cast_possible_truncation
)]

mod common;

use common::frontend::{sine, tone_amplitude};
use dsp_core::frontend::decimate::Decimator;

const N_OUT: usize = 400;
const SETTLE_OUT: usize = 48;

/// Output amplitude at the folded frequency for an input tone of amplitude 1.
fn response(d: u16, f_in: f64) -> f64 {
    let fs = f64::from(d) * f64::from(N_OUT as u16); // fs_out = N_OUT Hz: 1 Hz bins
    let fo = fs / f64::from(d);
    let mut dec = Decimator::new(d).unwrap();
    let x = sine(1.0, f_in, fs, (SETTLE_OUT + N_OUT) * usize::from(d));
    let mut y = Vec::new();
    dec.process(&x, |v| y.push(v));
    let folded = {
        let r = f_in.rem_euclid(fo);
        r.min(fo - r)
    };
    tone_amplitude(&y[SETTLE_OUT..], folded, fo)
}

/// Sweeps integer-Hz tones over every band that folds into [0, 0.4 fo]
/// (fo = 400 Hz, so 1 Hz steps hit integer DFT bins) and returns the worst
/// rejection in dB relative to the passband gain.
fn worst_rejection(d: u16, step_hz: usize) -> (f64, f64) {
    let fo = N_OUT as f64;
    let pass = response(d, 0.25 * fo);
    let mut worst = (f64::INFINITY, 0.0);
    let half = (f64::from(d) * fo / 2.0) as usize;
    for f in (1..half).step_by(step_hz) {
        let f = f as f64;
        let r = f.rem_euclid(fo);
        let folded = r.min(fo - r);
        // Only tones above fo/2 alias; keep those landing in the protected band.
        if f < fo / 2.0 || folded > 0.4 * fo {
            continue;
        }
        let rej = 20.0 * (pass / response(d, f)).log10();
        if rej < worst.0 {
            worst = (rej, f);
        }
    }
    worst
}

#[test]
fn alias_rejection_at_least_60_db() {
    // Steps chosen to keep the debug-build run short; edges 0.6 fo (240 Hz) are hit.
    for (d, step) in [
        (2u16, 1usize),
        (3, 1),
        (8, 3),
        (12, 7),
        (25, 13),
        (1024, 997),
    ] {
        let (rej, f) = worst_rejection(d, step);
        println!("decimate by {d}: worst alias rejection {rej:.1} dB at {f} Hz (fs_out 400 Hz)");
        assert!(rej >= 60.0, "factor {d}: {rej} dB at {f} Hz");
    }
}

#[test]
fn alias_rejection_at_band_edges() {
    // The hardest tones: exactly k fo +- 0.4 fo for every k (first alias band edges).
    for d in [2u16, 4, 6, 7, 8, 16, 64] {
        let fo = N_OUT as f64;
        let pass = response(d, 0.25 * fo);
        let mut worst = f64::INFINITY;
        for k in 1..=d / 2 {
            for f in [f64::from(k) * fo - 0.4 * fo, f64::from(k) * fo + 0.4 * fo] {
                if f < f64::from(d) * fo / 2.0 {
                    worst = worst.min(20.0 * (pass / response(d, f)).log10());
                }
            }
        }
        println!("decimate by {d}: worst rejection at alias band edges {worst:.1} dB");
        assert!(worst >= 60.0, "factor {d}: {worst} dB");
    }
}

#[test]
fn passband_flat_over_0_to_0p4_fs_out() {
    for d in [2u16, 3, 8, 12, 25, 1024] {
        let step = if d == 1024 { 40 } else { 4 };
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for f in (step..=160).step_by(step) {
            let g = 20.0 * response(d, f as f64).log10();
            lo = lo.min(g);
            hi = hi.max(g);
        }
        println!("decimate by {d}: passband gain over (0, 0.4 fs_out] in [{lo:.4}, {hi:.4}] dB");
        assert!(lo > -0.02 && hi < 0.02, "factor {d}: [{lo}, {hi}] dB");
    }
}
