//! Shaft speed from the once-per-revolution (or N-per-revolution) tach pulse.
//!
//! # Time base
//! The ADC sample clock and the tach capture timer share one clock. Input
//! sample `n` is taken at capture tick `tick_at_sample0 + n · tick_hz /
//! sample_rate_hz`, so a captured edge at tick `c` lies at input-sample time
//! `(c − tick_at_sample0) · sample_rate_hz / tick_hz`.
//!
//! The capture counter is a wrapping `u32`; it is unwrapped to a `u64`
//! internally by taking each new tick as the value nearest (within ±2³¹
//! ticks) to the latest known time, i.e. the last edge or the last
//! [`TachTracker::advance_to`] position. A stop longer than 2³¹ ticks is
//! therefore handled as long as `advance_to` is called at least once per 2³¹
//! ticks (every block, in practice).
//!
//! Times are kept as `f64` input-sample units. `f32` cannot hold 3·10⁷
//! samples (10 min at 51.2 kHz) with a fraction; `f64` keeps 2⁻²⁸ samples
//! there. `f64` is software-emulated on a Cortex-M4F, which is fine: edges
//! come a few hundred times per second at most.
//!
//! # Validation
//! At a segment start (the record start or after a stop) four edges are
//! collected first and the expected interval is seeded with the median of
//! their three intervals, so one glitch there cannot set a wrong expectation;
//! this delays the first marks by three pulses. Edges closer than half the
//! interval at `max_rpm` are dropped as extra pulses already at that stage.
//! Then each pulse interval is compared with the expected interval (the mean
//! of the last accepted intervals, up to one revolution's worth, max 16):
//! * ratio < 0.5: an extra (double) pulse. Of the two close edges the one
//!   nearer the expected position is kept; one pulse of look-ahead is held for
//!   that purpose ([`TachFlags::EXTRA_PULSE`]).
//! * ratio ≈ 2 or 3: missing pulses, bridged by evenly spaced interpolated
//!   pulses ([`TachFlags::MISSING_PULSE`]).
//! * ratio > 3.5: the shaft stopped or the tach failed; tracking restarts
//!   and the next mark starts a new segment ([`TachFlags::STOP`]).
//!
//! The host helper [`EdgeDetector`] turns a digitised tach channel into edge
//! times for [`TachTracker::push_edge_time`].

use core::fmt;

/// Capacity of the per-revolution speed series kept by [`TachTracker`].
pub const SERIES_CAP: usize = 1024;

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

/// Fault and state flags of a speed measurement (a `u16` with named bits).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TachFlags(pub u16);

impl TachFlags {
    /// No pulse at all in the record (tach mode).
    pub const NO_PULSES: Self = Self(1 << 0);
    /// At least one pulse was missing and was bridged by interpolation.
    pub const MISSING_PULSE: Self = Self(1 << 1);
    /// At least one extra (double) pulse was dropped.
    pub const EXTRA_PULSE: Self = Self(1 << 2);
    /// A revolution was slower than `min_rpm`.
    pub const BELOW_MIN_RPM: Self = Self(1 << 3);
    /// A revolution was faster than `max_rpm`.
    pub const ABOVE_MAX_RPM: Self = Self(1 << 4);
    /// (max − min) / mean speed over the record exceeded `max_speed_change_pct`.
    pub const SPEED_CHANGE: Self = Self(1 << 5);
    /// The pulses stopped for longer than 3.5 expected intervals (stop or tach loss).
    pub const STOP: Self = Self(1 << 6);
    /// Fewer good revolutions than `min_good_revs`.
    pub const TOO_FEW_REVS: Self = Self(1 << 7);
    /// An edge went back in time (or was not finite) and was dropped.
    pub const OUT_OF_ORDER: Self = Self(1 << 8);
    /// More revolutions than [`SERIES_CAP`]: the series holds the first ones, stats cover all.
    pub const SERIES_TRUNCATED: Self = Self(1 << 9);
    /// Constant mode: `advance_to` jumped more than 65 536 revolutions at once;
    /// the skipped virtual marks were not emitted and the next mark starts a segment.
    pub const TIME_JUMP: Self = Self(1 << 10);

