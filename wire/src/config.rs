//! The measuring-point configuration as a compact, versioned binary record.
//!
//! Layout, version 3, all fields little-endian (offsets in bytes; the
//! table with sizes is in docs/frame-format.md, "Configuration record"):
//!
//! ```text
//!  0 magic "EP"          2 version u8 = 3      3 total length u16 (incl. CRC)
//!  5 sample_rate_hz u32  9 band_lo_hz f32     13 band_hi_hz f32
//! 17 poles u8           18 pulses_per_rev u8  19 record_revs u16
//! 21 speed_min_rpm f32  25 speed_max_rpm f32  29 tach_tick_hz u32
//! 33 settle_ms u16      35 interval_s u32     39 flat_counts u16
//! 41 clip_level i16     43 clip_permille u16  45 saturated_permille u16
//! 47 low_battery_mv u16 49 alert_db f32       53 danger_db f32
//! 57 counts_to_g f32    61 band source u8     62 survey kurtosis f32
//! 66 samples_per_rev u16                      68 max_speed_change_pct f32
//! 72 options u8: bit 0 rectifier square (else abs), bit 1 window flat-top
//!    (else Hann), bit 2 ISO group 1 "large" (else group 2), bit 3 support
//!    flexible (else rigid), bit 4 a search block follows (else dsp-core's
//!    default search), bits 5-7 zero
//! 73 shaft count u8 (1..=4)  74 bearing count u8 (0..=8)  75 mesh count u8 (0..=4)
//! 76 shaft ratios, f32 each (shaft 0 is the tach shaft)
//!    search block (option bit 4), 28 bytes: harmonics u8, min_harmonics u8,
//!    anchor_harmonics u8, mask_shaft_harmonics u8 (0/1), then f32:
//!    slip_tolerance, min_window_bins, prominence_db, floor_band_orders,
//!    refine_bins, sideband_db
//!    bearings: +0 u8 bits 1..0 kind (0 orders, 1 geometry), bits 5..4 shaft
//!    index, other bits zero; kind 0: BPFO, BPFI, FTF, BSF f32 in orders of
//!    the bearing's shaft (17 bytes); kind 1: rolling elements u8, element
//!    diameter, pitch diameter, contact angle deg f32 (14 bytes)
//!    meshes, 3 bytes each: u8 bits 1..0 shaft, bits 7..4 mate shaft (15 =
//!    none), teeth u16
//!  end: CRC-32 (ISO-HDLC) of all preceding bytes
//! ```
//!
//! Version 2 (66-byte header with a one-byte length, at most 4 bearings of
//! 22 bytes with their shaft ratio) and version 1 (no kurtosis field, byte
//! 61 reserved and zero, bearings from offset 62) are still read: their
//! distinct bearing-shaft ratios become the shafts (tach shaft first), and
//! what they cannot say takes the value the node used before version 3
//! (64 samples per revolution, 60 % speed change, abs rectifier, Hann,
//! ISO group 2 rigid, dsp-core's default search, no meshes). Only version 3
//! is written.
//!
//! A record is decoded and validated in one step ([`PointRecord::decode`]);
//! once it exists, its accessors cannot fail. What the node stores is a
//! [`StoredConfig`]: the record plus the replay counter of the downlink that
//! brought it, in one write (`firmware::store`).

use crate::crc::crc32;
use dsp_core::config::{DefectSearchConfig, MachineGroup, Rectifier, Support, Window};
use heapless::Vec;

/// Format version written by this firmware.
pub const VERSION: u8 = 3;
/// Version 2, still read.
pub const VERSION_2: u8 = 2;
/// Version 1, still read.
pub const VERSION_1: u8 = 1;
/// Record magic.
pub const MAGIC: [u8; 2] = *b"EP";
/// Most bearings one measuring point describes: as many as a v2 report
/// frame carries ([`crate::frame::layout::MAX_BEARINGS`]) and a `dsp-core`
/// point watches.
pub const MAX_BEARINGS: usize = crate::frame::layout::MAX_BEARINGS;
/// Most bearings a version 1 or 2 record carries.
pub const V2_MAX_BEARINGS: usize = crate::frame::layout::V1_MAX_BEARINGS;
/// Most shafts (the tach shaft included), as `dsp-core`.
pub const MAX_SHAFTS: usize = dsp_core::config::MAX_SHAFTS;
/// Most gear meshes, as `dsp-core`.
pub const MAX_MESHES: usize = dsp_core::config::MAX_MESHES;
/// Fixed part of a version 3 record (before the shaft ratios).
pub const HEADER_LEN: usize = 76;
const HEADER_LEN_V2: usize = 66;
const HEADER_LEN_V1: usize = 62;
const BEARING_LEN_V2: usize = 22;
/// Bytes of the optional search block.
pub const SEARCH_LEN: usize = 28;
/// Bytes of a bearing given by its defect orders.
pub const ORDERS_LEN: usize = 17;
/// Bytes of a bearing given by its geometry.
pub const GEOMETRY_LEN: usize = 14;
/// Bytes of a gear mesh.
pub const MESH_LEN: usize = 3;
const CRC_LEN: usize = 4;
const NO_MATE: u8 = 0x0F;
/// Largest encoded record in bytes (4 shafts, the search block, 8 bearings
/// by orders, 4 meshes): 272.
pub const MAX_RECORD_LEN: usize = HEADER_LEN
    + 4 * MAX_SHAFTS
    + SEARCH_LEN
    + MAX_BEARINGS * ORDERS_LEN
    + MAX_MESHES * MESH_LEN
    + CRC_LEN;
