//! The machine description the simulator runs: [`MachineSpec`], readable
//! from TOML on top of the demo machine ([`DEMO_MACHINE_TOML`], the machine
//! of `envord demo`), and its validation ([`SpecError`]).
//!
//! Key style (shared with the point file): `[[shaft]]`, `[[bearing]]`,
//! `[[mesh]]`, and bearing multiples `bpfo_x`, `bpfi_x`, `ftf_x`, `bsf_x`.
//! The older spellings `[[shafts]]`, `[[bearings]]`, `[[gears]]` and `bpfo`,
//! `bpfi`, `ftf`, `bsf` are still read.

use serde::{Deserialize, Serialize};
use std::fmt;

/// The demo machine (`envord demo`, and `envord simulate` without `--spec`).
pub const DEMO_MACHINE_TOML: &str = include_str!("../../examples/demo-machine.toml");

/// Largest number of samples one simulation produces (per channel).
pub const MAX_SAMPLES: usize = 20_000_000;

/// A machine to simulate. All speeds are of the tach shaft unless said
/// otherwise; other shafts turn at `ratio` x the tach shaft's speed.
///
/// `Default` is a small base machine for code and tests (a two-stage
/// reducer at a constant 1480 rpm, 25.6 kS/s, outer-race defect in its one
/// bearing); it is not the demo machine. Spec files and `envord simulate`
/// start from the demo machine instead ([`MachineSpec::demo`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MachineSpec {
    /// Free text naming the machine.
    pub name: String,
    /// Sample rate, Hz (a whole number, 1000 to 400 000).
    pub fs_hz: f64,
    /// Record length, s.
    pub seconds: f64,
    /// Tach-shaft speed over the record.
    pub speed: SpeedProfile,
    /// Shafts, each with a speed ratio to the tach shaft (`[[shaft]]`).
    #[serde(rename = "shaft", alias = "shafts")]
    pub shafts: Vec<ShaftSpec>,
    /// Rolling-element bearings (`[[bearing]]`).
    #[serde(rename = "bearing", alias = "bearings")]
    pub bearings: Vec<BearingSpec>,
    /// Gear meshes (`[[mesh]]`).
    #[serde(rename = "mesh", alias = "gears")]
    pub gears: Vec<GearMeshSpec>,
    /// Broadband noise.
    pub noise: NoiseSpec,
    /// The once-per-rev tach channel.
    pub tach: TachSpec,
}

/// Tach-shaft speed profile.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum SpeedProfile {
    /// Constant speed.
    Constant {
        /// Speed, rpm.
        rpm: f64,
    },
    /// Linear change from `start_rpm` to `end_rpm` over the record.
    Ramp {
        /// Speed at t = 0, rpm.
        start_rpm: f64,
        /// Speed at the end of the record, rpm.
        end_rpm: f64,
    },
    /// Bounded random walk: every 10 ms the speed takes a Gaussian step of
    /// standard deviation `step_rpm_per_sqrt_s` x sqrt(0.01 s), reflected at
    /// the bounds; linear between steps.
    RandomWalk {
        /// Speed at t = 0, rpm.
        start_rpm: f64,
        /// Lower bound, rpm.
        min_rpm: f64,
        /// Upper bound, rpm.
        max_rpm: f64,
        /// Step size, rpm per sqrt(s).
        step_rpm_per_sqrt_s: f64,
    },
}

impl SpeedProfile {
    /// Lowest and highest speed the profile can reach, rpm.
    pub fn rpm_bounds(&self) -> (f64, f64) {
        match *self {
            SpeedProfile::Constant { rpm } => (rpm, rpm),
            SpeedProfile::Ramp { start_rpm, end_rpm } => {
                (start_rpm.min(end_rpm), start_rpm.max(end_rpm))
            }
            SpeedProfile::RandomWalk {
                min_rpm, max_rpm, ..
            } => (min_rpm, max_rpm),
        }
    }
}

/// A shaft.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct ShaftSpec {
    /// Name other items refer to.
    pub name: String,
    /// Speed / tach-shaft speed.
    pub ratio: f64,
    /// Imbalance: amplitude of the 1x sine, g.
    pub imbalance_g: f64,
    /// Phase of the 1x sine at shaft angle 0, degrees.
    pub imbalance_phase_deg: f64,
}

