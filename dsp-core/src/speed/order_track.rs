//! Computed order tracking: resampling the decimated envelope to a constant
//! number of samples per shaft revolution.
//!
//! * The shaft angle is modelled by the inverse curve `t(θ)`: a monotone
//!   piecewise cubic Hermite (PCHIP, Fritsch–Carlson) through the revolution
//!   marks `(k, t_k)`. Node slopes are the harmonic mean of the neighbouring
//!   revolution periods (one-sided three-point formula at segment ends), so
//!   speed varies smoothly inside a revolution and `θ(t)` is C¹ and monotone.
//!   Working on `t(θ)` gives each output sample time directly, without root
//!   finding.
//! * Envelope values between decimated samples come from a 4-tap
//!   Catmull-Rom cubic (Keys kernel, a = −0.5).
//! * Streaming: only a ring of `RING` recent decimated samples is kept.
//!   Revolution `k` is emitted, whole (`samples_per_rev` values), once mark
//!   `k + 2` is known (or the segment/record ended) and its samples arrived.
//!   The angle-domain buffer for the FFT belongs to the caller's sink.
//!
//! Decimated sample `j` is taken to describe the envelope at input-sample
//! time `j · decimation − delay_input_samples` (the decimator's group delay,
//! which may include any offset of its first output).

use core::fmt;

use crate::speed::tach::RevMark;

/// Longest queue of revolutions waiting for their samples.
const JOB_CAP: usize = 8;

/// Ring length (decimated samples) the tracker needs for speeds down to
/// `min_rpm`: four revolutions and the kernel support. Emission of revolution
/// k waits for mark k+2; at a segment start the tach tracker holds three
/// intervals before its first mark (see [`crate::speed::tach`]), so the first
/// revolution's samples must survive about four revolutions.
pub fn ring_needed(decimated_rate_hz: f32, min_rpm: f32) -> usize {
    let rev = decimated_rate_hz * 60.0 / min_rpm;
    crate::num::f32_to_usize_sat(libm::ceilf(4.0 * rev)).saturating_add(16)
}

/// Interpolation between decimated envelope samples.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Interpolation {
    /// 4-tap Catmull-Rom cubic (the default).
    #[default]
    CatmullRom,
    /// 2-tap linear; cheaper and less accurate, kept as a baseline.
    Linear,
}

/// Configuration of the order tracker.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct OrderTrackConfig {
    /// Output samples per revolution, a power of two in `8..=4096`.
    pub samples_per_rev: u16,
    /// Decimation factor from the input rate to the envelope rate.
    pub decimation: u16,
    /// Rate of the decimated envelope fed to [`OrderTracker::push_sample`], Hz.
    pub input_rate_hz: f32,
    /// Group delay of the envelope chain, input samples (see module docs).
    pub delay_input_samples: f32,
    /// Slowest speed to be tracked; sizes the ring check in [`OrderTracker::new`].
    pub min_rpm: f32,
    /// Interpolation kernel.
    pub interpolation: Interpolation,
}

impl Default for OrderTrackConfig {
    fn default() -> Self {
        Self {
            samples_per_rev: 256,
            decimation: 8,
            input_rate_hz: 6_400.0,
            delay_input_samples: 0.0,
            min_rpm: 600.0,
            interpolation: Interpolation::CatmullRom,
        }
    }
}

/// Why an [`OrderTrackConfig`] was rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum OrderTrackError {
    /// `samples_per_rev` is not a power of two in 8..=4096.
    BadSamplesPerRev,
    /// `decimation` is zero.
    ZeroDecimation,
    /// Rate, delay or speed is not finite (rate and speed must be positive).
    BadNumber,
    /// `RING` is smaller than [`ring_needed`] for the configured `min_rpm`.
    RingTooSmall {
        /// Samples needed.
        needed: u32,
    },
}

impl fmt::Display for OrderTrackError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::BadSamplesPerRev => {
                f.write_str("samples per revolution must be a power of two in 8..=4096")
            }
            Self::ZeroDecimation => f.write_str("decimation is zero"),
            Self::BadNumber => {
                f.write_str("rate, delay and speed must be finite (rate and speed positive)")
            }
            Self::RingTooSmall { needed } => write!(
                f,
                "ring too small for the speed range: {needed} samples needed"
            ),
        }
    }
}