/// Largest stored configuration ([`StoredConfig`]: counter + record).
pub const MAX_STORED_LEN: usize = 4 + MAX_RECORD_LEN;

const OPT_SQUARE: u8 = 1;
const OPT_FLAT_TOP: u8 = 1 << 1;
const OPT_GROUP_LARGE: u8 = 1 << 2;
const OPT_FLEXIBLE: u8 = 1 << 3;
const OPT_SEARCH: u8 = 1 << 4;

/// Signal-health thresholds the record carries (bytes 38..46), used by the
/// node's streamed checks (`firmware::quality::SignalHealth`).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct HealthLimits {
    /// A record whose peak-to-peak span is at most this many counts is "flat".
    pub flat_counts: u16,
    /// Magnitude at or above which a sample counts as clipped.
    pub clip_level: i16,
    /// Clipped samples, per mille of the record, from which CLIPPING is raised.
    pub clip_permille: u16,
    /// Clipped samples, per mille, from which the sensor is called saturated.
    pub saturated_permille: u16,
}

impl Default for HealthLimits {
    fn default() -> Self {
        // 12-bit ADC in a signed 16-bit container (common practice); flat span
        // of a few counts covers ADC noise on a dead input.
        Self {
            flat_counts: 4,
            clip_level: 2047,
            clip_permille: 1,
            saturated_permille: 100,
        }
    }
}

pub use crate::band::BandSource;

/// How a bearing's defect frequencies are given.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BearingModel {
    /// Defect frequencies as multiples of the bearing shaft speed (orders).
    Orders {
        /// Ball pass frequency, outer race.
        bpfo: f32,
        /// Ball pass frequency, inner race.
        bpfi: f32,
        /// Fundamental train (cage) frequency.
        ftf: f32,
        /// Ball spin frequency.
        bsf: f32,
    },
    /// Geometry from which the core computes the orders.
    Geometry {
        /// Number of rolling elements.
        elements: u8,
        /// Rolling element diameter in mm.
        element_mm: f32,
        /// Pitch diameter in mm.
        pitch_mm: f32,
        /// Contact angle in degrees.
        contact_deg: f32,
    },
}

/// One monitored bearing.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingSpec {
    /// Index into [`PointRecord::shafts`] of the shaft it sits on.
    pub shaft: u8,
    /// Defect frequencies or geometry.
    pub model: BearingModel,
}

/// One watched gear mesh (teeth of the gear on `shaft`; the mesh order is
/// teeth x that shaft's order).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MeshSpec {
    /// Index into [`PointRecord::shafts`] of the shaft carrying the gear.
    pub shaft: u8,
    /// Teeth of that gear (>= 1).
    pub teeth: u16,
    /// Shaft of the meshing gear (its sidebands are measured too).
    pub mate: Option<u8>,
}

