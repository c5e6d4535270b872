//! Butterworth band-pass design on the device: analog prototype, LP->BP
//! transform, bilinear transform with prewarped band edges, emitted as
//! cascaded second-order sections.
//!
//! Design runs in `f64` (soft float on the Cortex-M4F, a one-off cost) and
//! emits `f32` sections. Each section carries one zero at z = 1, one at
//! z = -1 and one conjugate pole pair; its gain is set to unity at the band
//! centre so the cascade has unit gain there (exact for Butterworth) and no
//! section needs a large gain in f32.

use core::f64::consts::PI;

/// Maximum number of second-order sections (8 poles).
pub const MAX_SECTIONS: usize = 4;

/// One second-order section, `a[0] == 1`.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Sos {
    /// Numerator b0, b1, b2.
    pub b: [f32; 3],
    /// Denominator 1, a1, a2.
    pub a: [f32; 3],
}

/// Up to [`MAX_SECTIONS`] sections applied in order.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SosCascade {
    sections: [Sos; MAX_SECTIONS],
    len: usize,
}

/// Why a filter design was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum DesignError {
    /// A band edge or the sample rate is NaN or infinite.
    NonFinite,
    /// The sample rate is not positive.
    SampleRate,
    /// Band edges not ordered as 0 < lo < hi.
    BandOrder,
    /// The upper edge is at or above 0.95 x Nyquist.
    AboveLimit,
    /// Poles not one of 2, 4, 6, 8.
    Poles,
}

impl core::fmt::Display for DesignError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        let s = match self {
            Self::NonFinite => "band edge or sample rate is not finite",
            Self::SampleRate => "sample rate must be positive",
            Self::BandOrder => "band edges must satisfy 0 < lo < hi",
            Self::AboveLimit => "upper band edge must be below 0.95 x Nyquist",
            Self::Poles => "poles must be 2, 4, 6 or 8",
        };
        f.write_str(s)
    }
}

impl core::error::Error for DesignError {}

impl SosCascade {
    /// The empty cascade (identity), usable in constant context.
    pub const EMPTY: Self = Self {
        sections: [Sos {
            b: [0.0; 3],
            a: [0.0; 3],
        }; MAX_SECTIONS],
        len: 0,
    };

    /// Builds a cascade from sections; `None` when more than [`MAX_SECTIONS`].
    pub fn from_sections(secs: &[Sos]) -> Option<Self> {
        if secs.len() > MAX_SECTIONS {
            return None;
        }
        let mut c = Self::default();
        for (d, s) in c.sections.iter_mut().zip(secs) {
            *d = *s;
        }
        c.len = secs.len();
        Some(c)
    }

    /// The sections in order.
    pub fn sections(&self) -> &[Sos] {
        self.sections.get(..self.len).unwrap_or(&[])
    }

    /// Mutable sections (used to fold a gain or integrator into one section).
    pub(crate) fn sections_mut(&mut self) -> &mut [Sos] {
        self.sections.get_mut(..self.len).unwrap_or(&mut [])
    }

    /// Number of sections.
    pub fn len(&self) -> usize {
        self.len
    }

    /// True when the cascade has no sections (identity).
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Magnitude response |H| at `f_hz` for sample rate `fs_hz`, evaluated in f64
    /// from the stored f32 coefficients.
    pub fn magnitude(&self, f_hz: f64, fs_hz: f64) -> f64 {
        let w = 2.0 * PI * f_hz / fs_hz;
        self.sections()
            .iter()
            .map(|s| {
                let (b, a) = (widen(s.b), widen(s.a));
                poly_at(&b, w).abs() / poly_at(&a, w).abs()
            })
            .product()
    }

    /// Group delay in samples at `f_hz` (sum over sections of
    /// Re(sum k c_k z^-k / sum c_k z^-k) of numerator minus denominator).
    pub fn group_delay(&self, f_hz: f64, fs_hz: f64) -> f64 {
        let w = 2.0 * PI * f_hz / fs_hz;
        self.sections()
            .iter()
            .map(|s| poly_delay(&widen(s.b), w) - poly_delay(&widen(s.a), w))
            .sum()
    }
}

fn widen(c: [f32; 3]) -> [f64; 3] {
    c.map(f64::from)
}

/// sum c_k e^{-jwk}
fn poly_at(c: &[f64; 3], w: f64) -> Cx {
    c.iter().enumerate().fold(Cx::ZERO, |acc, (k, &ck)| {
        let kw = -w * k_f64(k);
        acc.add(Cx::new(ck * libm::cos(kw), ck * libm::sin(kw)))
    })
}

