//! The streaming speed tracker: pulse validation (extra, missing, stop),
//! segment bookkeeping and the once-per-revolution marks (see the stage
//! docs in [`super`]).

use super::{RevMark, SpeedSource, SpeedSummary, TachConfigError, TachFlags, SERIES_CAP};

/// Interval ratio below which a pulse is taken as an extra (double) pulse.
const EXTRA_RATIO: f64 = 0.5;
/// Largest number of consecutive missing pulses that are bridged.
const MAX_BRIDGE: f64 = 3.0;
/// Interval ratio above which the gap counts as a stop (no bridging).
const STOP_RATIO: f64 = MAX_BRIDGE + 0.5;
/// Edges collected at a segment start before validation begins (3 intervals, median).
const BOOT: usize = 4;
/// Largest number of virtual marks one `advance_to` call emits (constant mode).
const MAX_JUMP_REVS: f64 = 65_536.0;
/// Intervals averaged for the expected interval (capped for large `pulses_per_rev`).
const AVG_CAP: usize = 16;

#[derive(Clone, Copy, Debug)]
struct Validated {
    /// Input samples per capture tick.
    samples_per_tick: f64,
    tick0: u32,
    pulses_per_rev: u32,
    fs: f64,
    min_rpm: f32,
    max_rpm: f32,
    max_change_pct: f32,
    min_good_revs: u32,
    /// Longest plausible pulse interval (at `min_rpm`), input samples.
    max_pulse_interval: f64,
    /// Shortest plausible pulse interval (at `max_rpm`), input samples.
    min_pulse_interval: f64,
}

#[derive(Clone, Copy, Debug)]
enum Mode {
    Tach(Validated),
    Constant { period: f64, rpm: f32 },
}

/// Streaming speed tracker: edges in, validated once-per-rev marks out.
///
/// ```
/// use dsp_core::speed::tach::{SpeedSource, TachConfig, TachTracker};
/// let mut cfg = TachConfig::default();
/// cfg.min_good_revs = 3;
/// let mut t = TachTracker::new(&SpeedSource::Tach(cfg)).unwrap();
/// let mut marks = 0;
/// // 1500 rpm at 51.2 kHz = 2048 samples per rev = 40_000 ticks at 1 MHz.
/// for k in 0..10u32 {
///     t.push_edge(k * 40_000, |_| marks += 1);
/// }
/// let s = t.finish(|_| marks += 1);
/// assert_eq!(marks, 10);
/// assert!((s.mean_rpm - 1500.0).abs() < 0.01);
/// assert!(!s.flags.is_fault());
/// ```
#[derive(Clone, Debug)]
pub struct TachTracker {
    mode: Mode,
    flags: TachFlags,
    // --- edge unwrapping
    /// Unwrapped tick (offset by 2^32) of the latest known time.
    ref_tick: u64,
    /// Latest position given to `advance_to`, input samples.
    now: f64,
    edges_seen: u32,
    // --- segment state
    /// Segment start: edges are collected in `boot` first.
    booting: bool,
    boot: [f64; BOOT],
    n_boot: usize,
    /// Last committed pulse time (None at segment start).
    accepted: Option<f64>,
    /// Candidate pulse awaiting look-ahead.
    pending: Option<f64>,
    intervals: [f64; AVG_CAP],
    n_intervals: usize,
    interval_pos: usize,
    pulses_in_segment: u32,
    new_segment: bool,
    rev_dirty: bool,
    stop_flagged_at: Option<f64>,
    // --- marks and stats
    last_mark: Option<f64>,
    mark_index: u32,
    revs: u32,
    good_revs: u32,
    missing: u32,
    extra: u32,
    sum_rpm: f64,
    min_rpm: f32,
    max_rpm: f32,
    series: heapless::Vec<f32, SERIES_CAP>,
    /// Constant mode: next virtual mark index.
    next_virtual: u64,
}

/// A validated speed source (small), applied in place by
/// [`TachTracker::reconfigure`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct TachPlan(Mode);