/// Measuring-point configuration (decoded and validated).
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct PointRecord {
    /// ADC sample rate in Hz.
    pub sample_rate_hz: u32,
    /// Band-pass lower edge in Hz (0 when [`BandSource::Unset`]).
    pub band_lo_hz: f32,
    /// Band-pass upper edge in Hz (0 when [`BandSource::Unset`]).
    pub band_hi_hz: f32,
    /// Where the band comes from.
    pub band_source: BandSource,
    /// Spectral kurtosis of the band when [`BandSource::Survey`] (finite);
    /// otherwise 0 (written as 0 whatever it holds).
    pub band_kurtosis: f32,
    /// Band-pass order (poles), even.
    pub poles: u8,
    /// Tach pulses per revolution of the tach shaft.
    pub pulses_per_rev: u8,
    /// Revolutions of the tach shaft to record (first pass).
    pub record_revs: u16,
    /// Lowest shaft speed measured, rpm.
    pub speed_min_rpm: f32,
    /// Highest shaft speed measured, rpm.
    pub speed_max_rpm: f32,
    /// Tach capture timer rate in Hz.
    pub tach_tick_hz: u32,
    /// Sensor settling time after power-up, ms.
    pub settle_ms: u16,
    /// Interval between scheduled measurements, s.
    pub interval_s: u32,
    /// Signal-health thresholds.
    pub health: HealthLimits,
    /// LOW_BATTERY below this supply voltage, mV.
    pub low_battery_mv: u16,
    /// The point's alert level: rise of a defect's envelope amplitude over
    /// its baseline, dB. The node carries it with the rest of the point; the
    /// gateway grades with it (`envord gateway downlink ... config --db`
    /// stores it as the node's limits; docs/gateway.md "Alarms").
    pub alert_db: f32,
    /// The point's danger level, dB over the baseline (as `alert_db`).
    pub danger_db: f32,
    /// Acceleration per ADC count, g (sensor sensitivity and ADC gain).
    pub counts_to_g: f32,
    /// Angle-domain samples per tach revolution of the first pass (a power
    /// of two, 16..=1024); later passes follow from the shafts
    /// (`dsp_core::diagnosis::coverage::plan`).
    pub samples_per_rev: u16,
    /// Largest speed change over a record, percent of the mean.
    pub max_speed_change_pct: f32,
    /// Envelope rectifier.
    pub rectifier: Rectifier,
    /// Spectral window.
    pub window: Window,
    /// ISO 20816-3 machine group.
    pub machine_group: MachineGroup,
    /// ISO 20816-3 support class.
    pub support: Support,
    /// Shaft speeds over the tach shaft's (1 to [`MAX_SHAFTS`]; index 0 is
    /// the tach shaft).
    pub shafts: Vec<f32, MAX_SHAFTS>,
    /// Monitored bearings (0 to [`MAX_BEARINGS`]; none: overall levels only,
    /// as `analyze` of a point without bearings).
    pub bearings: Vec<BearingSpec, MAX_BEARINGS>,
    /// Watched gear meshes (0 to [`MAX_MESHES`]).
    pub meshes: Vec<MeshSpec, MAX_MESHES>,
    /// Defect search settings.
    pub search: DefectSearchConfig,
}

impl Default for PointRecord {
    /// A fictional demonstration point: a 1480 rpm motor on a test stand,
    /// one deep-groove bearing given by its geometry. Valid by construction.
    fn default() -> Self {
        let mut bearings = Vec::new();
        // capacity is MAX_BEARINGS >= 1, so this push cannot fail
        let _ = bearings.push(BearingSpec {
            shaft: 0,
            model: BearingModel::Geometry {
                elements: 9,
                element_mm: 7.94,
                pitch_mm: 39.04,
                contact_deg: 0.0,
            },
        });
        let mut shafts = Vec::new();
        let _ = shafts.push(1.0);
        Self {
            sample_rate_hz: 25_600,
            band_lo_hz: 2_000.0,
            band_hi_hz: 8_000.0,
            band_source: BandSource::Configured,
            band_kurtosis: 0.0,
            poles: 4,
            pulses_per_rev: 1,
            record_revs: 64,
            // the node pipeline's resampler ring bounds the speed range (2048
            // samples cover 1000..3600 rpm at this rate; 600 rpm would not fit)
            speed_min_rpm: 1_000.0,
            speed_max_rpm: 3_600.0,
            tach_tick_hz: 25_600,
            settle_ms: 200,
            interval_s: 3_600,
            health: HealthLimits::default(),
            low_battery_mv: 3_000,
            alert_db: 6.0,
            danger_db: 12.0,
            // 100 mV/g sensor, 3.6 V over 4096 counts: 0.879 mV per count
            counts_to_g: 0.008_789,
            samples_per_rev: 64,
            max_speed_change_pct: 60.0,
            rectifier: Rectifier::Abs,
            window: Window::Hann,
            machine_group: MachineGroup::Medium,
            support: Support::Rigid,
            shafts,
            bearings,
            meshes: Vec::new(),
            search: DefectSearchConfig::default(),
        }
    }
}

/// Why a record was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConfigError {
    /// Shorter than its header or its declared length.
    Truncated,
    /// Not a configuration record.
    BadMagic,
    /// Written by a format version this firmware does not read.
    UnsupportedVersion(u8),
    /// Declared length does not match the content.
    BadLength,
    /// CRC mismatch: corrupted in storage or transit.
    BadCrc,
    /// A field is out of its allowed range (the field's name, as in
    /// [`PointRecord`]; `search.*` for the search settings).
    OutOfRange(&'static str),
    /// The output buffer is too small to encode the record.
    BufferTooSmall,
}

impl core::fmt::Display for ConfigError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Truncated => f.write_str("configuration record truncated"),
            Self::BadMagic => f.write_str("not a configuration record"),
            Self::UnsupportedVersion(v) => write!(f, "unsupported configuration version {v}"),
            Self::BadLength => f.write_str("configuration length does not match its content"),
            Self::BadCrc => f.write_str("configuration CRC mismatch"),
            Self::OutOfRange(name) => write!(f, "configuration field `{name}` out of range"),
            Self::BufferTooSmall => f.write_str("buffer too small for configuration record"),
        }
    }
}

impl core::error::Error for ConfigError {}

/// Little-endian cursor over a byte slice; every read is bounds-checked.
struct Reader<'a> {
    data: &'a [u8],
}