    /// Flags that make the speed (and anything computed from it) unreliable.
    pub const FAULTS: Self = Self(
        Self::NO_PULSES.0
            | Self::MISSING_PULSE.0
            | Self::EXTRA_PULSE.0
            | Self::BELOW_MIN_RPM.0
            | Self::ABOVE_MAX_RPM.0
            | Self::SPEED_CHANGE.0
            | Self::STOP.0
            | Self::TOO_FEW_REVS.0
            | Self::OUT_OF_ORDER.0
            | Self::TIME_JUMP.0,
    );

    /// No flag set.
    pub const fn empty() -> Self {
        Self(0)
    }
    /// True if every bit of `other` is set.
    pub const fn contains(self, other: Self) -> bool {
        self.0 & other.0 == other.0
    }
    /// Sets the bits of `other`.
    pub fn insert(&mut self, other: Self) {
        self.0 |= other.0;
    }
    /// True if any fault bit ([`Self::FAULTS`]) is set.
    pub const fn is_fault(self) -> bool {
        self.0 & Self::FAULTS.0 != 0
    }
    /// Raw bits (for the radio frame).
    pub const fn bits(self) -> u16 {
        self.0
    }
}

/// Configuration of a tach input.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct TachConfig {
    /// Capture timer rate in ticks per second.
    pub tick_hz: u32,
    /// Capture timer value at the instant of input sample 0.
    pub tick_at_sample0: u32,
    /// ADC (input) sample rate in Hz.
    pub sample_rate_hz: f32,
    /// Tach pulses per shaft revolution (1 for a once-per-rev mark).
    pub pulses_per_rev: u8,
    /// Lowest plausible speed; slower revolutions raise [`TachFlags::BELOW_MIN_RPM`].
    pub min_rpm: f32,
    /// Highest plausible speed; faster revolutions raise [`TachFlags::ABOVE_MAX_RPM`].
    pub max_rpm: f32,
    /// Allowed (max − min) / mean speed over the record, in percent.
    pub max_speed_change_pct: f32,
    /// Fewer good revolutions raise [`TachFlags::TOO_FEW_REVS`].
    pub min_good_revs: u16,
}

impl Default for TachConfig {
    fn default() -> Self {
        Self {
            tick_hz: 1_000_000,
            tick_at_sample0: 0,
            sample_rate_hz: 51_200.0,
            pulses_per_rev: 1,
            min_rpm: 60.0,
            max_rpm: 6_000.0,
            max_speed_change_pct: 10.0,
            min_good_revs: 8,
        }
    }
}

/// Where the shaft speed comes from.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SpeedSource {
    /// Measured from tach edges.
    Tach(TachConfig),
    /// Known constant speed without tach: virtual marks from the sample count.
    Constant {
        /// Shaft speed in rpm.
        rpm: f32,
        /// ADC (input) sample rate in Hz.
        sample_rate_hz: f32,
    },
}

/// Why a [`SpeedSource`] was rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TachConfigError {
    /// `tick_hz` is zero.
    ZeroTickRate,
    /// The sample rate is not finite and positive.
    BadSampleRate,
    /// `pulses_per_rev` is zero.
    ZeroPulsesPerRev,
    /// The speed range is not `0 < min_rpm < max_rpm` (finite), or the constant rpm is not finite and positive.
    BadSpeedRange,
    /// `max_speed_change_pct` is not finite and positive.
    BadSpeedChangeLimit,
}

impl fmt::Display for TachConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self {
            Self::ZeroTickRate => "tach tick rate is zero",
            Self::BadSampleRate => "sample rate must be finite and positive",
            Self::ZeroPulsesPerRev => "pulses per revolution is zero",
            Self::BadSpeedRange => "speed range must satisfy 0 < min_rpm < max_rpm",
            Self::BadSpeedChangeLimit => "speed change limit must be finite and positive",
        };
        f.write_str(s)
    }
}

impl core::error::Error for TachConfigError {}

