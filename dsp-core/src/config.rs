//! The measuring point: everything the node must know to diagnose one sensor
//! position, validated once, up front.
//!
//! A [`PointConfig`] is plain data (built from a point file on the host, from
//! the stored configuration record on the node). [`PointConfig::validate`]
//! checks every field and returns a typed [`ConfigError`]; the pipeline only
//! accepts a validated configuration, so nothing downstream re-checks it.

use core::fmt;

use heapless::{String, Vec};

pub use crate::diagnosis::defects::DefectSearchConfig;
pub use crate::frontend::rectify::Rectifier;
pub use crate::overall::velocity::{MachineGroup, Support};
pub use crate::spectrum::Window;

/// Most bearings one measuring point watches: a three-stage gearbox has
/// eight on four shafts, and cross-bearing attribution can only give a peak
/// to a bearing the point knows. The radio frame of format version 1 and
/// the node's configuration record carry at most four
/// (`wire::MAX_BEARINGS`).
pub const MAX_BEARINGS: usize = 8;
/// Most shafts one measuring point describes (the tach shaft included).
pub const MAX_SHAFTS: usize = 4;
/// Most gear meshes one measuring point watches.
pub const MAX_MESHES: usize = 4;
/// Longest shaft or bearing name, in bytes.
pub const NAME_LEN: usize = 16;

/// A short name (shaft or bearing), at most [`NAME_LEN`] bytes.
pub type Name = String<NAME_LEN>;

/// Where the shaft speed comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SpeedInput {
    /// Edges of a tach on the reference shaft, timestamped by a capture timer
    /// that shares its clock with the ADC sample clock.
    Tach {
        /// Pulses per revolution of the tach shaft (1 for a once-per-rev mark).
        pulses_per_rev: u8,
        /// Capture timer rate in ticks per second.
        tick_hz: u32,
        /// Capture timer value at the instant the first ADC sample is taken.
        tick_at_sample0: u32,
    },
    /// A known constant speed and no tach (test rigs, recordings with only an rpm).
    Constant {
        /// Speed of the tach (reference) shaft in rpm.
        rpm: f32,
    },
}

impl Default for SpeedInput {
    fn default() -> Self {
        SpeedInput::Tach {
            pulses_per_rev: 1,
            tick_hz: 1_000_000,
            tick_at_sample0: 0,
        }
    }
}

/// A shaft and its speed relative to the tach (reference) shaft.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Shaft {
    /// Name, unique within the point.
    pub name: Name,
    /// Speed of this shaft divided by the speed of the tach shaft.
    pub ratio: f32,
}

/// How a bearing's defect frequencies are known.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BearingKinematics {
    /// Geometry; lengths in any one unit.
    Geometry {
        /// Number of rolling elements.
        rollers: u16,
        /// Rolling-element diameter.
        roller_diameter: f32,
        /// Pitch diameter.
        pitch_diameter: f32,
        /// Contact angle in degrees.
        contact_angle_deg: f32,
    },
    /// Defect frequencies as multiples of the bearing's own shaft speed.
    /// `bsf_x` is the single-sided ball spin frequency; the rolling-element
    /// defect is watched at 2 x BSF.
    Multiples {
        /// Outer-race defect multiple.
        bpfo_x: f32,
        /// Inner-race defect multiple.
        bpfi_x: f32,
        /// Cage (fundamental train) multiple.
        ftf_x: f32,
        /// Ball spin multiple (1 x BSF).
        bsf_x: f32,
    },
}

/// One watched bearing.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Bearing {
    /// Name, unique within the point.
    pub name: Name,
    /// Index into [`PointConfig::shafts`] of the shaft it sits on.
    pub shaft: u8,
    /// Its defect frequencies.
    pub kinematics: BearingKinematics,
}

/// A gear mesh watched as an optional line at its mesh order (teeth of a
/// gear times the order of the shaft that carries it).
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Mesh {
    /// Name, unique among the meshes.
    pub name: Name,
    /// Index into [`PointConfig::shafts`] of the shaft carrying the gear.
    pub shaft: u8,
    /// Teeth of that gear.
    pub teeth: u16,
}