impl<'a> Reader<'a> {
    fn take<const N: usize>(&mut self) -> Result<[u8; N], ConfigError> {
        let (head, rest) = self
            .data
            .split_at_checked(N)
            .ok_or(ConfigError::BadLength)?;
        self.data = rest;
        let mut out = [0u8; N];
        out.copy_from_slice(head);
        Ok(out)
    }
    fn u8(&mut self) -> Result<u8, ConfigError> {
        Ok(self.take::<1>()?[0])
    }
    fn u16(&mut self) -> Result<u16, ConfigError> {
        Ok(u16::from_le_bytes(self.take()?))
    }
    fn i16(&mut self) -> Result<i16, ConfigError> {
        Ok(i16::from_le_bytes(self.take()?))
    }
    fn u32(&mut self) -> Result<u32, ConfigError> {
        Ok(u32::from_le_bytes(self.take()?))
    }
    fn f32(&mut self) -> Result<f32, ConfigError> {
        Ok(f32::from_le_bytes(self.take()?))
    }
}

/// Little-endian writer into a fixed buffer.
struct Writer<'a> {
    buf: &'a mut [u8],
    pos: usize,
}

impl Writer<'_> {
    fn put(&mut self, bytes: &[u8]) -> Result<(), ConfigError> {
        let end = self
            .pos
            .checked_add(bytes.len())
            .ok_or(ConfigError::BufferTooSmall)?;
        let dst = self
            .buf
            .get_mut(self.pos..end)
            .ok_or(ConfigError::BufferTooSmall)?;
        dst.copy_from_slice(bytes);
        self.pos = end;
        Ok(())
    }
    fn f32s(&mut self, v: &[f32]) -> Result<(), ConfigError> {
        for x in v {
            self.put(&x.to_le_bytes())?;
        }
        Ok(())
    }
}

fn check(ok: bool, field: &'static str) -> Result<(), ConfigError> {
    if ok {
        Ok(())
    } else {
        Err(ConfigError::OutOfRange(field))
    }
}

fn in_range(x: f32, lo: f32, hi: f32) -> bool {
    x.is_finite() && x >= lo && x <= hi
}

fn positive(x: f32, hi: f32) -> bool {
    x.is_finite() && x > 0.0 && x <= hi
}

/// The options byte of a version 3 record, or the field no code names.
fn options(r: &PointRecord) -> Result<u8, ConfigError> {
    let mut o = 0u8;
    if r.rectifier == Rectifier::Square {
        o |= OPT_SQUARE;
    }
    match r.window {
        Window::Hann => {}
        Window::FlatTop => o |= OPT_FLAT_TOP,
        _ => return Err(ConfigError::OutOfRange("window")),
    }
    if r.machine_group == MachineGroup::Large {
        o |= OPT_GROUP_LARGE;
    }
    if r.support == Support::Flexible {
        o |= OPT_FLEXIBLE;
    }
    if r.search != DefectSearchConfig::default() {
        o |= OPT_SEARCH;
    }
    Ok(o)
}

/// Checks the search settings field by field (the ranges of
/// `DefectSearchConfig::validate`, each with its own name).
fn validate_search(s: &DefectSearchConfig) -> Result<(), ConfigError> {
    check((1..=10).contains(&s.harmonics), "search.harmonics")?;
    check(
        (1..=s.harmonics).contains(&s.min_harmonics),
        "search.min_harmonics",
    )?;
    check(
        (1..=s.harmonics).contains(&s.anchor_harmonics),
        "search.anchor_harmonics",
    )?;
    check(positive(s.slip_tolerance, 0.2), "search.slip_tolerance")?;
    check(
        in_range(s.min_window_bins, 0.5, 1000.0),
        "search.min_window_bins",
    )?;
    check(
        positive(s.prominence_threshold_db, f32::MAX),
        "search.prominence_db",
    )?;
    check(
        positive(s.floor_band_orders, 1000.0),
        "search.floor_band_orders",
    )?;
    check(in_range(s.refine_bins, 0.5, 1000.0), "search.refine_bins")?;
    check(
        positive(s.sideband_threshold_db, f32::MAX),
        "search.sideband_db",
    )
}

