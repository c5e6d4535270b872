//! Anti-alias low-pass and integer decimation, multi-stage, computing only
//! the kept outputs.
//!
//! Structure: the factor is split into stages of 2..=8 (largest first, the
//! smallest prime factor last, because the last stage has the narrowest
//! transition and is cheapest at the lowest rate). Each stage is a linear
//! phase FIR designed on the device by the window method: Kaiser window with
//! Kaiser's formulas for length and beta (the same as `scipy.signal.kaiserord`
//! and `scipy.signal.firwin(..., window=('kaiser', beta))`, DC gain 1).
//!
//! Band plan, with `fo` the final output rate and `fp = 0.4 fo` the protected
//! band: stage i (output rate `r_i`) passes `[0, fp]` and stops from
//! `r_i - fp`, so nothing that folds into `[0, fp]` at any stage survives.
//! Cut-off = `r_i / 2`. Design attenuation [`STOP_DB`].
//!
//! Each stage keeps a doubled ring buffer so the dot product reads one
//! contiguous window; outputs are computed only every M-th input.

/// Kaiser design attenuation in dB (margin over the 60 dB requirement).
pub const STOP_DB: f64 = 66.0;
/// Protected output band as a fraction of the output rate.
pub const PASS_FRACTION: f64 = 0.4;
/// Maximum decimation factor.
pub const MAX_FACTOR: u16 = 1024;
/// Maximum factor of one stage.
pub const MAX_STAGE_FACTOR: u16 = 8;
/// Maximum number of stages (3^6 = 729 needs six).
pub const MAX_STAGES: usize = 6;
/// Tap pool shared by all stages.
pub const TAP_POOL: usize = 320;

/// Why a decimator could not be built.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DecimateError {
    /// Factor 0 or above [`MAX_FACTOR`].
    FactorRange,
    /// The factor has a prime factor above 7 (no stage of 2..=8 fits).
    FactorPrime,
    /// The stages need more taps than [`TAP_POOL`].
    TooManyTaps,
}

impl core::fmt::Display for DecimateError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            Self::FactorRange => "decimation factor must be 1..=1024",
            Self::FactorPrime => "decimation factor must have no prime factor above 7",
            Self::TooManyTaps => "decimator stages exceed the tap pool",
        })
    }
}

impl core::error::Error for DecimateError {}

#[derive(Clone, Copy, Debug, Default)]
struct Stage {
    factor: u16,
    taps: usize,
    offset: usize,
    pos: usize,
    phase: u16,
}

/// Multi-stage FIR decimator with state.
#[derive(Clone, Debug)]
pub struct Decimator {
    factor: u16,
    stages: [Stage; MAX_STAGES],
    n_stages: usize,
    /// Taps of all stages, each stored time-reversed (oldest sample first).
    taps: [f32; TAP_POOL],
    /// Doubled ring buffers of all stages (2 x taps each).
    ring: [f32; 2 * TAP_POOL],
}

/// Splits `factor` into stage factors (largest first). Returns the count.
pub fn stage_factors(factor: u16) -> Result<([u16; MAX_STAGES], usize), DecimateError> {
    if factor == 0 || factor > MAX_FACTOR {
        return Err(DecimateError::FactorRange);
    }
    let mut primes = [0u16; 10];
    let mut np = 0usize;
    let mut rest = factor;
    for p in [7u16, 5, 3, 2] {
        while rest % p == 0 {
            if let Some(s) = primes.get_mut(np) {
                *s = p;
            }
            np += 1;
            rest /= p;
        }
    }
    if rest != 1 {
        return Err(DecimateError::FactorPrime);
    }
    let mut out = [0u16; MAX_STAGES];
    if np == 0 {
        return Ok((out, 0));
    }
    // Smallest prime alone as the last stage; the others merged greedily (<= 8).
    let (head, last) = primes.split_at(np.saturating_sub(1));
    let mut n = 0usize;
    for &p in head {
        let merged = n > 0
            && out
                .get(n - 1)
                .is_some_and(|&c| c.saturating_mul(p) <= MAX_STAGE_FACTOR);
        if merged {
            if let Some(c) = out.get_mut(n - 1) {
                *c *= p;
            }
        } else if let Some(c) = out.get_mut(n) {
            *c = p;
            n += 1;
        }
    }
    if let Some(head) = out.get_mut(..n) {
        head.sort_unstable_by(|a, b| b.cmp(a));
    }
    if let (Some(c), Some(&l)) = (out.get_mut(n), last.first()) {
        *c = l;
        n += 1;
    }
    Ok((out, n))
}