fn poly_delay(c: &[f64; 3], w: f64) -> f64 {
    let num = c.iter().enumerate().fold(Cx::ZERO, |acc, (k, &ck)| {
        let kw = -w * k_f64(k);
        let m = ck * k_f64(k);
        acc.add(Cx::new(m * libm::cos(kw), m * libm::sin(kw)))
    });
    let den = poly_at(c, w);
    let r = num.div(den);
    if r.re.is_finite() {
        r.re
    } else {
        0.0
    }
}

#[allow(clippy::cast_precision_loss)]
fn k_f64(k: usize) -> f64 {
    k as f64
}

/// Minimal complex number for the design (f64).
#[derive(Clone, Copy, Debug)]
struct Cx {
    re: f64,
    im: f64,
}

impl Cx {
    const ZERO: Cx = Cx { re: 0.0, im: 0.0 };
    fn new(re: f64, im: f64) -> Self {
        Self { re, im }
    }
    fn add(self, o: Cx) -> Cx {
        Cx::new(self.re + o.re, self.im + o.im)
    }
    fn sub(self, o: Cx) -> Cx {
        Cx::new(self.re - o.re, self.im - o.im)
    }
    fn mul(self, o: Cx) -> Cx {
        Cx::new(
            self.re * o.re - self.im * o.im,
            self.re * o.im + self.im * o.re,
        )
    }
    fn scale(self, k: f64) -> Cx {
        Cx::new(self.re * k, self.im * k)
    }
    fn div(self, o: Cx) -> Cx {
        let d = o.re * o.re + o.im * o.im;
        Cx::new(
            (self.re * o.re + self.im * o.im) / d,
            (self.im * o.re - self.re * o.im) / d,
        )
    }
    fn abs(self) -> f64 {
        libm::hypot(self.re, self.im)
    }
    /// Principal square root.
    fn sqrt(self) -> Cx {
        let r = self.abs();
        let re = libm::sqrt((r + self.re) * 0.5);
        let im = libm::sqrt((r - self.re) * 0.5);
        Cx::new(re, if self.im < 0.0 { -im } else { im })
    }
}

/// Digital centre frequency (Hz) of a prewarped band-pass with edges lo, hi:
/// the frequency that maps to the analog geometric centre.
pub fn bandpass_centre_hz(lo_hz: f32, hi_hz: f32, fs_hz: f32) -> f32 {
    let fs = f64::from(fs_hz);
    let t =
        libm::sqrt(libm::tan(PI * f64::from(lo_hz) / fs) * libm::tan(PI * f64::from(hi_hz) / fs));
    crate::num::f64_to_f32(fs / PI * libm::atan(t))
}

/// Validates band edges for a band-pass at `fs_hz`.
pub(crate) fn check_band(lo_hz: f32, hi_hz: f32, fs_hz: f32) -> Result<(), DesignError> {
    if !(lo_hz.is_finite() && hi_hz.is_finite() && fs_hz.is_finite()) {
        return Err(DesignError::NonFinite);
    }
    if fs_hz <= 0.0 {
        return Err(DesignError::SampleRate);
    }
    if !(lo_hz > 0.0 && lo_hz < hi_hz) {
        return Err(DesignError::BandOrder);
    }
    if hi_hz >= 0.95 * 0.5 * fs_hz {
        return Err(DesignError::AboveLimit);
    }
    Ok(())
}