impl TachPlan {
    /// Validates the source.
    pub(crate) fn new(src: &SpeedSource) -> Result<Self, TachConfigError> {
        let mode = match *src {
            SpeedSource::Tach(c) => {
                if c.tick_hz == 0 {
                    return Err(TachConfigError::ZeroTickRate);
                }
                if !(c.sample_rate_hz.is_finite() && c.sample_rate_hz > 0.0) {
                    return Err(TachConfigError::BadSampleRate);
                }
                if c.pulses_per_rev == 0 {
                    return Err(TachConfigError::ZeroPulsesPerRev);
                }
                if !(c.min_rpm.is_finite()
                    && c.max_rpm.is_finite()
                    && c.min_rpm > 0.0
                    && c.min_rpm < c.max_rpm)
                {
                    return Err(TachConfigError::BadSpeedRange);
                }
                if !(c.max_speed_change_pct.is_finite() && c.max_speed_change_pct > 0.0) {
                    return Err(TachConfigError::BadSpeedChangeLimit);
                }
                let fs = f64::from(c.sample_rate_hz);
                let ppr = u32::from(c.pulses_per_rev);
                let per_rev = |rpm: f32| fs * 60.0 / f64::from(rpm) / f64::from(ppr);
                Mode::Tach(Validated {
                    samples_per_tick: fs / f64::from(c.tick_hz),
                    tick0: c.tick_at_sample0,
                    pulses_per_rev: ppr,
                    fs,
                    min_rpm: c.min_rpm,
                    max_rpm: c.max_rpm,
                    max_change_pct: c.max_speed_change_pct,
                    min_good_revs: u32::from(c.min_good_revs),
                    max_pulse_interval: per_rev(c.min_rpm),
                    min_pulse_interval: per_rev(c.max_rpm),
                })
            }
            SpeedSource::Constant {
                rpm,
                sample_rate_hz,
            } => {
                if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
                    return Err(TachConfigError::BadSampleRate);
                }
                // At least 2 input samples per revolution.
                if !(rpm.is_finite() && rpm > 0.0 && rpm <= 30.0 * sample_rate_hz) {
                    return Err(TachConfigError::BadSpeedRange);
                }
                Mode::Constant {
                    period: f64::from(sample_rate_hz) * 60.0 / f64::from(rpm),
                    rpm,
                }
            }
        };
        Ok(Self(mode))
    }
}

impl TachTracker {
    /// Validates the source and creates a tracker.
    pub fn new(src: &SpeedSource) -> Result<Self, TachConfigError> {
        let plan = TachPlan::new(src)?;
        let mut t = Self::unconfigured();
        t.apply(plan);
        Ok(t)
    }

    /// Validates the source and restarts this tracker with it in place
    /// (the speed series is cleared, not rebuilt); on error `self` is left
    /// unchanged.
    pub fn reconfigure(&mut self, src: &SpeedSource) -> Result<(), TachConfigError> {
        let plan = TachPlan::new(src)?;
        self.apply(plan);
        Ok(())
    }

    /// A tracker for constant context (a placeholder constant speed),
    /// configured later with [`Self::reconfigure`].
    pub(crate) const fn unconfigured() -> Self {
        Self {
            mode: Mode::Constant {
                period: 1.0,
                rpm: 1.0,
            },
            flags: TachFlags::empty(),
            ref_tick: 0,
            now: 0.0,
            edges_seen: 0,
            booting: true,
            boot: [0.0; BOOT],
            n_boot: 0,
            accepted: None,
            pending: None,
            intervals: [0.0; AVG_CAP],
            n_intervals: 0,
            interval_pos: 0,
            pulses_in_segment: 0,
            new_segment: true,
            rev_dirty: false,
            stop_flagged_at: None,
            last_mark: None,
            mark_index: 0,
            revs: 0,
            good_revs: 0,
            missing: 0,
            extra: 0,
            sum_rpm: 0.0,
            min_rpm: f32::INFINITY,
            max_rpm: 0.0,
            series: heapless::Vec::new(),
            next_virtual: 0,
        }
    }

    /// Starts over with a validated source: every field as in
    /// [`Self::unconfigured`] (the series cleared in place) but the mode and
    /// the tick reference. A test checks that a reused tracker equals a new one.
    pub(crate) fn apply(&mut self, plan: TachPlan) {
        let mode = plan.0;
        self.mode = mode;
        self.flags = TachFlags::empty();
        self.ref_tick = match mode {
            Mode::Tach(v) => (1u64 << 32) + u64::from(v.tick0),
            Mode::Constant { .. } => 0,
        };
        self.now = 0.0;
        self.edges_seen = 0;
        self.booting = true;
        self.boot = [0.0; BOOT];
        self.n_boot = 0;
        self.accepted = None;
        self.pending = None;
        self.intervals = [0.0; AVG_CAP];
        self.n_intervals = 0;
        self.interval_pos = 0;
        self.pulses_in_segment = 0;
        self.new_segment = true;
        self.rev_dirty = false;
        self.stop_flagged_at = None;
        self.last_mark = None;
        self.mark_index = 0;
        self.revs = 0;
        self.good_revs = 0;
        self.missing = 0;
        self.extra = 0;
        self.sum_rpm = 0.0;
        self.min_rpm = f32::INFINITY;
        self.max_rpm = 0.0;
        self.series.clear();
        self.next_virtual = 0;
    }

