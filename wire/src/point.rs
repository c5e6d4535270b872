//! The stored record as `dsp-core`'s measuring point ([`PointConfig`]), for
//! the adapter from the firmware's `firmware::hal::MeasurementCore` to
//! `dsp_core::pipeline::Pipeline`.
//!
//! The record's shafts, bearings and meshes keep their order and indices
//! (shaft 0 is the tach shaft); they are named by their place. Tach ticks count from the first ADC sample
//! (both boards start the capture time base with the sample clock), so
//! `tick_at_sample0` is 0. The alert/danger levels are not part of the
//! point: they apply when a report is compared with the baseline.
//!
//! [`record_from_point`] goes the other way for the gateway's configuration
//! downlink: a measuring point and the node settings a point file does not
//! hold become a record, refused with the key named when the record cannot
//! carry something or the node would read back another point. Both
//! directions live here only: `analyze` ([`check_sendable`]), the gateway's
//! `downlink config` and the node all go through them.

use crate::config::{BandSource, BearingModel, BearingSpec, MeshSpec, PointRecord};
use dsp_core::config::{
    name_from, Bearing, BearingKinematics, ConfigError, Mesh, Name, PointConfig, Shaft, SpeedInput,
};

/// Why a record could not become a measuring point.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum PointError {
    /// More shafts, bearings or meshes than `dsp-core` holds (cannot happen
    /// for a validated record: the capacities are the same).
    TooManyShafts,
    /// dsp-core refused the converted point.
    Refused(ConfigError),
}

impl core::fmt::Display for PointError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::TooManyShafts => {
                f.write_str("more shafts, bearings or meshes than dsp-core holds")
            }
            Self::Refused(e) => write!(f, "measuring point refused: {e}"),
        }
    }
}

impl core::error::Error for PointError {}

const SHAFT_NAMES: [&str; 4] = ["tach", "shaft1", "shaft2", "shaft3"];
const BEARING_NAMES: [&str; 8] = [
    "bearing0", "bearing1", "bearing2", "bearing3", "bearing4", "bearing5", "bearing6", "bearing7",
];
const MESH_NAMES: [&str; 4] = ["mesh0", "mesh1", "mesh2", "mesh3"];

