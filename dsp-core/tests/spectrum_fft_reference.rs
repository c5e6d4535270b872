//! microfft (as used by dsp-core) against rustfft, and the full amplitude
//! spectrum against an f64 rustfft reference with the same window and scale.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::panic
)]

use dsp_core::spectrum::{real_fft, OrderSpectrum, SpectrumConfig, SpectrumError, Window};
use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

/// SplitMix64 (Steele, Lea, Flood 2014), uniform in [-1, 1).
struct Rng(u64);
impl Rng {
    fn next_f64(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
    }
}

/// Relative error of microfft's packed real FFT against rustfft's complex
/// FFT of the same input (f32 both), max |difference| / max |X|: within 1e-5.
#[test]
fn microfft_matches_rustfft() {
    let mut planner = FftPlanner::<f32>::new();
    for (seed, n) in [512usize, 1024, 2048, 4096].into_iter().enumerate() {
        let mut rng = Rng(seed as u64 + 11);
        let x: Vec<f32> = (0..n).map(|_| rng.next_f64() as f32).collect();
        let mut reference: Vec<Complex<f32>> = x.iter().map(|&v| Complex::new(v, 0.0)).collect();
        planner.plan_fft_forward(n).process(&mut reference);
        let mut buf = x.clone();
        let out = real_fft(&mut buf).unwrap();
        assert_eq!(out.len(), n / 2);
        let scale = reference.iter().map(|c| c.norm()).fold(0.0f32, f32::max);
        let mut worst = 0.0f32;
        for (k, c) in out.iter().enumerate() {
            let (re, im) = if k == 0 { (c.re, 0.0) } else { (c.re, c.im) };
            let r = reference[k];
            worst = worst.max(((re - r.re).powi(2) + (im - r.im).powi(2)).sqrt() / scale);
        }
        // Nyquist real part packed into bin 0's imaginary part (microfft doc).
        worst = worst.max((out[0].im - reference[n / 2].re).abs() / scale);
        println!("N={n}: max relative error {worst:.2e}");
        assert!(worst < 1e-5, "N={n}: {worst}");
    }
    let mut odd = vec![0.0f32; 1000];
    assert_eq!(
        real_fft(&mut odd).err(),
        Some(SpectrumError::UnsupportedSize)
    );
}

fn reference_amplitudes(x: &[f32], window: Window) -> Vec<f64> {
    // Window formulas: periodic Hann and the 5-term flat-top, evaluated in f64.
    let n = x.len();
    let w: Vec<f64> = (0..n)
        .map(|i| {
            let t = 2.0 * std::f64::consts::PI * i as f64 / n as f64;
            match window {
                Window::Hann => 0.5 - 0.5 * t.cos(),
                _ => {
                    0.21557895 - 0.41663158 * t.cos() + 0.277263158 * (2.0 * t).cos()
                        - 0.083578947 * (3.0 * t).cos()
                        + 0.006947368 * (4.0 * t).cos()
                }
            }
        })
        .collect();
    let cg = w.iter().sum::<f64>() / n as f64;
    let mean = x.iter().map(|&v| f64::from(v)).sum::<f64>() / n as f64;
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .zip(&w)
        .map(|(&v, &wi)| Complex::new((f64::from(v) - mean) * wi, 0.0))
        .collect();
    FftPlanner::<f64>::new()
        .plan_fft_forward(n)
        .process(&mut buf);
    (0..n / 2)
        .map(|k| buf[k].norm() * if k == 0 { 1.0 } else { 2.0 } / (n as f64 * cg))
        .collect()
}

fn check_spectrum<const N: usize, const H: usize>(seed: u64, window: Window) -> f64 {
    let mut rng = Rng(seed);
    let x: Vec<f32> = (0..N).map(|_| 1.0 + rng.next_f64() as f32).collect();
    let mut cfg = SpectrumConfig::with_samples_per_rev(32);
    cfg.window = window;
    let mut s = OrderSpectrum::<N, H>::new(cfg).unwrap();
    assert_eq!(s.push_slice(&x), 1);
    let reference = reference_amplitudes(&x, window);
    let scale = reference.iter().cloned().fold(0.0, f64::max);
    s.amplitudes()
        .iter()
        .zip(&reference)
        .map(|(&a, &r)| (f64::from(a) - r).abs() / scale)
        .fold(0.0, f64::max)
}

/// Amplitude spectrum (mean removal, window, scaling) against an f64 rustfft
/// computation of the same definition: within 1e-5 of the largest bin.
#[test]
fn amplitude_spectrum_matches_f64_reference() {
    for window in [Window::Hann, Window::FlatTop] {
        let e = [
            check_spectrum::<512, 256>(1, window),
            check_spectrum::<1024, 512>(2, window),
            check_spectrum::<2048, 1024>(3, window),
            check_spectrum::<4096, 2048>(4, window),
        ];
        println!("{window:?}: max relative error 512..4096 = {e:?}");
        assert!(e.iter().all(|&v| v < 1e-5), "{window:?} {e:?}");
    }
}

/// Window values against scipy 1.17.1
/// `scipy.signal.windows.flattop(16, sym=False)` (printed with numpy 2.4.6).
#[test]
fn flat_top_window_matches_scipy() {
    let scipy = [
        -0.0004210510000000013,
        -0.005268058476261594,
        -0.026872193286334545,
        -0.06269683377894208,
        -0.05473684,
        0.10174541538894774,
        0.4441353572863345,
        0.8285352768662559,
        1.000000003,
        0.8285352768662559,
        0.4441353572863345,
        0.10174541538894805,
        -0.05473684,
        -0.06269683377894202,
        -0.026872193286334545,
        -0.005268058476261517,
    ];
    for (i, &v) in scipy.iter().enumerate() {
        let ours = f64::from(Window::FlatTop.value(i, 16));
        assert!((ours - v).abs() < 2e-6, "n={i}: {ours} vs {v}");
    }
    // Coherent gain = mean of the window: scipy gives 0.21557895 (flat-top), 0.5 (Hann).
    assert!((f64::from(Window::FlatTop.coherent_gain()) - 0.21557895).abs() < 1e-7);
    assert_eq!(Window::Hann.coherent_gain(), 0.5);
}