    /// Flags raised so far.
    pub fn flags(&self) -> TachFlags {
        self.flags
    }

    /// Per-revolution speeds in rpm (the first [`SERIES_CAP`] revolutions).
    pub fn speed_series(&self) -> &[f32] {
        &self.series
    }

    /// Converts a captured tick to input-sample time, unwrapping the `u32`
    /// counter against the latest known time. Returns `None` in constant-speed mode.
    pub fn tick_to_samples(&mut self, tick: u32) -> Option<f64> {
        let Mode::Tach(v) = self.mode else {
            return None;
        };
        // Nearest interpretation to the reference: signed 32-bit difference
        // (the `as i32` reinterprets the wrapped difference on purpose).
        let d = i64::from(tick.wrapping_sub(crate::num::u64_low_u32(self.ref_tick)) as i32);
        let t64 = self.ref_tick.saturating_add_signed(d);
        self.ref_tick = self.ref_tick.max(t64);
        Some((t64 as f64 - self.tick_origin(&v)) * v.samples_per_tick)
    }

    /// Unwrapped tick of input sample 0 (offset by 2^32 so that edges shortly
    /// before sample 0 stay representable).
    fn tick_origin(&self, v: &Validated) -> f64 {
        (1u64 << 32) as f64 + f64::from(v.tick0)
    }

    /// Pushes one captured edge (capture timer ticks). Marks are emitted
    /// through `marks` as soon as they are validated (one pulse of look-ahead).
    pub fn push_edge(&mut self, tick: u32, marks: impl FnMut(RevMark)) {
        if let Some(t) = self.tick_to_samples(tick) {
            self.push_edge_time(t, marks);
        }
    }

    /// Pushes one edge given directly in input-sample time (e.g. from
    /// [`EdgeDetector`]). Ignored in constant-speed mode.
    pub fn push_edge_time(&mut self, t: f64, mut marks: impl FnMut(RevMark)) {
        let Mode::Tach(v) = self.mode else {
            return;
        };
        self.edges_seen = self.edges_seen.saturating_add(1);
        let latest = self.latest_edge();
        if !t.is_finite() || latest.is_some_and(|l| t <= l) {
            self.flags.insert(TachFlags::OUT_OF_ORDER);
            return;
        }
        if self.now < t {
            self.now = t;
            self.update_ref_from_now(&v);
        }
        self.process_edge(t, &v, &mut marks);
    }

    /// Latest edge held or accepted in the current segment.
    fn latest_edge(&self) -> Option<f64> {
        if self.booting {
            self.n_boot
                .checked_sub(1)
                .and_then(|i| self.boot.get(i))
                .copied()
        } else {
            self.pending.or(self.accepted)
        }
    }

    fn process_edge(&mut self, t: f64, v: &Validated, marks: &mut impl FnMut(RevMark)) {
        if self.booting {
            // Segment start: collect BOOT edges, then judge them against the
            // median interval so that one glitch cannot set the expectation.
            if let Some(l) = self.latest_edge() {
                if t - l < EXTRA_RATIO * v.min_pulse_interval {
                    self.note_extra();
                    return;
                }
            }
            if let Some(slot) = self.boot.get_mut(self.n_boot) {
                *slot = t;
                self.n_boot += 1;
            }
            if self.n_boot >= BOOT {
                self.end_boot(v, marks);
            }
            return;
        }
        let Some(p) = self.pending else {
            // The held pulse was already committed by `advance_to`: an edge
            // too close after it can only be dropped.
            if let (Some(a), Some(e)) = (self.accepted, self.expected()) {
                if t - a < EXTRA_RATIO * e {
                    self.note_extra();
                    return;
                }
            }
            self.pending = Some(t);
            return;
        };
        let expected = self.expected().unwrap_or_else(|| {
            // No expectation yet: judge against the configured speed range.
            libm::sqrt(v.min_pulse_interval * v.max_pulse_interval)
        });
        let dt = t - p;
        let close = match self.expected() {
            Some(e) => dt < EXTRA_RATIO * e,
            None => dt < EXTRA_RATIO * v.min_pulse_interval,
        };
        if close {
            // Two close edges: keep the one nearer an expected position.
            self.note_extra();
            if let Some(a) = self.accepted {
                let miss = |x: f64| {
                    let r = (x - a) / expected;
                    (r - libm::round(r)).abs()
                };
                if miss(t) < miss(p) {
                    self.pending = Some(t);
                }
            }
            return;
        }
        self.pending = None;
        self.commit_with_restart(p, v, marks);
        if self.booting {
            self.process_edge(t, v, marks);
        } else {
            self.pending = Some(t);
        }
    }