/// Kaiser's window length and beta for attenuation `a_db` and transition
/// `width` (fraction of Nyquist), as `scipy.signal.kaiserord`.
pub fn kaiser_order(a_db: f64, width: f64) -> (usize, f64) {
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
fn to_f64(x: usize) -> f64 {
    x as f64
}

/// Windowed-sinc low-pass with Kaiser window: `cutoff` as a fraction of
/// Nyquist, normalised to unit DC gain (as `scipy.signal.firwin`). Writes
/// `out.len()` taps in natural order.
pub fn kaiser_lowpass(out: &mut [f32], cutoff: f64, beta: f64) {
    let n = out.len();
    let mid = to_f64(n.saturating_sub(1)) * 0.5;
    let i0b = bessel_i0(beta);
    let mut h = [0f64; TAP_POOL];
    let mut sum = 0.0;
    for (i, hi) in h.iter_mut().take(n).enumerate() {
        let m = to_f64(i) - mid;
        let x = core::f64::consts::PI * cutoff * m;
        let sinc = if m == 0.0 { 1.0 } else { libm::sin(x) / x };
        let r = if n > 1 { (to_f64(i) - mid) / mid } else { 0.0 };
        let w = bessel_i0(beta * libm::sqrt((1.0 - r * r).max(0.0))) / i0b;
        *hi = cutoff * sinc * w;
        sum += *hi;
    }
    for (o, hi) in out.iter_mut().zip(h.iter()) {
        *o = crate::num::f64_to_f32(hi / sum);
    }
}

impl Decimator {
    /// Designs a decimator by `factor` (1 = pass-through).
    ///
    /// ```
    /// use dsp_core::decimate::Decimator;
    /// let mut d = Decimator::new(8).unwrap();
    /// let kept = (0..64).filter_map(|_| d.push(1.0)).count();
    /// assert_eq!(kept, 8);
    /// ```
    pub fn new(factor: u16) -> Result<Self, DecimateError> {
        let (factors, n) = stage_factors(factor)?;
        let mut d = Decimator {
            factor,
            stages: [Stage::default(); MAX_STAGES],
            n_stages: n,
            taps: [0.0; TAP_POOL],
            ring: [0.0; 2 * TAP_POOL],
        };
        // Rate after each stage in units of the output rate.
        let mut rate_in = f64::from(factor);
        let mut offset = 0usize;
        for (st, &m) in d.stages.iter_mut().zip(factors.iter()).take(n) {
            let rate_out = rate_in / f64::from(m);
            let width = 2.0 * (rate_out - 2.0 * PASS_FRACTION) / rate_in;
            let (taps, beta) = kaiser_order(STOP_DB, width);
            let end = offset + taps;
            let slot = d
                .taps
                .get_mut(offset..end)
                .ok_or(DecimateError::TooManyTaps)?;
            kaiser_lowpass(slot, 1.0 / f64::from(m), beta);
            slot.reverse();
            *st = Stage {
                factor: m,
                taps,
                offset,
                pos: 0,
                phase: 0,
            };
            offset = end;
            rate_in = rate_out;
        }
        Ok(d)
    }

    /// Overall factor.
    pub fn factor(&self) -> u16 {
        self.factor
    }

    /// Stage factors and tap counts, in processing order.
    pub fn stages(&self) -> impl Iterator<Item = (u16, usize)> + '_ {
        self.stages
            .iter()
            .take(self.n_stages)
            .map(|s| (s.factor, s.taps))
    }

    /// Taps of stage `i` in natural order reversed (as stored: oldest-sample
    /// coefficient first). Symmetric filters read the same either way.
    pub fn stage_taps(&self, i: usize) -> &[f32] {
        self.stages
            .get(i)
            .filter(|_| i < self.n_stages)
            .and_then(|s| self.taps.get(s.offset..s.offset + s.taps))
            .unwrap_or(&[])
    }

    /// Delay of the linear-phase chain in input samples: sum of (N-1)/2 of
    /// each stage scaled by the rate ratio to the input.
    pub fn delay_input_samples(&self) -> f32 {
        let mut scale = 1.0f64;
        let mut d = 0.0f64;
        for s in self.stages.iter().take(self.n_stages) {
            d += to_f64(s.taps.saturating_sub(1)) * 0.5 * scale;
            scale *= f64::from(s.factor);
        }
        crate::num::f64_to_f32(d)
    }

    /// Clears the state (taps are kept).
    pub fn reset(&mut self) {
        self.ring = [0.0; 2 * TAP_POOL];
        for s in self.stages.iter_mut() {
            s.pos = 0;
            s.phase = 0;
        }
    }

    /// Pushes one input sample; returns an output every `factor` inputs
    /// (after inputs factor-1, 2 factor-1, ...).
    #[inline]
    pub fn push(&mut self, x: f32) -> Option<f32> {
        let Self {
            stages,
            n_stages,
            taps,
            ring,
            ..
        } = self;
        let mut v = x;
        for st in stages.iter_mut().take(*n_stages) {
            let n = st.taps;
            let base = 2 * st.offset;
            if let Some(r) = ring.get_mut(base + st.pos) {
                *r = v;
            }
            if let Some(r) = ring.get_mut(base + st.pos + n) {
                *r = v;
            }
            st.pos += 1;
            if st.pos >= n {
                st.pos = 0;
            }
            st.phase += 1;
            if st.phase < st.factor {
                return None;
            }
            st.phase = 0;
            let w = ring.get(base + st.pos..base + st.pos + n).unwrap_or(&[]);
            let h = taps.get(st.offset..st.offset + n).unwrap_or(&[]);
            v = w.iter().zip(h).fold(0.0f32, |acc, (a, b)| acc + a * b);
        }
        Some(v)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn factorisation() {
        let f = |d: u16, want: &[u16]| {
            let (s, n) = stage_factors(d).unwrap();
            assert_eq!(&s[..n], want, "{d}");
        };
        f(1, &[]);
        f(8, &[4, 2]);
        f(1024, &[8, 8, 8, 2]);
        f(729, &[3, 3, 3, 3, 3, 3]);
        f(12, &[6, 2]);
        f(25, &[5, 5]);
        assert_eq!(stage_factors(11), Err(DecimateError::FactorPrime));
        assert_eq!(stage_factors(0), Err(DecimateError::FactorRange));
        assert_eq!(stage_factors(1025), Err(DecimateError::FactorRange));
    }

    #[test]
    fn every_supported_factor_fits() {
        for d in 1..=MAX_FACTOR {
            match Decimator::new(d) {
                Ok(dec) => assert_eq!(dec.stages().map(|s| s.0).product::<u16>(), d.max(1)),
                Err(e) => assert_eq!(e, DecimateError::FactorPrime, "{d}"),
            }
        }
    }

    #[test]
    fn unit_dc_gain() {
        let mut d = Decimator::new(8).unwrap();
        let mut last = 0.0;
        for _ in 0..2000 {
            if let Some(y) = d.push(1.0) {
                last = y;
            }
        }
        assert!((last - 1.0).abs() < 1e-5);
    }
}