impl Default for ShaftSpec {
    fn default() -> Self {
        ShaftSpec {
            name: "input".into(),
            ratio: 1.0,
            imbalance_g: 0.0,
            imbalance_phase_deg: 0.0,
        }
    }
}

/// Which bearing part carries a localised defect.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Fault {
    /// Healthy bearing: no impacts.
    #[default]
    None,
    /// Outer race: impacts at BPFO, equal amplitude (stationary defect).
    Outer,
    /// Inner race: impacts at BPFI, amplitude modulated at the shaft rate
    /// as the defect passes through the load zone.
    Inner,
    /// Rolling element: impacts at 2 x BSF (the ball strikes both races
    /// once per spin revolution), modulated at FTF (the cage carries the
    /// ball through the load zone).
    Ball,
}

/// A rolling-element bearing on a shaft.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct BearingSpec {
    /// Free text.
    pub name: String,
    /// Name of the shaft the inner ring turns with.
    pub shaft: String,
    /// Defect location.
    pub fault: Fault,
    /// Outer-race defect frequency, multiple of the shaft speed (`bpfo_x`).
    #[serde(rename = "bpfo_x", alias = "bpfo")]
    pub bpfo: f64,
    /// Inner-race defect frequency, multiple of the shaft speed (`bpfi_x`).
    #[serde(rename = "bpfi_x", alias = "bpfi")]
    pub bpfi: f64,
    /// Cage (fundamental train) frequency, multiple of the shaft speed (`ftf_x`).
    #[serde(rename = "ftf_x", alias = "ftf")]
    pub ftf: f64,
    /// Ball spin frequency, multiple of the shaft speed (kinematic, 1x spin; `bsf_x`).
    #[serde(rename = "bsf_x", alias = "bsf")]
    pub bsf: f64,
    /// Amplitude of each impact's decaying sine, g (before modulation).
    pub impact_g: f64,
    /// Random slip: standard deviation of each impact interval as a fraction
    /// of its mean. 1-2 % is the figure usually quoted for rolling-element
    /// bearings (from memory: Randall & Antoni, "Rolling element bearing
    /// diagnostics - a tutorial", MSSP 25 (2011), section 2; not re-checked).
    pub slip: f64,
    /// Structural resonance the impacts excite, Hz.
    pub resonance_hz: f64,
    /// Damping ratio of that resonance.
    pub damping_ratio: f64,
    /// Depth of the load-zone modulation for inner-race and ball faults
    /// (0 = none, 1 = impacts vanish opposite the load zone).
    pub load_zone_depth: f64,
}

impl Default for BearingSpec {
    fn default() -> Self {
        // Defect multiples of a 6205 deep-groove bearing as printed in the
        // CWRU bearing specification text (BPFI 5.4152, BPFO 3.5848, FTF
        // 0.39828); BSF 2.357 = half the CWRU "rolling element" 4.7135
        // (Smith & Randall 2015, Table 2).
        BearingSpec {
            name: "input drive end".into(),
            shaft: "input".into(),
            fault: Fault::None,
            bpfo: 3.5848,
            bpfi: 5.4152,
            ftf: 0.39828,
            bsf: 2.357,
            impact_g: 1.0,
            slip: 0.015,
            resonance_hz: 4200.0,
            damping_ratio: 0.03,
            load_zone_depth: 0.8,
        }
    }
}

/// A gear mesh: a tone at teeth x shaft order with first-order sidebands
/// at +-1x of that shaft.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct GearMeshSpec {
    /// Free text.
    pub name: String,
    /// Shaft carrying the gear whose teeth are counted.
    pub shaft: String,
    /// Tooth count (mesh order on that shaft).
    pub teeth: u32,
    /// Mesh tone amplitude, g.
    pub amplitude_g: f64,
    /// Amplitude of each sideband, g.
    pub sideband_g: f64,
    /// Ringing of the structure that the meshing drives, g (0: none): a
    /// carrier at `carrier_hz` whose amplitude follows the tooth meshing,
    /// `carrier_g x (1 + cos(mesh angle)) / 2`, so that the mesh order shows
    /// in the envelope spectrum of a band around `carrier_hz`.
    pub carrier_g: f64,
    /// Frequency of that ringing, Hz (used when `carrier_g` > 0).
    pub carrier_hz: f64,
    /// Shaft of a gear with a damaged tooth ("" = none): the mesh (tone and
    /// carrier) is modulated once per turn of that shaft by `1 + fault_depth
    /// x cos(shaft angle)`, which puts sidebands at `mesh +- that shaft's
    /// order` (common practice for a local gear fault).
    pub fault_shaft: String,
    /// Depth of that modulation, 0 to 1.
    pub fault_depth: f64,
}