impl core::error::Error for OrderTrackError {}

/// State flags of the order tracker (a `u8` with named bits).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct OrderFlags(pub u8);

impl OrderFlags {
    /// A revolution needed samples that had left the ring; it was skipped.
    pub const RING_OVERFLOW: Self = Self(1 << 0);
    /// A revolution started before the first decimated sample; it was skipped.
    pub const BEFORE_START: Self = Self(1 << 1);
    /// Marks ran more than the job queue ahead of the samples; a revolution was skipped.
    pub const JOB_OVERFLOW: Self = Self(1 << 2);
    /// A non-finite envelope sample was replaced by 0.
    pub const NON_FINITE_INPUT: Self = Self(1 << 3);
    /// A mark was out of order or not finite and was ignored.
    pub const BAD_MARK: Self = Self(1 << 4);
    /// The record ended before a revolution's samples arrived; it was skipped.
    pub const INCOMPLETE_END: Self = Self(1 << 5);

    /// True if every bit of `other` is set.
    pub const fn contains(self, other: Self) -> bool {
        self.0 & other.0 == other.0
    }
    /// Sets the bits of `other`.
    pub fn insert(&mut self, other: Self) {
        self.0 |= other.0;
    }
    /// True if no flag is set.
    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }
}

/// One revolution ready for resampling: `t(s) = t0 + h(s)`, `s ∈ [0, 1)`.
#[derive(Clone, Copy, Debug)]
struct RevJob {
    t0: f64,
    /// Period (t_{k+1} − t_k), input samples.
    period: f32,
    /// dt/dθ at both ends, input samples per revolution.
    d0: f32,
    d1: f32,
}

/// Streaming angle-domain resampler with a ring of `RING` decimated samples.
///
/// ```
/// use dsp_core::speed::order_track::{OrderTrackConfig, OrderTracker};
/// use dsp_core::speed::tach::RevMark;
/// let mut cfg = OrderTrackConfig::default();
/// cfg.samples_per_rev = 16;
/// cfg.decimation = 1;
/// cfg.input_rate_hz = 1000.0;
/// cfg.min_rpm = 600.0; // 100 samples per revolution at most
/// let mut ot = OrderTracker::<512>::new(&cfg).unwrap();
/// let mut out = 0usize;
/// for j in 0..1000u32 {
///     ot.push_sample(1.0, |_| out += 1);
///     if j % 100 == 50 {
///         let m = RevMark { time_samples: f64::from(j), index: j / 100, segment_start: j == 50, bridged: false };
///         ot.push_mark(m, |_| out += 1);
///     }
/// }
/// ot.finish(|_| out += 1);
/// assert_eq!(out, 9 * 16); // 10 marks bound 9 whole revolutions
/// ```
#[derive(Clone, Debug)]
pub struct OrderTracker<const RING: usize> {
    s: u16,
    inv_s: f32,
    decim: f64,
    delay: f64,
    interp: Interpolation,
    ring: [f32; RING],
    /// Decimated samples pushed so far.
    pushed: u64,
    /// Last up to 4 marks of the current segment (oldest first), and their count.
    marks: [f64; 4],
    n_marks: usize,
    jobs: heapless::Deque<RevJob, JOB_CAP>,
    revs_emitted: u32,
    revs_skipped: u32,
    flags: OrderFlags,
}

/// A validated tracker configuration (small), applied in place by
/// [`OrderTracker::reconfigure`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct OrderTrackPlan {
    s: u16,
    decim: f64,
    delay: f64,
    interp: Interpolation,
}

impl OrderTrackPlan {
    /// Validates `cfg` for a ring of `ring` samples.
    pub(crate) fn new(cfg: &OrderTrackConfig, ring: usize) -> Result<Self, OrderTrackError> {
        let s = cfg.samples_per_rev;
        if !(8..=4096).contains(&s) || !s.is_power_of_two() {
            return Err(OrderTrackError::BadSamplesPerRev);
        }
        if cfg.decimation == 0 {
            return Err(OrderTrackError::ZeroDecimation);
        }
        let pos = |x: f32| x.is_finite() && x > 0.0;
        if !(pos(cfg.input_rate_hz) && pos(cfg.min_rpm) && cfg.delay_input_samples.is_finite()) {
            return Err(OrderTrackError::BadNumber);
        }
        let needed = ring_needed(cfg.input_rate_hz, cfg.min_rpm);
        if ring < needed {
            return Err(OrderTrackError::RingTooSmall {
                needed: u32::try_from(needed).unwrap_or(u32::MAX),
            });
        }
        Ok(Self {
            s,
            decim: f64::from(cfg.decimation),
            delay: f64::from(cfg.delay_input_samples),
            interp: cfg.interpolation,
        })
    }
}

