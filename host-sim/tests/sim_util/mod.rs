//! Reference signal tools for the simulator checks, written from textbook
//! definitions, independent of the simulator code.
#![allow(dead_code, clippy::indexing_slicing, clippy::cast_possible_truncation)]

use std::f64::consts::PI;

/// RBJ band-pass biquad (constant 0 dB peak gain), from R. Bristow-Johnson,
/// "Cookbook formulae for audio EQ biquad filter coefficients" (common
/// practice), applied `passes` times in cascade.
pub fn bandpass(x: &[f32], fs: f64, f0: f64, q: f64, passes: usize) -> Vec<f64> {
    let w0 = 2.0 * PI * f0 / fs;
    let alpha = w0.sin() / (2.0 * q);
    let a0 = 1.0 + alpha;
    let (b0, b1, b2) = (alpha / a0, 0.0, -alpha / a0);
    let (a1, a2) = (-2.0 * w0.cos() / a0, (1.0 - alpha) / a0);
    let mut y: Vec<f64> = x.iter().map(|&v| f64::from(v)).collect();
    for _ in 0..passes {
        let (mut x1, mut x2, mut y1, mut y2) = (0.0, 0.0, 0.0, 0.0);
        for v in y.iter_mut() {
            let x0 = *v;
            let y0 = b0 * x0 + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2;
            x2 = x1;
            x1 = x0;
            y2 = y1;
            y1 = y0;
            *v = y0;
        }
    }
    y
}

/// Squares, removes the mean and block-averages by `m` (a crude low-pass
/// before a slow DFT; the lines checked are far below the new Nyquist).
pub fn squared_decimated(x: &[f64], m: usize) -> Vec<f64> {
    let sq: Vec<f64> = x.iter().map(|v| v * v).collect();
    let mean = sq.iter().sum::<f64>() / sq.len() as f64;
    sq.chunks_exact(m)
        .map(|c| c.iter().map(|v| v - mean).sum::<f64>() / m as f64)
        .collect()
}

/// |DFT| of a Hann-windowed sequence at frequency f (definition of the DTFT
/// evaluated at one point).
pub fn dft_mag(x: &[f64], fs: f64, f: f64) -> f64 {
    let n = x.len() as f64;
    let (mut re, mut im) = (0.0, 0.0);
    for (i, v) in x.iter().enumerate() {
        let w = 0.5 - 0.5 * (2.0 * PI * i as f64 / n).cos();
        let ph = 2.0 * PI * f * i as f64 / fs;
        re += w * v * ph.cos();
        im -= w * v * ph.sin();
    }
    (re * re + im * im).sqrt()
}

/// Averaged periodogram value at f: mean over non-overlapping segments of
/// `seg` samples of |Hann-windowed DFT|^2 (Welch's method without overlap).
pub fn avg_power(x: &[f64], fs: f64, f: f64, seg: usize) -> f64 {
    let segs: Vec<&[f64]> = x.chunks_exact(seg).collect();
    segs.iter().map(|s| dft_mag(s, fs, f).powi(2)).sum::<f64>() / segs.len() as f64
}

/// Line height in dB: the strongest averaged power within +-half a bin of
/// `f` over the median on a 1-bin grid from 0.5 f to 1.5 f that leaves out
/// +-3 % around `f` and around any frequency in `also_exclude` (window and
/// median floor as in the shared CWRU set's envelope check; common practice).
pub fn line_db(x: &[f64], fs: f64, f: f64, seg: usize, also_exclude: &[f64]) -> f64 {
    let df = fs / seg as f64;
    let peak = [f - df / 2.0, f - df / 4.0, f, f + df / 4.0, f + df / 2.0]
        .iter()
        .map(|&g| avg_power(x, fs, g, seg))
        .fold(0.0, f64::max);
    let mut floor = Vec::new();
    let mut g = 0.5 * f;
    while g <= 1.5 * f {
        let near = |c: f64| (g - c).abs() < (0.03 * c).max(1.5 * df);
        if !near(f) && !also_exclude.iter().any(|&c| near(c)) {
            floor.push(avg_power(x, fs, g, seg));
        }
        g += df;
    }
    floor.sort_by(f64::total_cmp);
    let med = floor[floor.len() / 2];
    10.0 * (peak / med).log10()
}

/// Rising crossings of `level`, linearly interpolated, in seconds.
pub fn rising_edges(x: &[f32], fs: f64, level: f64) -> Vec<f64> {
    let mut out = Vec::new();
    for i in 1..x.len() {
        let (a, b) = (f64::from(x[i - 1]), f64::from(x[i]));
        if a < level && b >= level {
            out.push(((i - 1) as f64 + (level - a) / (b - a)) / fs);
        }
    }
    out
}

/// Bursts where |x| exceeds `thr`, each counted once; a new burst needs
/// `gap` samples below the threshold first. Returns burst start indices.
pub fn bursts(x: &[f32], thr: f32, gap: usize) -> Vec<usize> {
    let mut starts = Vec::new();
    let mut quiet = gap;
    for (i, v) in x.iter().enumerate() {
        if v.abs() > thr {
            if quiet >= gap {
                starts.push(i);
            }
            quiet = 0;
        } else {
            quiet += 1;
        }
    }
    starts
}
