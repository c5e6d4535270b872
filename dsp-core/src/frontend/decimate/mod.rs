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

mod design;
mod kernels;
mod plan;

pub use design::{halfband_length, HB_R2, HB_R4, HB_R8};
#[cfg(test)]
use plan::stage_factors;
pub(crate) use plan::DecimatorPlan;

use design::kaiser_lowpass;
use kernels::run_stage;
use plan::{chain_delay, Stage};

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
