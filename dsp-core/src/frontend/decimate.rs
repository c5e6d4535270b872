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
//! Processing is block-wise per stage over linear history buffers: a block
//! of up to [`BLOCK`] inputs sits behind the stage's N-1 samples of history,
//! the kept outputs (every M-th input) are computed from contiguous windows
//! and written straight behind the next stage's history (the last stage's
//! go to the caller), then the last N-1 samples move to the front. The first
//! stage's inputs are written into its history by their producer
//! ([`Decimator::process_with`]), so no sample is copied between stages.
//! Half-band taps are read from the static tables (only window-method taps
//! are stored) and their kernels have compile-time lengths and compute two
//! outputs per step from shared loads. Both pools are sized for the most
//! demanding supported factors (taps: 343 = 7 x 7 x 7; history: 1024),
//! which a test recomputes.

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
/// Tap pool of the window-method (odd-factor) stages; half-band taps are
/// read from the static tables. 206 is what factor 343 (7 x 7 x 7) needs,
/// the most of any supported factor (`pools_fit_the_most_demanding_factor`).
pub const TAP_POOL: usize = 206;
/// Inputs processed per stage block.
pub const BLOCK: usize = 128;
/// History pool: N - 1 + (input block capacity) per stage (plus [`SLACK`]
/// per half-band stage), summed over the stages; 383 for factor 1024, the
/// most of any supported factor.
pub const HIST_POOL: usize = 383;
/// Samples after a half-band stage's inputs that its two-output kernel may
/// span without reading them, so every pair of outputs takes the fast loop.
const SLACK: usize = 3;

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
#[non_exhaustive]
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

/// Which half-band table a factor-2 stage uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum HalfBand {
    R2,
    R4,
    R8,
}

impl HalfBand {
    /// The table for a stage with input rate `rate_in` (units of the final
    /// output rate).
    fn for_rate(rate_in: f64) -> Self {
        if rate_in <= 2.5 {
            Self::R2
        } else if rate_in <= 4.5 {
            Self::R4
        } else {
            Self::R8
        }
    }

    fn outer(self) -> &'static [f32] {
        match self {
            Self::R2 => &HB_R2,
            Self::R4 => &HB_R4,
            Self::R8 => &HB_R8,
        }
    }

    /// Filter length 4k + 3 (k + 1 outer taps).
    fn len(self) -> usize {
        4 * self.outer().len() - 1
    }
}

#[derive(Clone, Copy, Debug, Default)]
struct Stage {
    factor: u16,
    /// `Some` for factor-2 stages (taps from the table), `None` for
    /// window-method stages (taps in the pool at `offset`).
    halfband: Option<HalfBand>,
    taps: usize,
    offset: usize,
    /// Start of this stage's history region: N - 1 + `cap` samples.
    hist: usize,
    /// Input capacity per block.
    cap: usize,
    phase: usize,
}

/// Multi-stage FIR decimator with state.
#[derive(Clone, Debug)]
pub struct Decimator {
    factor: u16,
    stages: [Stage; MAX_STAGES],
    n_stages: usize,
    /// Taps of the window-method stages, each stored time-reversed (oldest
    /// sample first).
    taps: [f32; TAP_POOL],
    /// Linear history buffers of all stages (N - 1 + input capacity each).
    hist: [f32; HIST_POOL],
}

/// A validated stage plan (small; the taps are designed when it is applied).
#[derive(Clone, Copy, Debug)]
pub(crate) struct DecimatorPlan {
    factor: u16,
    stages: [Stage; MAX_STAGES],
    n_stages: usize,
    betas: [f64; MAX_STAGES],
}