impl Bearing {
    /// The bearing's defect multiples of its own shaft speed (from the
    /// geometry by the kinematic formulas, or as given).
    pub fn multiples(&self) -> Result<crate::diagnosis::kinematics::DefectMultiples, ConfigError> {
        match self.kinematics {
            BearingKinematics::Geometry {
                rollers,
                roller_diameter,
                pitch_diameter,
                contact_angle_deg,
            } => crate::diagnosis::kinematics::BearingGeometry {
                rollers,
                roller_diameter,
                pitch_diameter,
                contact_angle_deg,
            }
            .multiples()
            .map_err(|_| ConfigError::BearingGeometry),
            BearingKinematics::Multiples {
                bpfo_x,
                bpfi_x,
                ftf_x,
                bsf_x,
            } => crate::diagnosis::kinematics::DefectMultiples::new(bpfo_x, bpfi_x, ftf_x, bsf_x)
                .map_err(|_| ConfigError::BearingMultiples),
        }
    }
}

/// A measuring point: sensor, band, speed source, record length, and the
/// bearings to watch.
///
/// ```
/// use dsp_core::config::PointConfig;
/// let point = PointConfig::default();
/// assert!(point.validate().is_ok());
/// ```
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct PointConfig {
    /// ADC sample rate in Hz.
    pub sample_rate_hz: f32,
    /// Scale from ADC counts to g.
    pub counts_to_g: f32,
    /// Magnitude of ADC full scale in counts; samples at or beyond count as clipped.
    pub adc_full_scale: i16,
    /// Envelope band edges in Hz; `None` picks [`PointConfig::default_band_hz`].
    pub band_hz: Option<[f32; 2]>,
    /// Band-pass poles: 2, 4, 6 or 8.
    pub poles: u8,
    /// Rectifier.
    pub rectifier: Rectifier,
    /// Speed source.
    pub speed: SpeedInput,
    /// Lowest plausible tach-shaft speed, rpm (also sizes the resampler).
    pub min_rpm: f32,
    /// Highest plausible tach-shaft speed, rpm (also sets the decimation).
    pub max_rpm: f32,
    /// Largest speed change over the record, percent of the mean, before it is flagged.
    pub max_speed_change_pct: f32,
    /// Angle-domain samples per revolution of the tach shaft (power of two).
    pub samples_per_rev: u16,
    /// Record length in tach-shaft revolutions (a multiple of the revolutions
    /// of one spectrum segment; more revolutions mean more averaged segments).
    pub revolutions: u16,
    /// Spectral window.
    pub window: Window,
    /// Shafts; index 0 is the tach shaft (ratio 1).
    pub shafts: Vec<Shaft, MAX_SHAFTS>,
    /// Watched bearings.
    pub bearings: Vec<Bearing, MAX_BEARINGS>,
    /// Gear meshes watched as optional lines (reported, never "detected").
    pub meshes: Vec<Mesh, MAX_MESHES>,
    /// Defect search thresholds.
    pub search: DefectSearchConfig,
    /// ISO 20816-3 machine group for the velocity zone.
    pub machine_group: MachineGroup,
    /// ISO 20816-3 support class.
    pub support: Support,
}

impl Default for PointConfig {
    /// A plausible point: 51.2 kS/s, 16-bit ADC at ±50 g, 8-pole band
    /// [`default_band_hz`](Self::default_band_hz) (6-12 kHz here), once-per-rev
    /// tach at 1 MHz, 300-3000 rpm, 64 samples/rev over 256 revolutions, no
    /// bearings yet. With a tach, 300-3000 rpm is wider than the node's
    /// resampler ring holds: narrow the speed range for a real machine.
    fn default() -> Self {
        let mut shafts = Vec::new();
        // Capacity is MAX_SHAFTS >= 1, so this push cannot fail.
        let _ = shafts.push(Shaft {
            name: name_from("input"),
            ratio: 1.0,
        });
        PointConfig {
            sample_rate_hz: 51_200.0,
            counts_to_g: 50.0 / 32_768.0,
            adc_full_scale: i16::MAX,
            band_hz: None,
            poles: 8,
            rectifier: Rectifier::Abs,
            speed: SpeedInput::default(),
            min_rpm: 300.0,
            max_rpm: 3000.0,
            max_speed_change_pct: 60.0,
            samples_per_rev: 64,
            revolutions: 256,
            window: Window::Hann,
            shafts,
            bearings: Vec::new(),
            meshes: Vec::new(),
            search: DefectSearchConfig::default(),
            machine_group: MachineGroup::Medium,
            support: Support::Rigid,
        }
    }
}