impl<const RING: usize> OrderTracker<RING> {
    /// Validates the configuration (including that `RING` fits `min_rpm`).
    pub fn new(cfg: &OrderTrackConfig) -> Result<Self, OrderTrackError> {
        let plan = OrderTrackPlan::new(cfg, RING)?;
        let mut t = Self::unconfigured();
        t.apply(&plan);
        Ok(t)
    }

    /// Validates `cfg` and restarts this tracker with it in place (the ring
    /// is cleared, not rebuilt); on error `self` is left unchanged.
    pub fn reconfigure(&mut self, cfg: &OrderTrackConfig) -> Result<(), OrderTrackError> {
        let plan = OrderTrackPlan::new(cfg, RING)?;
        self.apply(&plan);
        Ok(())
    }

    /// A tracker for constant context, configured later with
    /// [`Self::reconfigure`].
    pub(crate) const fn unconfigured() -> Self {
        Self {
            s: 64,
            inv_s: 1.0 / 64.0,
            decim: 1.0,
            delay: 0.0,
            interp: Interpolation::CatmullRom,
            ring: [0.0; RING],
            pushed: 0,
            marks: [0.0; 4],
            n_marks: 0,
            jobs: heapless::Deque::new(),
            revs_emitted: 0,
            revs_skipped: 0,
            flags: OrderFlags(0),
        }
    }

    /// Starts over with a validated configuration, in place.
    pub(crate) fn apply(&mut self, plan: &OrderTrackPlan) {
        self.s = plan.s;
        self.inv_s = 1.0 / f32::from(plan.s);
        self.decim = plan.decim;
        self.delay = plan.delay;
        self.interp = plan.interp;
        self.ring.fill(0.0);
        self.pushed = 0;
        self.marks = [0.0; 4];
        self.n_marks = 0;
        self.jobs.clear();
        self.revs_emitted = 0;
        self.revs_skipped = 0;
        self.flags = OrderFlags::default();
    }

    /// Whole revolutions emitted so far.
    pub fn revs_emitted(&self) -> u32 {
        self.revs_emitted
    }

    /// Revolutions skipped (see [`OrderFlags`]).
    pub fn revs_skipped(&self) -> u32 {
        self.revs_skipped
    }

    /// Flags raised so far.
    pub fn flags(&self) -> OrderFlags {
        self.flags
    }

    /// Pushes one decimated envelope sample; emits revolutions that became complete.
    pub fn push_sample(&mut self, x: f32, mut out: impl FnMut(f32)) {
        let x = if x.is_finite() {
            x
        } else {
            self.flags.insert(OrderFlags::NON_FINITE_INPUT);
            0.0
        };
        let slot = usize::try_from(self.pushed % (RING as u64)).unwrap_or(0);
        if let Some(r) = self.ring.get_mut(slot) {
            *r = x;
        }
        self.pushed = self.pushed.saturating_add(1);
        self.drain(false, &mut out);
    }

    /// Pushes one revolution mark (from [`crate::speed::tach::TachTracker`]).
    pub fn push_mark(&mut self, m: RevMark, mut out: impl FnMut(f32)) {
        let t = m.time_samples;
        let last = self
            .n_marks
            .checked_sub(1)
            .and_then(|i| self.marks.get(i))
            .copied();
        if !t.is_finite() || (!m.segment_start && last.is_some_and(|l| t <= l)) {
            self.flags.insert(OrderFlags::BAD_MARK);
            return;
        }
        if m.segment_start || last.is_some_and(|l| t <= l) {
            self.end_segment();
        }
        if self.n_marks == 4 {
            self.marks.rotate_left(1);
            self.n_marks = 3;
        }
        if let Some(slot) = self.marks.get_mut(self.n_marks) {
            *slot = t;
        }
        self.n_marks += 1;
        self.on_new_mark();
        self.drain(false, &mut out);
    }