    /// Seeds the expected interval with the median of the boot intervals and
    /// replays the boot edges through the normal validation.
    fn end_boot(&mut self, v: &Validated, marks: &mut impl FnMut(RevMark)) {
        let n = self.n_boot;
        let edges = self.boot;
        self.n_boot = 0;
        self.booting = false;
        let mut iv = [0.0f64; BOOT];
        let mut k = 0;
        for (slot, (a, b)) in iv.iter_mut().zip(
            edges
                .iter()
                .take(n)
                .zip(edges.iter().skip(1).take(n.saturating_sub(1))),
        ) {
            *slot = b - a;
            k += 1;
        }
        let iv = iv.get_mut(..k).unwrap_or_default();
        iv.sort_unstable_by(f64::total_cmp);
        let e0 = match k {
            0 => None,
            2 => Some(0.5 * iv.iter().sum::<f64>()),
            _ => iv.get(k / 2).copied(),
        };
        self.n_intervals = 0;
        self.interval_pos = 0;
        if let Some(e) = e0.filter(|&e| e <= STOP_RATIO * v.max_pulse_interval) {
            self.record_interval(e, v);
        }
        for &e in edges.iter().take(n) {
            self.process_edge(e, v, marks);
        }
    }

    /// Tells the tracker that all input samples before `input_samples` have
    /// been taken. Constant mode emits the virtual marks up to there; tach
    /// mode commits the held pulse once no double pulse can follow and flags a
    /// stop if no pulse came for too long.
    ///
    /// Push the edges of a block before calling `advance_to` for its end.
    pub fn advance_to(&mut self, input_samples: u64, mut marks: impl FnMut(RevMark)) {
        let now = input_samples as f64;
        match self.mode {
            Mode::Constant { period, .. } => {
                let target = now / period;
                if target - self.next_virtual as f64 > MAX_JUMP_REVS {
                    // A jump this large is a caller error; skip instead of looping for ages.
                    self.flags.insert(TachFlags::TIME_JUMP);
                    self.next_virtual =
                        crate::num::f64_to_u64_sat(libm::ceil(target - MAX_JUMP_REVS));
                    self.new_segment = true;
                    self.last_mark = None;
                }
                loop {
                    let t = self.next_virtual as f64 * period;
                    if t >= now {
                        break;
                    }
                    self.emit_mark(t, false, &mut marks);
                    self.next_virtual = self.next_virtual.saturating_add(1);
                }
                self.now = self.now.max(now);
            }
            Mode::Tach(v) => {
                if now > self.now {
                    self.now = now;
                    self.update_ref_from_now(&v);
                }
                if let (Some(p), Some(e)) = (self.pending, self.expected()) {
                    if now - p > EXTRA_RATIO * e && self.accepted.is_some() {
                        self.pending = None;
                        self.commit_with_restart(p, &v, &mut marks);
                    }
                }
                self.check_stop(&v);
            }
        }
    }