/// Converts and validates. The record carries no names: shafts, bearings
/// and meshes are named by their place (`tach`, `shaft1`, `bearing0`,
/// `mesh0`, ...); nothing in the diagnosis depends on a name.
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
    p.samples_per_rev = rec.samples_per_rev;
    p.max_speed_change_pct = rec.max_speed_change_pct;
    p.rectifier = rec.rectifier;
    p.window = rec.window;
    p.machine_group = rec.machine_group;
    p.support = rec.support;
    p.search = rec.search;
    p.shafts.clear();
    p.bearings.clear();
    p.meshes.clear();
    for (&ratio, name) in rec.shafts.iter().zip(SHAFT_NAMES) {
        p.shafts
            .push(Shaft {
                name: name_from(name),
                ratio,
            })
            .map_err(|_| PointError::TooManyShafts)?;
    }
    for (b, name) in rec.bearings.iter().zip(BEARING_NAMES) {
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
                shaft: b.shaft,
                kinematics,
            })
            .map_err(|_| PointError::TooManyShafts)?;
    }
    for (m, name) in rec.meshes.iter().zip(MESH_NAMES) {
        p.meshes
            .push(Mesh {
                name: name_from(name),
                shaft: m.shaft,
                teeth: m.teeth,
                mate: m.mate,
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

impl Default for NodeSettings {
    /// The defaults of `envord gateway downlink ... config` (and of
    /// [`PointRecord::default`]).
    fn default() -> Self {
        let r = PointRecord::default();
        Self {
            settle_ms: r.settle_ms,
            interval_s: r.interval_s,
            low_battery_mv: r.low_battery_mv,
            alert_db: r.alert_db,
            danger_db: r.danger_db,
            flat_counts: r.health.flat_counts,
            clip_permille: r.health.clip_permille,
            saturated_permille: r.health.saturated_permille,
        }
    }
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
            Self::Invalid(crate::config::ConfigError::OutOfRange(field)) => write!(
                f,
                "{}: outside the range the node's configuration record carries (record field \
                 `{field}`, docs/frame-format.md \"Configuration record\")",
                point_key(field)
            ),
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
    r.samples_per_rev = p.samples_per_rev;
    r.max_speed_change_pct = p.max_speed_change_pct;
    r.rectifier = p.rectifier;
    r.window = p.window;
    r.machine_group = p.machine_group;
    r.support = p.support;
    r.search = p.search;
    r.shafts.clear();
    for sh in &p.shafts {
        r.shafts
            .push(sh.ratio)
            .map_err(|_| unsupported("shaft", "at most 4 shafts"))?;
    }
    r.bearings.clear();
    for b in &p.bearings {
        if usize::from(b.shaft) >= p.shafts.len() {
            return Err(RecordError::NoSuchShaft {
                bearing: b.name.clone(),
            });
        }
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
                shaft: b.shaft,
                model,
            })
            .map_err(|_| unsupported("bearing", "at most 8 bearings"))?;
    }
    r.meshes.clear();
    for m in &p.meshes {
        r.meshes
            .push(MeshSpec {
                shaft: m.shaft,
                teeth: m.teeth,
                mate: m.mate,
            })
            .map_err(|_| unsupported("mesh", "at most 4 meshes"))?;
    }
    r.validate().map_err(RecordError::Invalid)?;
    // What the node will make of it must be the point the file describes,
    // names apart (the record carries none).
    let mut back = point_config(&r).map_err(RecordError::NodeRefuses)?;
    for (x, y) in back.shafts.iter_mut().zip(&p.shafts) {
        x.name = y.name.clone();
    }
    for (x, y) in back.bearings.iter_mut().zip(&p.bearings) {
        x.name = y.name.clone();
    }
    for (x, y) in back.meshes.iter_mut().zip(&p.meshes) {
        x.name = y.name.clone();
    }
    if back != *p {
        return Err(unsupported(
            "point",
            "the node would read back another point (a value the record rounds)",
        ));
    }
    Ok(r)
}

/// Whether the node could be sent this point (with the default node
/// settings): `Ok` when [`record_from_point`] accepts it. A constant-speed
/// point (a recording with a known rpm and no tach) is checked as if its
/// speed came from the node's tach: the speed source belongs to the
/// recording, everything else to the point.
pub fn check_sendable(p: &PointConfig) -> Result<(), RecordError> {
    let mut q = p.clone();
    if let SpeedInput::Constant { .. } = q.speed {
        q.speed = SpeedInput::default();
    }
    record_from_point(&q, &NodeSettings::default()).map(|_| ())
}

/// The point-file key of a record field named by
/// [`ConfigError::OutOfRange`](crate::config::ConfigError::OutOfRange)
/// (the field name itself when it has no point-file key).
pub fn point_key(field: &'static str) -> &'static str {
    match field {
        "sample_rate_hz" => "sensor.sample_rate_hz",
        "counts_to_g" => "sensor.counts_to_g",
        "clip_level" => "sensor.adc_full_scale",
        "band_lo_hz" | "band_hi_hz" => "envelope.band_hz",
        "poles" => "envelope.poles",
        "pulses_per_rev" => "speed.pulses_per_rev",
        "tach_tick_hz" => "speed.tick_hz",
        "speed_min_rpm" => "speed.min_rpm",
        "speed_max_rpm" => "speed.max_rpm",
        "max_speed_change_pct" => "speed.max_change_pct",
        "record_revs" => "spectrum.revolutions",
        "samples_per_rev" => "spectrum.samples_per_rev",
        "window" => "spectrum.window",
        "shaft_ratio" | "shafts" => "shaft.ratio",
        "bearings" | "bearing_shaft" => "bearing",
        "defect_order" => "bearing.*_x",
        "elements" => "bearing.rollers",
        "pitch_mm" => "bearing.pitch_diameter",
        "element_mm" => "bearing.roller_diameter",
        "contact_deg" => "bearing.contact_angle_deg",
        "mesh_shaft" | "mesh_teeth" | "mesh_mate" | "meshes" => "mesh",
        "search.prominence_db" => "search.prominence_db",
        "search.sideband_db" => "search.sideband_db",
        other => other,
    }
}