impl DecimatorPlan {
    /// Splits `factor` into stages and checks that they fit the pools.
    pub(crate) fn new(factor: u16) -> Result<Self, DecimateError> {
        let (factors, n) = stage_factors(factor)?;
        let mut plan = DecimatorPlan {
            factor,
            stages: [Stage::default(); MAX_STAGES],
            n_stages: n,
            betas: [0f64; MAX_STAGES],
        };
        let mut rate_in = f64::from(factor);
        let (mut offset, mut hist, mut cap) = (0usize, 0usize, BLOCK);
        let stages = plan.stages.iter_mut().zip(plan.betas.iter_mut());
        for ((st, beta), &m) in stages.zip(&factors).take(n) {
            let rate_out = rate_in / f64::from(m);
            let width = 2.0 * (rate_out - 2.0 * PASS_FRACTION) / rate_in;
            let halfband = (m == 2).then(|| HalfBand::for_rate(rate_in));
            let taps = match halfband {
                Some(hb) => hb.len(),
                None => {
                    let (taps, b) = kaiser_order(STOP_DB, width);
                    *beta = b;
                    taps.max(1)
                }
            };
            *st = Stage {
                factor: m,
                halfband,
                taps,
                offset,
                hist,
                cap,
                phase: 0,
            };
            if halfband.is_none() {
                offset += taps;
            }
            hist += taps - 1 + cap + if halfband.is_some() { SLACK } else { 0 };
            cap = cap.div_ceil(usize::from(m).max(1));
            rate_in = rate_out;
        }
        if offset > TAP_POOL || hist > HIST_POOL {
            return Err(DecimateError::TooManyTaps);
        }
        Ok(plan)
    }

    /// Delay of the planned chain in input samples (see
    /// [`Decimator::delay_input_samples`]).
    pub(crate) fn delay_input_samples(&self) -> f32 {
        chain_delay(self.stages.iter().take(self.n_stages))
    }
}

/// Sum of (N-1)/2 of each stage scaled by the rate ratio to the input.
fn chain_delay<'a>(stages: impl Iterator<Item = &'a Stage>) -> f32 {
    let mut scale = 1.0f64;
    let mut d = 0.0f64;
    for s in stages {
        d += to_f64(s.taps.saturating_sub(1)) * 0.5 * scale;
        scale *= f64::from(s.factor);
    }
    crate::num::f64_to_f32(d)
}