impl PointRecord {
    /// Checks every field against its allowed range.
    pub fn validate(&self) -> Result<(), ConfigError> {
        check(
            (1_000..=200_000).contains(&self.sample_rate_hz),
            "sample_rate_hz",
        )?;
        // u32 -> f32 is exact below 2^24, and the range above keeps it there
        let nyquist = f32::from(u16::try_from(self.sample_rate_hz / 2).unwrap_or(u16::MAX));
        if self.band_source == BandSource::Unset {
            // canonical form, so decode(encode(x)) == x
            check(
                self.band_lo_hz == 0.0 && self.band_hi_hz == 0.0,
                "band_lo_hz",
            )?;
        } else {
            check(in_range(self.band_lo_hz, 1.0, nyquist), "band_lo_hz")?;
            check(
                in_range(self.band_hi_hz, self.band_lo_hz, nyquist)
                    && self.band_hi_hz > self.band_lo_hz,
                "band_hi_hz",
            )?;
        }
        if self.band_source == BandSource::Survey {
            check(in_range(self.band_kurtosis, -3.0, 1.0e6), "band_kurtosis")?;
        }
        check(matches!(self.poles, 2 | 4 | 6 | 8), "poles")?;
        check(self.pulses_per_rev >= 1, "pulses_per_rev")?;
        check(self.record_revs >= 1, "record_revs")?;
        check(in_range(self.speed_min_rpm, 1.0, 60_000.0), "speed_min_rpm")?;
        check(
            in_range(self.speed_max_rpm, self.speed_min_rpm, 60_000.0),
            "speed_max_rpm",
        )?;
        check(
            (1_000..=64_000_000).contains(&self.tach_tick_hz),
            "tach_tick_hz",
        )?;
        check(self.settle_ms <= 10_000, "settle_ms")?;
        check((10..=7 * 86_400).contains(&self.interval_s), "interval_s")?;
        check(self.health.flat_counts <= 1_000, "flat_counts")?;
        check(self.health.clip_level > 0, "clip_level")?;
        check(
            (1..=1_000).contains(&self.health.clip_permille),
            "clip_permille",
        )?;
        check(
            (self.health.clip_permille..=1_000).contains(&self.health.saturated_permille),
            "saturated_permille",
        )?;
        check(
            (1_000..=5_000).contains(&self.low_battery_mv),
            "low_battery_mv",
        )?;
        check(in_range(self.alert_db, 0.0, 60.0), "alert_db")?;
        check(in_range(self.danger_db, self.alert_db, 60.0), "danger_db")?;
        check(in_range(self.counts_to_g, 1e-9, 1e3), "counts_to_g")?;
        check(
            self.samples_per_rev.is_power_of_two() && (16..=1024).contains(&self.samples_per_rev),
            "samples_per_rev",
        )?;
        check(
            positive(self.max_speed_change_pct, 1e4),
            "max_speed_change_pct",
        )?;
        options(self)?;
        validate_search(&self.search)?;
        check(
            !self.shafts.is_empty() && self.shafts.iter().all(|&r| in_range(r, 1e-4, 1e4)),
            "shaft_ratio",
        )?;
        let shafts = self.shafts.len();
        for b in &self.bearings {
            check(usize::from(b.shaft) < shafts, "bearing_shaft")?;
            match b.model {
                BearingModel::Orders {
                    bpfo,
                    bpfi,
                    ftf,
                    bsf,
                } => {
                    for o in [bpfo, bpfi, ftf, bsf] {
                        check(in_range(o, 0.01, 1000.0), "defect_order")?;
                    }
                }
                BearingModel::Geometry {
                    elements,
                    element_mm,
                    pitch_mm,
                    contact_deg,
                } => {
                    check(elements >= 1, "elements")?;
                    check(positive(pitch_mm, 1e5), "pitch_mm")?;
                    check(
                        positive(element_mm, pitch_mm) && element_mm < pitch_mm,
                        "element_mm",
                    )?;
                    check(
                        in_range(contact_deg, 0.0, 90.0) && contact_deg < 90.0,
                        "contact_deg",
                    )?;
                }
            }
        }
        for m in &self.meshes {
            check(usize::from(m.shaft) < shafts, "mesh_shaft")?;
            check(m.teeth >= 1, "mesh_teeth")?;
            check(
                m.mate
                    .is_none_or(|x| x != m.shaft && usize::from(x) < shafts),
                "mesh_mate",
            )?;
        }
        Ok(())
    }

    /// Encoded length of this record in bytes (version 3).
    pub fn encoded_len(&self) -> usize {
        let search = if self.search == DefectSearchConfig::default() {
            0
        } else {
            SEARCH_LEN
        };
        let bearings: usize = self
            .bearings
            .iter()
            .map(|b| match b.model {
                BearingModel::Orders { .. } => ORDERS_LEN,
                BearingModel::Geometry { .. } => GEOMETRY_LEN,
            })
            .sum();
        HEADER_LEN
            + 4 * self.shafts.len()
            + search
            + bearings
            + MESH_LEN * self.meshes.len()
            + CRC_LEN
    }

