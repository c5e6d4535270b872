//! Anti-alias low-pass and integer decimation, multi-stage, computing only
//! the kept outputs.
//!
//! Structure: the odd part of the factor (primes 3, 5, 7) is merged into
//! stages of at most 8, largest first, and every factor 2 is its own
//! half-band stage after them (the last stages have the narrowest
//! transitions and run at the lowest rates). Each stage is a linear-phase
//! FIR. Odd stages are designed on the device by the window method: Kaiser
//! window with Kaiser's formulas for length and beta (the same as
//! `scipy.signal.kaiserord` and `scipy.signal.firwin(..., window=('kaiser',
//! beta))`, DC gain 1). Stages of 2 are equiripple half-band filters from
//! committed tables ([`HB_R2`], [`HB_R4`], [`HB_R8`], designed with
//! `scipy.signal.remez`, >= 68 dB): length 4k + 3, every second tap exactly
//! zero (skipped), centre 0.5, pass-band ripple <= 3.4e-4. For a factor of 8
//! that is 7 + 11 + 39 taps (2 + 3 + 10 multiplies per output) instead of the
//! Kaiser 15 + 15 + 43. All stages use the tap symmetry (one multiply per
//! tap pair).
//!
//! Band plan, with `fo` the final output rate and `fp = 0.4 fo` the protected
//! band: stage i (output rate `r_i`) passes `[0, fp]` and stops from
//! `r_i - fp`, so nothing that folds into `[0, fp]` at any stage survives.
//! Cut-off = `r_i / 2`. Design attenuation [`STOP_DB`].
//!
//! Processing is block-wise per stage: a block of up to [`BLOCK`] inputs is
//! copied behind the stage's N-1 samples of history in a linear buffer, the
//! kept outputs (every M-th input) are computed from contiguous windows, and
//! the last N-1 samples are moved to the front. Per input this costs one
//! copy plus an amortised (N-1)/block move; only kept outputs are computed.

/// Design attenuation in dB (margin over the 60 dB requirement): Kaiser
/// stages by design, half-band tables checked by `tests/reference/halfband_tables.py`.
pub const STOP_DB: f64 = 66.0;
/// Protected output band as a fraction of the output rate.
pub const PASS_FRACTION: f64 = 0.4;
/// Maximum decimation factor.
pub const MAX_FACTOR: u16 = 1024;
/// Maximum factor of one stage.
pub const MAX_STAGE_FACTOR: u16 = 8;
/// Maximum number of stages (1024 = 2^10 needs ten half-band stages).
pub const MAX_STAGES: usize = 10;
/// Tap pool shared by all stages.
pub const TAP_POOL: usize = 320;
/// Inputs processed per stage block.
pub const BLOCK: usize = 128;
/// History pool: N - 1 + (input block capacity) per stage. Stage inputs
/// shrink by >= 2 per stage, so the capacities sum to < 2 BLOCK + MAX_STAGES.
const HIST_POOL: usize = TAP_POOL + 2 * BLOCK + MAX_STAGES;

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
    halfband: bool,
    taps: usize,
    offset: usize,
    hist: usize,
    phase: usize,
}

/// Multi-stage FIR decimator with state.
#[derive(Clone, Debug)]
pub struct Decimator {
    factor: u16,
    stages: [Stage; MAX_STAGES],
    n_stages: usize,
    /// Taps of all stages, each stored time-reversed (oldest sample first).
    taps: [f32; TAP_POOL],
    /// Linear history buffers of all stages (N - 1 + input capacity each).
    hist: [f32; HIST_POOL],
}

