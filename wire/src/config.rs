//! The measuring-point configuration as a compact, versioned binary record.
//!
//! Layout, version 2, all fields little-endian (offsets in bytes):
//!
//! ```text
//!  0 magic "EP"          2 version u8 = 2      3 total length u8 (incl. CRC)
//!  4 sample_rate_hz u32  8 band_lo_hz f32     12 band_hi_hz f32
//! 16 poles u8           17 pulses_per_rev u8  18 record_revs u16
//! 20 speed_min_rpm f32  24 speed_max_rpm f32  28 tach_tick_hz u32
//! 32 settle_ms u16      34 interval_s u32     38 flat_counts u16
//! 40 clip_level i16     42 clip_permille u16  44 saturated_permille u16
//! 46 low_battery_mv u16 48 alert_db f32       52 danger_db f32
//! 56 counts_to_g f32 (sensor and ADC sensitivity, g per count)
//! 60 bearing count u8   61 band source u8: 0 configured, 1 chosen by the
//!                          node's band survey, 2 none (band fields 0: the
//!                          node surveys, meanwhile dsp-core's default band)
//! 62 survey kurtosis f32 (source 1: spectral kurtosis of the band; else 0)
//! 66 bearings, 22 bytes each:
//!    +0 kind u8 (0 = defect orders given, 1 = geometry)  +1 rolling elements u8
//!    +2 shaft_ratio f32 (bearing shaft speed / tach shaft speed)
//!    +6 four f32: kind 0: BPFO, BPFI, FTF, BSF in orders of the bearing shaft
//!                 kind 1: element diameter mm, pitch diameter mm, contact angle deg, 0
//!  end: CRC-32 (ISO-HDLC) of all preceding bytes
//! ```
//!
//! Version 1 records (no kurtosis field, byte 61 reserved and zero, bearings
//! from offset 62) are still read, as configured bands.
//!
//! A record is decoded and validated in one step ([`PointRecord::decode`]);
//! once it exists, its accessors cannot fail. What the node stores is a
//! [`StoredConfig`]: the record plus the replay counter of the downlink that
//! brought it, in one write (`firmware::store`).

use crate::crc::crc32;
use heapless::Vec;

/// Format version written by this firmware.
pub const VERSION: u8 = 2;
/// The previous version, still read.
pub const VERSION_1: u8 = 1;
/// Record magic.
pub const MAGIC: [u8; 2] = *b"EP";
/// Most bearings one measuring point describes.
/// Record versions 1 and 2 carry 4 bearings (the v1 frame's capacity); a
/// v2 report frame carries 8 ([`crate::frame::layout::MAX_BEARINGS`]).
pub const MAX_BEARINGS: usize = crate::frame::layout::V1_MAX_BEARINGS;
const HEADER_LEN: usize = 66;
const HEADER_LEN_V1: usize = 62;
const BEARING_LEN: usize = 22;
/// Largest encoded record in bytes.
pub const MAX_RECORD_LEN: usize = HEADER_LEN + MAX_BEARINGS * BEARING_LEN + 4;
/// Largest stored configuration ([`StoredConfig`]: counter + record).
pub const MAX_STORED_LEN: usize = 4 + MAX_RECORD_LEN;

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
    /// Bearing shaft speed divided by tach shaft speed (gear ratio).
    pub shaft_ratio: f32,
    /// Defect frequencies or geometry.
    pub model: BearingModel,
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
    /// Revolutions of the tach shaft to record.
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
    /// Monitored bearings (1 to [`MAX_BEARINGS`]).
    pub bearings: Vec<BearingSpec, MAX_BEARINGS>,
}

