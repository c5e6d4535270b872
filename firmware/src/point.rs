//! The stored record as `dsp-core`'s measuring point ([`PointConfig`]), for
//! the adapter from the firmware's [`crate::hal::MeasurementCore`] to
//! `dsp_core::pipeline::Pipeline`.
//!
//! The tach shaft is shaft 0 (ratio 1); every other distinct bearing-shaft
//! ratio gets its own shaft. Tach ticks count from the first ADC sample
//! (both boards start the capture time base with the sample clock), so
//! `tick_at_sample0` is 0. The alert/danger levels are not part of the
//! point: they apply when a report is compared with the baseline.

use crate::config::{BearingModel, PointRecord};
use dsp_core::config::{
    name_from, Bearing, BearingKinematics, ConfigError, PointConfig, Shaft, SpeedInput,
};

/// Why a record could not become a measuring point.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum PointError {
    /// More distinct shaft ratios than `dsp_core::config::MAX_SHAFTS`.
    TooManyShafts,
    /// dsp-core refused the converted point.
    Refused(ConfigError),
}

impl core::fmt::Display for PointError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::TooManyShafts => f.write_str("too many distinct shaft ratios"),
            Self::Refused(e) => write!(f, "measuring point refused: {e}"),
        }
    }
}

impl core::error::Error for PointError {}

const SHAFT_NAMES: [&str; 4] = ["tach", "shaft1", "shaft2", "shaft3"];
const BEARING_NAMES: [&str; 4] = ["bearing0", "bearing1", "bearing2", "bearing3"];

/// Converts and validates.
///
/// ```
/// let point = firmware::point::point_config(&firmware::config::PointRecord::default()).unwrap();
/// assert_eq!(point.sample_rate_hz, 25_600.0);
/// ```
pub fn point_config(rec: &PointRecord) -> Result<PointConfig, PointError> {
    let mut p = PointConfig::default();
    // validated range 1 kHz..200 kHz: exact in f32
    p.sample_rate_hz = f32::from(u16::try_from(rec.sample_rate_hz / 10).unwrap_or(u16::MAX)) * 10.0
        + f32::from(u8::try_from(rec.sample_rate_hz % 10).unwrap_or(0));
    p.counts_to_g = rec.counts_to_g;
    p.adc_full_scale = rec.health.clip_level;
    p.band_hz = rec.band_hz(); // None: dsp-core's default band until a survey ran
    p.poles = rec.poles;
    p.speed = SpeedInput::Tach {
        pulses_per_rev: rec.pulses_per_rev,
        tick_hz: rec.tach_tick_hz,
        tick_at_sample0: 0,
    };
    p.min_rpm = rec.speed_min_rpm;
    p.max_rpm = rec.speed_max_rpm;
    p.revolutions = rec.record_revs;
    p.shafts.clear();
    p.bearings.clear();
    p.shafts
        .push(Shaft {
            name: name_from(SHAFT_NAMES[0]),
            ratio: 1.0,
        })
        .map_err(|_| PointError::TooManyShafts)?;
    for (b, name) in rec.bearings.iter().zip(BEARING_NAMES) {
        let found = p.shafts.iter().position(|s| s.ratio == b.shaft_ratio);
        let shaft = match found {
            Some(i) => i,
            None => {
                let i = p.shafts.len();
                let shaft_name = SHAFT_NAMES.get(i).ok_or(PointError::TooManyShafts)?;
                p.shafts
                    .push(Shaft {
                        name: name_from(shaft_name),
                        ratio: b.shaft_ratio,
                    })
                    .map_err(|_| PointError::TooManyShafts)?;
                i
            }
        };
        let kinematics = match b.model {
            BearingModel::Orders {
                bpfo,
                bpfi,
                ftf,
                bsf,
            } => BearingKinematics::Multiples {
                bpfo_x: bpfo,
                bpfi_x: bpfi,
                ftf_x: ftf,
                bsf_x: bsf,
            },
            BearingModel::Geometry {
                elements,
                element_mm,
                pitch_mm,
                contact_deg,
            } => BearingKinematics::Geometry {
                rollers: u16::from(elements),
                roller_diameter: element_mm,
                pitch_diameter: pitch_mm,
                contact_angle_deg: contact_deg,
            },
        };
        p.bearings
            .push(Bearing {
                name: name_from(name),
                shaft: u8::try_from(shaft).map_err(|_| PointError::TooManyShafts)?,
                kinematics,
            })
            .map_err(|_| PointError::TooManyShafts)?;
    }
    p.validate().map_err(PointError::Refused)?;
    Ok(p)
}
