//! A minimal [`MeasurementCore`]: overall level and speed only.
//!
//! It lets a board image run the whole cycle and emit real frames before the
//! envelope pipeline of `dsp-core` is wired in through its adapter, and it
//! stays useful as a fallback mode. Sums are kept in integers, so the host and
//! the target compute bit-identical frames from the same samples.
//!
//! Frame: the 12-byte `0x4F` overall frame of [`wire::overall`] (its byte
//! layout lives there and in docs/frame-format.md); this module computes the
//! figures and rounds them to the frame's units. Fields saturate.

use crate::config::PointRecord;
use crate::hal::MeasurementCore;
use dsp_core::num::{f32_to_u32_sat, sqrtf};
use dsp_core::QualityFlags;

use wire::overall::{flag_byte, OverallFrame};
pub use wire::overall::{FRAME_KIND, FRAME_LEN};

/// Why the overall core failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum OverallError {
    /// `encode` before `finish`.
    NotFinished,
    /// Frame buffer shorter than [`FRAME_LEN`].
    BufferTooSmall,
}

impl core::fmt::Display for OverallError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::NotFinished => f.write_str("encode called before finish"),
            Self::BufferTooSmall => f.write_str("frame buffer too small"),
        }
    }
}

impl core::error::Error for OverallError {}

/// Figures of a finished record.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Overall {
    /// Samples seen.
    pub samples: u32,
    /// RMS about the mean, counts.
    pub rms: f32,
    /// Largest magnitude about the mean, counts.
    pub peak: f32,
    /// Peak / RMS (0 for a zero RMS).
    pub crest: f32,
    /// Tach shaft speed in rpm (0 without two edges).
    pub speed_rpm: f32,
}

/// Streams sums of x and x² (exact in integers) and tach edge statistics.
#[derive(Clone, Debug, Default)]
pub struct OverallCore {
    n: u64,
    sum: i64,
    sum_sq: u64,
    max: i32,
    min: i32,
    edges: u32,
    first_tick: u32,
    last_tick: u32,
    tick_hz: u32,
    pulses_per_rev: u8,
    flags: QualityFlags,
    result: Option<Overall>,
}

impl OverallCore {
    /// A core waiting for `start`.
    pub fn new() -> Self {
        Self::default()
    }

    /// Figures of the last finished record.
    pub fn result(&self) -> Option<Overall> {
        self.result
    }
}

/// Rounds to a u16 field, saturating.
fn field_u16(x: f32) -> u16 {
    u16::try_from(f32_to_u32_sat(x + 0.5)).unwrap_or(u16::MAX)
}

impl MeasurementCore for OverallCore {
    type Error = OverallError;

    fn load_baseline(&mut self, _data: &[u8]) -> Result<(), OverallError> {
        Ok(()) // overall levels are reported absolute; no baseline needed
    }

    fn start(&mut self, config: &PointRecord) -> Result<(), OverallError> {
        *self = Self {
            max: i32::MIN,
            min: i32::MAX,
            tick_hz: config.tach_tick_hz,
            pulses_per_rev: config.pulses_per_rev,
            ..Self::default()
        };
        Ok(())
    }

    fn push_block(&mut self, samples: &[i16]) {
        for &s in samples {
            let x = i32::from(s);
            self.sum = self.sum.saturating_add(i64::from(x));
            self.sum_sq = self
                .sum_sq
                .saturating_add(u64::from(x.unsigned_abs()).pow(2));
            self.max = self.max.max(x);
            self.min = self.min.min(x);
        }
        self.n = self
            .n
            .saturating_add(u64::try_from(samples.len()).unwrap_or(u64::MAX));
    }

    fn push_edge(&mut self, tick: u32) {
        if self.edges == 0 {
            self.first_tick = tick;
        }
        self.last_tick = tick;
        self.edges = self.edges.saturating_add(1);
    }

    #[allow(clippy::cast_precision_loss)] // sums up to 2^63 into f64 for one division
    fn finish(&mut self, flags: QualityFlags) -> Result<(), OverallError> {
        self.flags = flags;
        let mut o = Overall {
            samples: u32::try_from(self.n).unwrap_or(u32::MAX),
            ..Overall::default()
        };
        if self.n > 0 {
            let n = self.n as f64;
            let mean = self.sum as f64 / n;
            let var = (self.sum_sq as f64 / n - mean * mean).max(0.0);
            o.rms = sqrtf(dsp_core::num::f64_to_f32(var));
            let hi = f64::from(self.max) - mean;
            let lo = mean - f64::from(self.min);
            o.peak = dsp_core::num::f64_to_f32(hi.max(lo));
            if o.rms > 0.0 {
                o.crest = o.peak / o.rms;
            }
        }
        if self.edges >= 2 && self.pulses_per_rev > 0 {
            // ticks wrap at 2^32: wrapping difference is right for records shorter than one wrap
            let span = f64::from(self.last_tick.wrapping_sub(self.first_tick));
            if span > 0.0 {
                let revs = f64::from(self.edges - 1) / f64::from(self.pulses_per_rev);
                let rpm = revs * 60.0 * f64::from(self.tick_hz) / span;
                o.speed_rpm = dsp_core::num::f64_to_f32(rpm);
            }
        }
        self.result = Some(o);
        Ok(())
    }

    /// Writes the 12-byte overall frame described in the module docs.
    fn encode(&mut self, frame: &mut [u8]) -> Result<usize, OverallError> {
        let flags = self.flags;
        let o = self.result.ok_or(OverallError::NotFinished)?;
        OverallFrame {
            flags: flag_byte(flags),
            rms_decicounts: field_u16(o.rms * 10.0),
            peak_counts: field_u16(o.peak),
            crest_milli: field_u16(o.crest * 1000.0),
            speed_decirpm: f32_to_u32_sat(o.speed_rpm * 10.0 + 0.5),
        }
        .emit(frame)
        .map_err(|_| OverallError::BufferTooSmall)
    }
}