impl Default for PointRecord {
    /// A fictional demonstration point: a 1480 rpm motor on a test stand,
    /// one deep-groove bearing given by its geometry. Valid by construction.
    fn default() -> Self {
        let mut bearings = Vec::new();
        // capacity is MAX_BEARINGS >= 1, so this push cannot fail
        let _ = bearings.push(BearingSpec {
            shaft_ratio: 1.0,
            model: BearingModel::Geometry {
                elements: 9,
                element_mm: 7.94,
                pitch_mm: 39.04,
                contact_deg: 0.0,
            },
        });
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
            bearings,
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
    /// Declared length does not match the bearing count.
    BadLength,
    /// CRC mismatch: corrupted in storage or transit.
    BadCrc,
    /// A field is out of its allowed range (the field's name).
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
            .ok_or(ConfigError::Truncated)?;
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
        check((1..=64).contains(&self.pulses_per_rev), "pulses_per_rev")?;
        check((4..=1_000).contains(&self.record_revs), "record_revs")?;
        check(
            in_range(self.speed_min_rpm, 10.0, 60_000.0),
            "speed_min_rpm",
        )?;
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
        check(in_range(self.counts_to_g, 1e-7, 1.0), "counts_to_g")?;
        check(!self.bearings.is_empty(), "bearings")?;
        for b in &self.bearings {
            check(in_range(b.shaft_ratio, 0.01, 100.0), "shaft_ratio")?;
            match b.model {
                BearingModel::Orders {
                    bpfo,
                    bpfi,
                    ftf,
                    bsf,
                } => {
                    for o in [bpfo, bpfi, ftf, bsf] {
                        check(in_range(o, 0.05, 100.0), "defect_order")?;
                    }
                }
                BearingModel::Geometry {
                    elements,
                    element_mm,
                    pitch_mm,
                    contact_deg,
                } => {
                    check((3..=64).contains(&elements), "elements")?;
                    check(in_range(pitch_mm, 1.0, 5_000.0), "pitch_mm")?;
                    check(
                        in_range(element_mm, 0.1, pitch_mm) && element_mm < pitch_mm,
                        "element_mm",
                    )?;
                    check(in_range(contact_deg, 0.0, 45.0), "contact_deg")?;
                }
            }
        }
        Ok(())
    }

    /// Encoded length of this record in bytes.
    pub fn encoded_len(&self) -> usize {
        HEADER_LEN + self.bearings.len() * BEARING_LEN + 4
    }

    /// Validates and writes the record; returns its length.
    pub fn encode(&self, buf: &mut [u8]) -> Result<usize, ConfigError> {
        self.validate()?;
        let len = self.encoded_len();
        let len_u8 = u8::try_from(len).map_err(|_| ConfigError::BadLength)?;
        let count = u8::try_from(self.bearings.len()).map_err(|_| ConfigError::BadLength)?;
        let mut w = Writer { buf, pos: 0 };
        w.put(&MAGIC)?;
        w.put(&[VERSION, len_u8])?;
        w.put(&self.sample_rate_hz.to_le_bytes())?;
        w.put(&self.band_lo_hz.to_le_bytes())?;
        w.put(&self.band_hi_hz.to_le_bytes())?;
        w.put(&[self.poles, self.pulses_per_rev])?;
        w.put(&self.record_revs.to_le_bytes())?;
        w.put(&self.speed_min_rpm.to_le_bytes())?;
        w.put(&self.speed_max_rpm.to_le_bytes())?;
        w.put(&self.tach_tick_hz.to_le_bytes())?;
        w.put(&self.settle_ms.to_le_bytes())?;
        w.put(&self.interval_s.to_le_bytes())?;
        w.put(&self.health.flat_counts.to_le_bytes())?;
        w.put(&self.health.clip_level.to_le_bytes())?;
        w.put(&self.health.clip_permille.to_le_bytes())?;
        w.put(&self.health.saturated_permille.to_le_bytes())?;
        w.put(&self.low_battery_mv.to_le_bytes())?;
        w.put(&self.alert_db.to_le_bytes())?;
        w.put(&self.danger_db.to_le_bytes())?;
        w.put(&self.counts_to_g.to_le_bytes())?;
        let (source, kurtosis) = match self.band_source {
            BandSource::Configured => (0u8, 0.0f32),
            BandSource::Survey => (1, self.band_kurtosis),
            BandSource::Unset => (2, 0.0),
        };
        w.put(&[count, source])?;
        w.put(&kurtosis.to_le_bytes())?;
        for b in &self.bearings {
            let (kind, elements, v) = match b.model {
                BearingModel::Orders {
                    bpfo,
                    bpfi,
                    ftf,
                    bsf,
                } => (0u8, 0u8, [bpfo, bpfi, ftf, bsf]),
                BearingModel::Geometry {
                    elements,
                    element_mm,
                    pitch_mm,
                    contact_deg,
                } => (1, elements, [element_mm, pitch_mm, contact_deg, 0.0]),
            };
            w.put(&[kind, elements])?;
            w.put(&b.shaft_ratio.to_le_bytes())?;
            for x in v {
                w.put(&x.to_le_bytes())?;
            }
        }
        let crc = crc32(w.buf.get(..w.pos).ok_or(ConfigError::BufferTooSmall)?);
        w.put(&crc.to_le_bytes())?;
        Ok(w.pos)
    }

