//! The node's signal-health checks that raise quality flags
//! ([`dsp_core::QualityFlags`], the one flag set of node, core and host)
//! while blocks stream past (no raw record is kept).
//!
//! # Two sensor-fault checks, one flag
//!
//! `SENSOR_FAULT` is raised by two different checks, kept apart on purpose
//! (they look at different things, and merging them would change flags):
//!
//! * the node's **input check** ([`SignalHealth`], here): raw ADC counts
//!   before any processing; a dead input is a peak-to-peak span of at most
//!   [`HealthLimits::flat_counts`], a saturated one has at least
//!   [`HealthLimits::saturated_permille`] of its samples at the clip level.
//!   Its limits travel in the configuration record, so the gateway can
//!   tune them per sensor by downlink. It runs with every core, also one
//!   without dsp-core (the overall-only core).
//! * the core's **channel check** (`dsp_core::pipeline`, in `finish`): the
//!   front end's AC RMS below one ADC count in g (flat), or more than 1 % of
//!   the samples at full scale (saturated), fixed, the same on the node and
//!   in `envord analyze` on the host.
//!
//! On the node both run and their results are OR-ed: the firmware passes
//! its flags to the core ([`crate::hal::MeasurementCore::finish`]), and the
//! frame's one `sensor_fault` bit means "either check failed".

use dsp_core::QualityFlags;

/// Thresholds of the node's input check ([`SignalHealth`]; not the core's
/// channel check, see the module docs), taken from the stored configuration
/// (the record's fields, so defined with it in `wire::config`).
pub use wire::config::HealthLimits;

/// The node's input check: running min/max/clip counts over a streamed
/// record of raw ADC counts.
#[derive(Clone, Copy, Debug)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SignalHealth {
    min: i16,
    max: i16,
    samples: u32,
    clipped: u32,
}

impl Default for SignalHealth {
    fn default() -> Self {
        Self::new()
    }
}

impl SignalHealth {
    /// Nothing seen yet.
    pub const fn new() -> Self {
        Self {
            min: i16::MAX,
            max: i16::MIN,
            samples: 0,
            clipped: 0,
        }
    }

    /// Accounts for one block.
    pub fn observe(&mut self, block: &[i16], clip_level: i16) {
        let clip = clip_level.unsigned_abs();
        for &s in block {
            self.min = self.min.min(s);
            self.max = self.max.max(s);
            if s.unsigned_abs() >= clip {
                self.clipped = self.clipped.saturating_add(1);
            }
        }
        let n = u32::try_from(block.len()).unwrap_or(u32::MAX);
        self.samples = self.samples.saturating_add(n);
    }

    /// Samples seen.
    pub const fn samples(&self) -> u32 {
        self.samples
    }

    /// Samples at or above the clip level.
    pub const fn clipped(&self) -> u32 {
        self.clipped
    }

    /// Peak-to-peak span in counts (0 before any sample).
    pub fn span(&self) -> u32 {
        if self.samples == 0 {
            return 0;
        }
        let span = i32::from(self.max) - i32::from(self.min);
        u32::try_from(span).unwrap_or(0)
    }

    /// Flags for what was seen: SENSOR_FAULT for a flat, saturated or empty
    /// record, CLIPPING when the clipped share reaches the limit.
    pub fn flags(&self, limits: &HealthLimits) -> QualityFlags {
        let mut f = QualityFlags::empty();
        if self.samples == 0 {
            f.insert(QualityFlags::SENSOR_FAULT);
            return f;
        }
        if self.span() <= u32::from(limits.flat_counts) {
            f.insert(QualityFlags::SENSOR_FAULT);
        }
        // per mille without overflow: clipped * 1000 in u64
        let permille = u64::from(self.clipped) * 1000 / u64::from(self.samples);
        if self.clipped > 0 && permille >= u64::from(limits.clip_permille) {
            f.insert(QualityFlags::CLIPPING);
        }
        if permille >= u64::from(limits.saturated_permille) {
            f.insert(QualityFlags::SENSOR_FAULT);
        }
        f
    }
}