/// Splits `factor` into stage factors (largest first). Returns the count.
pub fn stage_factors(factor: u16) -> Result<([u16; MAX_STAGES], usize), DecimateError> {
    if factor == 0 || factor > MAX_FACTOR {
        return Err(DecimateError::FactorRange);
    }
    let mut out = [0u16; MAX_STAGES];
    let mut n = 0usize;
    let mut rest = factor;
    // Odd primes, largest first, merged greedily while the stage stays <= 8.
    for p in [7u16, 5, 3] {
        while rest % p == 0 {
            rest /= p;
            let merge = n > 0
                && out
                    .get(n - 1)
                    .is_some_and(|&c| c.saturating_mul(p) <= MAX_STAGE_FACTOR);
            if merge {
                if let Some(c) = out.get_mut(n - 1) {
                    *c *= p;
                }
            } else if let Some(c) = out.get_mut(n) {
                *c = p;
                n += 1;
            }
        }
    }
    if let Some(odd) = out.get_mut(..n) {
        odd.sort_unstable_by(|a, b| b.cmp(a));
    }
    // Then one half-band stage per factor 2.
    while rest % 2 == 0 {
        rest /= 2;
        if let Some(c) = out.get_mut(n) {
            *c = 2;
            n += 1;
        }
    }
    if rest != 1 {
        return Err(DecimateError::FactorPrime);
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

/// One output of a symmetric FIR over window `w` (oldest first) with taps
/// `h` of the same length: one multiply per tap pair; half-band filters
/// (length 4k + 3) visit only the nonzero pairs (even distance from the ends).
#[inline]
fn fir_output(w: &[f32], h: &[f32], halfband: bool) -> f32 {
    let n = w.len().min(h.len());
    let m = n / 2;
    let centre = if n % 2 == 1 {
        w.get(m).zip(h.get(m)).map_or(0.0, |(a, b)| a * b)
    } else {
        0.0
    };
    if halfband {
        // Pairs (2j, n-1-2j), j = 0..=k: chunk j of w[..m+1] starts at 2j and
        // chunk j from the end of w[m..] ends at n-1-2j.
        let (Some(wl), Some(wh), Some(hl)) = (w.get(..m + 1), w.get(m..n), h.get(..m + 1)) else {
            return 0.0;
        };
        wl.chunks_exact(2)
            .zip(wh.rchunks_exact(2))
            .zip(hl.chunks_exact(2))
            .fold(centre, |acc, ((a, b), c)| match (a, b, c) {
                ([a, _], [_, b], [c, _]) => acc + c * (a + b),
                _ => acc,
            })
    } else {
        let (Some(wl), Some(wh), Some(hl)) = (w.get(..m), w.get(n - m..n), h.get(..m)) else {
            return 0.0;
        };
        wl.iter()
            .zip(wh.iter().rev())
            .zip(hl)
            .fold(centre, |acc, ((a, b), c)| acc + c * (a + b))
    }
}

/// The half-band table for a stage with input rate `rate_in` (units of the
/// final output rate).
fn halfband_table(rate_in: f64) -> &'static [f32] {
    if rate_in <= 2.5 {
        &HB_R2
    } else if rate_in <= 4.5 {
        &HB_R4
    } else {
        &HB_R8
    }
}

/// Expands a half-band table into `slot` (length 4k + 3, symmetric).
fn fill_halfband(slot: &mut [f32], outer: &[f32]) {
    let n = slot.len();
    slot.fill(0.0);
    for (j, &c) in outer.iter().enumerate() {
        if let Some(h) = slot.get_mut(2 * j) {
            *h = c;
        }
        if let Some(h) = slot.get_mut(n - 1 - 2 * j) {
            *h = c;
        }
    }
    if let Some(h) = slot.get_mut(n / 2) {
        *h = 0.5;
    }
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
            hist: [0.0; HIST_POOL],
        };
        // Rate after each stage in units of the output rate.
        let mut rate_in = f64::from(factor);
        let mut offset = 0usize;
        let (mut hist, mut cap) = (0usize, BLOCK);
        for (st, &m) in d.stages.iter_mut().zip(factors.iter()).take(n) {
            let rate_out = rate_in / f64::from(m);
            let width = 2.0 * (rate_out - 2.0 * PASS_FRACTION) / rate_in;
            let halfband = m == 2;
            let (taps, beta) = if halfband {
                (4 * halfband_table(rate_in).len() - 1, 0.0)
            } else {
                kaiser_order(STOP_DB, width)
            };
            let end = offset + taps;
            let slot = d
                .taps
                .get_mut(offset..end)
                .ok_or(DecimateError::TooManyTaps)?;
            if halfband {
                fill_halfband(slot, halfband_table(rate_in));
            } else {
                kaiser_lowpass(slot, 1.0 / f64::from(m), beta);
                slot.reverse();
            }
            *st = Stage {
                factor: m,
                halfband,
                taps,
                offset,
                hist,
                phase: 0,
            };
            offset = end;
            hist += taps - 1 + cap;
            cap = cap.div_ceil(usize::from(m).max(1));
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
        self.hist = [0.0; HIST_POOL];
        for s in self.stages.iter_mut() {
            s.phase = 0;
        }
    }

    /// Pushes one input sample; returns an output every `factor` inputs
    /// (after inputs factor-1, 2 factor-1, ...). Same results as [`Self::process`].
    pub fn push(&mut self, x: f32) -> Option<f32> {
        let mut y = None;
        self.process(&[x], |v| y = Some(v));
        y
    }

    /// Pushes a block of any length; calls `out` for each kept output, in
    /// order. Results do not depend on how the input is split.
    pub fn process(&mut self, input: &[f32], mut out: impl FnMut(f32)) {
        let Self {
            stages,
            n_stages,
            taps,
            hist,
            ..
        } = self;
        let Some((first, rest)) = stages
            .get_mut(..*n_stages)
            .and_then(|s| s.split_first_mut())
        else {
            // Factor 1: pass-through.
            input.iter().for_each(|&v| out(v));
            return;
        };
        // Every stage decimates by >= 2, so BLOCK / 2 outputs fit. The scratch
        // buffers are swapped by reference (no copies); the first stage reads
        // the caller's block directly.
        let mut a = [0f32; BLOCK / 2];
        let mut b = [0f32; BLOCK / 2];
        for chunk in input.chunks(BLOCK) {
            let (mut src, mut dst) = (&mut a, &mut b);
            let mut len = run_stage(first, taps, hist, chunk, src);
            for st in rest.iter_mut() {
                if len == 0 {
                    break;
                }
                len = run_stage(st, taps, hist, src.get(..len).unwrap_or(&[]), dst);
                core::mem::swap(&mut src, &mut dst);
            }
            src.iter().take(len).for_each(|&v| out(v));
        }
    }
}