    /// Ends the record: commits the held pulse, computes the stats and flags.
    pub fn finish(&mut self, mut marks: impl FnMut(RevMark)) -> SpeedSummary {
        let mut constant = false;
        match self.mode {
            Mode::Tach(v) => {
                // Flush the boot buffer and the held pulse (bounded: each
                // round consumes edges).
                for _ in 0..2 * BOOT {
                    if self.booting && self.n_boot > 0 {
                        self.end_boot(&v, &mut marks);
                    }
                    if let Some(p) = self.pending.take() {
                        self.commit_with_restart(p, &v, &mut marks);
                    }
                    if !(self.booting && self.n_boot > 0) {
                        break;
                    }
                }
                self.check_stop(&v);
                if self.edges_seen == 0 {
                    self.flags.insert(TachFlags::NO_PULSES);
                }
                if self.good_revs < v.min_good_revs {
                    self.flags.insert(TachFlags::TOO_FEW_REVS);
                }
                if self.revs > 0 {
                    let mean = self.sum_rpm / f64::from(self.revs);
                    let change = f64::from(self.max_rpm - self.min_rpm) / mean * 100.0;
                    if change > f64::from(v.max_change_pct) {
                        self.flags.insert(TachFlags::SPEED_CHANGE);
                    }
                }
            }
            Mode::Constant { .. } => constant = true,
        }
        let (mean, min, max) = match self.mode {
            Mode::Constant { rpm, .. } => (rpm, rpm, rpm),
            Mode::Tach(_) if self.revs > 0 => (
                crate::num::f64_to_f32(self.sum_rpm / f64::from(self.revs)),
                self.min_rpm,
                self.max_rpm,
            ),
            Mode::Tach(_) => (0.0, 0.0, 0.0),
        };
        SpeedSummary {
            mean_rpm: mean,
            min_rpm: min,
            max_rpm: max,
            revs: self.revs,
            good_revs: self.good_revs,
            missing_pulses: self.missing,
            extra_pulses: self.extra,
            flags: self.flags,
            constant_speed: constant,
        }
    }

    /// Keeps the unwrap reference close to "now" across long pulse gaps.
    fn update_ref_from_now(&mut self, v: &Validated) {
        let ticks = self.now / v.samples_per_tick + self.tick_origin(v);
        let t = crate::num::f64_to_u64_sat(ticks);
        self.ref_tick = self.ref_tick.max(t);
    }

    fn check_stop(&mut self, v: &Validated) {
        let Some(last) = self.latest_edge() else {
            return;
        };
        let limit = match self.expected() {
            Some(e) => STOP_RATIO * e,
            None => STOP_RATIO * v.max_pulse_interval,
        };
        if self.now - last > limit && self.stop_flagged_at != Some(last) {
            self.stop_flagged_at = Some(last);
            self.flags.insert(TachFlags::STOP);
        }
    }

    fn expected(&self) -> Option<f64> {
        if self.n_intervals == 0 {
            return None;
        }
        let n = self.n_intervals;
        let sum: f64 = self.intervals.iter().take(n).sum();
        Some(sum / n as f64)
    }

    fn record_interval(&mut self, dt: f64, v: &Validated) {
        let cap = usize::try_from(v.pulses_per_rev)
            .unwrap_or(AVG_CAP)
            .clamp(1, AVG_CAP);
        if let Some(slot) = self.intervals.get_mut(self.interval_pos % cap) {
            *slot = dt;
        }
        self.interval_pos = (self.interval_pos + 1) % cap;
        self.n_intervals = (self.n_intervals + 1).min(cap);
    }

    fn note_extra(&mut self) {
        self.extra = self.extra.saturating_add(1);
        self.flags.insert(TachFlags::EXTRA_PULSE);
        self.rev_dirty = true;
    }

    fn reset_segment(&mut self) {
        self.pending = None;
        self.booting = true;
        self.n_boot = 0;
        self.accepted = None;
        self.n_intervals = 0;
        self.interval_pos = 0;
        self.pulses_in_segment = 0;
        self.new_segment = true;
        self.last_mark = None;
        self.rev_dirty = false;
    }

    /// Commits `p`; if the gap before it ended the segment, `p` starts the next one.
    fn commit_with_restart(&mut self, p: f64, v: &Validated, marks: &mut impl FnMut(RevMark)) {
        self.commit(p, v, marks);
        if self.accepted.is_none() {
            self.process_edge(p, v, marks);
        }
    }