/// Builds a [`Name`], cutting at [`NAME_LEN`] bytes on a character boundary.
pub fn name_from(s: &str) -> Name {
    let mut out = Name::new();
    for c in s.chars() {
        if out.push(c).is_err() {
            break;
        }
    }
    out
}

/// Why a measuring point was refused.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum ConfigError {
    /// The sample rate is not finite and positive.
    SampleRate,
    /// The counts-to-g scale is not finite and positive.
    Scale,
    /// The ADC full scale is not positive.
    FullScale,
    /// Band edges not finite, or not 0 < lo < hi < 0.95 x Nyquist.
    Band,
    /// Poles not one of 2, 4, 6, 8.
    Poles,
    /// Tach pulses per revolution or tick rate is zero.
    Tach,
    /// A constant speed not finite and positive, or outside the speed range.
    ConstantSpeed,
    /// Speed range not finite, not 0 < min <= max, or wider than the
    /// resampler can hold.
    SpeedRange,
    /// Speed change limit not finite and positive.
    SpeedChange,
    /// Samples per revolution not a power of two in 16..=1024.
    SamplesPerRev,
    /// Record revolutions zero, or not a whole number of segments.
    Revolutions,
    /// No shaft, or a shaft ratio not finite and positive.
    ShaftRatio,
    /// Two shafts or two bearings share a name.
    DuplicateName,
    /// A bearing's shaft index is out of range.
    BearingShaft,
    /// Bearing geometry impossible: zero rollers, non-positive or
    /// non-finite sizes, pitch diameter not larger than roller diameter,
    /// contact angle outside 0..90 degrees.
    BearingGeometry,
    /// Given defect multiples not finite and positive.
    BearingMultiples,
    /// The defect search thresholds are out of range (see
    /// [`DefectSearchConfig::validate`]).
    Search,
    /// The highest watched order does not fit the spectrum: raise
    /// `samples_per_rev`.
    OrderRange,
    /// A gear mesh with no teeth, on a shaft that does not exist, or a
    /// duplicate mesh name.
    Mesh,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let msg = match self {
            ConfigError::SampleRate => "sample rate must be finite and positive",
            ConfigError::Scale => "counts-to-g scale must be finite and positive",
            ConfigError::FullScale => "ADC full scale must be positive",
            ConfigError::Band => "band edges must be finite with 0 < lo < hi < 0.95 x Nyquist",
            ConfigError::Poles => "band-pass poles must be 2, 4, 6 or 8",
            ConfigError::Tach => "tach pulses per revolution and tick rate must be non-zero",
            ConfigError::ConstantSpeed => {
                "constant speed must be finite, positive and inside the speed range"
            }
            ConfigError::SpeedRange => {
                "speed range must be finite with 0 < min <= max, max/min <= 16"
            }
            ConfigError::SpeedChange => "speed change limit must be finite and positive",
            ConfigError::SamplesPerRev => {
                "samples per revolution must be a power of two in 16..=1024"
            }
            ConfigError::Revolutions => {
                "record revolutions must be a non-zero multiple of the segment revolutions"
            }
            ConfigError::ShaftRatio => "shaft ratios must be finite and positive",
            ConfigError::DuplicateName => "shaft and bearing names must be unique",
            ConfigError::BearingShaft => "bearing refers to a shaft that does not exist",
            ConfigError::BearingGeometry => {
                "bearing geometry impossible (rollers >= 1, 0 < roller < pitch diameter, 0 <= angle < 90)"
            }
            ConfigError::BearingMultiples => "defect multiples must be finite and positive",
            ConfigError::Search => {
                "defect search thresholds out of range (harmonics 1..=10, slip in (0, 0.2], thresholds > 0 dB)"
            }
            ConfigError::Mesh => {
                "gear mesh needs teeth >= 1, an existing shaft and a unique name"
            }
            ConfigError::OrderRange => {
                "highest watched order exceeds the spectrum; raise samples_per_rev"
            }
        };
        f.write_str(msg)
    }
}