    /// Validates and writes the record (version 3); returns its length.
    pub fn encode(&self, buf: &mut [u8]) -> Result<usize, ConfigError> {
        self.validate()?;
        let len = u16::try_from(self.encoded_len()).map_err(|_| ConfigError::BadLength)?;
        let count = |n: usize| u8::try_from(n).map_err(|_| ConfigError::BadLength);
        let opts = options(self)?;
        let mut w = Writer { buf, pos: 0 };
        w.put(&MAGIC)?;
        w.put(&[VERSION])?;
        w.put(&len.to_le_bytes())?;
        w.put(&self.sample_rate_hz.to_le_bytes())?;
        w.f32s(&[self.band_lo_hz, self.band_hi_hz])?;
        w.put(&[self.poles, self.pulses_per_rev])?;
        w.put(&self.record_revs.to_le_bytes())?;
        w.f32s(&[self.speed_min_rpm, self.speed_max_rpm])?;
        w.put(&self.tach_tick_hz.to_le_bytes())?;
        w.put(&self.settle_ms.to_le_bytes())?;
        w.put(&self.interval_s.to_le_bytes())?;
        w.put(&self.health.flat_counts.to_le_bytes())?;
        w.put(&self.health.clip_level.to_le_bytes())?;
        w.put(&self.health.clip_permille.to_le_bytes())?;
        w.put(&self.health.saturated_permille.to_le_bytes())?;
        w.put(&self.low_battery_mv.to_le_bytes())?;
        w.f32s(&[self.alert_db, self.danger_db, self.counts_to_g])?;
        let (source, kurtosis) = match self.band_source {
            BandSource::Configured => (0u8, 0.0f32),
            BandSource::Survey => (1, self.band_kurtosis),
            BandSource::Unset => (2, 0.0),
        };
        w.put(&[source])?;
        w.put(&kurtosis.to_le_bytes())?;
        w.put(&self.samples_per_rev.to_le_bytes())?;
        w.put(&self.max_speed_change_pct.to_le_bytes())?;
        w.put(&[
            opts,
            count(self.shafts.len())?,
            count(self.bearings.len())?,
            count(self.meshes.len())?,
        ])?;
        w.f32s(&self.shafts)?;
        if opts & OPT_SEARCH != 0 {
            let s = &self.search;
            w.put(&[
                s.harmonics,
                s.min_harmonics,
                s.anchor_harmonics,
                u8::from(s.mask_shaft_harmonics),
            ])?;
            w.f32s(&[
                s.slip_tolerance,
                s.min_window_bins,
                s.prominence_threshold_db,
                s.floor_band_orders,
                s.refine_bins,
                s.sideband_threshold_db,
            ])?;
        }
        for b in &self.bearings {
            let tag = b.shaft << 4;
            match b.model {
                BearingModel::Orders {
                    bpfo,
                    bpfi,
                    ftf,
                    bsf,
                } => {
                    w.put(&[tag])?;
                    w.f32s(&[bpfo, bpfi, ftf, bsf])?;
                }
                BearingModel::Geometry {
                    elements,
                    element_mm,
                    pitch_mm,
                    contact_deg,
                } => {
                    w.put(&[tag | 1, elements])?;
                    w.f32s(&[element_mm, pitch_mm, contact_deg])?;
                }
            }
        }
        for m in &self.meshes {
            w.put(&[m.shaft | (m.mate.unwrap_or(NO_MATE) << 4)])?;
            w.put(&m.teeth.to_le_bytes())?;
        }
        let crc = crc32(w.buf.get(..w.pos).ok_or(ConfigError::BufferTooSmall)?);
        w.put(&crc.to_le_bytes())?;
        Ok(w.pos)
    }

    /// Parses, checks the CRC, version (1, 2 or 3), the length against the
    /// content and every range. Trailing bytes after the declared length
    /// are ignored.
    pub fn decode(data: &[u8]) -> Result<Self, ConfigError> {
        let head = data.get(..5).ok_or(ConfigError::Truncated)?;
        if head.get(..2) != Some(&MAGIC[..]) {
            return Err(ConfigError::BadMagic);
        }
        let version = head.get(2).copied().unwrap_or(0);
        let b3 = usize::from(head.get(3).copied().unwrap_or(0));
        let (len, min_len, body_at) = match version {
            VERSION => (
                b3 | usize::from(head.get(4).copied().unwrap_or(0)) << 8,
                HEADER_LEN,
                5,
            ),
            VERSION_2 => (b3, HEADER_LEN_V2, 4),
            VERSION_1 => (b3, HEADER_LEN_V1, 4),
            v => return Err(ConfigError::UnsupportedVersion(v)),
        };
        if len < min_len + CRC_LEN {
            return Err(ConfigError::BadLength);
        }
        let record = data.get(..len).ok_or(ConfigError::Truncated)?;
        let (body, crc_bytes) = record
            .split_at_checked(len - CRC_LEN)
            .ok_or(ConfigError::Truncated)?;
        let mut crc = [0u8; 4];
        crc.copy_from_slice(crc_bytes);
        if crc32(body) != u32::from_le_bytes(crc) {
            return Err(ConfigError::BadCrc);
        }
        let mut r = Reader {
            data: body.get(body_at..).ok_or(ConfigError::Truncated)?,
        };
        let mut rec = Self {
            sample_rate_hz: r.u32()?,
            band_lo_hz: r.f32()?,
            band_hi_hz: r.f32()?,
            poles: r.u8()?,
            pulses_per_rev: r.u8()?,
            record_revs: r.u16()?,
            speed_min_rpm: r.f32()?,
            speed_max_rpm: r.f32()?,
            tach_tick_hz: r.u32()?,
            settle_ms: r.u16()?,
            interval_s: r.u32()?,
            health: HealthLimits {
                flat_counts: r.u16()?,
                clip_level: r.i16()?,
                clip_permille: r.u16()?,
                saturated_permille: r.u16()?,
            },
            low_battery_mv: r.u16()?,
            alert_db: r.f32()?,
            danger_db: r.f32()?,
            counts_to_g: r.f32()?,
            ..Self::default()
        };
        rec.bearings.clear();
        rec.shafts.clear();
        let old_count = if version == VERSION { 0 } else { r.u8()? };
        let source = r.u8()?;
        let kurtosis = if version == VERSION_1 { 0.0 } else { r.f32()? };
        rec.band_kurtosis = kurtosis;
        rec.band_source = match (version, source) {
            (_, 0) if kurtosis == 0.0 => BandSource::Configured,
            (VERSION_2 | VERSION, 1) => BandSource::Survey,
            (VERSION_2 | VERSION, 2) if kurtosis == 0.0 => BandSource::Unset,
            _ => return Err(ConfigError::OutOfRange("band_source")),
        };
        if version == VERSION {
            decode_v3_tail(&mut r, &mut rec)?;
        } else {
            decode_v2_bearings(&mut r, &mut rec, usize::from(old_count))?;
        }
        if !r.data.is_empty() {
            return Err(ConfigError::BadLength);
        }
        rec.validate()?;
        Ok(rec)
    }