/// Splits `factor` into stage factors (largest first). Returns the count.
pub(crate) fn stage_factors(factor: u16) -> Result<([u16; MAX_STAGES], usize), DecimateError> {
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

/// One output of a symmetric FIR over window `w` (oldest first) with taps
/// `h` of the same length: one multiply per tap pair, centre tap first, then
/// the pairs from the outside in. Four pairs per step (same order of
/// operations as one at a time).
#[inline]
fn fir_output(w: &[f32], h: &[f32]) -> f32 {
    let n = w.len().min(h.len());
    let m = n / 2;
    let centre = if n % 2 == 1 {
        w.get(m).zip(h.get(m)).map_or(0.0, |(a, b)| a * b)
    } else {
        0.0
    };
    let (Some(wl), Some(wh), Some(hl)) = (w.get(..m), w.get(n - m..n), h.get(..m)) else {
        return 0.0;
    };
    wl.iter()
        .zip(wh.iter().rev())
        .zip(hl)
        .fold(centre, |acc, ((a, b), c)| acc + c * (a + b))
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

impl Decimator {
    /// Designs a decimator by `factor` (1 = pass-through).
    ///
    /// ```
    /// use dsp_core::frontend::decimate::Decimator;
    /// let mut d = Decimator::new(8).unwrap();
    /// let kept = (0..64).filter_map(|_| d.push(1.0)).count();
    /// assert_eq!(kept, 8);
    /// ```
    pub fn new(factor: u16) -> Result<Self, DecimateError> {
        let mut d = Self::pass_through();
        d.reconfigure(factor)?;
        Ok(d)
    }

    /// A pass-through decimator (factor 1), usable in constant context so a
    /// larger object can be placed statically and configured in place.
    pub const fn pass_through() -> Self {
        Decimator {
            factor: 1,
            stages: [Stage {
                factor: 1,
                halfband: None,
                taps: 0,
                offset: 0,
                hist: 0,
                cap: 0,
                phase: 0,
            }; MAX_STAGES],
            n_stages: 0,
            taps: [0.0; TAP_POOL],
            hist: [0.0; HIST_POOL],
        }
    }

    /// Designs the stages for `factor` in place and clears the state; on
    /// error `self` is left unchanged.
    pub fn reconfigure(&mut self, factor: u16) -> Result<(), DecimateError> {
        let plan = DecimatorPlan::new(factor)?;
        self.apply(&plan);
        Ok(())
    }

    /// Designs the planned stages in place and clears the state.
    pub(crate) fn apply(&mut self, plan: &DecimatorPlan) {
        for (st, &beta) in plan.stages.iter().zip(&plan.betas).take(plan.n_stages) {
            if st.halfband.is_some() {
                continue;
            }
            if let Some(slot) = self.taps.get_mut(st.offset..st.offset + st.taps) {
                kaiser_lowpass(slot, 1.0 / f64::from(st.factor), beta);
                slot.reverse();
            }
        }
        self.factor = plan.factor;
        self.stages = plan.stages;
        self.n_stages = plan.n_stages;
        self.hist.fill(0.0);
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

    /// Taps of stage `i` as applied to the window, oldest-sample coefficient
    /// first (symmetric filters read the same either way); empty for a stage
    /// that does not exist. Half-band taps are expanded from their table.
    pub fn stage_taps(&self, i: usize) -> impl DoubleEndedIterator<Item = f32> + '_ {
        let st = self.stages.get(i).filter(|_| i < self.n_stages).copied();
        let n = st.map_or(0, |s| s.taps);
        (0..n).map(move |j| match st {
            Some(Stage {
                halfband: Some(hb),
                taps,
                ..
            }) => {
                let k = j.min(taps - 1 - j);
                if k == taps / 2 {
                    0.5
                } else if k % 2 == 0 {
                    hb.outer().get(k / 2).copied().unwrap_or(0.0)
                } else {
                    0.0
                }
            }
            Some(s) => self.taps.get(s.offset + j).copied().unwrap_or(0.0),
            None => 0.0,
        })
    }

    /// Delay of the linear-phase chain in input samples: sum of (N-1)/2 of
    /// each stage scaled by the rate ratio to the input.
    pub fn delay_input_samples(&self) -> f32 {
        chain_delay(self.stages.iter().take(self.n_stages))
    }

    /// Clears the state (taps are kept).
    pub fn reset(&mut self) {
        self.hist.fill(0.0);
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
    pub fn process(&mut self, input: &[f32], out: impl FnMut(f32)) {
        self.process_map(input, |x| x, out);
    }

    /// Decimates `f(x)` for each `x` of `input` (any length), calling `f`
    /// once per sample, in order, and `out` for each kept output: the mapped
    /// samples go straight into the first stage's history (see
    /// [`Self::process_with`]). Same results as [`Self::process`] on the
    /// mapped samples.
    ///
    /// ```
    /// use dsp_core::frontend::decimate::Decimator;
    /// let (mut a, mut b) = (Decimator::new(8).unwrap(), Decimator::new(8).unwrap());
    /// let x: Vec<f32> = (0..100).map(|i| (i as f32 * 0.3).sin()).collect();
    /// let sq: Vec<f32> = x.iter().map(|v| v * v).collect();
    /// let (mut ya, mut yb) = (Vec::new(), Vec::new());
    /// a.process(&sq, |v| ya.push(v));
    /// b.process_map(&x, |v| v * v, |v| yb.push(v));
    /// assert_eq!(ya, yb);
    /// ```
    pub fn process_map(
        &mut self,
        input: &[f32],
        mut f: impl FnMut(f32) -> f32,
        mut out: impl FnMut(f32),
    ) {
        for chunk in input.chunks(BLOCK) {
            self.process_with(
                chunk.len(),
                |slot| {
                    for (s, &x) in slot.iter_mut().zip(chunk) {
                        *s = f(x);
                    }
                },
                &mut out,
            );
        }
    }

    /// Pushes `len.min(BLOCK)` inputs that `fill` writes straight into the
    /// first stage's history (it gets a slice of exactly that length), and
    /// calls `out` for each kept output; returns the number of inputs taken.
    /// The producer (the front end's band-pass and rectifier) thus writes
    /// where the first stage reads, and nothing is copied in between. Same
    /// results as [`Self::process`] on the same samples.
    ///
    /// ```
    /// use dsp_core::frontend::decimate::Decimator;
    /// let (mut a, mut b) = (Decimator::new(4).unwrap(), Decimator::new(4).unwrap());
    /// let x: Vec<f32> = (0..100).map(|i| (i as f32 * 0.3).sin()).collect();
    /// let (mut ya, mut yb) = (Vec::new(), Vec::new());
    /// a.process(&x, |v| ya.push(v));
    /// let taken = b.process_with(x.len(), |s| s.copy_from_slice(&x), |v| yb.push(v));
    /// assert_eq!((taken, ya), (100, yb));
    /// ```
    pub fn process_with(
        &mut self,
        len: usize,
        fill: impl FnOnce(&mut [f32]),
        mut out: impl FnMut(f32),
    ) -> usize {
        let len = len.min(BLOCK);
        let Self {
            stages,
            n_stages,
            taps,
            hist,
            ..
        } = self;
        let stages = stages.get_mut(..*n_stages).unwrap_or(&mut []);
        let Some(first) = stages.first() else {
            // Factor 1: pass-through.
            let mut buf = [0f32; BLOCK];
            let slot = buf.get_mut(..len).unwrap_or(&mut []);
            fill(slot);
            slot.iter().for_each(|&v| out(v));
            return len;
        };
        let keep = first.taps.saturating_sub(1);
        match hist.get_mut(first.hist + keep..first.hist + keep + len) {
            Some(slot) => fill(slot),
            None => return 0,
        }
        let mut n = len;
        for i in 0..stages.len() {
            let next = stages
                .get(i + 1)
                .map(|s| (s.hist, s.taps.saturating_sub(1), s.cap));
            let Some(st) = stages.get_mut(i) else { break };
            // This stage's region lies below the next stage's.
            let split = next.map_or(HIST_POOL, |(h, _, _)| h);
            let Some((cur, nxt)) = hist.split_at_mut_checked(split) else {
                break;
            };
            let Some(region) = cur.get_mut(st.hist..) else {
                break;
            };
            n = match next {
                Some((_, keep, cap)) => {
                    let dst = nxt.get_mut(keep..keep + cap).unwrap_or(&mut []);
                    run_stage(st, taps, region, n, Some(dst), |_| {})
                }
                None => run_stage(st, taps, region, n, None, &mut out),
            };
            if n == 0 {
                break;
            }
        }
        len
    }
}

/// Half-band output over a window of N = 4k + 3 samples with K = k + 1
/// outer taps: centre first, then the nonzero tap pairs (even distance
/// from the ends) from the outside in, one multiply per pair; the zero taps
/// are skipped, not multiplied.
#[inline(always)]
fn halfband_output<const N: usize, const K: usize>(w: &[f32; N], outer: &[f32; K]) -> f32 {
    let centre = w.get(N / 2).map_or(0.0, |&c| c * 0.5);
    let lo = w.iter().step_by(2);
    let hi = w.iter().rev().step_by(2);
    lo.zip(hi)
        .zip(outer)
        .fold(centre, |acc, ((a, b), c)| acc + c * (a + b))
}

/// Two consecutive outputs (windows at samples 0 and 2) of a flat window
/// of F = 4Q >= N + 2 samples: both from the same loaded samples, stored
/// after both are computed.
#[inline(always)]
fn halfband_two<const N: usize, const K: usize, const F: usize>(
    flat: &[f32; F],
    outer: &[f32; K],
) -> (f32, f32) {
    let a = flat
        .first_chunk::<N>()
        .map_or(0.0, |w| halfband_output(w, outer));
    let b = flat
        .get(2..)
        .and_then(|s| s.first_chunk::<N>())
        .map_or(0.0, |w| halfband_output(w, outer));
    (a, b)
}

/// One half-band stage (length N = 4k + 3, K outer taps from its table,
/// Q = k + 2 blocks of four samples per output pair, F = 4Q, KEEP = N - 1;
/// all compile-time, so loops unroll and taps stay in registers). `h` holds
/// the KEEP history samples and the `l` new ones; windows start at
/// `h[first]`, `h[first + 2]`, ... Outputs go to `dst` or, when it is
/// `None`, to `emit`. Outputs are computed two at a time in a counted loop
/// (shared loads, no per-output checks). Afterwards the last KEEP samples
/// move to the front. Returns the number of outputs.
#[inline(always)]
fn halfband_stage<
    const N: usize,
    const K: usize,
    const Q: usize,
    const F: usize,
    const KEEP: usize,
>(
    region: &mut [f32],
    len: usize,
    first: usize,
    outer: &[f32; K],
    dst: Option<&mut [f32]>,
    mut emit: impl FnMut(f32),
) -> usize {
    let taps = *outer;
    // Samples: `len`, then up to SLACK more that the last block of a pair
    // may span but no output reads (a pair reads N + 2 of its F samples).
    let ext = region
        .get(..len + SLACK)
        .or(region.get(..len))
        .unwrap_or(&[]);
    let w = ext.get(first..).unwrap_or(&[]);
    let w_len = len.saturating_sub(first);
    let total = if w_len >= N { (w_len - N) / 2 + 1 } else { 0 };
    let (quads, _) = w.as_chunks::<4>();
    // Pairs of outputs whose F-sample block lies inside `ext`.
    let pairs = (total / 2).min(quads.len().saturating_sub(Q - 1));
    // Slice windows and a slice iterator zip to a counted loop without
    // per-output checks (`map`, not `filter_map`, keeps it so; the
    // conversion cannot fail: Q blocks of four are F samples).
    let blocks = quads
        .windows(Q)
        .map(|q| <&[f32; F]>::try_from(q.as_flattened()).ok());
    let mut done = 0;
    let mut dst = match dst {
        Some(d) => {
            let (head, tail) = d
                .split_at_mut_checked(2 * pairs)
                .unwrap_or((&mut [], &mut []));
            for (flat, o) in blocks.zip(head.as_chunks_mut::<2>().0) {
                if let Some(flat) = flat {
                    (o[0], o[1]) = halfband_two::<N, K, F>(flat, &taps);
                    done += 2;
                }
            }
            Some(tail.iter_mut())
        }
        None => {
            for flat in blocks.take(pairs).flatten() {
                let (a, b) = halfband_two::<N, K, F>(flat, &taps);
                emit(a);
                emit(b);
                done += 2;
            }
            None
        }
    };
    // The last output (an odd count), or any the slack did not cover.
    while done < total {
        let Some(win) = w.get(2 * done..).and_then(|s| s.first_chunk::<N>()) else {
            break;
        };
        let v = halfband_output(win, &taps);
        match dst.as_mut() {
            Some(it) => {
                if let Some(o) = it.next() {
                    *o = v;
                }
            }
            None => emit(v),
        }
        done += 1;
    }
    let h = region.get_mut(..len).unwrap_or(&mut []);
    shift_history::<KEEP>(h);
    done
}

/// Moves the last KEEP samples of `h` to its front. When source and
/// destination do not overlap (a block at least KEEP long, the usual case)
/// this is a copy of known length, which the compiler inlines; otherwise a
/// library move.
#[inline(always)]
fn shift_history<const KEEP: usize>(h: &mut [f32]) {
    let l = h.len().saturating_sub(KEEP);
    if l >= KEEP {
        if let Some((front, back)) = h.split_at_mut_checked(l) {
            if let (Some(d), Some(s)) =
                (front.first_chunk_mut::<KEEP>(), back.first_chunk::<KEEP>())
            {
                d.copy_from_slice(s);
            }
        }
    } else {
        move_to_front(h, l);
    }
}

/// `h.copy_within(l.., 0)` for a block shorter than the history (source
/// and destination overlap), out of line so that the usual case above stays
/// an inlined copy of known length instead of being merged into this move.
#[inline(never)]
fn move_to_front(h: &mut [f32], l: usize) {
    if l <= h.len() {
        h.copy_within(l.., 0);
    }
}

/// Runs one stage over the `l` inputs already written behind its history
/// in `region` (which starts at the stage's history); writes the kept
/// outputs to `dst`, or calls `emit` for each when `dst` is `None`, and
/// returns their count.
fn run_stage(
    st: &mut Stage,
    taps: &[f32],
    region: &mut [f32],
    l: usize,
    dst: Option<&mut [f32]>,
    emit: impl FnMut(f32),
) -> usize {
    let n = st.taps;
    let m = usize::from(st.factor.max(1));
    let keep = n.saturating_sub(1);
    if region.len() < keep + l {
        return 0;
    }
    // Output k of this block ends at block index first + k m, so its window
    // starts at h[first + k m].
    let first = m - 1 - st.phase.min(m - 1);
    st.phase = (st.phase + l) % m;
    match st.halfband {
        Some(HalfBand::R8) => {
            halfband_stage::<7, 2, 3, 12, 6>(region, keep + l, first, &HB_R8, dst, emit)
        }
        Some(HalfBand::R4) => {
            halfband_stage::<11, 3, 4, 16, 10>(region, keep + l, first, &HB_R4, dst, emit)
        }
        Some(HalfBand::R2) => {
            halfband_stage::<39, 10, 11, 44, 38>(region, keep + l, first, &HB_R2, dst, emit)
        }
        None => {
            let h = region.get_mut(..keep + l).unwrap_or(&mut []);
            let t = taps.get(st.offset..st.offset + n).unwrap_or(&[]);
            let count = window_stage(h, first, m, t, dst, emit);
            move_to_front(h, l);
            count
        }
    }
}

/// Kept outputs of a window-method stage (runtime length and factor m):
/// windows start at `h[first]`, `h[first + m]`, ...; two outputs per step
/// share the tap loads and the loop, each with the arithmetic of
/// [`fir_output`]. Outputs go to `dst` or, when it is `None`, to `emit`.
fn window_stage(
    h: &[f32],
    first: usize,
    m: usize,
    t: &[f32],
    dst: Option<&mut [f32]>,
    emit: impl FnMut(f32),
) -> usize {
    let n = t.len();
    let w = h.get(first..).unwrap_or(&[]);
    if n == 0 || m == 0 || w.len() < n {
        return 0;
    }
    let total = (w.len() - n) / m + 1;
    let mut dst = dst.map(|d| d.iter_mut());
    let mut emit = emit;
    let mut put = |v: f32| match dst.as_mut() {
        Some(it) => {
            if let Some(o) = it.next() {
                *o = v;
            }
        }
        None => emit(v),
    };
    let mut done = 0;
    while done + 2 <= total {
        let s = done * m;
        let (Some(a), Some(b)) = (w.get(s..s + n), w.get(s + m..s + m + n)) else {
            break;
        };
        let (ya, yb) = fir_two(a, b, t);
        put(ya);
        put(yb);
        done += 2;
    }
    if done < total {
        if let Some(a) = w.get(done * m..done * m + n) {
            put(fir_output(a, t));
            done += 1;
        }
    }
    done
}

/// [`fir_output`] over two windows of the length of `h` at once (taps
/// loaded once for both).
#[inline]
fn fir_two(a: &[f32], b: &[f32], h: &[f32]) -> (f32, f32) {
    let n = h.len();
    let m = n / 2;
    let centre = |w: &[f32]| {
        if n % 2 == 1 {
            w.get(m).zip(h.get(m)).map_or(0.0, |(x, c)| x * c)
        } else {
            0.0
        }
    };
    let (Some(al), Some(ah), Some(bl), Some(bh), Some(hl)) = (
        a.get(..m),
        a.get(n - m..n),
        b.get(..m),
        b.get(n - m..n),
        h.get(..m),
    ) else {
        return (0.0, 0.0);
    };
    hl.iter()
        .zip(al.iter().zip(ah.iter().rev()))
        .zip(bl.iter().zip(bh.iter().rev()))
        .fold(
            (centre(a), centre(b)),
            |(ya, yb), ((c, (a0, a1)), (b0, b1))| (ya + c * (a0 + a1), yb + c * (b0 + b1)),
        )
}

#[cfg(test)]
mod tests {
    use super::*;
    extern crate std;
    use std::vec::Vec;

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
    fn pools_fit_the_most_demanding_factor() {
        // Recomputes each supported factor's need (window-method taps; N - 1
        // plus input capacity per stage) and checks the pools are exactly
        // the largest need, so a design change that outgrows them, or
        // leaves them oversized, fails here rather than at run time.
        let (mut taps_max, mut hist_max) = (0, 0);
        let (mut need_343, mut need_1024) = (0, 0);
        for d in 1..=MAX_FACTOR {
            let Ok(dec) = Decimator::new(d) else { continue };
            let (mut taps, mut hist, mut cap) = (0, 0, BLOCK);
            for (m, n) in dec.stages() {
                if m != 2 {
                    taps += n;
                }
                hist += n - 1 + cap + if m == 2 { SLACK } else { 0 };
                cap = cap.div_ceil(usize::from(m));
            }
            taps_max = taps_max.max(taps);
            hist_max = hist_max.max(hist);
            if d == 343 {
                need_343 = taps;
            }
            if d == 1024 {
                need_1024 = hist;
            }
        }
        assert_eq!((taps_max, hist_max), (TAP_POOL, HIST_POOL));
        assert_eq!((need_343, need_1024), (TAP_POOL, HIST_POOL));
    }

    #[test]
    fn half_band_taps_expand_from_the_tables() {
        let d = Decimator::new(8).unwrap();
        let t: Vec<f32> = d.stage_taps(0).collect();
        assert_eq!(t, [HB_R8[0], 0.0, HB_R8[1], 0.5, HB_R8[1], 0.0, HB_R8[0]]);
        assert_eq!(d.stage_taps(2).count(), 39);
        assert_eq!(d.stage_taps(3).count(), 0);
    }

    #[test]
    fn any_split_and_the_fused_producer_give_the_same_bits() {
        // Reference: the same decimator fed one block of pre-squared samples.
        let x: Vec<f32> = (0..5000u32)
            .map(|i| libm::sinf(i as f32 * 0.37) + if i % 29 == 0 { 1.5 } else { -0.2 })
            .collect();
        let sq: Vec<f32> = x.iter().map(|v| v * v).collect();
        for d in [2u16, 3, 4, 6, 8, 12, 16, 25, 64, 343, 1024] {
            let mut want = Vec::new();
            Decimator::new(d)
                .unwrap()
                .process(&sq, |v| want.push(v.to_bits()));
            for split in [1usize, 5, 127, 128, 129, 300] {
                let mut dec = Decimator::new(d).unwrap();
                let mut got = Vec::new();
                for (k, c) in x.chunks(split).enumerate() {
                    if k % 2 == 0 {
                        dec.process_map(c, |v| v * v, |v| got.push(v.to_bits()));
                    } else {
                        let c: Vec<f32> = c.iter().map(|v| v * v).collect();
                        dec.process(&c, |v| got.push(v.to_bits()));
                    }
                }
                assert_eq!(got, want, "factor {d} split {split}");
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