/// A once-per-revolution mark for the order tracker.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RevMark {
    /// Time of the mark in input-sample units (see the module time base).
    pub time_samples: f64,
    /// Running revolution number over the record (0 for the first mark).
    pub index: u32,
    /// First mark after a stop or at the start: the angle is not continuous with earlier marks.
    pub segment_start: bool,
    /// The mark was interpolated across a missing pulse.
    pub bridged: bool,
}

/// Speed measured over a record.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SpeedSummary {
    /// Mean of the per-revolution speeds (0 if none).
    pub mean_rpm: f32,
    /// Slowest revolution (0 if none).
    pub min_rpm: f32,
    /// Fastest revolution (0 if none).
    pub max_rpm: f32,
    /// Complete revolutions measured.
    pub revs: u32,
    /// Revolutions without bridged or dropped pulses and inside the speed range.
    pub good_revs: u32,
    /// Pulses bridged by interpolation.
    pub missing_pulses: u32,
    /// Pulses dropped as extra.
    pub extra_pulses: u32,
    /// Faults and state.
    pub flags: TachFlags,
    /// True in constant-speed mode (no tach, virtual marks).
    pub constant_speed: bool,
}

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
/// use dsp_core::tach::{SpeedSource, TachConfig, TachTracker};
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

/// Why an [`EdgeDetector`] was rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum EdgeDetectorError {
    /// Thresholds must be finite with `low < high`.
    BadThresholds,
}

impl fmt::Display for EdgeDetectorError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("edge thresholds must be finite with low < high")
    }
}

impl core::error::Error for EdgeDetectorError {}

/// Rising-edge detector with hysteresis on a digitised tach channel.
///
/// An edge is armed once the signal is below `low` and confirmed when it then
/// exceeds `high`; its time is the last upward crossing of the mid level
/// `(low + high) / 2` before confirmation, linearly interpolated between the
/// two samples around it. Works across blocks. Non-finite samples are skipped
/// and break the interpolation pair.
///
/// ```
/// use dsp_core::tach::EdgeDetector;
/// let mut d = EdgeDetector::new(0.3, 0.7).unwrap();
/// let x = [0.0, 0.0, 0.25, 0.75, 1.0, 1.0];
/// let mut edges = [0.0f64; 1];
/// let mut n = 0;
/// d.process(&x, |t| { edges[0] = t; n += 1 });
/// assert_eq!(n, 1);
/// assert!((edges[0] - 2.5).abs() < 1e-9); // mid level 0.5 crossed half-way from 2 to 3
/// ```
#[derive(Clone, Copy, Debug)]
pub struct EdgeDetector {
    low: f32,
    high: f32,
    mid: f32,
    armed: bool,
    candidate: Option<f64>,
    prev: Option<f32>,
    n: u64,
}

impl EdgeDetector {
    /// Creates a detector with hysteresis thresholds `low < high`.
    pub fn new(low: f32, high: f32) -> Result<Self, EdgeDetectorError> {
        if !(low.is_finite() && high.is_finite() && low < high) {
            return Err(EdgeDetectorError::BadThresholds);
        }
        Ok(Self {
            low,
            high,
            mid: 0.5 * (low + high),
            armed: false,
            candidate: None,
            prev: None,
            n: 0,
        })
    }

    /// Samples processed so far.
    pub fn samples_seen(&self) -> u64 {
        self.n
    }

    /// Processes a block; `edge` receives each rising-edge time in input samples.
    pub fn process(&mut self, block: &[f32], mut edge: impl FnMut(f64)) {
        for &x in block {
            let i = self.n;
            self.n = self.n.saturating_add(1);
            if !x.is_finite() {
                self.prev = None;
                continue;
            }
            if let Some(p) = self.prev {
                if self.armed && p < self.mid && x >= self.mid {
                    let frac = f64::from((self.mid - p) / (x - p));
                    self.candidate = Some((i - 1) as f64 + frac);
                }
            }
            if self.armed && x > self.high {
                // Confirmed; without a mid crossing pair (e.g. after NaN) use this sample.
                edge(self.candidate.unwrap_or(i as f64));
                self.armed = false;
                self.candidate = None;
            } else if x < self.low {
                self.armed = true;
                self.candidate = None;
            }
            self.prev = Some(x);
        }
    }
}

#[cfg(test)]
mod reconfigure_tests {
    use super::*;
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