    /// The band edges, when the record has one.
    pub fn band_hz(&self) -> Option<[f32; 2]> {
        (self.band_source != BandSource::Unset).then_some([self.band_lo_hz, self.band_hi_hz])
    }

    /// This record with the band a survey chose (`kurtosis` its spectral
    /// kurtosis), validated.
    pub fn with_survey_band(&self, band_hz: [f32; 2], kurtosis: f32) -> Result<Self, ConfigError> {
        let mut r = self.clone();
        r.band_lo_hz = band_hz[0];
        r.band_hi_hz = band_hz[1];
        r.band_source = BandSource::Survey;
        r.band_kurtosis = kurtosis;
        r.validate()?;
        Ok(r)
    }

    /// Blocks of `block_len` samples to record: `record_revs` revolutions at
    /// the lowest speed, rounded up, at least 1 and at most `max_blocks`.
    pub fn record_blocks(&self, block_len: usize, max_blocks: u32) -> u32 {
        // samples = revs * 60 / rpm_min * fs, in f64 (all inputs validated finite)
        let secs = f64::from(self.record_revs) * 60.0 / f64::from(self.speed_min_rpm);
        let samples = secs * f64::from(self.sample_rate_hz);
        let block = f64::from(u32::try_from(block_len.max(1)).unwrap_or(u32::MAX));
        let blocks = ceil_to_u32(samples / block);
        blocks.clamp(1, max_blocks.max(1))
    }
}

/// Version 3 after the band source: first-pass spectrum, options, shafts,
/// search block, bearings, meshes.
fn decode_v3_tail(r: &mut Reader<'_>, rec: &mut PointRecord) -> Result<(), ConfigError> {
    rec.samples_per_rev = r.u16()?;
    rec.max_speed_change_pct = r.f32()?;
    let opts = r.u8()?;
    check(opts < 1 << 5, "options")?;
    rec.rectifier = if opts & OPT_SQUARE != 0 {
        Rectifier::Square
    } else {
        Rectifier::Abs
    };
    rec.window = if opts & OPT_FLAT_TOP != 0 {
        Window::FlatTop
    } else {
        Window::Hann
    };
    rec.machine_group = if opts & OPT_GROUP_LARGE != 0 {
        MachineGroup::Large
    } else {
        MachineGroup::Medium
    };
    rec.support = if opts & OPT_FLEXIBLE != 0 {
        Support::Flexible
    } else {
        Support::Rigid
    };
    let shafts = r.u8()?;
    let bearings = r.u8()?;
    let meshes = r.u8()?;
    check((1..=MAX_SHAFTS).contains(&usize::from(shafts)), "shafts")?;
    check(usize::from(bearings) <= MAX_BEARINGS, "bearings")?;
    check(usize::from(meshes) <= MAX_MESHES, "meshes")?;
    for _ in 0..shafts {
        rec.shafts
            .push(r.f32()?)
            .map_err(|_| ConfigError::OutOfRange("shafts"))?;
    }
    if opts & OPT_SEARCH != 0 {
        let s = &mut rec.search;
        s.harmonics = r.u8()?;
        s.min_harmonics = r.u8()?;
        s.anchor_harmonics = r.u8()?;
        s.mask_shaft_harmonics = match r.u8()? {
            0 => false,
            1 => true,
            _ => return Err(ConfigError::OutOfRange("search.mask_shaft_harmonics")),
        };
        s.slip_tolerance = r.f32()?;
        s.min_window_bins = r.f32()?;
        s.prominence_threshold_db = r.f32()?;
        s.floor_band_orders = r.f32()?;
        s.refine_bins = r.f32()?;
        s.sideband_threshold_db = r.f32()?;
        // canonical: a block equal to the default is written as none
        check(*s != DefectSearchConfig::default(), "options")?;
    }
    for _ in 0..bearings {
        let tag = r.u8()?;
        check(tag & 0b1100_1110 == 0, "bearing_kind")?;
        let shaft = tag >> 4;
        let model = if tag & 1 == 0 {
            BearingModel::Orders {
                bpfo: r.f32()?,
                bpfi: r.f32()?,
                ftf: r.f32()?,
                bsf: r.f32()?,
            }
        } else {
            BearingModel::Geometry {
                elements: r.u8()?,
                element_mm: r.f32()?,
                pitch_mm: r.f32()?,
                contact_deg: r.f32()?,
            }
        };
        rec.bearings
            .push(BearingSpec { shaft, model })
            .map_err(|_| ConfigError::OutOfRange("bearings"))?;
    }
    for _ in 0..meshes {
        let b = r.u8()?;
        check(b & 0b1100 == 0, "mesh_shaft")?;
        let mate = match b >> 4 {
            NO_MATE => None,
            x => Some(x),
        };
        rec.meshes
            .push(MeshSpec {
                shaft: b & 0b11,
                teeth: r.u16()?,
                mate,
            })
            .map_err(|_| ConfigError::OutOfRange("meshes"))?;
    }
    Ok(())
}