/// Kept outputs of a factor-2 half-band stage over the linear history `h`
/// (windows start at `first`, `first + 2`, ...). Lengths the designs produce
/// get a kernel with the length fixed at compile time (unrolled, taps in
/// registers); the arithmetic is that of [`fir_output`], so the results are
/// the same bit for bit.
fn halfband_outputs(h: &[f32], t: &[f32], first: usize, dst: &mut [f32]) -> usize {
    macro_rules! dispatch {
        ($($n:literal),*) => {
            match t.len() {
                $($n => halfband_fixed::<$n>(h, t, first, dst),)*
                _ => {
                    // `max(1)`: an empty kernel gives no outputs instead of a panic path.
                    let windows = h.windows(t.len().max(1)).skip(first).step_by(2).zip(dst.iter_mut());
                    let mut count = 0;
                    for (w, d) in windows {
                        *d = fir_output(w, t, true);
                        count += 1;
                    }
                    count
                }
            }
        };
    }
    dispatch!(3, 7, 11, 15, 19, 23, 27, 31, 35, 39, 43, 47)
}

#[inline(always)]
fn halfband_fixed<const N: usize>(h: &[f32], t: &[f32], first: usize, dst: &mut [f32]) -> usize {
    let Ok(taps) = <&[f32; N]>::try_from(t) else {
        return 0;
    };
    // Local copy: the compiler keeps the taps in FPU registers over the block.
    let taps: [f32; N] = *taps;
    let mut count = 0;
    let mut start = first;
    for d in dst.iter_mut() {
        let Some(w) = h
            .get(start..start + N)
            .and_then(|s| <&[f32; N]>::try_from(s).ok())
        else {
            break;
        };
        *d = fir_output(w, &taps, true);
        count += 1;
        start += 2;
    }
    count
}

/// Runs one stage over `src` (at most [`BLOCK`] samples), writing kept
/// outputs to `dst`; returns their count.
fn run_stage(
    st: &mut Stage,
    taps: &[f32],
    hist: &mut [f32],
    src: &[f32],
    dst: &mut [f32],
) -> usize {
    let n = st.taps;
    let m = usize::from(st.factor.max(1));
    let l = src.len();
    if n == 0 {
        // `windows(0)` panics; a stage always has taps (checked in `new`).
        return 0;
    }
    let keep = n.saturating_sub(1);
    let (Some(h), Some(t)) = (
        hist.get_mut(st.hist..st.hist + keep + l),
        taps.get(st.offset..st.offset + n),
    ) else {
        return 0;
    };
    if let Some(tail) = h.get_mut(keep..) {
        tail.copy_from_slice(src);
    }
    // Output k of this block ends at block index first + k m.
    let first = m - 1 - st.phase;
    let mut count = 0;
    if st.halfband {
        count = halfband_outputs(h, t, first, dst);
    } else {
        let windows = h
            .windows(n.max(1))
            .skip(first)
            .step_by(m.max(1))
            .zip(dst.iter_mut());
        for (w, d) in windows {
            *d = fir_output(w, t, false);
            count += 1;
        }
    }
    st.phase = (st.phase + l) % m;
    if l <= h.len() {
        h.copy_within(l.., 0);
    }
    count
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
        f(8, &[2, 2, 2]);
        f(1024, &[2; 10]);
        f(729, &[3, 3, 3, 3, 3, 3]);
        f(12, &[3, 2, 2]);
        f(25, &[5, 5]);
        f(70, &[7, 5, 2]);
        f(6, &[3, 2]);
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
        // Equiripple half-bands: DC gain 1 within the pass-band ripple of the
        // three tables (3.4e-4 + 3.6e-4 + 2.3e-4, halfband_tables.py).
        assert!((last - 1.0).abs() < 1e-3, "{last}");
    }
}