impl core::error::Error for ConfigError {}

fn finite_pos(x: f32) -> bool {
    x.is_finite() && x > 0.0
}

/// Two watched lines of different bearings of one point that lie within the
/// search's slip window of each other (harmonic `h` of one, `g` of the
/// other): the envelope spectrum cannot tell which bearing a peak there
/// belongs to. Found by [`PointConfig::line_coincidences`].
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineCoincidence {
    /// Indices into [`PointConfig::bearings`], the first the lower.
    pub bearings: [u8; 2],
    /// The watched kind of each (BPFO, BPFI or BSF; BSF watched at 2 x BSF).
    pub kinds: [crate::diagnosis::kinematics::DefectKind; 2],
    /// The harmonic of each line that coincides (1 or 2).
    pub harmonics: [u8; 2],
    /// Those harmonics in tach-shaft orders.
    pub orders: [f32; 2],
}

/// Most coincidences [`PointConfig::line_coincidences`] lists.
pub const MAX_COINCIDENCES: usize = 16;

impl PointConfig {
    /// Pairs of race and rolling-element lines of *different* bearings whose
    /// 1st or 2nd harmonics lie within `search.slip_tolerance` (relative) of
    /// each other, in the order of the bearings: a detection on one may as
    /// well be the other (two identical bearings on one shaft are the
    /// common case). One entry per pair of lines, the lowest harmonics that
    /// coincide; at most [`MAX_COINCIDENCES`]. Bearings whose kinematics or
    /// shaft are invalid are skipped ([`Self::validate`] reports them). The
    /// cage line is left out: its harmonics are dense at low orders and it
    /// is rarely a primary finding.
    ///
    /// ```
    /// use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig};
    /// let mut p = PointConfig::default();
    /// let k = BearingKinematics::Multiples { bpfo_x: 3.58, bpfi_x: 5.42, ftf_x: 0.40, bsf_x: 2.36 };
    /// p.bearings.clear();
    /// for name in ["input-de", "input-nde"] {
    ///     p.bearings.push(Bearing { name: name_from(name), shaft: 0, kinematics: k }).unwrap();
    /// }
    /// // Identical bearings on one shaft: all three lines coincide.
    /// assert_eq!(p.line_coincidences().len(), 3);
    /// ```
    pub fn line_coincidences(&self) -> Vec<LineCoincidence, MAX_COINCIDENCES> {
        use crate::diagnosis::kinematics::{DefectKind, ShaftRatio};
        const KINDS: [DefectKind; 3] = [DefectKind::Bpfo, DefectKind::Bpfi, DefectKind::Bsf];
        let tol = self.search.slip_tolerance;
        let orders = |b: &Bearing| {
            let ratio = self.shafts.get(usize::from(b.shaft))?.ratio;
            let ratio = ShaftRatio::new(ratio).ok()?;
            Some(b.multiples().ok()?.orders(ratio))
        };
        let mut out = Vec::new();
        for (i, a) in self.bearings.iter().enumerate() {
            let Some(oa) = orders(a) else { continue };
            for (j, b) in self.bearings.iter().enumerate().skip(i + 1) {
                let Some(ob) = orders(b) else { continue };
                for ka in KINDS {
                    for kb in KINDS {
                        let (la, lb) = (oa.line(ka), ob.line(kb));
                        let hit = [(1u8, 1u8), (1, 2), (2, 1)].into_iter().find(|&(h, g)| {
                            let (x, y) = (f32::from(h) * la, f32::from(g) * lb);
                            libm::fabsf(x - y) <= tol * x.max(y)
                        });
                        let (Some((h, g)), Ok(bi), Ok(bj)) =
                            (hit, u8::try_from(i), u8::try_from(j))
                        else {
                            continue;
                        };
                        // Full: the first MAX_COINCIDENCES are kept.
                        let _ = out.push(LineCoincidence {
                            bearings: [bi, bj],
                            kinds: [ka, kb],
                            harmonics: [h, g],
                            orders: [f32::from(h) * la, f32::from(g) * lb],
                        });
                    }
                }
            }
        }
        out
    }