/// Versions 1 and 2: `count` bearings of 22 bytes with their shaft ratio;
/// the distinct ratios become the shafts, the tach shaft (1) first.
fn decode_v2_bearings(
    r: &mut Reader<'_>,
    rec: &mut PointRecord,
    count: usize,
) -> Result<(), ConfigError> {
    if count > V2_MAX_BEARINGS || r.data.len() != count * BEARING_LEN_V2 {
        return Err(ConfigError::BadLength);
    }
    rec.shafts
        .push(1.0)
        .map_err(|_| ConfigError::OutOfRange("shafts"))?;
    for _ in 0..count {
        let kind = r.u8()?;
        let elements = r.u8()?;
        let ratio = r.f32()?;
        let v = [r.f32()?, r.f32()?, r.f32()?, r.f32()?];
        let model = match kind {
            0 => BearingModel::Orders {
                bpfo: v[0],
                bpfi: v[1],
                ftf: v[2],
                bsf: v[3],
            },
            1 => BearingModel::Geometry {
                elements,
                element_mm: v[0],
                pitch_mm: v[1],
                contact_deg: v[2],
            },
            _ => return Err(ConfigError::OutOfRange("bearing_kind")),
        };
        let shaft = match rec.shafts.iter().position(|&s| s == ratio) {
            Some(i) => i,
            None => {
                rec.shafts
                    .push(ratio)
                    .map_err(|_| ConfigError::OutOfRange("shafts"))?;
                rec.shafts.len() - 1
            }
        };
        rec.bearings
            .push(BearingSpec {
                shaft: u8::try_from(shaft).map_err(|_| ConfigError::OutOfRange("shafts"))?,
                model,
            })
            .map_err(|_| ConfigError::OutOfRange("bearings"))?;
    }
    Ok(())
}

/// Rounds up to an integer, saturating (NaN and negatives give 0).
fn ceil_to_u32(x: f64) -> u32 {
    let t = f64_to_u32(x);
    if f64::from(t) < x {
        t.saturating_add(1)
    } else {
        t
    }
}

#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
fn f64_to_u32(x: f64) -> u32 {
    // float-to-int `as` saturates and maps NaN to 0 (Rust reference)
    x as u32
}

/// What the node stores in its configuration slot: the record and the replay
/// counter of the downlink that last changed the node's state, written
/// together so that a power cycle can never separate them.
///
/// Layout: counter u32 LE, then the [`PointRecord`] bytes.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StoredConfig {
    /// Counter of the last accepted downlink (0 at provisioning).
    pub counter: u32,
    /// The configuration.
    pub record: PointRecord,
}

impl StoredConfig {
    /// Writes the counter and the validated record; returns the length.
    pub fn encode(&self, buf: &mut [u8]) -> Result<usize, ConfigError> {
        let (head, rest) = buf
            .split_at_mut_checked(4)
            .ok_or(ConfigError::BufferTooSmall)?;
        head.copy_from_slice(&self.counter.to_le_bytes());
        Ok(4 + self.record.encode(rest)?)
    }

    /// Reads what [`StoredConfig::encode`] wrote.
    pub fn decode(data: &[u8]) -> Result<Self, ConfigError> {
        let (head, rest) = data.split_at_checked(4).ok_or(ConfigError::Truncated)?;
        let mut c = [0u8; 4];
        c.copy_from_slice(head);
        Ok(Self {
            counter: u32::from_le_bytes(c),
            record: PointRecord::decode(rest)?,
        })
    }
}
