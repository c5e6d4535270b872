//! Overall indicators of the raw acceleration, accumulated in the same pass
//! as the envelope path.
//!
//! Accumulation: shifted sums. The shift `K` is the first finite sample
//! (close to the mean, so no catastrophic cancellation); per sample the
//! powers of `d = x - K` are summed in f32 (cheap on the M4F FPU), and every
//! [`FLUSH_EVERY`] counted samples the partial sums are added to f64 totals.
//! The flush points depend on the sample count only, never on block
//! boundaries, so the result is bit-identical for any split of the input.
//!
//! Definitions (documented choices):
//! * `peak` = max |x - mean| = max(max - mean, mean - min) (AC peak).
//! * `crest_factor` = peak / AC RMS.
//! * `kurtosis` = m4 / m2^2 (4th standardised moment, normal = 3).
//! * non-finite samples are skipped here (not counted in `count`) and
//!   counted in `non_finite`; the filters get the last finite sample instead
//!   (0 before the first), so a dropout neither propagates NaN nor injects a
//!   step of the DC offset that would look like an impact in the envelope.
//!   Clipped samples are counted in `clipped` and still included in the
//!   statistics.

use super::velocity::Zone;
use super::FLUSH_EVERY;

/// Snapshot of the overall indicators.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Overall {
    /// Finite samples accumulated.
    pub count: u32,
    /// DC mean (g).
    pub mean: f32,
    /// AC RMS, i.e. standard deviation with 1/n (g).
    pub rms_ac: f32,
    /// max |x - mean| (g).
    pub peak: f32,
    /// max - min (g).
    pub peak_to_peak: f32,
    /// peak / rms_ac (0 when rms_ac is 0).
    pub crest_factor: f32,
    /// 4th standardised moment (normal = 3; 0 when rms_ac is 0).
    pub kurtosis: f32,
    /// Samples at or beyond the ADC full scale.
    pub clipped: u32,
    /// Non-finite input samples (last finite sample held in the filters, skipped here).
    pub non_finite: u32,
    /// Velocity RMS in mm/s over the configured band (0 when disabled or not settled).
    pub velocity_rms_mm_s: f32,
    /// Velocity samples in the RMS (after the settling time).
    pub velocity_count: u32,
    /// ISO 20816-3 zone of `velocity_rms_mm_s`, `None` when velocity is disabled or has no samples.
    pub zone: Option<Zone>,
}

/// Streaming accumulator of [`Overall`].
#[derive(Clone, Debug, Default)]
pub struct OverallAcc {
    shift: Option<f32>,
    count: u32,
    pending: u32,
    p: [f32; 4],
    t: [f64; 4],
    min: f32,
    max: f32,
    clipped: u32,
    non_finite: u32,
    last: f32,
}

impl OverallAcc {
    /// Empty accumulator.
    pub const fn new() -> Self {
        Self {
            shift: None,
            count: 0,
            pending: 0,
            p: [0.0; 4],
            t: [0.0; 4],
            min: 0.0,
            max: 0.0,
            clipped: 0,
            non_finite: 0,
            last: 0.0,
        }
    }

    /// Clears everything.
    pub fn reset(&mut self) {
        *self = Self::new();
    }

    /// Counts one clipped sample.
    #[inline]
    pub(crate) fn add_clipped(&mut self) {
        self.clipped = self.clipped.saturating_add(1);
    }

    /// Adds one sample; returns the value for the filters (for a non-finite
    /// sample the last finite one, 0 before any).
    #[inline]
    pub fn add(&mut self, x: f32) -> f32 {
        if !x.is_finite() {
            self.non_finite = self.non_finite.saturating_add(1);
            return self.last;
        }
        self.last = x;
        let k = match self.shift {
            Some(k) => k,
            None => {
                self.shift = Some(x);
                self.min = x;
                self.max = x;
                x
            }
        };
        let d = x - k;
        let d2 = d * d;
        self.p[0] += d;
        self.p[1] += d2;
        self.p[2] += d2 * d;
        self.p[3] += d2 * d2;
        // Comparisons, not f32::min/max: those are libm calls on the M4F
        // (x is finite here, so the result is the same).
        if x < self.min {
            self.min = x;
        }
        if x > self.max {
            self.max = x;
        }
        self.count = self.count.saturating_add(1);
        self.pending += 1;
        if self.pending >= FLUSH_EVERY {
            self.flush();
        }
        x
    }