    /// Accepts pulse `p` relative to the last accepted one (bridging gaps).
    /// A gap too long for bridging ends the segment and leaves `accepted` None.
    fn commit(&mut self, p: f64, v: &Validated, marks: &mut impl FnMut(RevMark)) {
        let Some(a) = self.accepted else {
            self.accepted = Some(p);
            self.pulse(p, false, v, marks);
            return;
        };
        let dt = p - a;
        let expected = self.expected().unwrap_or(dt);
        let ratio = dt / expected;
        let first_interval = self.n_intervals == 0;
        if !first_interval && ratio < EXTRA_RATIO {
            // Defensive: the look-ahead normally catches this before commit.
            self.note_extra();
            return;
        }
        let too_long = if first_interval {
            dt > STOP_RATIO * v.max_pulse_interval
        } else {
            ratio > STOP_RATIO
        };
        if too_long {
            if self.stop_flagged_at != Some(a) {
                self.stop_flagged_at = Some(a);
                self.flags.insert(TachFlags::STOP);
            }
            self.reset_segment();
            return;
        }
        let n = if first_interval {
            1.0
        } else {
            libm::round(ratio).max(1.0)
        };
        let step = dt / n;
        let mut k = 1.0;
        while k < n {
            self.missing = self.missing.saturating_add(1);
            self.flags.insert(TachFlags::MISSING_PULSE);
            self.rev_dirty = true;
            self.pulse(a + k * step, true, v, marks);
            k += 1.0;
        }
        for _ in 0..crate::num::f64_to_u32_sat(n) {
            self.record_interval(step, v);
        }
        self.accepted = Some(p);
        self.pulse(p, false, v, marks);
    }

    /// One accepted (real or bridged) pulse; every `pulses_per_rev`-th is a mark.
    fn pulse(&mut self, t: f64, bridged: bool, v: &Validated, marks: &mut impl FnMut(RevMark)) {
        // `max(1)`: validated non-zero, but the target build must not keep a
        // division-by-zero panic path (no-panic link check).
        let is_mark = self.pulses_in_segment % v.pulses_per_rev.max(1) == 0;
        self.pulses_in_segment = self.pulses_in_segment.wrapping_add(1);
        if !is_mark {
            return;
        }
        if let Some(prev) = self.last_mark.filter(|&p| t > p) {
            let rpm = crate::num::f64_to_f32(v.fs * 60.0 / (t - prev));
            self.revs = self.revs.saturating_add(1);
            self.sum_rpm += f64::from(rpm);
            self.min_rpm = self.min_rpm.min(rpm);
            self.max_rpm = self.max_rpm.max(rpm);
            let mut good = !self.rev_dirty && !bridged;
            if rpm < v.min_rpm {
                self.flags.insert(TachFlags::BELOW_MIN_RPM);
                good = false;
            }
            if rpm > v.max_rpm {
                self.flags.insert(TachFlags::ABOVE_MAX_RPM);
                good = false;
            }
            if good {
                self.good_revs = self.good_revs.saturating_add(1);
            }
            if self.series.push(rpm).is_err() {
                self.flags.insert(TachFlags::SERIES_TRUNCATED);
            }
        }
        self.rev_dirty = false;
        self.emit_mark(t, bridged, marks);
    }

    fn emit_mark(&mut self, t: f64, bridged: bool, marks: &mut impl FnMut(RevMark)) {
        if let Mode::Constant { rpm, .. } = self.mode {
            if self.last_mark.is_some() {
                self.revs = self.revs.saturating_add(1);
                self.good_revs = self.good_revs.saturating_add(1);
                if self.series.push(rpm).is_err() {
                    self.flags.insert(TachFlags::SERIES_TRUNCATED);
                }
            }
        }
        let m = RevMark {
            time_samples: t,
            index: self.mark_index,
            segment_start: self.new_segment,
            bridged,
        };
        self.new_segment = false;
        self.last_mark = Some(t);
        self.mark_index = self.mark_index.wrapping_add(1);
        marks(m);
    }
}

#[cfg(test)]
mod reconfigure_tests {
    use super::*;
    use crate::speed::tach::TachConfig;
    extern crate std;
    use std::format;

    #[test]
    fn a_reconfigured_tracker_equals_a_new_one() {
        // Every field, compared through Debug (series included).
        let mut cfg = TachConfig {
            min_good_revs: 3,
            ..TachConfig::default()
        };
        let mut t = TachTracker::new(&SpeedSource::Tach(cfg)).unwrap();
        for k in 0..40u32 {
            t.push_edge(k * 40_000 + (k % 3) * 900, |_| {});
        }
        t.advance_to(2_000_000, |_| {});
        let _ = t.finish(|_| {});
        cfg.tick_at_sample0 = 17;
        let src = SpeedSource::Tach(cfg);
        t.reconfigure(&src).unwrap();
        assert_eq!(
            format!("{t:?}"),
            format!("{:?}", TachTracker::new(&src).unwrap())
        );
        // A refused source changes nothing.
        let before = format!("{t:?}");
        let mut bad = cfg;
        bad.tick_hz = 0;
        assert!(t.reconfigure(&SpeedSource::Tach(bad)).is_err());
        assert_eq!(format!("{t:?}"), before);
    }
}
