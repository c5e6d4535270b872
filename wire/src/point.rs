//! The stored record as `dsp-core`'s measuring point ([`PointConfig`]), for
//! the adapter from the firmware's `firmware::hal::MeasurementCore` to
//! `dsp_core::pipeline::Pipeline`.
//!
//! The tach shaft is shaft 0 (ratio 1); every other distinct bearing-shaft
//! ratio gets its own shaft. Tach ticks count from the first ADC sample
//! (both boards start the capture time base with the sample clock), so
//! `tick_at_sample0` is 0. The alert/danger levels are not part of the
//! point: they apply when a report is compared with the baseline.
//!
//! [`record_from_point`] goes the other way for the gateway's configuration
//! downlink: a measuring point and the node settings a point file does not
//! hold become a record, refused with the key named when the record cannot
//! carry something or the node would read back another point.

use crate::config::{BandSource, BearingModel, BearingSpec, PointRecord};
use dsp_core::config::{
    name_from, Bearing, BearingKinematics, ConfigError, Name, PointConfig, Shaft, SpeedInput,
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
/// let point = wire::point::point_config(&wire::config::PointRecord::default()).unwrap();
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

/// Node settings of a configuration record that a measuring point does not
/// hold (the gateway's `downlink config` options).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NodeSettings {
    /// Sensor settling time after power-up, ms.
    pub settle_ms: u16,
    /// Interval between measurements, s.
    pub interval_s: u32,
    /// LOW_BATTERY below this supply voltage, mV.
    pub low_battery_mv: u16,
    /// Alert level, dB over the baseline.
    pub alert_db: f32,
    /// Danger level, dB over the baseline.
    pub danger_db: f32,
    /// Flat-record span, counts.
    pub flat_counts: u16,
    /// CLIPPING from this many per mille of samples at the clip level.
    pub clip_permille: u16,
    /// SENSOR_FAULT from this many per mille of clipped samples.
    pub saturated_permille: u16,
}

/// Why a measuring point cannot become a configuration record.
#[derive(Clone, Debug, PartialEq)]
pub enum RecordError {
    /// The point sets `key` to something the record cannot carry (`why`).
    Unsupported {
        /// Point-file key.
        key: &'static str,
        /// What the record can carry instead.
        why: &'static str,
    },
    /// A bearing with more than 255 rolling elements.
    TooManyElements {
        /// The bearing's name.
        bearing: Name,
    },
    /// A bearing on a shaft the point does not define.
    NoSuchShaft {
        /// The bearing's name.
        bearing: Name,
    },
    /// The record fails the node's own range checks.
    Invalid(crate::config::ConfigError),
    /// The node would refuse the record as a measuring point.
    NodeRefuses(PointError),
}

impl core::fmt::Display for RecordError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        const TAIL: &str = "the node's configuration record cannot carry it";
        match self {
            Self::Unsupported { key, why } => write!(f, "{key}: {why}; {TAIL}"),
            Self::TooManyElements { bearing } => write!(
                f,
                "bearing `{}`.rollers: at most 255 rolling elements; {TAIL}",
                bearing.as_str()
            ),
            Self::NoSuchShaft { bearing } => {
                write!(f, "bearing `{}`.shaft: no such shaft", bearing.as_str())
            }
            Self::Invalid(e) => write!(f, "{e} (the node's own range checks)"),
            Self::NodeRefuses(e) => write!(f, "the node would refuse this point: {e}"),
        }
    }
}

impl core::error::Error for RecordError {}

fn unsupported(key: &'static str, why: &'static str) -> RecordError {
    RecordError::Unsupported { key, why }
}