impl Default for GearMeshSpec {
    fn default() -> Self {
        GearMeshSpec {
            name: "mesh".into(),
            shaft: "input".into(),
            teeth: 20,
            amplitude_g: 0.0,
            sideband_g: 0.0,
            carrier_g: 0.0,
            carrier_hz: 0.0,
            fault_shaft: String::new(),
            fault_depth: 0.0,
        }
    }
}

/// Broadband Gaussian noise added to the acceleration.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(default, deny_unknown_fields)]
pub struct NoiseSpec {
    /// Noise RMS, g (used when `snr_db` is absent).
    pub rms_g: f64,
    /// If given: noise RMS = RMS of the noiseless signal / 10^(snr_db/20).
    pub snr_db: Option<f64>,
}

/// The tach channel: a once-per-rev pulse of the tach shaft.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct TachSpec {
    /// Pulse level, V (low level is 0 V).
    pub high_v: f64,
    /// Pulse width as a fraction of the current revolution period.
    pub duty: f64,
    /// Tach-shaft angle of the rising edge, revolutions in [0, 1).
    pub phase_rev: f64,
    /// RMS timing noise added to each pulse edge, s.
    pub jitter_s: f64,
    /// Probability that a pulse is missing.
    pub dropout_prob: f64,
}

impl Default for TachSpec {
    fn default() -> Self {
        TachSpec {
            high_v: 1.0,
            duty: 0.05,
            phase_rev: 0.25,
            jitter_s: 0.0,
            dropout_prob: 0.0,
        }
    }
}

impl Default for MachineSpec {
    fn default() -> Self {
        // Invented base: two-stage helical reducer, 19/67 then 17/59 teeth,
        // 4-pole motor speed, tach on the input shaft.
        let r1 = 19.0 / 67.0;
        MachineSpec {
            name: "base machine (fictional two-stage reducer, not the demo)".into(),
            fs_hz: 25_600.0,
            seconds: 10.0,
            speed: SpeedProfile::Constant { rpm: 1480.0 },
            shafts: vec![
                ShaftSpec {
                    name: "input".into(),
                    ratio: 1.0,
                    imbalance_g: 0.05,
                    imbalance_phase_deg: 0.0,
                },
                ShaftSpec {
                    name: "intermediate".into(),
                    ratio: r1,
                    imbalance_g: 0.02,
                    imbalance_phase_deg: 40.0,
                },
                ShaftSpec {
                    name: "output".into(),
                    ratio: r1 * 17.0 / 59.0,
                    imbalance_g: 0.01,
                    imbalance_phase_deg: 110.0,
                },
            ],
            bearings: vec![BearingSpec {
                fault: Fault::Outer,
                ..BearingSpec::default()
            }],
            gears: vec![
                GearMeshSpec {
                    name: "stage 1".into(),
                    shaft: "input".into(),
                    teeth: 19,
                    amplitude_g: 0.3,
                    sideband_g: 0.05,
                    ..GearMeshSpec::default()
                },
                GearMeshSpec {
                    name: "stage 2".into(),
                    shaft: "intermediate".into(),
                    teeth: 17,
                    amplitude_g: 0.2,
                    sideband_g: 0.03,
                    ..GearMeshSpec::default()
                },
            ],
            noise: NoiseSpec {
                rms_g: 0.1,
                snr_db: None,
            },
            tach: TachSpec::default(),
        }
    }
}

/// Why a [`MachineSpec`] cannot be simulated.
#[derive(Debug, Clone, PartialEq)]
pub enum SpecError {
    /// The TOML text did not parse or has unknown/mistyped keys.
    Parse(String),
    /// A value outside its allowed range (or not finite).
    OutOfRange {
        /// Dotted path of the field, e.g. `bearing[0].slip`.
        field: String,
        /// The value given.
        value: f64,
        /// The allowed range, in words.
        allowed: &'static str,
    },
    /// A bearing or gear names a shaft that is not in `shafts`.
    UnknownShaft {
        /// Dotted path of the item.
        field: String,
        /// The shaft name given.
        shaft: String,
    },
    /// Two shafts share a name.
    DuplicateShaft {
        /// The name.
        name: String,
    },
    /// A tone or resonance would lie at or above the Nyquist frequency.
    Aliasing {
        /// Dotted path of the item.
        field: String,
        /// Its highest frequency, Hz.
        hz: f64,
        /// fs / 2, Hz.
        nyquist_hz: f64,
    },
    /// The record would have more than [`MAX_SAMPLES`] samples.
    TooManySamples {
        /// Samples requested.
        samples: f64,
    },
}