    /// Ends the record: finishes the last segment and emits what the samples allow.
    pub fn finish(&mut self, mut out: impl FnMut(f32)) {
        self.end_segment();
        self.drain(true, &mut out);
    }

    /// Creates the job that became defined with the newest mark.
    fn on_new_mark(&mut self) {
        let m = self.marks;
        match self.n_marks {
            // Marks 0,1,2 of the segment: first revolution, one-sided start slope.
            3 => {
                let (p0, p1) = (m[1] - m[0], m[2] - m[1]);
                self.add_job(m[0], p0, end_slope(p0, p1), pchip_slope(p0, p1));
            }
            4 => {
                let (p0, p1, p2) = (m[1] - m[0], m[2] - m[1], m[3] - m[2]);
                self.add_job(m[1], p1, pchip_slope(p0, p1), pchip_slope(p1, p2));
            }
            _ => {}
        }
    }

    /// Closes the current segment: the last revolution gets a one-sided end slope.
    fn end_segment(&mut self) {
        let m = self.marks;
        match self.n_marks {
            2 => {
                let p = m[1] - m[0];
                self.add_job(m[0], p, p, p);
            }
            n @ (3 | 4) => {
                let (a, b, c) = if n == 3 {
                    (m[0], m[1], m[2])
                } else {
                    (m[1], m[2], m[3])
                };
                let (p0, p1) = (b - a, c - b);
                self.add_job(b, p1, pchip_slope(p0, p1), end_slope(p1, p0));
            }
            _ => {}
        }
        self.n_marks = 0;
    }

    fn add_job(&mut self, t0: f64, period: f64, d0: f64, d1: f64) {
        let job = RevJob {
            t0,
            period: crate::num::f64_to_f32(period),
            d0: crate::num::f64_to_f32(d0),
            d1: crate::num::f64_to_f32(d1),
        };
        if self.jobs.push_back(job).is_err() {
            self.flags.insert(OrderFlags::JOB_OVERFLOW);
            self.revs_skipped = self.revs_skipped.saturating_add(1);
        }
    }

    /// Fractional decimated index of input time `t`.
    fn index_of(&self, t: f64) -> f64 {
        (t + self.delay) / self.decim
    }

    /// Emits queued revolutions whose samples are all present.
    fn drain(&mut self, finishing: bool, out: &mut impl FnMut(f32)) {
        while let Some(job) = self.jobs.front().copied() {
            let u0 = self.index_of(job.t0);
            let u1 = self.index_of(job.t0 + f64::from(job.period));
            let first = libm::floor(u0) - 1.0;
            let last = libm::floor(u1) + 2.0;
            let oldest = self.pushed.saturating_sub(RING as u64) as f64;
            let skip = if first < 0.0 {
                Some(OrderFlags::BEFORE_START)
            } else if first < oldest {
                Some(OrderFlags::RING_OVERFLOW)
            } else if last >= self.pushed as f64 {
                if !finishing {
                    return;
                }
                Some(OrderFlags::INCOMPLETE_END)
            } else {
                None
            };
            self.jobs.pop_front();
            if let Some(f) = skip {
                self.flags.insert(f);
                self.revs_skipped = self.revs_skipped.saturating_add(1);
                continue;
            }
            self.emit(&job, u0, out);
            self.revs_emitted = self.revs_emitted.saturating_add(1);
        }
    }

    fn emit(&self, job: &RevJob, u0: f64, out: &mut impl FnMut(f32)) {
        // Integer base in f64 once per revolution, per-point work in f32.
        let base = libm::floor(u0);
        let frac0 = crate::num::f64_to_f32(u0 - base);
        let jb = crate::num::f64_to_i64_sat(base);
        let inv_d = crate::num::f64_to_f32(1.0 / self.decim);
        for i in 0..self.s {
            let s = f32::from(i) * self.inv_s;
            let off = hermite_offset(s, job.period, job.d0, job.d1) * inv_d + frac0;
            let k = libm::floorf(off);
            let mu = off - k;
            let j = jb.saturating_add(i64::from(crate::num::f32_to_i32_sat(k)));
            out(match self.interp {
                Interpolation::CatmullRom => self.catmull_rom(j, mu),
                Interpolation::Linear => {
                    let y1 = self.at(j);
                    y1 + mu * (self.at(j.saturating_add(1)) - y1)
                }
            });
        }
    }