    /// The band used when none is configured and no survey ran: one octave
    /// ending at 0.75 x Nyquist, capped at 12 kHz (6-12 kHz at 51.2 kS/s,
    /// 4.8-9.6 kHz at 25.6 kS/s). Our choice; the idea is common practice:
    /// a band above the gear-mesh harmonics, below the mounted sensor's
    /// resonance, and clear of the anti-alias roll-off near Nyquist.
    pub fn default_band_hz(&self) -> [f32; 2] {
        let nyq = 0.5 * self.sample_rate_hz;
        let hi = (0.75 * nyq).min(12_000.0);
        [0.5 * hi, hi]
    }

    /// The band actually used.
    pub fn band(&self) -> [f32; 2] {
        self.band_hz.unwrap_or_else(|| self.default_band_hz())
    }

    /// Checks every field; see [`ConfigError`] for the rules.
    pub fn validate(&self) -> Result<(), ConfigError> {
        if !finite_pos(self.sample_rate_hz) {
            return Err(ConfigError::SampleRate);
        }
        if !finite_pos(self.counts_to_g) {
            return Err(ConfigError::Scale);
        }
        if self.adc_full_scale <= 0 {
            return Err(ConfigError::FullScale);
        }
        let [lo, hi] = self.band();
        let nyq = 0.5 * self.sample_rate_hz;
        if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && lo < hi && hi < 0.95 * nyq) {
            return Err(ConfigError::Band);
        }
        if !matches!(self.poles, 2 | 4 | 6 | 8) {
            return Err(ConfigError::Poles);
        }
        if !(finite_pos(self.min_rpm)
            && finite_pos(self.max_rpm)
            && self.min_rpm <= self.max_rpm
            && self.max_rpm <= 16.0 * self.min_rpm)
        {
            return Err(ConfigError::SpeedRange);
        }
        match self.speed {
            SpeedInput::Tach {
                pulses_per_rev,
                tick_hz,
                ..
            } => {
                if pulses_per_rev == 0 || tick_hz == 0 {
                    return Err(ConfigError::Tach);
                }
            }
            SpeedInput::Constant { rpm } => {
                if !(finite_pos(rpm) && rpm >= self.min_rpm && rpm <= self.max_rpm) {
                    return Err(ConfigError::ConstantSpeed);
                }
            }
        }
        if !finite_pos(self.max_speed_change_pct) {
            return Err(ConfigError::SpeedChange);
        }
        if !(self.samples_per_rev.is_power_of_two() && (16..=1024).contains(&self.samples_per_rev))
        {
            return Err(ConfigError::SamplesPerRev);
        }
        if self.revolutions == 0 {
            return Err(ConfigError::Revolutions);
        }
        if self.shafts.is_empty() || self.shafts.iter().any(|s| !finite_pos(s.ratio)) {
            return Err(ConfigError::ShaftRatio);
        }
        if has_duplicates(self.shafts.iter().map(|s| s.name.as_str()))
            || has_duplicates(self.bearings.iter().map(|b| b.name.as_str()))
        {
            return Err(ConfigError::DuplicateName);
        }
        for b in &self.bearings {
            if usize::from(b.shaft) >= self.shafts.len() {
                return Err(ConfigError::BearingShaft);
            }
            match b.kinematics {
                BearingKinematics::Geometry {
                    rollers,
                    roller_diameter,
                    pitch_diameter,
                    contact_angle_deg,
                } => {
                    if rollers == 0
                        || !finite_pos(roller_diameter)
                        || !finite_pos(pitch_diameter)
                        || pitch_diameter <= roller_diameter
                        || !contact_angle_deg.is_finite()
                        || !(0.0..90.0).contains(&contact_angle_deg)
                    {
                        return Err(ConfigError::BearingGeometry);
                    }
                }
                BearingKinematics::Multiples {
                    bpfo_x,
                    bpfi_x,
                    ftf_x,
                    bsf_x,
                } => {
                    if ![bpfo_x, bpfi_x, ftf_x, bsf_x]
                        .iter()
                        .all(|&x| finite_pos(x))
                    {
                        return Err(ConfigError::BearingMultiples);
                    }
                }
            }
        }
        if has_duplicates(self.meshes.iter().map(|m| m.name.as_str()))
            || self
                .meshes
                .iter()
                .any(|m| m.teeth == 0 || usize::from(m.shaft) >= self.shafts.len())
        {
            return Err(ConfigError::Mesh);
        }
        self.search.validate().map_err(|_| ConfigError::Search)?;
        Ok(())
    }
}

