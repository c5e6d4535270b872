//! FIR design of the decimator's stages: the committed equiripple
//! half-band tables (factor-2 stages) and the Kaiser window method (odd
//! stages, designed on the device; as `scipy.signal.kaiserord` / `firwin`).

/// Equiripple half-band tables (outer nonzero taps h[0], h[2], ..., h[mid-1];
/// centre 0.5), designed offline with `scipy.signal.remez` by
/// `tests/reference/halfband_tables.py`, which also checks these values
/// (`--check`). Key: input rate of the stage in units of the final output
/// rate; stages with a higher input rate use the r_in = 8 table (their
/// transition is wider). Shorter than the Kaiser designs of the same
/// rejection (15, 15, 43 taps for a factor of 8).
/// r_in = 2: 39 taps, 69.3 dB
#[allow(clippy::excessive_precision)] // f64 design values, rounded to f32 here
pub const HB_R2: [f32; 10] = [
    -6.384939155e-04,
    1.630702023e-03,
    -3.549788794e-03,
    6.773608404e-03,
    -1.188262717e-02,
    1.978160945e-02,
    -3.220490401e-02,
    5.351152234e-02,
    -9.972502693e-02,
    3.161337846e-01,
];
/// r_in = 4: 11 taps, 68.5 dB
#[allow(clippy::excessive_precision)] // f64 design values, rounded to f32 here
pub const HB_R4: [f32; 3] = [9.705091935e-03, -5.811350108e-02, 2.985905845e-01];
/// r_in = 8: 7 taps, 72.2 dB
#[allow(clippy::excessive_precision)] // f64 design values, rounded to f32 here
pub const HB_R8: [f32; 2] = [-3.366726971e-02, 2.835545008e-01];

/// Which half-band table a factor-2 stage uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum HalfBand {
    R2,
    R4,
    R8,
}

impl HalfBand {
    /// The table for a stage with input rate `rate_in` (units of the final
    /// output rate).
    pub(super) fn for_rate(rate_in: f64) -> Self {
        if rate_in <= 2.5 {
            Self::R2
        } else if rate_in <= 4.5 {
            Self::R4
        } else {
            Self::R8
        }
    }

    pub(super) fn outer(self) -> &'static [f32] {
        match self {
            Self::R2 => &HB_R2,
            Self::R4 => &HB_R4,
            Self::R8 => &HB_R8,
        }
    }

    /// Filter length 4k + 3 (k + 1 outer taps).
    pub(super) fn len(self) -> usize {
        4 * self.outer().len() - 1
    }
}

/// Kaiser's window length and beta for attenuation `a_db` and transition
/// `width` (fraction of Nyquist), as `scipy.signal.kaiserord`.
pub(crate) fn kaiser_order(a_db: f64, width: f64) -> (usize, f64) {
    let beta = if a_db > 50.0 {
        0.1102 * (a_db - 8.7)
    } else if a_db > 21.0 {
        0.5842 * libm::pow(a_db - 21.0, 0.4) + 0.07886 * (a_db - 21.0)
    } else {
        0.0
    };
    let n = libm::ceil((a_db - 7.95) / 2.285 / (core::f64::consts::PI * width) + 1.0);
    (
        crate::num::f32_to_usize_sat(crate::num::f64_to_f32(n)),
        beta,
    )
}

/// Rounds a length up to 4k + 3 (odd, outermost taps of a half-band nonzero).
pub fn halfband_length(n: usize) -> usize {
    let mut m = n.max(3);
    while m % 4 != 3 {
        m += 1;
    }
    m
}

/// Modified Bessel function I0 by its power series (converges for all x).
fn bessel_i0(x: f64) -> f64 {
    let q = x * x * 0.25;
    let mut term = 1.0;
    let mut sum = 1.0;
    let mut k = 1.0;
    while term > sum * 1e-17 {
        term *= q / (k * k);
        sum += term;
        k += 1.0;
    }
    sum
}

#[allow(clippy::cast_precision_loss)]
pub(super) fn to_f64(x: usize) -> f64 {
    x as f64
}

/// Windowed-sinc low-pass with Kaiser window: `cutoff` as a fraction of
/// Nyquist, normalised to unit DC gain (as `scipy.signal.firwin`). Writes
/// `out.len()` taps in natural order. Each tap is evaluated twice (for the
/// sum, then scaled) so that no f64 buffer is needed on the stack.
pub(crate) fn kaiser_lowpass(out: &mut [f32], cutoff: f64, beta: f64) {
    let n = out.len();
    let mid = to_f64(n.saturating_sub(1)) * 0.5;
    let i0b = bessel_i0(beta);
    let tap = |i: usize| {
        let m = to_f64(i) - mid;
        let x = core::f64::consts::PI * cutoff * m;
        let sinc = if m == 0.0 { 1.0 } else { libm::sin(x) / x };
        let r = if n > 1 { (to_f64(i) - mid) / mid } else { 0.0 };
        let w = bessel_i0(beta * libm::sqrt((1.0 - r * r).max(0.0))) / i0b;
        cutoff * sinc * w
    };
    let sum: f64 = (0..n).map(tap).sum();
    for (i, o) in out.iter_mut().enumerate() {
        *o = crate::num::f64_to_f32(tap(i) / sum);
    }
}