    /// Sample `j` of the decimated stream (0 if outside the ring; `drain` checked the range).
    fn at(&self, j: i64) -> f32 {
        let Ok(j) = u64::try_from(j) else {
            return 0.0;
        };
        let slot = usize::try_from(j % (RING as u64)).unwrap_or(0);
        self.ring.get(slot).copied().unwrap_or(0.0)
    }

    /// Catmull-Rom cubic between samples `j` and `j + 1` at fraction `mu`.
    fn catmull_rom(&self, j: i64, mu: f32) -> f32 {
        let (y0, y1, y2, y3) = (
            self.at(j.saturating_sub(1)),
            self.at(j),
            self.at(j.saturating_add(1)),
            self.at(j.saturating_add(2)),
        );
        let a = -0.5 * y0 + 1.5 * y1 - 1.5 * y2 + 0.5 * y3;
        let b = y0 - 2.5 * y1 + 2.0 * y2 - 0.5 * y3;
        let c = -0.5 * y0 + 0.5 * y2;
        ((a * mu + b) * mu + c) * mu + y1
    }
}

/// Cubic Hermite offset on a unit interval: `h(0) = 0`, `h(1) = period`,
/// `h'(0) = d0`, `h'(1) = d1`.
fn hermite_offset(s: f32, period: f32, d0: f32, d1: f32) -> f32 {
    let s2 = s * s;
    let s3 = s2 * s;
    (s3 - 2.0 * s2 + s) * d0 + (-2.0 * s3 + 3.0 * s2) * period + (s3 - s2) * d1
}

/// Fritsch–Carlson slope at an interior node of unit spacing: harmonic mean of
/// the neighbouring periods (both positive here).
fn pchip_slope(p0: f64, p1: f64) -> f64 {
    if p0 > 0.0 && p1 > 0.0 {
        2.0 * p0 * p1 / (p0 + p1)
    } else {
        0.0
    }
}

/// One-sided three-point end slope (PCHIP end rule) for the end next to
/// period `p_near`, `p_far` being the following one; kept within `0..=3·p_near`.
fn end_slope(p_near: f64, p_far: f64) -> f64 {
    let d = 0.5 * (3.0 * p_near - p_far);
    // Not `clamp`: it panics when the upper bound is negative or NaN (a
    // corrupt period); `max`/`min` return the non-NaN operand instead.
    d.max(0.0).min((3.0 * p_near).max(0.0))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_reconfigured_tracker_equals_a_new_one() {
        extern crate std;
        use std::format;
        let mut cfg = OrderTrackConfig {
            samples_per_rev: 32,
            decimation: 8,
            input_rate_hz: 6400.0,
            min_rpm: 1200.0,
            ..OrderTrackConfig::default()
        };
        let mut t = OrderTracker::<2048>::new(&cfg).unwrap();
        for j in 0..3000u32 {
            if j % 256 == 0 {
                let mark = crate::speed::tach::RevMark {
                    time_samples: f64::from(j) * 8.0,
                    index: j / 256,
                    segment_start: j == 0,
                    bridged: false,
                };
                t.push_mark(mark, |_| {});
            }
            t.push_sample(f32::from(u16::try_from(j % 7).unwrap()), |_| {});
        }
        cfg.samples_per_rev = 64;
        t.reconfigure(&cfg).unwrap();
        assert_eq!(
            format!("{t:?}"),
            format!("{:?}", OrderTracker::<2048>::new(&cfg).unwrap())
        );
    }

    #[test]
    fn hermite_ends() {
        assert_eq!(hermite_offset(0.0, 100.0, 90.0, 110.0), 0.0);
        assert!((hermite_offset(1.0, 100.0, 90.0, 110.0) - 100.0).abs() < 1e-4);
    }

    #[test]
    fn end_slope_linear_speed() {
        // Periods of a linearly changing period p(θ) = 100 + 10θ: slope at 0 is 100.
        // Integrated: t(1)-t(0) = 105, t(2)-t(1) = 115; 0.5*(3*105-115) = 100.
        assert!((end_slope(105.0, 115.0) - 100.0).abs() < 1e-9);
    }
}
