//! The stage plan: how a factor splits into stages, and where each stage's
//! taps and history sit in the decimator's pools.

use super::design::{kaiser_order, to_f64, HalfBand};
use super::{DecimateError, BLOCK, HIST_POOL, MAX_FACTOR, MAX_STAGES, MAX_STAGE_FACTOR};
use super::{PASS_FRACTION, SLACK, STOP_DB, TAP_POOL};

/// One stage of the chain: its factor, its taps and its place in the pools.
#[derive(Clone, Copy, Debug, Default)]
pub(super) struct Stage {
    pub(super) factor: u16,
    /// `Some` for factor-2 stages (taps from the table), `None` for
    /// window-method stages (taps in the pool at `offset`).
    pub(super) halfband: Option<HalfBand>,
    pub(super) taps: usize,
    pub(super) offset: usize,
    /// Start of this stage's history region: N - 1 + `cap` samples.
    pub(super) hist: usize,
    /// Input capacity per block.
    pub(super) cap: usize,
    pub(super) phase: usize,
}

/// A validated stage plan (small; the taps are designed when it is applied).
#[derive(Clone, Copy, Debug)]
pub(crate) struct DecimatorPlan {
    pub(super) factor: u16,
    pub(super) stages: [Stage; MAX_STAGES],
    pub(super) n_stages: usize,
    pub(super) betas: [f64; MAX_STAGES],
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
    /// [`super::Decimator::delay_input_samples`]).
    pub(crate) fn delay_input_samples(&self) -> f32 {
        chain_delay(self.stages.iter().take(self.n_stages))
    }
}

/// Sum of (N-1)/2 of each stage scaled by the rate ratio to the input.
pub(super) fn chain_delay<'a>(stages: impl Iterator<Item = &'a Stage>) -> f32 {
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