/// Designs a Butterworth band-pass of `poles` poles (2, 4, 6, 8; the analog
/// prototype has order `poles / 2`) between `lo_hz` and `hi_hz` at `fs_hz`.
///
/// The magnitude equals that of `scipy.signal.butter(poles/2, [lo, hi],
/// btype='bandpass', fs=fs, output='sos')` (checked in the tests against
/// scipy goldens).
///
/// ```
/// use dsp_core::frontend::design::butter_bandpass;
/// let bp = butter_bandpass(2000.0, 5000.0, 12000.0, 8).unwrap();
/// assert_eq!(bp.len(), 4);
/// assert!((bp.magnitude(3000.0, 12000.0) - 1.0).abs() < 0.01);
/// ```
pub fn butter_bandpass(
    lo_hz: f32,
    hi_hz: f32,
    fs_hz: f32,
    poles: u8,
) -> Result<SosCascade, DesignError> {
    check_band(lo_hz, hi_hz, fs_hz)?;
    if !matches!(poles, 2 | 4 | 6 | 8) {
        return Err(DesignError::Poles);
    }
    let n = usize::from(poles / 2);
    let fs = f64::from(fs_hz);
    let fs2 = 2.0 * fs;
    // Prewarped analog edges (rad/s).
    let w1 = fs2 * libm::tan(PI * f64::from(lo_hz) / fs);
    let w2 = fs2 * libm::tan(PI * f64::from(hi_hz) / fs);
    let bw = w2 - w1;
    let w0sq = w1 * w2;
    let wc = 2.0 * libm::atan(libm::sqrt(w0sq) / fs2); // digital centre, rad/sample
    let n_f = k_f64(n);

    let mut out = SosCascade::default();
    let mut count = 0usize;
    let mut emit = |z1: Cx, z2: Cx| {
        // Denominator (1 - z1 z^-1)(1 - z2 z^-1); real parts (pairs are conjugate or both real).
        let a1 = -(z1.add(z2)).re;
        let a2 = z1.mul(z2).re;
        let a = [1.0, a1, a2];
        let b = [1.0, 0.0, -1.0];
        let g = poly_at(&a, wc).abs() / poly_at(&b, wc).abs();
        if let Some(s) = out.sections.get_mut(count) {
            *s = Sos {
                b: [f32c(g), 0.0, f32c(-g)],
                a: [1.0, f32c(a1), f32c(a2)],
            };
            count += 1;
        }
    };
    let bilinear = |s: Cx| Cx::new(fs2, 0.0).add(s).div(Cx::new(fs2, 0.0).sub(s));
    for k in 0..n.div_ceil(2) {
        // Analog LP prototype pole exp(j pi (2k + n + 1) / (2n)), upper half-plane or real.
        let th = PI * (2.0 * k_f64(k) + n_f + 1.0) / (2.0 * n_f);
        let p = Cx::new(libm::cos(th), libm::sin(th));
        let ph = p.scale(bw * 0.5);
        let root = ph.mul(ph).sub(Cx::new(w0sq, 0.0)).sqrt();
        let s1 = bilinear(ph.add(root));
        let s2 = bilinear(ph.sub(root));
        if 2 * k + 1 == n {
            // Real prototype pole: its two band-pass poles form one section.
            emit(s1, s2);
        } else {
            // Complex prototype pole: each band-pass pole pairs with its conjugate.
            emit(s1, Cx::new(s1.re, -s1.im));
            emit(s2, Cx::new(s2.re, -s2.im));
        }
    }
    out.len = count;
    Ok(out)
}

fn f32c(x: f64) -> f32 {
    crate::num::f64_to_f32(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unit_gain_at_centre_and_stable() {
        for poles in [2u8, 4, 6, 8] {
            let c = butter_bandpass(2000.0, 5000.0, 51200.0, poles).unwrap();
            assert_eq!(c.len(), usize::from(poles / 2));
            let fc = f64::from(bandpass_centre_hz(2000.0, 5000.0, 51200.0));
            assert!((c.magnitude(fc, 51200.0) - 1.0).abs() < 1e-4);
            // Butterworth: -3.01 dB at the edges (textbook property).
            let e = 20.0 * c.magnitude(2000.0, 51200.0).log10();
            assert!((e + 3.0103).abs() < 0.01, "{e}");
            for s in c.sections() {
                assert!(s.a[2] < 1.0 && s.a[2] > 0.0);
            }
        }
    }

    #[test]
    fn rejects_bad_input() {
        assert_eq!(
            butter_bandpass(f32::NAN, 5.0, 100.0, 4),
            Err(DesignError::NonFinite)
        );
        assert_eq!(
            butter_bandpass(5.0, 5.0, 100.0, 4),
            Err(DesignError::BandOrder)
        );
        assert_eq!(
            butter_bandpass(0.0, 5.0, 100.0, 4),
            Err(DesignError::BandOrder)
        );
        assert_eq!(
            butter_bandpass(5.0, 48.0, 100.0, 4),
            Err(DesignError::AboveLimit)
        );
        assert_eq!(
            butter_bandpass(5.0, 20.0, 100.0, 3),
            Err(DesignError::Poles)
        );
        assert_eq!(
            butter_bandpass(5.0, 20.0, -100.0, 4),
            Err(DesignError::SampleRate)
        );
    }
}
