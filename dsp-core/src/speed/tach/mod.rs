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
//!
//! Files: the shared types (flags, configuration, marks, summary) here,
//! the tracker in `tracker.rs`, the host's edge detector in `edge.rs`.

use core::fmt;

mod edge;
mod tracker;

pub use edge::{EdgeDetector, EdgeDetectorError};
pub(crate) use tracker::TachPlan;
pub use tracker::TachTracker;

/// Capacity of the per-revolution speed series kept by [`TachTracker`].
pub const SERIES_CAP: usize = 1024;

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
#[non_exhaustive]
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
