//! Issue 20 measurement options of `envord validate`: the demodulation
//! ([`Rectifier`]: the plain envelope `|x|`, the default, or the squared
//! envelope `x^2`) and an optional pre-whitening of the raw record before
//! the band survey and the envelope ([`Prewhiten`]). Defaults give the
//! fixed method of docs/validation.md unchanged.

use dsp_core::Rectifier;
use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

/// Pre-whitening of the raw record (host only, see [`cepstral_prewhiten`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Prewhiten {
    /// The raw record as recorded.
    #[default]
    None,
    /// Cepstral pre-whitening of the whole record.
    Cepstral,
}

/// A `--prewhiten` or `--rectifier` value that is not one of the names.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VariantError {
    /// The text given.
    pub text: String,
    /// The accepted names.
    pub expected: &'static str,
}

impl std::fmt::Display for VariantError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: expected {}", self.text, self.expected)
    }
}

impl std::error::Error for VariantError {}

impl std::str::FromStr for Prewhiten {
    type Err = VariantError;
    fn from_str(s: &str) -> Result<Self, VariantError> {
        match s.trim().to_ascii_lowercase().as_str() {
            "none" => Ok(Prewhiten::None),
            "cepstral" => Ok(Prewhiten::Cepstral),
            _ => Err(VariantError {
                text: s.to_string(),
                expected: "none or cepstral",
            }),
        }
    }
}

/// Parses `abs` or `square` (the `--rectifier` value).
pub fn parse_rectifier(s: &str) -> Result<Rectifier, VariantError> {
    match s.trim().to_ascii_lowercase().as_str() {
        "abs" => Ok(Rectifier::Abs),
        "square" => Ok(Rectifier::Square),
        _ => Err(VariantError {
            text: s.to_string(),
            expected: "abs or square",
        }),
    }
}

/// The measurement options applied to every record alike.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Variant {
    /// Demodulation of the band-passed signal.
    pub rectifier: Rectifier,
    /// Pre-whitening of the raw record.
    pub prewhiten: Prewhiten,
}

impl Default for Variant {
    /// The fixed method: plain envelope, no pre-whitening.
    fn default() -> Self {
        Variant {
            rectifier: Rectifier::Abs,
            prewhiten: Prewhiten::None,
        }
    }
}

/// Cepstral pre-whitening (Sawalhi & Randall; Borghesani, Pennacchi,
/// Randall, Sawalhi, Ricci, "Application of cepstrum pre-whitening for the
/// diagnosis of bearing faults under variable speed conditions", MSSP 36
/// (2013), reference from memory): the real cepstrum of the record set to zero except at
/// quefrency 0, i.e. the log magnitude spectrum made flat, back to time with
/// the phase kept: `x_w = IFFT(X / |X|)`. Discrete components (gear mesh,
/// shaft harmonics) and resonances lose their weight; impacts keep their
/// timing. The whole record is one transform (as in the paper); the output
/// is scaled to the input's RMS so that the node's level checks read the
/// same magnitude. Bins with `|X| = 0` stay 0. An empty or all-zero record
/// is returned unchanged.
pub fn cepstral_prewhiten(x: &[f32]) -> Vec<f32> {
    let n = x.len();
    if n == 0 {
        return Vec::new();
    }
    #[allow(clippy::cast_precision_loss)]
    let mean = x.iter().map(|&v| f64::from(v)).sum::<f64>() / n as f64;
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .map(|&v| Complex::new(f64::from(v) - mean, 0.0))
        .collect();
    let rms_in = rms(buf.iter().map(|c| c.re));
    if rms_in == 0.0 {
        return x.to_vec();
    }
    let mut planner = FftPlanner::<f64>::new();
    planner.plan_fft_forward(n).process(&mut buf);
    for c in &mut buf {
        let m = c.norm();
        *c = if m > 0.0 {
            *c / m
        } else {
            Complex::new(0.0, 0.0)
        };
    }
    planner.plan_fft_inverse(n).process(&mut buf);
    let rms_out = rms(buf.iter().map(|c| c.re));
    let g = if rms_out > 0.0 { rms_in / rms_out } else { 0.0 };
    #[allow(clippy::cast_possible_truncation)]
    buf.iter().map(|c| (c.re * g) as f32).collect()
}