impl fmt::Display for SpecError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            SpecError::Parse(m) => write!(f, "machine spec: {m}"),
            SpecError::OutOfRange {
                field,
                value,
                allowed,
            } => write!(f, "{field} = {value} is out of range (allowed: {allowed})"),
            SpecError::UnknownShaft { field, shaft } => {
                write!(f, "{field}: no shaft named \"{shaft}\"")
            }
            SpecError::DuplicateShaft { name } => {
                write!(f, "two shafts are named \"{name}\"")
            }
            SpecError::Aliasing {
                field,
                hz,
                nyquist_hz,
            } => write!(
                f,
                "{field}: reaches {hz:.1} Hz, at or above the Nyquist frequency {nyquist_hz:.1} Hz"
            ),
            SpecError::TooManySamples { samples } => write!(
                f,
                "record of {samples:.0} samples is over the {MAX_SAMPLES}-sample limit"
            ),
        }
    }
}

impl std::error::Error for SpecError {}

fn check(
    field: impl Into<String>,
    value: f64,
    ok: bool,
    allowed: &'static str,
) -> Result<(), SpecError> {
    if ok && value.is_finite() {
        Ok(())
    } else {
        Err(SpecError::OutOfRange {
            field: field.into(),
            value,
            allowed,
        })
    }
}

fn within(
    field: impl Into<String>,
    v: f64,
    lo: f64,
    hi: f64,
    allowed: &'static str,
) -> Result<(), SpecError> {
    check(field, v, v >= lo && v <= hi, allowed)
}

impl MachineSpec {
    /// The demo machine ([`DEMO_MACHINE_TOML`]).
    pub fn demo() -> Result<Self, SpecError> {
        toml::from_str(DEMO_MACHINE_TOML)
            .map_err(|e| SpecError::Parse(format!("demo machine: {e}")))
    }

    /// Parses a TOML description on top of the demo machine: a top-level key
    /// or section left out takes the demo machine's value. The machine's
    /// parts are taken as a whole: give none of `[[shaft]]`, `[[bearing]]`
    /// and `[[mesh]]` for the demo's, or the ones you want (one left out is
    /// then empty). Inside a section or list entry, a key left out takes
    /// that item's own default. Unknown keys are errors naming the line.
    ///
    /// ```
    /// use host_sim::simulate::{MachineSpec, SpeedProfile};
    /// let s = MachineSpec::from_toml_str("seconds = 2.0\n[speed]\nkind = \"ramp\"\nstart_rpm = 600\nend_rpm = 1200\n").unwrap();
    /// assert_eq!(s.speed, SpeedProfile::Ramp { start_rpm: 600.0, end_rpm: 1200.0 });
    /// assert_eq!(s.bearings, MachineSpec::demo().unwrap().bearings);
    /// assert!(s.validate().is_ok());
    /// ```
    pub fn from_toml_str(text: &str) -> Result<Self, SpecError> {
        // First as given, for errors that name the line and key.
        let _: MachineSpec = toml::from_str(text).map_err(|e| SpecError::Parse(e.to_string()))?;
        let parse = |t: &str| -> Result<toml::Table, SpecError> {
            t.parse::<toml::Table>()
                .map_err(|e| SpecError::Parse(e.to_string()))
        };
        let mut user = parse(text)?;
        // Old spellings of the lists, as their new names, for the merge.
        for (old, new) in [
            ("shafts", "shaft"),
            ("bearings", "bearing"),
            ("gears", "mesh"),
        ] {
            if let Some(v) = user.remove(old) {
                user.insert(new.to_string(), v);
            }
        }
        let mut merged = parse(DEMO_MACHINE_TOML)?;
        let parts = ["shaft", "bearing", "mesh"];
        if parts.iter().any(|k| user.contains_key(*k)) {
            for k in parts {
                merged.insert(k.to_string(), toml::Value::Array(Vec::new()));
            }
        }
        for (k, v) in user {
            merged.insert(k, v);
        }
        toml::Value::Table(merged)
            .try_into()
            .map_err(|e: toml::de::Error| SpecError::Parse(e.to_string()))
    }