fn has_duplicates<'a>(names: impl Iterator<Item = &'a str> + Clone) -> bool {
    names
        .clone()
        .enumerate()
        .any(|(i, a)| names.clone().skip(i + 1).any(|b| a == b))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bearing(name: &str, kin: BearingKinematics) -> Bearing {
        Bearing {
            name: name_from(name),
            shaft: 0,
            kinematics: kin,
        }
    }

    const CWRU_DE: BearingKinematics = BearingKinematics::Geometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    };

    #[test]
    fn default_is_valid() {
        assert_eq!(PointConfig::default().validate(), Ok(()));
    }

    #[test]
    fn refuses_each_bad_field() {
        let ok = PointConfig::default();
        type Case = (fn(&mut PointConfig), ConfigError);
        let cases: [Case; 14] = [
            (|c| c.sample_rate_hz = f32::NAN, ConfigError::SampleRate),
            (|c| c.counts_to_g = f32::INFINITY, ConfigError::Scale),
            (|c| c.band_hz = Some([5000.0, 30_000.0]), ConfigError::Band),
            (|c| c.band_hz = Some([f32::NAN, 3000.0]), ConfigError::Band),
            (|c| c.band_hz = Some([4000.0, 3000.0]), ConfigError::Band),
            (|c| c.poles = 5, ConfigError::Poles),
            (|c| c.min_rpm = 0.0, ConfigError::SpeedRange),
            (
                |c| c.speed = SpeedInput::Constant { rpm: 10_000.0 },
                ConfigError::ConstantSpeed,
            ),
            (|c| c.samples_per_rev = 100, ConfigError::SamplesPerRev),
            (|c| c.revolutions = 0, ConfigError::Revolutions),
            (
                |c| {
                    let _ = c.bearings.push(bearing(
                        "x",
                        BearingKinematics::Geometry {
                            rollers: 0,
                            roller_diameter: 1.0,
                            pitch_diameter: 5.0,
                            contact_angle_deg: 0.0,
                        },
                    ));
                },
                ConfigError::BearingGeometry,
            ),
            (
                |c| {
                    let _ = c.bearings.push(bearing(
                        "x",
                        BearingKinematics::Geometry {
                            rollers: 9,
                            roller_diameter: 2.0,
                            pitch_diameter: 2.0,
                            contact_angle_deg: 0.0,
                        },
                    ));
                },
                ConfigError::BearingGeometry,
            ),
            (
                |c| {
                    let _ = c.bearings.push(bearing("a", CWRU_DE));
                    let _ = c.bearings.push(bearing("a", CWRU_DE));
                },
                ConfigError::DuplicateName,
            ),
            (|c| c.search.harmonics = 11, ConfigError::Search),
        ];
        for (break_it, want) in cases {
            let mut c = ok.clone();
            break_it(&mut c);
            assert_eq!(c.validate(), Err(want));
        }
    }

    #[test]
    fn capacity_refuses_one_bearing_too_many() {
        let mut c = PointConfig::default();
        for i in 0..MAX_BEARINGS {
            let n = [b'a' + u8::try_from(i).unwrap()];
            assert!(c
                .bearings
                .push(bearing(core::str::from_utf8(&n).unwrap(), CWRU_DE))
                .is_ok());
        }
        // heapless hands the item back instead of growing.
        assert!(c.bearings.push(bearing("z", CWRU_DE)).is_err());
    }

    #[test]
    fn names_are_cut_at_capacity() {
        let n = name_from("a-very-long-bearing-name-indeed");
        assert_eq!(n.len(), NAME_LEN);
    }
}
