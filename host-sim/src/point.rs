//! The point file: a measuring point described in TOML (a contract outside
//! scripts rely on; extend it, do not break it).
//!
//! See `host-sim/examples/point.toml` for a commented example. Every key is
//! checked: unknown keys, wrong types and impossible values are refused with
//! a message naming the file and the key (or line) at fault.

use std::path::Path;

use dsp_core::config::{
    name_from, Bearing, BearingKinematics, DefectSearchConfig, MachineGroup, Mesh, PointConfig,
    Rectifier, Shaft, SpeedInput, Support, Window, MAX_BEARINGS, MAX_MESHES, MAX_SHAFTS, NAME_LEN,
};
use serde::Deserialize;

use crate::error::CliError;

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct PointFile {
    #[serde(default)]
    sensor: SensorSection,
    #[serde(default)]
    envelope: EnvelopeSection,
    #[serde(default)]
    speed: SpeedSection,
    #[serde(default)]
    spectrum: SpectrumSection,
    #[serde(default)]
    search: SearchSection,
    #[serde(default)]
    iso: IsoSection,
    // The simulator's machine spec once spelled these `shafts`, `bearings`
    // and `gears`; both files now use the singular names, and read the old.
    #[serde(default, alias = "shafts")]
    shaft: Vec<ShaftEntry>,
    #[serde(default, alias = "bearings")]
    bearing: Vec<BearingEntry>,
    #[serde(default, alias = "gears")]
    mesh: Vec<MeshEntry>,
    /// Reports by exception (crate::report_policy); checked here, read there.
    #[serde(default)]
    report: crate::report_policy::ReportSection,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct MeshEntry {
    name: String,
    shaft: Option<String>,
    teeth: u16,
    /// The shaft whose gear meshes with this one (sidebands at its order too).
    mate_shaft: Option<String>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct SensorSection {
    sample_rate_hz: Option<f32>,
    counts_to_g: Option<f32>,
    adc_full_scale: Option<i16>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct EnvelopeSection {
    band_hz: Option<[f32; 2]>,
    poles: Option<u8>,
    rectifier: Option<String>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct SpeedSection {
    source: Option<String>,
    rpm: Option<f32>,
    pulses_per_rev: Option<u8>,
    tick_hz: Option<u32>,
    min_rpm: Option<f32>,
    max_rpm: Option<f32>,
    max_change_pct: Option<f32>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct SpectrumSection {
    samples_per_rev: Option<u16>,
    revolutions: Option<u16>,
    window: Option<String>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct SearchSection {
    harmonics: Option<u8>,
    slip_tolerance: Option<f32>,
    prominence_db: Option<f32>,
    min_harmonics: Option<u8>,
    sideband_db: Option<f32>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct IsoSection {
    group: Option<u8>,
    support: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ShaftEntry {
    name: String,
    ratio: Option<f32>,
    /// Name of the shaft that drives this one through a gear mesh.
    driven_by: Option<String>,
    /// `[driver teeth, driven teeth]` of that mesh.
    teeth: Option<[u16; 2]>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct BearingEntry {
    name: String,
    shaft: Option<String>,
    rollers: Option<u16>,
    roller_diameter_mm: Option<f32>,
    roller_diameter_in: Option<f32>,
    pitch_diameter_mm: Option<f32>,
    pitch_diameter_in: Option<f32>,
    contact_angle_deg: Option<f32>,
    bpfo_x: Option<f32>,
    bpfi_x: Option<f32>,
    ftf_x: Option<f32>,
    bsf_x: Option<f32>,
}

/// Reads and validates a point file.
pub fn load(path: &Path) -> Result<PointConfig, CliError> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| CliError::input(path.display(), format!("cannot read point file: {e}")))?;
    parse(&text).map_err(|m| CliError::input(path.display(), m))
}

/// Why point-file text is refused; the message names the key or line.
#[derive(Clone, Debug, PartialEq)]
pub enum PointError {
    /// Not TOML, or a key unknown or of the wrong type (the parser's message).
    Toml(toml::de::Error),
    /// The `[report]` section is refused.
    Report(crate::report_policy::SectionError),
    /// A key's value is none of the two it may be.
    NotOneOf {
        /// The key (`envelope.rectifier`, ...).
        key: &'static str,
        /// The value given.
        value: String,
        /// The two values allowed.
        allowed: [&'static str; 2],
    },
    /// `speed.source = "constant"` without `speed.rpm`.
    RpmMissing,
    /// `iso.group` is not 1 or 2.
    IsoGroup(u8),
    /// A name is empty or too long (`what`: shaft, bearing, mesh).
    NameLength {
        /// Entry kind (`shaft`, `bearing`, `mesh`).
        what: &'static str,
        /// The name given.
        name: String,
    },
    /// Two entries of one kind (`what`, plural `whats`) share a name.
    DuplicateName {
        /// Entry kind (`shaft`, `bearing`, `mesh`).
        what: &'static str,
        /// Its plural.
        whats: &'static str,
        /// The name given.
        name: String,
    },
    /// More entries than fit a point.
    TooMany {
        /// Entry kind (`shaft`, `bearing`, `mesh`).
        what: &'static str,
        /// Entries given.
        n: usize,
        /// Entries that fit.
        cap: usize,
    },
    /// An entry's list is full.
    Capacity(&'static str),
    /// `driven_by` names no shaft listed before.
    DrivenBy {
        /// The shaft named.
        shaft: String,
        /// The shaft `driven_by` names.
        by: String,
    },
    /// A tooth count is 0.
    ZeroTeeth {
        /// The shaft named.
        shaft: String,
    },
    /// Neither `ratio` nor `driven_by` with `teeth` (or both).
    RatioOrTeeth {
        /// The shaft named.
        shaft: String,
    },
    /// The first shaft's ratio is not 1.
    FirstRatio {
        /// The shaft named.
        shaft: String,
    },
    /// A length given both in mm and in inches.
    BothUnits {
        /// The bearing's name.
        bearing: String,
        /// The key, without unit suffix.
        key: &'static str,
    },
    /// `shaft` names no shaft.
    NoShaft {
        /// Entry kind (`shaft`, `bearing`, `mesh`).
        what: &'static str,
        /// The entry's name.
        owner: String,
        /// The shaft named.
        shaft: String,
    },
    /// A bearing has a shaft's name.
    BearingNamedAsShaft {
        /// The name given.
        name: String,
    },
    /// Geometry given without `rollers`.
    RollersMissing {
        /// The bearing's name.
        bearing: String,
    },
    /// Geometry given without a diameter (`key`: roller_diameter, pitch_diameter).
    DiameterMissing {
        /// The bearing's name.
        bearing: String,
        /// The key, without unit suffix.
        key: &'static str,
    },
    /// Neither complete geometry nor all four multiples.
    GeometryOrMultiples {
        /// The bearing's name.
        bearing: String,
    },
    /// A mesh's mate shaft is its own shaft.
    MateIsOwnShaft {
        /// The mesh's name.
        mesh: String,
        /// The mate shaft named.
        mate: String,
    },
    /// The point is refused by the core's check (the key it refers to).
    Invalid(dsp_core::config::ConfigError),
}

impl std::fmt::Display for PointError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            PointError::Toml(e) => write!(f, "{e}"),
            PointError::Report(e) => write!(f, "{e}"),
            PointError::NotOneOf {
                key,
                value,
                allowed: [a, b],
            } => write!(f, "{key}: `{value}` is not `{a}` or `{b}`"),
            PointError::RpmMissing => {
                f.write_str("speed.rpm: required when speed.source = \"constant\"")
            }
            PointError::IsoGroup(g) => write!(f, "iso.group: {g} is not 1 or 2"),
            PointError::NameLength { what, name } => {
                write!(f, "{what}.name `{name}`: must be 1 to {NAME_LEN} bytes")
            }
            PointError::DuplicateName { what, whats, name } => write!(
                f,
                "{what}.name `{name}`: two {whats} share this name; give each {what} its own name"
            ),
            PointError::TooMany { what, n, cap } => {
                write!(f, "{what}: {n} given, at most {cap} fit one measuring point")
            }
            PointError::Capacity(what) => write!(f, "{what}: capacity exceeded"),
            PointError::DrivenBy { shaft, by } => write!(
                f,
                "shaft `{shaft}`.driven_by: `{by}` is not a shaft listed before it"
            ),
            PointError::ZeroTeeth { shaft } => {
                write!(f, "shaft `{shaft}`.teeth: tooth counts must be > 0")
            }
            PointError::RatioOrTeeth { shaft } => write!(
                f,
                "shaft `{shaft}`: give either `ratio`, or `driven_by` with `teeth`"
            ),
            PointError::FirstRatio { shaft } => write!(
                f,
                "shaft `{shaft}`: the first shaft is the tach shaft and has ratio 1"
            ),
            PointError::BothUnits { bearing, key } => {
                write!(f, "bearing `{bearing}`: give {key}_mm or {key}_in, not both")
            }
            PointError::NoShaft { what, owner, shaft } => {
                write!(f, "{what} `{owner}`.shaft: no shaft named `{shaft}`")
            }
            PointError::BearingNamedAsShaft { name } => write!(
                f,
                "bearing.name `{name}`: also the name of a shaft; shaft and bearing names must differ"
            ),
            PointError::RollersMissing { bearing } => {
                write!(f, "bearing `{bearing}`.rollers: missing")
            }
            PointError::DiameterMissing { bearing, key } => {
                write!(f, "bearing `{bearing}`: {key}_mm or _in missing")
            }
            PointError::GeometryOrMultiples { bearing } => write!(
                f,
                "bearing `{bearing}`: give either geometry (rollers, roller_diameter_*, \
                 pitch_diameter_*, contact_angle_deg) or all of bpfo_x, bpfi_x, ftf_x, bsf_x"
            ),
            PointError::MateIsOwnShaft { mesh, mate } => write!(
                f,
                "mesh `{mesh}`: mate_shaft `{mate}` is the gear's own shaft; name the shaft \
                 of the meshing gear"
            ),
            PointError::Invalid(e) => write!(f, "{e} ({})", config_key(*e)),
        }
    }
}

impl std::error::Error for PointError {}

/// Parses and validates point-file text; the error names the key or line.
pub fn parse(text: &str) -> Result<PointConfig, PointError> {
    let file: PointFile = toml::from_str(text).map_err(PointError::Toml)?;
    crate::report_policy::from_section(&file.report).map_err(PointError::Report)?;
    let mut p = PointConfig::default();

    if let Some(v) = file.sensor.sample_rate_hz {
        p.sample_rate_hz = v;
    }
    if let Some(v) = file.sensor.counts_to_g {
        p.counts_to_g = v;
    }
    if let Some(v) = file.sensor.adc_full_scale {
        p.adc_full_scale = v;
    }

    p.band_hz = file.envelope.band_hz;
    if let Some(v) = file.envelope.poles {
        p.poles = v;
    }
    if let Some(r) = &file.envelope.rectifier {
        p.rectifier = match r.as_str() {
            "abs" => Rectifier::Abs,
            "square" => Rectifier::Square,
            other => {
                return Err(PointError::NotOneOf {
                    key: "envelope.rectifier",
                    value: other.to_string(),
                    allowed: ["abs", "square"],
                })
            }
        };
    }

    let s = &file.speed;
    if let Some(v) = s.min_rpm {
        p.min_rpm = v;
    }
    if let Some(v) = s.max_rpm {
        p.max_rpm = v;
    }
    if let Some(v) = s.max_change_pct {
        p.max_speed_change_pct = v;
    }
    let source = s
        .source
        .as_deref()
        .unwrap_or(if s.rpm.is_some() { "constant" } else { "tach" });
    p.speed = match source {
        "tach" => SpeedInput::Tach {
            pulses_per_rev: s.pulses_per_rev.unwrap_or(1),
            tick_hz: s.tick_hz.unwrap_or(1_000_000),
            tick_at_sample0: 0,
        },
        "constant" => SpeedInput::Constant {
            rpm: s.rpm.ok_or(PointError::RpmMissing)?,
        },
        other => {
            return Err(PointError::NotOneOf {
                key: "speed.source",
                value: other.to_string(),
                allowed: ["tach", "constant"],
            })
        }
    };

    if let Some(v) = file.spectrum.samples_per_rev {
        p.samples_per_rev = v;
    }
    if let Some(v) = file.spectrum.revolutions {
        p.revolutions = v;
    }
    if let Some(w) = &file.spectrum.window {
        p.window = match w.as_str() {
            "hann" => Window::Hann,
            "flattop" => Window::FlatTop,
            other => {
                return Err(PointError::NotOneOf {
                    key: "spectrum.window",
                    value: other.to_string(),
                    allowed: ["hann", "flattop"],
                })
            }
        };
    }

    let mut search = DefectSearchConfig::default();
    if let Some(v) = file.search.harmonics {
        search.harmonics = v;
        search.anchor_harmonics = search.anchor_harmonics.min(v);
        search.min_harmonics = search.min_harmonics.min(v);
    }
    if let Some(v) = file.search.slip_tolerance {
        search.slip_tolerance = v;
    }
    if let Some(v) = file.search.prominence_db {
        search.prominence_threshold_db = v;
    }
    if let Some(v) = file.search.min_harmonics {
        search.min_harmonics = v;
    }
    if let Some(v) = file.search.sideband_db {
        search.sideband_threshold_db = v;
    }
    p.search = search;

    if let Some(g) = file.iso.group {
        p.machine_group = match g {
            1 => MachineGroup::Large,
            2 => MachineGroup::Medium,
            other => return Err(PointError::IsoGroup(other)),
        };
    }
    if let Some(sup) = &file.iso.support {
        p.support = match sup.as_str() {
            "rigid" => Support::Rigid,
            "flexible" => Support::Flexible,
            other => {
                return Err(PointError::NotOneOf {
                    key: "iso.support",
                    value: other.to_string(),
                    allowed: ["rigid", "flexible"],
                })
            }
        };
    }

    shafts(&file.shaft, &mut p)?;
    bearings(&file.bearing, &mut p)?;
    meshes(&file.mesh, &mut p)?;

    p.validate().map_err(PointError::Invalid)?;
    Ok(p)
}

fn check_name(what: &'static str, name: &str) -> Result<(), PointError> {
    if name.is_empty() || name.len() > NAME_LEN {
        return Err(PointError::NameLength {
            what,
            name: name.to_string(),
        });
    }
    Ok(())
}

fn shafts(entries: &[ShaftEntry], p: &mut PointConfig) -> Result<(), PointError> {
    if entries.is_empty() {
        return Ok(()); // the default single tach shaft, ratio 1
    }
    check_count("shaft", entries.len(), MAX_SHAFTS)?;
    p.shafts.clear();
    for (i, e) in entries.iter().enumerate() {
        check_name("shaft", &e.name)?;
        if entries.iter().take(i).any(|o| o.name == e.name) {
            return Err(PointError::DuplicateName {
                what: "shaft",
                whats: "shafts",
                name: e.name.clone(),
            });
        }
        let ratio = match (e.ratio, &e.driven_by, e.teeth) {
            (Some(r), None, None) => r,
            (None, Some(by), Some([z_driver, z_driven])) => {
                let driver = p
                    .shafts
                    .iter()
                    .find(|s| s.name.as_str() == by)
                    .ok_or_else(|| PointError::DrivenBy {
                        shaft: e.name.clone(),
                        by: by.clone(),
                    })?;
                if z_driver == 0 || z_driven == 0 {
                    return Err(PointError::ZeroTeeth {
                        shaft: e.name.clone(),
                    });
                }
                driver.ratio * f32::from(z_driver) / f32::from(z_driven)
            }
            (None, None, None) if i == 0 => 1.0,
            _ => {
                return Err(PointError::RatioOrTeeth {
                    shaft: e.name.clone(),
                })
            }
        };
        if i == 0 && (ratio - 1.0).abs() > f32::EPSILON {
            return Err(PointError::FirstRatio {
                shaft: e.name.clone(),
            });
        }
        p.shafts
            .push(Shaft {
                name: name_from(&e.name),
                ratio,
            })
            .map_err(|_| PointError::Capacity("shaft"))?;
    }
    Ok(())
}

fn length(
    bearing: &str,
    key: &'static str,
    mm: Option<f32>,
    inch: Option<f32>,
) -> Result<Option<f32>, PointError> {
    crate::bearing_len::length_mm(mm, inch).map_err(|_| PointError::BothUnits {
        bearing: bearing.to_string(),
        key,
    })
}

fn check_count(what: &'static str, n: usize, cap: usize) -> Result<(), PointError> {
    if n > cap {
        return Err(PointError::TooMany { what, n, cap });
    }
    Ok(())
}

/// Index of the shaft `shaft` names (the tach shaft when absent).
fn shaft_of(
    p: &PointConfig,
    what: &'static str,
    owner: &str,
    shaft: Option<&str>,
) -> Result<u8, PointError> {
    let i = match shaft {
        None => 0,
        Some(s) => p
            .shafts
            .iter()
            .position(|x| x.name.as_str() == s)
            .ok_or_else(|| PointError::NoShaft {
                what,
                owner: owner.to_string(),
                shaft: s.to_string(),
            })?,
    };
    // At most MAX_SHAFTS (4) shafts exist.
    Ok(u8::try_from(i).unwrap_or(u8::MAX))
}

fn bearings(entries: &[BearingEntry], p: &mut PointConfig) -> Result<(), PointError> {
    check_count("bearing", entries.len(), MAX_BEARINGS)?;
    for (i, e) in entries.iter().enumerate() {
        check_name("bearing", &e.name)?;
        if entries.iter().take(i).any(|o| o.name == e.name) {
            return Err(PointError::DuplicateName {
                what: "bearing",
                whats: "bearings",
                name: e.name.clone(),
            });
        }
        // one name, one thing: reports and gateway maps refer to both by name
        if p.shafts.iter().any(|s| s.name.as_str() == e.name) {
            return Err(PointError::BearingNamedAsShaft {
                name: e.name.clone(),
            });
        }
        let shaft = shaft_of(p, "bearing", &e.name, e.shaft.as_deref())?;
        let d = length(
            &e.name,
            "roller_diameter",
            e.roller_diameter_mm,
            e.roller_diameter_in,
        )?;
        let pd = length(
            &e.name,
            "pitch_diameter",
            e.pitch_diameter_mm,
            e.pitch_diameter_in,
        )?;
        let geometry = e.rollers.is_some() || d.is_some() || pd.is_some();
        let multiples = [e.bpfo_x, e.bpfi_x, e.ftf_x, e.bsf_x];
        let kinematics = match (geometry, multiples) {
            (true, [None, None, None, None]) => BearingKinematics::Geometry {
                rollers: e.rollers.ok_or_else(|| PointError::RollersMissing {
                    bearing: e.name.clone(),
                })?,
                roller_diameter: d.ok_or_else(|| PointError::DiameterMissing {
                    bearing: e.name.clone(),
                    key: "roller_diameter",
                })?,
                pitch_diameter: pd.ok_or_else(|| PointError::DiameterMissing {
                    bearing: e.name.clone(),
                    key: "pitch_diameter",
                })?,
                contact_angle_deg: e.contact_angle_deg.unwrap_or(0.0),
            },
            (false, [Some(bpfo_x), Some(bpfi_x), Some(ftf_x), Some(bsf_x)]) => {
                BearingKinematics::Multiples {
                    bpfo_x,
                    bpfi_x,
                    ftf_x,
                    bsf_x,
                }
            }
            _ => {
                return Err(PointError::GeometryOrMultiples {
                    bearing: e.name.clone(),
                })
            }
        };
        p.bearings
            .push(Bearing {
                name: name_from(&e.name),
                shaft,
                kinematics,
            })
            .map_err(|_| PointError::Capacity("bearing"))?;
    }
    Ok(())
}

fn meshes(entries: &[MeshEntry], p: &mut PointConfig) -> Result<(), PointError> {
    check_count("mesh", entries.len(), MAX_MESHES)?;
    for (i, e) in entries.iter().enumerate() {
        check_name("mesh", &e.name)?;
        if entries.iter().take(i).any(|o| o.name == e.name) {
            return Err(PointError::DuplicateName {
                what: "mesh",
                whats: "meshes",
                name: e.name.clone(),
            });
        }
        let shaft = shaft_of(p, "mesh", &e.name, e.shaft.as_deref())?;
        let mate = match e.mate_shaft.as_deref() {
            Some(m) => {
                let x = shaft_of(p, "mesh", &e.name, Some(m))?;
                if x == shaft {
                    return Err(PointError::MateIsOwnShaft {
                        mesh: e.name.clone(),
                        mate: m.to_string(),
                    });
                }
                Some(x)
            }
            None => None,
        };
        p.meshes
            .push(Mesh {
                name: name_from(&e.name),
                shaft,
                teeth: e.teeth,
                mate,
            })
            .map_err(|_| PointError::Capacity("mesh"))?;
    }
    Ok(())
}

/// The point-file key a configuration error refers to.
pub(crate) fn config_key(e: dsp_core::config::ConfigError) -> &'static str {
    use dsp_core::config::ConfigError as E;
    match e {
        E::SampleRate => "sensor.sample_rate_hz",
        E::Scale => "sensor.counts_to_g",
        E::FullScale => "sensor.adc_full_scale",
        E::Band => "envelope.band_hz",
        E::Poles => "envelope.poles",
        E::Tach => "speed.pulses_per_rev / speed.tick_hz",
        E::ConstantSpeed => "speed.rpm",
        E::SpeedRange => "speed.min_rpm / speed.max_rpm",
        E::SpeedChange => "speed.max_change_pct",
        E::SamplesPerRev => "spectrum.samples_per_rev",
        E::Revolutions => "spectrum.revolutions",
        E::ShaftRatio => "shaft.ratio",
        E::DuplicateName => "shaft.name / bearing.name",
        E::BearingShaft => "bearing.shaft",
        E::BearingGeometry => "bearing geometry",
        E::BearingMultiples => "bearing.*_x",
        E::Search => "search",
        E::OrderRange => "spectrum.samples_per_rev",
        E::Mesh => "mesh",
        _ => "point",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn example_point_file_parses() {
        let text = include_str!("../examples/point.toml");
        let p = parse(text).unwrap();
        assert_eq!(p.bearings.len(), 3);
        assert_eq!(p.meshes.len(), 2);
        assert_eq!((p.meshes[1].shaft, p.meshes[1].teeth), (1, 23));
        assert_eq!(p.shafts.len(), 3);
        // intermediate shaft: 1 x 19/71 (tooth counts of the example)
        assert!((p.shafts[1].ratio - 19.0 / 71.0).abs() < 1e-6);
    }

    /// Every "(default: X)" in the example point files is the real default:
    /// a file giving only that key with X parses to the same point as an
    /// empty file (PointConfig::default through the parser).
    #[test]
    fn defaults_shown_in_the_examples_are_the_real_defaults() {
        let empty = parse("").unwrap();
        for (file, text) in [
            ("point.toml", include_str!("../examples/point.toml")),
            (
                "demo-point.toml",
                include_str!("../examples/demo-point.toml"),
            ),
        ] {
            let mut section = String::new();
            let mut checked = 0;
            for line in text.lines() {
                let t = line.trim();
                if t.starts_with('#') {
                    continue;
                }
                if t.starts_with("[[") {
                    section.clear(); // list entries have no defaults to show
                } else if t.starts_with('[') {
                    section = t.to_string();
                }
                let Some((kv, comment)) = t.split_once('#') else {
                    continue;
                };
                if kv.trim().is_empty() {
                    continue; // a comment line, not a key
                }
                let Some(d) = comment.split("(default: ").nth(1) else {
                    continue;
                };
                let value = d.split([')', ';']).next().unwrap().trim();
                let key = kv.split('=').next().unwrap().trim();
                assert!(
                    !section.is_empty(),
                    "{file}: default outside a section: {line}"
                );
                let one = format!("{section}\n{key} = {value}\n");
                let p = parse(&one).unwrap_or_else(|e| panic!("{file}: {one:?}: {e}"));
                assert_eq!(p, empty, "{file}: {key} = {value} is not the default");
                checked += 1;
            }
            assert!(checked >= 20, "{file}: only {checked} defaults shown");
        }
    }

    /// Both example files say the same about leaving `band_hz` out.
    #[test]
    fn examples_agree_on_the_band_left_out() {
        let band = |t: &'static str| t.lines().find(|l| l.starts_with("band_hz")).unwrap();
        let (a, b) = (
            band(include_str!("../examples/point.toml")),
            band(include_str!("../examples/demo-point.toml")),
        );
        assert_eq!(a, b);
        // and the node's fallback it names is dsp-core's
        let mut p = PointConfig::default();
        p.sample_rate_hz = 51_200.0;
        assert_eq!(p.default_band_hz(), [6000.0, 12_000.0]);
        assert!(a.contains("0.75 x Nyquist, at most 12 kHz"), "{a}");
    }

    /// The simulator's old list names are read here too.
    #[test]
    fn old_list_names_are_aliases() {
        let b = "bpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
        let new = parse(&format!(
            "[[shaft]]\nname = \"in\"\n[[bearing]]\nname = \"de\"\n{b}"
        ))
        .unwrap();
        let old = parse(&format!(
            "[[shafts]]\nname = \"in\"\n[[bearings]]\nname = \"de\"\n{b}"
        ))
        .unwrap();
        assert_eq!(new, old);
    }

    #[test]
    fn bad_keys_are_named() {
        let cases = [
            ("[envelope]\nband_hz = [5000.0]\n", "band_hz"),
            ("[envelope]\npoles = 5\n", "envelope.poles"),
            ("[speed]\nsource = \"laser\"\n", "speed.source"),
            ("[sensr]\n", "sensr"),
            (
                "[[bearing]]\nname = \"a\"\nrollers = 0\nroller_diameter_mm = 8\npitch_diameter_mm = 40\n",
                "bearing geometry",
            ),
            (
                "[[bearing]]\nname = \"a\"\nrollers = 9\nroller_diameter_mm = 8\n",
                "pitch_diameter",
            ),
            (
                "[[bearing]]\nname = \"a\"\nbpfo_x = 3.5\n",
                "either geometry",
            ),
            ("[envelope]\nband_hz = [nan, 4000.0]\n", "envelope.band_hz"),
            ("[[mesh]]\nname = \"m\"\nteeth = 0\n", "mesh"),
            ("[[mesh]]\nname = \"m\"\nshaft = \"x\"\nteeth = 9\n", "no shaft named"),
        ];
        for (text, key) in cases {
            let err = parse(text).unwrap_err().to_string();
            assert!(
                err.contains(key),
                "{text:?} gave {err:?}, want mention of {key}"
            );
        }
    }

    #[test]
    fn a_name_shared_by_a_shaft_and_a_bearing_is_refused() {
        let text = "[[shaft]]\nname = \"input\"\n[[shaft]]\nname = \"out\"\nratio = 0.25\n\
                    [[bearing]]\nname = \"out\"\nshaft = \"out\"\nbpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
        let err = parse(text).unwrap_err().to_string();
        assert!(
            err.contains("bearing.name `out`") && err.contains("shaft"),
            "{err}"
        );
        // the default tach shaft (no [[shaft]] given) is named `input`
        let text =
            "[[bearing]]\nname = \"input\"\nbpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
        assert!(parse(text)
            .unwrap_err()
            .to_string()
            .contains("bearing.name `input`"));
        // distinct names parse
        let text = "[[shaft]]\nname = \"input\"\n[[bearing]]\nname = \"de\"\nbpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
        assert!(parse(text).is_ok());
    }

    /// A name given twice is named in the message (it was the generic
    /// "names must be unique").
    #[test]
    fn duplicate_names_are_named() {
        let b = "bpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
        let text = format!("[[bearing]]\nname = \"de\"\n{b}[[bearing]]\nname = \"de\"\n{b}");
        let err = parse(&text).unwrap_err().to_string();
        assert!(
            err.contains("bearing.name `de`") && err.contains("two bearings"),
            "{err}"
        );
        let text = "[[shaft]]\nname = \"in\"\n[[shaft]]\nname = \"in\"\nratio = 0.5\n";
        assert!(parse(text)
            .unwrap_err()
            .to_string()
            .contains("shaft.name `in`"));
        let text = "[[mesh]]\nname = \"m\"\nteeth = 9\n[[mesh]]\nname = \"m\"\nteeth = 7\n";
        assert!(parse(text)
            .unwrap_err()
            .to_string()
            .contains("mesh.name `m`"));
    }

    #[test]
    fn too_many_bearings_refused() {
        let mut text = String::new();
        for i in 0..=dsp_core::config::MAX_BEARINGS {
            text.push_str(&format!(
                "[[bearing]]\nname = \"b{i}\"\nbpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n"
            ));
        }
        assert!(parse(&text).unwrap_err().to_string().contains("at most 8"));
    }
}