    /// Adds a block in place: the same arithmetic as [`Self::add`] sample by
    /// sample (so results do not depend on the block split), with the sums
    /// held in registers between flushes. Non-finite samples are replaced by
    /// the last finite one, as `add` returns it.
    ///
    /// ```
    /// use dsp_core::overall::OverallAcc;
    /// let (mut a, mut b) = (OverallAcc::new(), OverallAcc::new());
    /// let mut xs = [1.0f32, f32::NAN, -2.0, 0.5];
    /// let ys: Vec<f32> = xs.iter().map(|&x| b.add(x)).collect();
    /// a.add_block(&mut xs);
    /// assert_eq!(xs.to_vec(), ys);
    /// assert_eq!(a.snapshot(), b.snapshot());
    /// ```
    pub fn add_block(&mut self, xs: &mut [f32]) {
        let mut rest = xs;
        // Until the shift is known, the scalar path (it sets shift, min, max).
        while self.shift.is_none() {
            let Some((x, tail)) = rest.split_first_mut() else {
                return;
            };
            *x = self.add(*x);
            rest = tail;
        }
        let k = self.shift.unwrap_or(0.0);
        while !rest.is_empty() {
            let room = usize::try_from(FLUSH_EVERY.saturating_sub(self.pending))
                .unwrap_or(usize::MAX)
                .max(1);
            let Some((run, tail)) = rest.split_at_mut_checked(room.min(rest.len())) else {
                break;
            };
            let [mut p0, mut p1, mut p2, mut p3] = self.p;
            let (mut lo, mut hi, mut last) = (self.min, self.max, self.last);
            let mut bad = 0u32;
            for x in run.iter_mut() {
                let v = *x;
                if !v.is_finite() {
                    bad += 1;
                    *x = last;
                    continue;
                }
                last = v;
                let d = v - k;
                let d2 = d * d;
                p0 += d;
                p1 += d2;
                p2 += d2 * d;
                p3 += d2 * d2;
                if v < lo {
                    lo = v;
                }
                if v > hi {
                    hi = v;
                }
            }
            let good = u32::try_from(run.len()).unwrap_or(u32::MAX) - bad;
            self.p = [p0, p1, p2, p3];
            (self.min, self.max, self.last) = (lo, hi, last);
            self.non_finite = self.non_finite.saturating_add(bad);
            self.count = self.count.saturating_add(good);
            self.pending += good;
            if self.pending >= FLUSH_EVERY {
                self.flush();
            }
            rest = tail;
        }
    }

    fn flush(&mut self) {
        for (t, p) in self.t.iter_mut().zip(self.p.iter_mut()) {
            *t += f64::from(*p);
            *p = 0.0;
        }
        self.pending = 0;
    }

    /// Snapshot (velocity fields left at their defaults).
    pub fn snapshot(&self) -> Overall {
        let mut o = Overall {
            clipped: self.clipped,
            non_finite: self.non_finite,
            count: self.count,
            ..Overall::default()
        };
        let Some(k) = self.shift else { return o };
        let n = f64::from(self.count.max(1));
        let mut s = [0f64; 4];
        for ((s, t), p) in s.iter_mut().zip(self.t).zip(self.p) {
            *s = (t + f64::from(p)) / n;
        }
        let [s1, s2, s3, s4] = s;
        let mu = s1;
        let m2 = (s2 - mu * mu).max(0.0);
        let m4 = (s4 - 4.0 * mu * s3 + 6.0 * mu * mu * s2 - 3.0 * mu * mu * mu * mu).max(0.0);
        let mean = f64::from(k) + mu;
        let rms = libm::sqrt(m2);
        let peak = (f64::from(self.max) - mean).max(mean - f64::from(self.min));
        o.mean = crate::num::f64_to_f32(mean);
        o.rms_ac = crate::num::f64_to_f32(rms);
        o.peak = crate::num::f64_to_f32(peak);
        o.peak_to_peak = self.max - self.min;
        if m2 > 0.0 {
            o.crest_factor = crate::num::f64_to_f32(peak / rms);
            o.kurtosis = crate::num::f64_to_f32(m4 / (m2 * m2));
        }
        o
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn block_path_equals_sample_path_across_flushes() {
        // 1000 samples (several FLUSH_EVERY periods) with non-finite ones,
        // split into uneven blocks: same outputs and statistics bit for bit.
        let mut xs = [0f32; 1000];
        for (i, x) in xs.iter_mut().enumerate() {
            *x = libm::sinf(i as f32 * 0.77) * 3.0 + 0.25;
        }
        xs[0] = f32::NAN;
        xs[255] = f32::INFINITY;
        xs[256] = f32::NAN;
        xs[700] = f32::NEG_INFINITY;
        let (mut a, mut b) = (OverallAcc::new(), OverallAcc::new());
        let mut want = [0f32; 1000];
        for (w, &x) in want.iter_mut().zip(&xs) {
            *w = b.add(x);
        }
        let mut got = xs;
        let (p, q) = got.split_at_mut(300);
        let (p1, p2) = p.split_at_mut(7);
        a.add_block(p1);
        a.add_block(p2);
        a.add_block(q);
        assert!(got
            .iter()
            .zip(&want)
            .all(|(x, y)| x.to_bits() == y.to_bits()));
        assert_eq!(a.snapshot(), b.snapshot());
        assert_eq!(a.snapshot().non_finite, 4);
    }

    #[test]
    fn square_wave_moments() {
        // +-1 around 5: mean 5, rms 1, peak 1, crest 1, kurtosis 1 (two-point distribution).
        let mut a = OverallAcc::new();
        for i in 0..1000 {
            a.add(if i % 2 == 0 { 6.0 } else { 4.0 });
        }
        let o = a.snapshot();
        assert_eq!(o.count, 1000);
        assert!((o.mean - 5.0).abs() < 1e-6);
        assert!((o.rms_ac - 1.0).abs() < 1e-6);
        assert!((o.kurtosis - 1.0).abs() < 1e-5);
        assert!((o.crest_factor - 1.0).abs() < 1e-5);
        assert_eq!(o.peak_to_peak, 2.0);
    }

    #[test]
    fn non_finite_is_flagged_and_skipped() {
        let mut a = OverallAcc::new();
        assert_eq!(a.add(f32::NAN), 0.0);
        assert_eq!(a.add(f32::INFINITY), 0.0);
        a.add(1.0);
        assert_eq!(a.add(f32::NAN), 1.0);
        let o = a.snapshot();
        assert_eq!((o.count, o.non_finite), (1, 3));
        assert!(o.mean == 1.0 && o.rms_ac == 0.0 && o.kurtosis == 0.0);
    }
}
