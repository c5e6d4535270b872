//! Shared helpers of dsp-core's integration tests (`mod common;` in each).
#![allow(
    dead_code,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)] // each test binary uses some of them

/// Helpers of the front-end tests (dsp-core envelope front end).
pub mod frontend {
    use std::path::PathBuf;

    /// Path of a file in `dsp-core/tests/data/frontend/`.
    pub fn data_path(name: &str) -> PathBuf {
        PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("tests")
            .join("data")
            .join("frontend")
            .join(name)
    }

    /// Reads raw little-endian f32 samples; `None` if missing or truncated.
    pub fn read_f32_le(name: &str) -> Option<Vec<f32>> {
        let bytes = std::fs::read(data_path(name)).ok()?;
        if bytes.len() % 4 != 0 {
            return None;
        }
        Some(
            bytes
                .chunks_exact(4)
                .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
                .collect(),
        )
    }

    /// Sine of amplitude `amp` at `f_hz`, `n` samples at `fs_hz` (computed in f64).
    pub fn sine(amp: f64, f_hz: f64, fs_hz: f64, n: usize) -> Vec<f32> {
        (0..n)
            .map(|i| (amp * (2.0 * std::f64::consts::PI * f_hz * i as f64 / fs_hz).sin()) as f32)
            .collect()
    }

    /// RMS of a slice in f64.
    pub fn rms(x: &[f32]) -> f64 {
        if x.is_empty() {
            return 0.0;
        }
        (x.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>() / x.len() as f64).sqrt()
    }

    /// Amplitude of the `f_hz` component of `x` (sample rate `fs_hz`) by
    /// single-bin DFT correlation over the whole slice (use an integer number of cycles).
    pub fn tone_amplitude(x: &[f32], f_hz: f64, fs_hz: f64) -> f64 {
        let (mut c, mut s) = (0.0f64, 0.0f64);
        for (i, &v) in x.iter().enumerate() {
            let ph = 2.0 * std::f64::consts::PI * f_hz * i as f64 / fs_hz;
            c += f64::from(v) * ph.cos();
            s += f64::from(v) * ph.sin();
        }
        2.0 * (c * c + s * s).sqrt() / x.len() as f64
    }
}