    /// Index of the shaft named `name`.
    pub fn shaft_index(&self, name: &str) -> Option<usize> {
        self.shafts.iter().position(|s| s.name == name)
    }

    /// Checks every value; [`crate::simulate::simulate`] calls this first.
    pub fn validate(&self) -> Result<(), SpecError> {
        check(
            "fs_hz",
            self.fs_hz,
            (1000.0..=400_000.0).contains(&self.fs_hz) && self.fs_hz.fract() == 0.0,
            "a whole number of Hz from 1000 to 400000",
        )?;
        within("seconds", self.seconds, 1e-3, 3600.0, "0.001 to 3600 s")?;
        let samples = (self.seconds * self.fs_hz).round();
        if samples > MAX_SAMPLES as f64 {
            return Err(SpecError::TooManySamples { samples });
        }
        let nyq = self.fs_hz / 2.0;
        const RPM: &str = "0.1 to 100000 rpm";
        match self.speed {
            SpeedProfile::Constant { rpm } => within("speed.rpm", rpm, 0.1, 1e5, RPM)?,
            SpeedProfile::Ramp { start_rpm, end_rpm } => {
                within("speed.start_rpm", start_rpm, 0.1, 1e5, RPM)?;
                within("speed.end_rpm", end_rpm, 0.1, 1e5, RPM)?;
            }
            SpeedProfile::RandomWalk {
                start_rpm,
                min_rpm,
                max_rpm,
                step_rpm_per_sqrt_s,
            } => {
                within("speed.min_rpm", min_rpm, 0.1, 1e5, RPM)?;
                within(
                    "speed.max_rpm",
                    max_rpm,
                    min_rpm,
                    1e5,
                    "min_rpm to 100000 rpm",
                )?;
                within(
                    "speed.start_rpm",
                    start_rpm,
                    min_rpm,
                    max_rpm,
                    "min_rpm to max_rpm",
                )?;
                within(
                    "speed.step_rpm_per_sqrt_s",
                    step_rpm_per_sqrt_s,
                    0.0,
                    1e5,
                    "0 to 100000",
                )?;
            }
        }
        let (_, max_rpm) = self.speed.rpm_bounds();
        let max_tach_hz = max_rpm / 60.0;

        for (i, s) in self.shafts.iter().enumerate() {
            if self.shafts.iter().take(i).any(|o| o.name == s.name) {
                return Err(SpecError::DuplicateShaft {
                    name: s.name.clone(),
                });
            }
            within(
                format!("shaft[{i}].ratio"),
                s.ratio,
                1e-4,
                100.0,
                "0.0001 to 100",
            )?;
            within(
                format!("shaft[{i}].imbalance_g"),
                s.imbalance_g,
                0.0,
                1e4,
                "0 to 10000 g",
            )?;
            within(
                format!("shaft[{i}].imbalance_phase_deg"),
                s.imbalance_phase_deg,
                -360.0,
                360.0,
                "-360 to 360",
            )?;
            let hz = s.ratio * max_tach_hz;
            if hz >= nyq {
                return Err(SpecError::Aliasing {
                    field: format!("shaft[{i}]"),
                    hz,
                    nyquist_hz: nyq,
                });
            }
        }
        for (i, b) in self.bearings.iter().enumerate() {
            let f = |k: &str| format!("bearing[{i}].{k}");
            let si = self
                .shaft_index(&b.shaft)
                .ok_or_else(|| SpecError::UnknownShaft {
                    field: f("shaft"),
                    shaft: b.shaft.clone(),
                })?;
            const MULT: &str = "0.01 to 100 x shaft speed";
            within(f("bpfo_x"), b.bpfo, 0.01, 100.0, MULT)?;
            within(f("bpfi_x"), b.bpfi, 0.01, 100.0, MULT)?;
            within(f("ftf_x"), b.ftf, 0.01, 100.0, MULT)?;
            within(f("bsf_x"), b.bsf, 0.01, 100.0, MULT)?;
            within(f("impact_g"), b.impact_g, 0.0, 1e4, "0 to 10000 g")?;
            within(f("slip"), b.slip, 0.0, 0.1, "0 to 0.1")?;
            within(
                f("damping_ratio"),
                b.damping_ratio,
                1e-3,
                0.5,
                "0.001 to 0.5",
            )?;
            within(f("load_zone_depth"), b.load_zone_depth, 0.0, 1.0, "0 to 1")?;
            within(
                f("resonance_hz"),
                b.resonance_hz,
                1.0,
                1e6,
                "1 Hz up to below fs/2",
            )?;
            if b.resonance_hz >= 0.45 * self.fs_hz {
                return Err(SpecError::Aliasing {
                    field: f("resonance_hz"),
                    hz: b.resonance_hz,
                    nyquist_hz: nyq,
                });
            }
            let ratio = self.shafts.get(si).map_or(1.0, |s| s.ratio);
            let rate = self.impact_order(b) * ratio * max_tach_hz;
            if rate >= nyq {
                return Err(SpecError::Aliasing {
                    field: f("fault"),
                    hz: rate,
                    nyquist_hz: nyq,
                });
            }
        }
        for (i, g) in self.gears.iter().enumerate() {
            let f = |k: &str| format!("mesh[{i}].{k}");
            let si = self
                .shaft_index(&g.shaft)
                .ok_or_else(|| SpecError::UnknownShaft {
                    field: f("shaft"),
                    shaft: g.shaft.clone(),
                })?;
            within(f("teeth"), f64::from(g.teeth), 1.0, 10_000.0, "1 to 10000")?;
            within(f("amplitude_g"), g.amplitude_g, 0.0, 1e4, "0 to 10000 g")?;
            within(f("sideband_g"), g.sideband_g, 0.0, 1e4, "0 to 10000 g")?;
            within(f("carrier_g"), g.carrier_g, 0.0, 1e4, "0 to 10000 g")?;
            within(f("fault_depth"), g.fault_depth, 0.0, 1.0, "0 to 1")?;
            if g.carrier_g > 0.0 {
                within(
                    f("carrier_hz"),
                    g.carrier_hz,
                    1.0,
                    nyq,
                    "1 Hz to the Nyquist rate",
                )?;
            }
            if !g.fault_shaft.is_empty() && self.shaft_index(&g.fault_shaft).is_none() {
                return Err(SpecError::UnknownShaft {
                    field: f("fault_shaft"),
                    shaft: g.fault_shaft.clone(),
                });
            }
            let ratio = self.shafts.get(si).map_or(1.0, |s| s.ratio);
            let hz = (f64::from(g.teeth) + 1.0) * ratio * max_tach_hz;
            if hz >= nyq {
                return Err(SpecError::Aliasing {
                    field: format!("mesh[{i}]"),
                    hz,
                    nyquist_hz: nyq,
                });
            }
        }
        within("noise.rms_g", self.noise.rms_g, 0.0, 1e4, "0 to 10000 g")?;
        if let Some(snr) = self.noise.snr_db {
            within("noise.snr_db", snr, -60.0, 200.0, "-60 to 200 dB")?;
        }
        let t = &self.tach;
        within("tach.high_v", t.high_v, 1e-3, 100.0, "0.001 to 100 V")?;
        within("tach.duty", t.duty, 1e-4, 0.5, "0.0001 to 0.5")?;
        check(
            "tach.phase_rev",
            t.phase_rev,
            (0.0..1.0).contains(&t.phase_rev),
            "0 <= phase < 1",
        )?;
        // The pulse must be wide enough to reach full level (2-sample edges).
        let narrowest = t.duty / max_tach_hz * self.fs_hz;
        check(
            "tach.duty",
            t.duty,
            narrowest >= 3.0,
            "wide enough for a pulse of at least 3 samples at the highest speed",
        )?;
        within("tach.jitter_s", t.jitter_s, 0.0, 0.01, "0 to 0.01 s")?;
        check(
            "tach.dropout_prob",
            t.dropout_prob,
            (0.0..1.0).contains(&t.dropout_prob),
            "0 <= p < 1",
        )?;
        Ok(())
    }

    /// Impacts per revolution of the bearing's shaft for its fault (0 for
    /// a healthy bearing): BPFO, BPFI or 2 x BSF.
    pub fn impact_order(&self, b: &BearingSpec) -> f64 {
        match b.fault {
            Fault::None => 0.0,
            Fault::Outer => b.bpfo,
            Fault::Inner => b.bpfi,
            Fault::Ball => 2.0 * b.bsf,
        }
    }
}