/// The node's configuration record for a measuring point and node settings.
/// Everything the point sets must survive the node's own conversion
/// ([`point_config`]), else the key is named in the error.
pub fn record_from_point(p: &PointConfig, s: &NodeSettings) -> Result<PointRecord, RecordError> {
    let mut r = PointRecord::default();
    let fs = p.sample_rate_hz;
    if !(fs.is_finite() && fs >= 1.0 && libm::truncf(fs) == fs && fs <= 200_000.0) {
        return Err(unsupported(
            "sensor.sample_rate_hz",
            "the node samples at a whole number of Hz up to 200 kHz",
        ));
    }
    // whole number up to 200 000: exact
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    {
        r.sample_rate_hz = fs as u32;
    }
    match p.band_hz {
        Some([lo, hi]) => {
            r.band_lo_hz = lo;
            r.band_hi_hz = hi;
            r.band_source = BandSource::Configured;
        }
        None => {
            r.band_lo_hz = 0.0;
            r.band_hi_hz = 0.0;
            r.band_source = BandSource::Unset;
        }
    }
    r.poles = p.poles;
    match p.speed {
        SpeedInput::Tach {
            pulses_per_rev,
            tick_hz,
            tick_at_sample0,
        } => {
            if tick_at_sample0 != 0 {
                return Err(unsupported(
                    "speed.tick_at_sample0",
                    "the node's tach timer starts with its sample clock (0)",
                ));
            }
            r.pulses_per_rev = pulses_per_rev;
            r.tach_tick_hz = tick_hz;
        }
        SpeedInput::Constant { .. } => {
            return Err(unsupported(
                "speed.source",
                "the node measures speed with a tach (`source = \"tach\"`)",
            ))
        }
    }
    r.speed_min_rpm = p.min_rpm;
    r.speed_max_rpm = p.max_rpm;
    r.record_revs = p.revolutions;
    r.counts_to_g = p.counts_to_g;
    r.health.clip_level = p.adc_full_scale;
    r.health.flat_counts = s.flat_counts;
    r.health.clip_permille = s.clip_permille;
    r.health.saturated_permille = s.saturated_permille;
    r.settle_ms = s.settle_ms;
    r.interval_s = s.interval_s;
    r.low_battery_mv = s.low_battery_mv;
    r.alert_db = s.alert_db;
    r.danger_db = s.danger_db;
    r.bearings.clear();
    for b in &p.bearings {
        let ratio = p
            .shafts
            .get(usize::from(b.shaft))
            .map(|x| x.ratio)
            .ok_or_else(|| RecordError::NoSuchShaft {
                bearing: b.name.clone(),
            })?;
        let model = match b.kinematics {
            BearingKinematics::Geometry {
                rollers,
                roller_diameter,
                pitch_diameter,
                contact_angle_deg,
            } => BearingModel::Geometry {
                elements: u8::try_from(rollers).map_err(|_| RecordError::TooManyElements {
                    bearing: b.name.clone(),
                })?,
                element_mm: roller_diameter,
                pitch_mm: pitch_diameter,
                contact_deg: contact_angle_deg,
            },
            BearingKinematics::Multiples {
                bpfo_x,
                bpfi_x,
                ftf_x,
                bsf_x,
            } => BearingModel::Orders {
                bpfo: bpfo_x,
                bpfi: bpfi_x,
                ftf: ftf_x,
                bsf: bsf_x,
            },
        };
        r.bearings
            .push(BearingSpec {
                shaft_ratio: ratio,
                model,
            })
            .map_err(|_| unsupported("bearing", "at most 4 bearings"))?;
    }
    r.validate().map_err(RecordError::Invalid)?;
    // What the node will make of it must be the point the file describes.
    let back = point_config(&r).map_err(RecordError::NodeRefuses)?;
    let checks: [(&'static str, bool); 8] = [
        ("envelope.rectifier", back.rectifier == p.rectifier),
        (
            "spectrum.samples_per_rev",
            back.samples_per_rev == p.samples_per_rev,
        ),
        ("spectrum.window", back.window == p.window),
        (
            "speed.max_change_pct",
            back.max_speed_change_pct == p.max_speed_change_pct,
        ),
        ("search", back.search == p.search),
        ("iso.machine_group", back.machine_group == p.machine_group),
        ("iso.support", back.support == p.support),
        ("mesh", p.meshes.is_empty()),
    ];
    if let Some((key, _)) = checks.iter().find(|(_, same)| !same) {
        return Err(unsupported(
            key,
            "set to other than the node's default in the point file",
        ));
    }
    Ok(r)
}