    /// Parses, checks the CRC, version (1 or 2) and every range. Trailing
    /// bytes after the declared length are ignored.
    pub fn decode(data: &[u8]) -> Result<Self, ConfigError> {
        let head = data.get(..4).ok_or(ConfigError::Truncated)?;
        if head.get(..2) != Some(&MAGIC[..]) {
            return Err(ConfigError::BadMagic);
        }
        let version = head.get(2).copied().unwrap_or(0);
        let header_len = match version {
            VERSION => HEADER_LEN,
            VERSION_1 => HEADER_LEN_V1,
            v => return Err(ConfigError::UnsupportedVersion(v)),
        };
        let len = usize::from(head.get(3).copied().unwrap_or(0));
        if len < header_len + 4 {
            return Err(ConfigError::BadLength);
        }
        let record = data.get(..len).ok_or(ConfigError::Truncated)?;
        let (body, crc_bytes) = record
            .split_at_checked(len - 4)
            .ok_or(ConfigError::Truncated)?;
        let mut crc = [0u8; 4];
        crc.copy_from_slice(crc_bytes);
        if crc32(body) != u32::from_le_bytes(crc) {
            return Err(ConfigError::BadCrc);
        }
        let mut r = Reader {
            data: body.get(4..).ok_or(ConfigError::Truncated)?,
        };
        let sample_rate_hz = r.u32()?;
        let band_lo_hz = r.f32()?;
        let band_hi_hz = r.f32()?;
        let poles = r.u8()?;
        let pulses_per_rev = r.u8()?;
        let record_revs = r.u16()?;
        let speed_min_rpm = r.f32()?;
        let speed_max_rpm = r.f32()?;
        let tach_tick_hz = r.u32()?;
        let settle_ms = r.u16()?;
        let interval_s = r.u32()?;
        let health = HealthLimits {
            flat_counts: r.u16()?,
            clip_level: r.i16()?,
            clip_permille: r.u16()?,
            saturated_permille: r.u16()?,
        };
        let low_battery_mv = r.u16()?;
        let alert_db = r.f32()?;
        let danger_db = r.f32()?;
        let counts_to_g = r.f32()?;
        let count = usize::from(r.u8()?);
        let source = r.u8()?;
        let kurtosis = if version == VERSION { r.f32()? } else { 0.0 };
        if count > MAX_BEARINGS || len != header_len + count * BEARING_LEN + 4 {
            return Err(ConfigError::BadLength);
        }
        let band_source = match (version, source) {
            (VERSION_1, 0) | (VERSION, 0) if kurtosis == 0.0 => BandSource::Configured,
            (VERSION, 1) => BandSource::Survey,
            (VERSION, 2) if kurtosis == 0.0 => BandSource::Unset,
            _ => return Err(ConfigError::OutOfRange("band_source")),
        };
        let mut bearings = Vec::new();
        for _ in 0..count {
            let kind = r.u8()?;
            let elements = r.u8()?;
            let shaft_ratio = r.f32()?;
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
            bearings
                .push(BearingSpec { shaft_ratio, model })
                .map_err(|_| ConfigError::BadLength)?;
        }
        let rec = Self {
            sample_rate_hz,
            band_lo_hz,
            band_hi_hz,
            band_source,
            band_kurtosis: kurtosis,
            poles,
            pulses_per_rev,
            record_revs,
            speed_min_rpm,
            speed_max_rpm,
            tach_tick_hz,
            settle_ms,
            interval_s,
            health,
            low_battery_mv,
            alert_db,
            danger_db,
            counts_to_g,
            bearings,
        };
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