fn rms(it: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = it.fold((0.0f64, 0usize), |(s, n), v| (s + v * v, n + 1));
    if n == 0 {
        0.0
    } else {
        #[allow(clippy::cast_precision_loss)]
        (s / n as f64).sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Phase-only whitening (the identity `|FFT(x_w)| = const`, common
    /// practice of the method): a record of a strong tone, weak impacts with
    /// an irregular spacing (as slip makes them) and a little broadband
    /// noise comes back with a flat magnitude spectrum and the impacts
    /// standing out of the rest (numpy gives a ratio of 32 for the same
    /// record, from the same formula). A strictly periodic impulse train
    /// would not: its few spectral lines are flattened to the noise level.
    #[test]
    fn flattens_a_tone_and_keeps_impacts() {
        let n = 4096usize;
        let mut seed = 12345u32;
        let mut x = vec![0.0f32; n];
        for (i, v) in x.iter_mut().enumerate() {
            #[allow(clippy::cast_precision_loss)]
            let t = i as f32;
            // A tone on bin 205 (no wrap-around step).
            *v = 10.0 * (2.0 * core::f32::consts::PI * 205.0 * t / 4096.0).sin();
            seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
            #[allow(clippy::cast_precision_loss)]
            let u = (seed >> 8) as f32 / 16_777_216.0 - 0.5;
            *v += 0.01 * u;
        }
        let pos: Vec<usize> = (0..24).map(|j| j * 170 + (j * 37) % 23).collect();
        for &p in &pos {
            if let Some(v) = x.get_mut(p) {
                *v += 1.0;
            }
        }
        let at = |y: &[f32], imp: bool| {
            let s: Vec<f32> = y
                .iter()
                .enumerate()
                .filter(|(i, _)| pos.contains(i) == imp)
                .map(|(_, v)| v.abs())
                .collect();
            #[allow(clippy::cast_precision_loss)]
            let len = s.len() as f32;
            s.iter().sum::<f32>() / len
        };
        // Before: the tone hides the impulses.
        assert!(at(&x, true) < 2.0 * at(&x, false));
        let y = cepstral_prewhiten(&x);
        assert_eq!(y.len(), n);
        let mut buf: Vec<Complex<f64>> =
            y.iter().map(|&v| Complex::new(f64::from(v), 0.0)).collect();
        FftPlanner::<f64>::new()
            .plan_fft_forward(n)
            .process(&mut buf);
        let mags: Vec<f64> = buf.iter().skip(1).map(|c| c.norm()).collect();
        let max = mags.iter().cloned().fold(0.0, f64::max);
        let min = mags.iter().cloned().fold(f64::INFINITY, f64::min);
        assert!(max / min < 1.01, "not flat: {min} .. {max}");
        // After: the impulses stand out of the rest.
        let (on, off) = (at(&y, true), at(&y, false));
        assert!(on > 10.0 * off, "impulses {on}, elsewhere {off}");
        // Empty and zero records come back unchanged.
        assert!(cepstral_prewhiten(&[]).is_empty());
        assert_eq!(cepstral_prewhiten(&[0.0; 8]), vec![0.0; 8]);
    }

    #[test]
    fn option_names() {
        assert_eq!("Cepstral".parse::<Prewhiten>(), Ok(Prewhiten::Cepstral));
        assert_eq!("none".parse::<Prewhiten>(), Ok(Prewhiten::None));
        assert_eq!(parse_rectifier(" square "), Ok(Rectifier::Square));
        assert_eq!(parse_rectifier("abs"), Ok(Rectifier::Abs));
        let e = "lifter".parse::<Prewhiten>().unwrap_err();
        assert_eq!(e.to_string(), "lifter: expected none or cepstral");
        let e = parse_rectifier("hilbert").unwrap_err();
        assert_eq!(e.to_string(), "hilbert: expected abs or square");
        // The defaults are the fixed method of docs/validation.md.
        assert_eq!(
            Variant::default(),
            Variant {
                rectifier: Rectifier::Abs,
                prewhiten: Prewhiten::None
            }
        );
    }
}
