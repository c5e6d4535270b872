//! `envord validate <data-dir>`: the diagnosis checked on labelled open
//! bearing data (a folder with a `manifest.toml` laid out like the CWRU and
//! MFPT folders of the shared data).
//!
//! One fixed method for every record, no per-file tuning: the bearing and
//! speed documented for the record, [`validation_point`] (segment length by
//! one rule from the record's length, default search thresholds) and one
//! band rule for all (by default the automatic band survey, see
//! [`dsp_core::survey`]). A record with fault location `none` is correct
//! when nothing is detected; an inner-race, outer-race or ball record when
//! the bearing's kind call ([`dsp_core::kind_call`]) names its kind (BPFI,
//! BPFO, BSF): detected, highest score, and a clear margin. A fault record
//! reported "damaged, kind uncertain" is neither right nor a wrong kind
//! ([`crate::validate_outcome`]). Records with another fault text are
//! listed, not scored.
//!
//! # Manifest
//! One `[[recording]]` table per WAV file. Fields used (every other field is
//! ignored):
//! * `file`, `sample_rate_hz`, `shaft_rpm`, `fault_location` (required;
//!   `inner_race`, `outer_race`, `ball`, `none` in any case, with spaces or
//!   hyphens for the underscore; any other text is listed, not scored);
//! * `channel` (optional);
//! * the bearing: its geometry (`n_rollers` or `n_balls`; `roller_diameter_in`
//!   or `ball_diameter_in`, or the `_mm` forms; `pitch_diameter_in` or
//!   `pitch_diameter_mm`; `contact_angle_deg`, 0 when absent), preferred, or
//!   the multiples `bpfo_x`, `bpfi_x`, `ftf_x`, `bsf_x`. A record with
//!   neither takes the manifest's `[bearings.<faulted_bearing>]` table
//!   (`faulted_bearing = "fan end"` -> `[bearings.fan_end]`), or its only
//!   `[bearings.*]` table. Geometry and multiples given together are
//!   compared; a difference over 2 % is noted and the geometry is used.
//!
//! Datasets differ in what `bsf_x` means (CWRU lists 2 x BSF, MFPT 1 x BSF),
//! so `bsf_x` is checked against the kinematics: for a zero contact angle
//! `d/D = 1 - 2 FTF` and `BSF = (1 - (d/D)^2) / (2 d/D)`; a `bsf_x` nearer
//! twice that value is halved.
//!
//! A record that cannot be used (a missing or wrong field, an unreadable or
//! mismatching WAV, a record too short) is listed with an error naming the
//! file and the field; the run goes on with the next record. Scored records
//! with an error count as not correct.

use std::path::{Path, PathBuf};

use clap::Args;
use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::kinematics::{BearingGeometry, DefectKind, DefectMultiples, ShaftRatio};
use dsp_core::pipeline::NodePipeline;
use dsp_core::survey::{SurveyError, SurveyResult};
use serde_json::{json, Value};

use crate::analysis::{run, Accel, Record};
use crate::error::CliError;
use crate::validate_outcome::{outcome, Outcome};
use dsp_core::kind_call::{kind_call, KindCall};
use crate::wav::{read_wav, ReadOptions};

/// How the envelope band is chosen for every record.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BandRule {
    /// The spectral-kurtosis band survey on each record ([`dsp_core::survey`]).
    Auto,
    /// One octave ending at 0.75 x Nyquist, at most 12 kHz
    /// ([`PointConfig::default_band_hz`]).
    Default,
    /// The same band for every record (clipped to 0.9 x Nyquist).
    Fixed([f32; 2]),
    /// Issue 20 measurement: of the survey's bands, the one where the
    /// watched lines' strongest family scores highest over its floor (the
    /// envelope-spectrum evidence at the watched orders, any kind); the
    /// spectral-kurtosis band when no band has a counted family.
    Evidence,
}

impl std::str::FromStr for BandRule {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "auto" => Ok(BandRule::Auto),
            "default" => Ok(BandRule::Default),
            "evidence" => Ok(BandRule::Evidence),
            other => {
                let parts: Vec<&str> = other.split(',').collect();
                let nums: Result<Vec<f32>, _> = parts.iter().map(|p| p.trim().parse()).collect();
                match nums.as_deref() {
                    Ok([lo, hi]) if lo.is_finite() && hi.is_finite() && *lo > 0.0 && hi > lo => {
                        Ok(BandRule::Fixed([*lo, *hi]))
                    }
                    _ => Err(format!(
                        "`{other}`: give `auto`, `default`, `evidence` or `LO,HI` in Hz"
                    )),
                }
            }
        }
    }
}

/// Arguments of `envord validate`.
#[derive(Debug, Args)]
pub struct ValidateArgs {
    /// Folder holding `manifest.toml` and the WAV files it lists.
    pub data_dir: PathBuf,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Envelope band rule: `auto` (spectral-kurtosis survey), `default`
    /// (octave below 0.75 x Nyquist, at most 12 kHz) or `LO,HI` in Hz for
    /// every record.
    #[arg(long, default_value = "auto")]
    pub band: BandRule,
    /// Only records of this channel (`DE`, `FE`, `BA`; case-insensitive).
    #[arg(long)]
    pub channel: Option<String>,
    /// Also print, per record, the harmonics each kind found (table mode).
    #[arg(long)]
    pub detail: bool,
    /// Exit 1 when fewer scored records than this are right (a CI floor).
    #[arg(long)]
    pub min_correct: Option<usize>,
    /// False-alarm check: also watch a decoy bearing on the same shaft
    /// whose defect multiples are the documented ones times this factor
    /// (for example 0.87), as a node on a gearbox watches several bearings.
    /// The record has no fault of that bearing, so any detection on it is a
    /// false alarm (counted apart); the documented bearing is scored as usual.
    #[arg(long, value_parser = parse_decoy)]
    pub decoy: Option<f32>,
    /// With `--decoy`: watch the decoy bearing alone (the documented one is
    /// not watched, so its lines cannot be attributed to it). Every record is
    /// then expected to show nothing.
    #[arg(long, requires = "decoy")]
    pub decoy_alone: bool,
    /// With `--decoy`: exit 1 when the decoy bearing shows a detection on
    /// more records than this (a CI ceiling).
    #[arg(long, requires = "decoy")]
    pub max_decoy_alarms: Option<usize>,
}

fn parse_decoy(s: &str) -> Result<f32, String> {
    let f: f32 = s.trim().parse().map_err(|e| format!("{s}: {e}"))?;
    if f.is_finite() && (0.25..=4.0).contains(&f) && (f - 1.0).abs() >= 0.02 {
        Ok(f)
    } else {
        Err(format!(
            "{s}: a decoy factor lies in 0.25-4 and at least 2 % away from 1"
        ))
    }
}

/// The decoy of a manifest entry for [`ValidateArgs::decoy`]: the same
/// record and speed with a decoy bearing whose defect multiples are the
/// documented ones scaled by `factor`; watched beside the documented bearing,
/// or `alone` in its place (then `none` is the expected fault and the
/// original is kept in a note).
pub fn decoy_entry(entry: &ManifestEntry, factor: f32, alone: bool) -> ManifestEntry {
    let record = entry.record.clone().and_then(|mut rec| {
        let bearing = Bearing {
            name: name_from("documented"),
            shaft: 0,
            kinematics: rec.kinematics,
        };
        let m = bearing.multiples().map_err(|e| FieldError {
            record: rec.file.clone(),
            field: "bearing".into(),
            message: format!("{e}"),
        })?;
        let decoy = BearingKinematics::Multiples {
            bpfo_x: m.bpfo() * factor,
            bpfi_x: m.bpfi() * factor,
            ftf_x: m.ftf() * factor,
            bsf_x: m.bsf() * factor,
        };
        if alone {
            rec.notes.push(format!(
                "decoy bearing alone: the documented multiples x {factor} (was {})",
                if rec.fault_location.is_empty() {
                    "-"
                } else {
                    rec.fault_location.as_str()
                }
            ));
            rec.kinematics = decoy;
            rec.fault_location = "none".into();
        } else {
            rec.decoy = Some(decoy);
        }
        Ok(rec)
    });
    ManifestEntry {
        file: entry.file.clone(),
        fault_location: if alone {
            Some("none".into())
        } else {
            entry.fault_location.clone()
        },
        channel: entry.channel.clone(),
        record,
    }
}

/// One usable manifest record.
#[derive(Debug, Clone)]
pub struct ManifestRecord {
    /// WAV file name, relative to the data folder.
    pub file: String,
    /// Sample rate, Hz.
    pub sample_rate_hz: f32,
    /// Constant shaft speed, rpm.
    pub shaft_rpm: f32,
    /// The fault location as written in the manifest.
    pub fault_location: String,
    /// Sensor channel (`DE`, `FE`, `BA`) or empty.
    pub channel: String,
    /// `faulted_bearing` as written, or empty.
    pub faulted_bearing: String,
    /// The documented bearing.
    pub kinematics: BearingKinematics,
    /// Remarks on how the record was read (fallbacks, disagreements).
    pub notes: Vec<String>,
    /// A decoy bearing watched beside the documented one (`--decoy`).
    pub decoy: Option<BearingKinematics>,
}

/// Why one manifest record cannot be used: the record (its `file`, or its
/// position when `file` itself is missing), the field, and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldError {
    /// The record's `file`, or `recording #N` (1-based).
    pub record: String,
    /// The field at fault (one name, or several joined by `/`).
    pub field: String,
    /// What is wrong with it.
    pub message: String,
}

impl std::fmt::Display for FieldError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: `{}` {}", self.record, self.field, self.message)
    }
}

/// One `[[recording]]` entry: usable, or why not (with whatever of the
/// record could be read, for the listing).
#[derive(Debug, Clone)]
pub struct ManifestEntry {
    /// The record's `file`, or `recording #N` when absent.
    pub file: String,
    /// `fault_location` as written, if present.
    pub fault_location: Option<String>,
    /// `channel`, or empty.
    pub channel: String,
    /// The parsed record, or the first field error.
    pub record: Result<ManifestRecord, FieldError>,
}

/// A fault location (or a bearing name) in canonical form: trimmed, lower
/// case, spaces and hyphens as underscores (`"Inner race"` -> `inner_race`,
/// `"fan end"` -> `fan_end`).
pub fn canonical_location(fault_location: &str) -> String {
    fault_location
        .trim()
        .chars()
        .map(|c| match c {
            ' ' | '-' => '_',
            c => c.to_ascii_lowercase(),
        })
        .collect()
}

/// The defect kind a fault location should produce; `Some(None)` for a
/// healthy record, `None` when the location is not one of the scored ones.
pub fn expected_kind(fault_location: &str) -> Option<Option<DefectKind>> {
    match canonical_location(fault_location).as_str() {
        "inner_race" => Some(Some(DefectKind::Bpfi)),
        "outer_race" => Some(Some(DefectKind::Bpfo)),
        "ball" => Some(Some(DefectKind::Bsf)),
        "none" => Some(None),
        _ => None,
    }
}

/// Single-sided BSF multiple from `bsf_x` given with the other multiples:
/// halved when it is nearer twice the zero-contact-angle kinematic value
/// implied by FTF (see the module doc).
pub fn single_sided_bsf(ftf_x: f32, bsf_x: f32) -> f32 {
    let r = 1.0 - 2.0 * ftf_x;
    if !(r > 0.0 && r < 1.0) {
        return bsf_x; // not a simple rolling bearing on this shaft: take as given
    }
    let kin = (1.0 - r * r) / (2.0 * r);
    if (bsf_x - 2.0 * kin).abs() < (bsf_x - kin).abs() {
        0.5 * bsf_x
    } else {
        bsf_x
    }
}

/// Reads the fields of one table for one record, naming the record in errors.
struct Fields<'a> {
    t: &'a toml::Table,
    record: &'a str,
}

impl Fields<'_> {
    fn err(&self, field: &str, message: impl Into<String>) -> FieldError {
        FieldError {
            record: self.record.to_string(),
            field: field.to_string(),
            message: message.into(),
        }
    }

    fn text(&self, key: &str) -> Result<Option<String>, FieldError> {
        match self.t.get(key) {
            None => Ok(None),
            Some(toml::Value::String(s)) => Ok(Some(s.clone())),
            Some(v) => Err(self.err(key, format!("is {}, not text", v.type_str()))),
        }
    }

    /// A number (integer, float, or text holding one); `None` when absent.
    fn num(&self, key: &str) -> Result<Option<f64>, FieldError> {
        let v = match self.t.get(key) {
            None => return Ok(None),
            Some(toml::Value::Float(f)) => *f,
            Some(toml::Value::Integer(i)) => {
                #[allow(clippy::cast_precision_loss)]
                let f = *i as f64;
                f
            }
            Some(toml::Value::String(s)) => s
                .trim()
                .parse::<f64>()
                .map_err(|_| self.err(key, format!("`{s}` is not a number")))?,
            Some(v) => return Err(self.err(key, format!("is {}, not a number", v.type_str()))),
        };
        if v.is_finite() {
            Ok(Some(v))
        } else {
            Err(self.err(key, "is not finite"))
        }
    }

    /// A finite positive number that fits an `f32`; `None` when absent.
    fn positive(&self, key: &str) -> Result<Option<f32>, FieldError> {
        match self.num(key)? {
            None => Ok(None),
            Some(v) if v > 0.0 && v < f64::from(f32::MAX) => {
                #[allow(clippy::cast_possible_truncation)]
                let f = v as f32;
                Ok(Some(f))
            }
            Some(v) => Err(self.err(key, format!("{v} is not a positive number"))),
        }
    }

    fn required(&self, key: &str) -> Result<f32, FieldError> {
        self.positive(key)?
            .ok_or_else(|| self.err(key, "missing (required)"))
    }

    /// The first present of `keys` (aliases); two present with different
    /// values are an error.
    fn alias(&self, keys: &[&str]) -> Result<Option<(f32, String)>, FieldError> {
        let mut found: Option<(f32, String)> = None;
        for k in keys {
            if let Some(v) = self.positive(k)? {
                match &found {
                    Some((w, k0)) if (v - w).abs() > 1e-6 * w.abs().max(1.0) => {
                        return Err(
                            self.err(&format!("{k0}/{k}"), format!("disagree ({w} and {v})"))
                        );
                    }
                    Some(_) => {}
                    None => found = Some((v, (*k).to_string())),
                }
            }
        }
        Ok(found)
    }

    /// A length in inches from `<stem>_in` or `<stem>_mm` (and aliases).
    fn length_in(&self, stems: &[&str]) -> Result<Option<(f32, String)>, FieldError> {
        let inch: Vec<String> = stems.iter().map(|s| format!("{s}_in")).collect();
        let mm: Vec<String> = stems.iter().map(|s| format!("{s}_mm")).collect();
        let inch = self.alias(&inch.iter().map(String::as_str).collect::<Vec<_>>())?;
        let mm = self.alias(&mm.iter().map(String::as_str).collect::<Vec<_>>())?;
        Ok(match (inch, mm) {
            (Some(i), Some(m)) => {
                if (m.0 / 25.4 - i.0).abs() > 0.005 * i.0 {
                    return Err(self.err(
                        &format!("{}/{}", i.1, m.1),
                        format!("disagree ({} in, {} mm)", i.0, m.0),
                    ));
                }
                Some(i)
            }
            (Some(i), None) => Some(i),
            (None, Some(m)) => Some((m.0 / 25.4, m.1)),
            (None, None) => None,
        })
    }

    /// Geometry when complete; `Ok(Err(missing names))` when partial or absent.
    fn geometry(&self) -> Result<Result<BearingGeometry, Vec<&'static str>>, FieldError> {
        let rollers = match self.alias(&["n_rollers", "n_balls"])? {
            None => None,
            Some((n, key)) => {
                if n.fract() != 0.0 || !(1.0..=1000.0).contains(&n) {
                    return Err(self.err(&key, format!("{n} is not a whole number of rollers")));
                }
                #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
                let n = n as u16;
                Some(n)
            }
        };
        let d = self.length_in(&["roller_diameter", "ball_diameter"])?;
        let pd = self.length_in(&["pitch_diameter"])?;
        let angle = match self.num("contact_angle_deg")? {
            None => 0.0,
            Some(a) if (0.0..90.0).contains(&a) => {
                #[allow(clippy::cast_possible_truncation)]
                let a = a as f32;
                a
            }
            Some(a) => return Err(self.err("contact_angle_deg", format!("{a} is not in [0, 90)"))),
        };
        let mut missing = Vec::new();
        if rollers.is_none() {
            missing.push("n_rollers");
        }
        if d.is_none() {
            missing.push("roller_diameter_in");
        }
        if pd.is_none() {
            missing.push("pitch_diameter_in");
        }
        let (Some(n), Some((d, dk)), Some((pd, _))) = (rollers, d, pd) else {
            return Ok(Err(missing));
        };
        let g = BearingGeometry {
            rollers: n,
            roller_diameter: d,
            pitch_diameter: pd,
            contact_angle_deg: angle,
        };
        g.multiples()
            .map_err(|e| self.err(&format!("{dk}/pitch_diameter_in"), format!("{e}")))?;
        Ok(Ok(g))
    }

    /// The four multiples when all are present (`bsf_x` made single-sided);
    /// `Ok(Err(missing))` otherwise.
    fn multiples(&self) -> Result<Result<DefectMultiples, Vec<&'static str>>, FieldError> {
        let keys = ["bpfo_x", "bpfi_x", "ftf_x", "bsf_x"];
        let mut v = [0.0f32; 4];
        let mut missing = Vec::new();
        for (slot, k) in v.iter_mut().zip(keys) {
            match self.positive(k)? {
                Some(x) => *slot = x,
                None => missing.push(k),
            }
        }
        if !missing.is_empty() {
            return Ok(Err(missing));
        }
        let [o, i, f, b] = v;
        DefectMultiples::new(o, i, f, single_sided_bsf(f, b))
            .map(Ok)
            .map_err(|e| self.err("bpfo_x/bpfi_x/ftf_x/bsf_x", format!("{e}")))
    }

    /// The bearing of this table: geometry (preferred) or multiples, with
    /// notes; `Ok(None)` when the table gives neither completely.
    fn bearing(&self, notes: &mut Vec<String>) -> Result<Option<BearingKinematics>, FieldError> {
        let geometry = self.geometry()?;
        let multiples = self.multiples()?;
        match (geometry, multiples) {
            (Ok(g), m) => {
                if let (Ok(m), Ok(gm)) = (m, g.multiples()) {
                    let pairs = [
                        ("bpfo_x", m.bpfo(), gm.bpfo()),
                        ("bpfi_x", m.bpfi(), gm.bpfi()),
                        ("ftf_x", m.ftf(), gm.ftf()),
                        ("bsf_x", m.bsf(), gm.bsf()),
                    ];
                    for (k, given, geo) in pairs {
                        if (given / geo - 1.0).abs() > 0.02 {
                            notes.push(format!(
                                "`{k}` {given:.4} differs from the geometry's {geo:.4} by more than 2 %: geometry used"
                            ));
                        }
                    }
                }
                Ok(Some(BearingKinematics::Geometry {
                    rollers: g.rollers,
                    roller_diameter: g.roller_diameter,
                    pitch_diameter: g.pitch_diameter,
                    contact_angle_deg: g.contact_angle_deg,
                }))
            }
            (Err(gmiss), Ok(m)) => {
                if gmiss.len() < 3 {
                    notes.push(format!(
                        "geometry incomplete (no {}): multiples used",
                        gmiss.join(", ")
                    ));
                }
                Ok(Some(BearingKinematics::Multiples {
                    bpfo_x: m.bpfo(),
                    bpfi_x: m.bpfi(),
                    ftf_x: m.ftf(),
                    bsf_x: m.bsf(),
                }))
            }
            (Err(_), Err(_)) => Ok(None),
        }
    }
}

fn parse_record(
    index: usize,
    t: &toml::Table,
    bearings: Option<&toml::Table>,
) -> Result<ManifestRecord, FieldError> {
    let position = format!("recording #{}", index + 1);
    let f = Fields {
        t,
        record: &position,
    };
    let file = f
        .text("file")?
        .filter(|s| !s.trim().is_empty())
        .ok_or_else(|| f.err("file", "missing (required)"))?;
    let f = Fields { t, record: &file };
    let sample_rate_hz = f.required("sample_rate_hz")?;
    let shaft_rpm = f.required("shaft_rpm")?;
    let fault_location = f
        .text("fault_location")?
        .ok_or_else(|| f.err("fault_location", "missing (required)"))?;
    let channel = f.text("channel")?.unwrap_or_default();
    let faulted_bearing = f.text("faulted_bearing")?.unwrap_or_default();
    let mut notes = Vec::new();
    let kinematics = match f.bearing(&mut notes)? {
        Some(k) => k,
        None => {
            // The manifest's bearing table for this record.
            let tables: Vec<(&String, &toml::Table)> = bearings
                .map(|b| {
                    b.iter()
                        .filter_map(|(k, v)| v.as_table().map(|t| (k, t)))
                        .collect()
                })
                .unwrap_or_default();
            // `faulted_bearing = "fan end"` names `[bearings.fan_end]`.
            let wanted = canonical_location(&faulted_bearing);
            let table = tables
                .iter()
                .find(|(k, _)| !wanted.is_empty() && canonical_location(k) == wanted)
                .or_else(|| (tables.len() == 1).then(|| tables.first()).flatten());
            let Some((key, bt)) = table else {
                return Err(f.err(
                    "n_rollers/roller_diameter_in/pitch_diameter_in/bpfo_x/bpfi_x/ftf_x/bsf_x",
                    "no bearing: give the geometry or the four multiples (or a [bearings.<faulted_bearing>] table)",
                ));
            };
            let label = format!("{file} ([bearings.{key}])");
            let bf = Fields {
                t: bt,
                record: &label,
            };
            let k = bf.bearing(&mut notes)?.ok_or_else(|| {
                bf.err(
                    "n_rollers/roller_diameter_in/pitch_diameter_in/bpfo_x/bpfi_x/ftf_x/bsf_x",
                    "the bearing table gives neither the geometry nor the four multiples",
                )
            })?;
            notes.push(format!("bearing from [bearings.{key}]"));
            k
        }
    };
    Ok(ManifestRecord {
        file,
        sample_rate_hz,
        shaft_rpm,
        fault_location,
        channel,
        faulted_bearing,
        kinematics,
        notes,
        decoy: None,
    })
}

/// Parses a manifest. Only an unreadable manifest (not TOML, no
/// `[[recording]]` array) is an error; each record is usable or carries its
/// own [`FieldError`].
pub fn parse_manifest(text: &str) -> Result<Vec<ManifestEntry>, String> {
    let doc: toml::Table = toml::from_str(text).map_err(|e| e.to_string())?;
    let recs = doc
        .get("recording")
        .and_then(toml::Value::as_array)
        .ok_or("no [[recording]] tables")?;
    let bearings = doc.get("bearings").and_then(toml::Value::as_table);
    let mut out = Vec::new();
    for (i, r) in recs.iter().enumerate() {
        let position = format!("recording #{}", i + 1);
        let Some(t) = r.as_table() else {
            out.push(ManifestEntry {
                file: position.clone(),
                fault_location: None,
                channel: String::new(),
                record: Err(FieldError {
                    record: position,
                    field: "recording".into(),
                    message: "is not a table".into(),
                }),
            });
            continue;
        };
        let s = |k: &str| t.get(k).and_then(toml::Value::as_str).map(str::to_string);
        out.push(ManifestEntry {
            file: s("file").unwrap_or(position),
            fault_location: s("fault_location"),
            channel: s("channel").unwrap_or_default(),
            record: parse_record(i, t, bearings),
        });
    }
    Ok(out)
}

/// Fewest spectrum segments [`validation_point`] averages when the record
/// allows (see docs/validation.md for the measurement behind the value).
pub const MIN_SEGMENTS: usize = 2;

/// Samples per revolution [`validation_point`] may choose, finest first.
pub const SAMPLES_PER_REV: [u16; 4] = [64, 128, 256, 512];

/// Most revolutions one record is analysed over (the node's default record).
pub const MAX_REVOLUTIONS: usize = 256;

/// The one measuring point used for every record: the documented bearing on
/// the tach shaft at constant speed, default search thresholds, and the
/// segment length by one rule. Spectrum segments hold 4096 samples, so
/// `S` samples per revolution give segments of `4096 / S` revolutions and a
/// resolution of `S / 4096` orders; defects are searched up to `S / 4`
/// orders. `S` is the smallest of [`SAMPLES_PER_REV`] that the node's
/// pipeline accepts at the record's rate and speed (the resampler ring
/// bounds it), that searches the first two harmonics (`min_harmonics`) of
/// every line, and that averages at
/// least [`MIN_SEGMENTS`] segments within the record (less one revolution
/// for settling) and [`MAX_REVOLUTIONS`]; a record too short for that gets
/// the most segments any `S` gives. The band is set by the caller.
pub fn validation_point(rec: &ManifestRecord, samples: usize) -> Result<PointConfig, String> {
    let mut p = PointConfig::default();
    p.sample_rate_hz = rec.sample_rate_hz;
    p.speed = SpeedInput::Constant { rpm: rec.shaft_rpm };
    p.min_rpm = 0.9 * rec.shaft_rpm;
    p.max_rpm = 1.1 * rec.shaft_rpm;
    p.band_hz = None;
    p.bearings.clear();
    let _ = p.bearings.push(Bearing {
        name: name_from("documented"),
        shaft: 0,
        kinematics: rec.kinematics,
    });
    if let Some(kinematics) = rec.decoy {
        let _ = p.bearings.push(Bearing {
            name: name_from("decoy"),
            shaft: 0,
            kinematics,
        });
    }
    let top_line = p
        .bearings
        .iter()
        .map(|b| {
            b.multiples().ok().map(|m| {
                m.orders(ShaftRatio::TACH)
                    .lines()
                    .iter()
                    .fold(0.0f32, |a, &l| a.max(l))
            })
        })
        .try_fold(0.0f32, |a, l| l.map(|l| a.max(l)))
        .filter(|&l| l > 0.0)
        .ok_or("bearing multiples out of range")?;
    #[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
    let revs =
        (samples as f64 / f64::from(rec.sample_rate_hz) * f64::from(rec.shaft_rpm) / 60.0) as usize;
    let usable = revs.saturating_sub(1).min(MAX_REVOLUTIONS);
    let harmonics = f32::from(p.search.min_harmonics);
    // (samples per rev, segments) for every S that searches the lines and
    // that the node's pipeline accepts (its resampler ring bounds S).
    let plans: Vec<(u16, usize)> = SAMPLES_PER_REV
        .iter()
        .filter(|&&s| {
            // The window (slip) and main lobe above the last harmonic.
            let reach = harmonics * top_line * (1.0 + p.search.slip_tolerance)
                + 4.0 * f32::from(s) / 4096.0;
            let mut q = p.clone();
            q.samples_per_rev = s;
            q.revolutions = 4096 / s;
            reach < 0.25 * f32::from(s) && NodePipeline::new(&q).is_ok()
        })
        .map(|&s| (s, usable / (4096 / usize::from(s))))
        .collect();
    let &(spr, segs) = plans
        .iter()
        .find(|(_, n)| *n >= MIN_SEGMENTS)
        .or_else(|| {
            // Most segments; the finer resolution on a tie.
            plans
                .iter()
                .rev()
                .filter(|(_, n)| *n > 0)
                .max_by_key(|(_, n)| *n)
        })
        .ok_or_else(|| {
            if plans.is_empty() {
                format!(
                    "defect line at {top_line:.2} orders too high to search {harmonics} harmonics"
                )
            } else {
                let shortest = SAMPLES_PER_REV.last().map_or(8, |&s| 4096 / usize::from(s));
                format!(
                    "record too short: {revs} revolutions, at least {} needed",
                    shortest + 1
                )
            }
        })?;
    p.samples_per_rev = spr;
    p.revolutions = u16::try_from(segs * (4096 / usize::from(spr))).unwrap_or(256);
    Ok(p)
}

/// Outcome of one record.
#[derive(Debug, Clone)]
pub struct RecordResult {
    /// The record's file (or position).
    pub file: String,
    /// `fault_location` as written (empty when missing).
    pub fault_location: String,
    /// Sensor channel or empty.
    pub channel: String,
    /// Expected kind (see [`expected_kind`]).
    pub expected: Option<Option<DefectKind>>,
    /// Kinds detected.
    pub detected: Vec<DefectKind>,
    /// Score per kind (BPFO, BPFI, FTF, BSF), dB.
    pub scores: [f32; 4],
    /// Band used, Hz.
    pub band_hz: [f32; 2],
    /// The band came from the survey.
    pub band_auto: bool,
    /// Spectral kurtosis of the chosen band (survey only).
    pub band_kurtosis: Option<f32>,
    /// Samples per revolution of the point.
    pub samples_per_rev: u16,
    /// Segments averaged.
    pub segments: u32,
    /// Quality flags of the report.
    pub flags: String,
    /// `Some(correct)` for scored records.
    pub correct: Option<bool>,
    /// Why the record could not be analysed, if so (names file and field).
    pub error: Option<String>,
    /// Remarks on how the record was read.
    pub notes: Vec<String>,
    /// Found harmonics per kind, as text (`h2@10.81(17dB)`, `*` = not counted).
    pub detail: Vec<String>,
    /// Kinds detected on the decoy bearing (`Some` when one was watched):
    /// each a false alarm.
    pub decoy_detected: Option<Vec<DefectKind>>,
    /// The documented bearing's kind call (issue 20); `None` without a diagnosis.
    pub call: Option<KindCall>,
    /// Scored outcome (`Some` for scored records).
    pub outcome: Option<Outcome>,
}

/// Whether a detection list is right for an expectation (see the module doc).
pub fn judge(expected: Option<DefectKind>, detected: &[DefectKind], scores: &[f32; 4]) -> bool {
    match expected {
        None => detected.is_empty(),
        Some(k) => {
            let s = |k: DefectKind| scores.get(k.index()).copied().unwrap_or(f32::MIN);
            detected.contains(&k) && detected.iter().all(|&d| s(d) <= s(k))
        }
    }
}

/// Chooses the band of one record by `rule`; returns the band, whether it
/// came from the survey, and the survey's kurtosis. The survey is the node's
/// own rule ([`dsp_core::band_choice`]) for `point`, fed in ADC-sized blocks.
pub fn choose_band(
    rule: BandRule,
    x: &[f32],
    fs: f32,
    point: &PointConfig,
) -> Result<([f32; 2], bool, Option<f32>), String> {
    let nyq = 0.5 * fs;
    match rule {
        BandRule::Fixed([lo, hi]) => {
            let hi = hi.min(0.9 * nyq);
            if lo >= hi {
                return Err(format!("band {lo}-{hi} Hz does not fit fs {fs} Hz"));
            }
            Ok(([lo, hi], false, None))
        }
        BandRule::Default => {
            let mut p = PointConfig::default();
            p.sample_rate_hz = fs;
            Ok((p.default_band_hz(), false, None))
        }
        BandRule::Auto | BandRule::Evidence => {
            let r = survey_record(x, point).map_err(|e| format!("band survey: {e}"))?;
            Ok((r.band_hz, true, Some(r.kurtosis)))
        }
    }
}

/// [`BandRule::Evidence`]: runs the point in every survey band and keeps
/// the band whose strongest family (any kind of the first bearing) has the
/// highest score; the survey's own band on a tie (e.g. nothing counted).
fn evidence_band(
    x: &[f32],
    fs: f32,
    point: &PointConfig,
) -> Result<([f32; 2], bool, Option<f32>), String> {
    let r = survey_record(x, point).map_err(|e| format!("band survey: {e}"))?;
    let mut best = (r.band_hz, r.kurtosis, 0.0f32);
    for b in &r.bands {
        let mut p = point.clone();
        p.band_hz = Some(b.band_hz);
        let rec = Record {
            sample_rate_hz: fs,
            accel: Accel::G(x.to_vec()),
            edges_s: None,
        };
        let Ok(a) = run(&p, &rec) else { continue };
        let score = a
            .report
            .bearings
            .first()
            .and_then(|b| b.diagnosis.as_ref())
            .map_or(0.0, |d| {
                d.results
                    .iter()
                    .map(|r| r.score_db)
                    .fold(0.0f32, f32::max)
            });
        if score > best.2 {
            best = (b.band_hz, b.kurtosis, score);
        }
    }
    Ok((best.0, true, Some(best.1)))
}

/// Runs the node's band survey for `point` ([`dsp_core::band_choice`]) over
/// a whole record in ADC-sized blocks, as the node would over a capture.
pub fn survey_record(x: &[f32], point: &PointConfig) -> Result<SurveyResult, SurveyError> {
    let mut s = dsp_core::band_choice::new_survey(point)?;
    for block in x.chunks(dsp_core::pipeline::ADC_BLOCK) {
        s.push_f32(block);
    }
    s.finish()
}

/// An empty result for an entry, before analysis.
fn blank(entry: &ManifestEntry) -> RecordResult {
    let fault_location = entry.fault_location.clone().unwrap_or_default();
    RecordResult {
        file: entry.file.clone(),
        expected: entry.fault_location.as_deref().and_then(expected_kind),
        fault_location,
        channel: entry.channel.clone(),
        detected: Vec::new(),
        scores: [0.0; 4],
        band_hz: [0.0; 2],
        band_auto: false,
        band_kurtosis: None,
        samples_per_rev: 0,
        segments: 0,
        flags: String::new(),
        correct: None,
        error: None,
        notes: Vec::new(),
        detail: Vec::new(),
        decoy_detected: None,
        call: None,
        outcome: None,
    }
}

/// Analyses one manifest entry with the fixed method. Never fails: a record
/// that cannot be analysed carries its error (scored ones count as wrong).
pub fn analyse_entry(dir: &Path, entry: &ManifestEntry, rule: BandRule) -> RecordResult {
    let mut out = blank(entry);
    let res = match &entry.record {
        Err(e) => Err(e.to_string()),
        Ok(rec) => {
            out.notes.clone_from(&rec.notes);
            // The core never panics; the host's reading and glue are guarded
            // too, so one record cannot end the run.
            std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                analyse_into(dir, rec, rule, &mut out)
            }))
            .unwrap_or_else(|_| Err(format!("{}: internal error while analysing", rec.file)))
        }
    };
    match res {
        Ok(()) => {}
        Err(e) => {
            out.call = None;
            out.error = Some(e);
        }
    }
    // Scored by the kind call (issue 20): right only when the kind is named.
    out.outcome = out.expected.map(|e| outcome(e, out.call));
    out.correct = out.outcome.map(|o| o == Outcome::Right);
    out
}

/// Analyses one record into `out`; errors name the file and the field.
fn analyse_into(
    dir: &Path,
    rec: &ManifestRecord,
    rule: BandRule,
    out: &mut RecordResult,
) -> Result<(), String> {
    let path = dir.join(&rec.file);
    let wav = read_wav(&path, ReadOptions::accept_truncated())
        .map_err(|e| format!("{} (`file`): {e}", rec.file))?;
    if let Some(t) = &wav.truncation {
        out.notes.push(format!("WAV data truncated: {t:?}"));
    }
    if wav.channels.len() > 1 {
        out.notes.push(format!(
            "{} channels: the first is used",
            wav.channels.len()
        ));
    }
    let x = wav
        .channels
        .into_iter()
        .next()
        .filter(|c| !c.is_empty())
        .ok_or_else(|| format!("{} (`file`): no samples", rec.file))?;
    #[allow(clippy::cast_precision_loss)]
    let fs = wav.info.sample_rate as f32;
    if (fs - rec.sample_rate_hz).abs() > 0.5 {
        return Err(format!(
            "{}: `sample_rate_hz` {} differs from the WAV's {fs} Hz",
            rec.file, rec.sample_rate_hz
        ));
    }
    let mut point = validation_point(rec, x.len()).map_err(|e| format!("{}: {e}", rec.file))?;
    out.samples_per_rev = point.samples_per_rev;
    let planned = usize::from(point.revolutions) / (4096 / usize::from(point.samples_per_rev));
    if planned < MIN_SEGMENTS {
        out.notes.push(format!(
            "short record: {planned} segment(s) of {} revolutions, fewer than {MIN_SEGMENTS}",
            4096 / usize::from(point.samples_per_rev)
        ));
    }
    let chosen = if rule == BandRule::Evidence {
        evidence_band(&x, fs, &point)
    } else {
        choose_band(rule, &x, fs, &point)
    };
    let (band, auto, k) = match chosen {
        Ok(b) => b,
        // Lines too fast for any survey band of the minimum width: the
        // default octave, noted.
        Err(e) if matches!(rule, BandRule::Auto | BandRule::Evidence) => {
            out.notes.push(format!("{e}: default band used"));
            choose_band(BandRule::Default, &x, fs, &point)?
        }
        Err(e) => return Err(format!("{}: {e}", rec.file)),
    };
    out.band_hz = band;
    out.band_auto = auto;
    out.band_kurtosis = k;
    point.band_hz = Some(band);
    let a = run(
        &point,
        &Record {
            sample_rate_hz: fs,
            accel: Accel::G(x),
            edges_s: None,
        },
    )
    .map_err(|e| format!("{}: {e}", rec.file))?;
    let rep = &a.report;
    out.segments = rep.segments;
    out.flags = rep.flags.to_string();
    if !rep.analysed() {
        return Err(format!("{}: not analysable ({})", rec.file, rep.flags));
    }
    if let Some(d) = rep.bearings.first().and_then(|b| b.diagnosis.as_ref()) {
        out.detected = d.detected().collect();
        out.call = Some(kind_call(d));
        out.detail = detail_lines(d, "");
        for r in &d.results {
            if let Some(s) = out.scores.get_mut(r.kind.index()) {
                *s = r.score_db;
            }
        }
    }
    if let Some(d) = rep.bearings.get(1).and_then(|b| b.diagnosis.as_ref()) {
        out.detail.extend(detail_lines(d, "decoy "));
    }
    if rec.decoy.is_some() {
        out.decoy_detected = Some(
            rep.bearings
                .get(1)
                .and_then(|b| b.diagnosis.as_ref())
                .map(|d| d.detected().collect())
                .unwrap_or_default(),
        );
    }
    Ok(())
}

/// Found harmonics per kind, as text: `h2@10.809(28)`, `*` = not counted.
fn detail_lines(d: &dsp_core::defects::BearingDiagnosis, prefix: &str) -> Vec<String> {
    d.results
        .iter()
        .map(|r| {
            let f: Vec<String> = r
                .harmonics
                .iter()
                .filter(|h| h.found)
                .map(|h| {
                    format!(
                        "h{}@{:.3}({:.0}){}",
                        h.harmonic,
                        h.found_order,
                        h.prominence_db,
                        if h.counted { "" } else { "*" }
                    )
                })
                .collect();
            format!(
                "{prefix}{} sb {} {}",
                r.kind.name(),
                r.sideband_db.map_or("-".into(), |s| format!("{s:.0}")),
                f.join(" ")
            )
        })
        .collect()
}

fn kind_names(k: &[DefectKind]) -> Vec<&'static str> {
    k.iter().map(|k| k.name()).collect()
}

fn expected_name(e: Option<Option<DefectKind>>) -> &'static str {
    match e {
        Some(Some(k)) => k.name(),
        Some(None) => "none",
        None => "-",
    }
}

/// Summary counts: (group, total, correct), by fault type, channel and
/// sample rate.
pub fn totals(results: &[RecordResult]) -> Vec<(String, usize, usize)> {
    let mut groups: Vec<(String, usize, usize)> = Vec::new();
    let mut add = |g: String, ok: bool| {
        if let Some(e) = groups.iter_mut().find(|e| e.0 == g) {
            e.1 += 1;
            e.2 += usize::from(ok);
        } else {
            groups.push((g, 1, usize::from(ok)));
        }
    };
    for r in results {
        let Some(ok) = r.correct else { continue };
        let ch = if r.channel.is_empty() {
            "-"
        } else {
            r.channel.as_str()
        };
        let loc = canonical_location(&r.fault_location);
        add("all".into(), ok);
        add(format!("fault {loc}"), ok);
        add(format!("channel {ch}"), ok);
        add(format!("{loc} / {ch}"), ok);
    }
    groups
}

/// Analyses every entry of the manifest in `dir` (optionally one channel
/// only; with `decoy`, each for its [`decoy_entry`]). Only an unreadable
/// manifest is an error; each record's own failure is in its result.
pub fn validate_dir(
    dir: &Path,
    rule: BandRule,
    channel: Option<&str>,
    decoy: Option<f32>,
    alone: bool,
) -> Result<Vec<RecordResult>, CliError> {
    let mpath = dir.join("manifest.toml");
    let text = std::fs::read_to_string(&mpath)
        .map_err(|e| CliError::input(mpath.display(), format!("cannot read: {e}")))?;
    let mut entries = parse_manifest(&text).map_err(|e| CliError::input(mpath.display(), e))?;
    if let Some(ch) = channel {
        entries.retain(|r| r.channel.eq_ignore_ascii_case(ch));
    }
    if let Some(f) = decoy {
        entries = entries.iter().map(|e| decoy_entry(e, f, alone)).collect();
    }
    Ok(entries
        .iter()
        .map(|r| analyse_entry(dir, r, rule))
        .collect())
}

/// The `--json` document: `records` (`file`, `expected`, `detected`,
/// `correct` as a bool for every record, `scored`, and detail fields) and
/// `summary` (`total` and `correct` over the scored records, plus counts).
pub fn report_json(data_dir: &Path, results: &[RecordResult]) -> Value {
    let total = results.iter().filter(|r| r.correct.is_some()).count();
    let correct = results.iter().filter(|r| r.correct == Some(true)).count();
    let errors = results.iter().filter(|r| r.error.is_some()).count();
    let records: Vec<Value> = results
        .iter()
        .map(|r| {
            json!({
                "file": r.file,
                "expected": expected_name(r.expected),
                "detected": kind_names(&r.detected),
                // A bool for every record; `scored` tells which ones count.
                "correct": r.correct == Some(true),
                "scored": r.correct.is_some(),
                "fault_location": r.fault_location,
                "channel": r.channel,
                "scores_db": {
                    "BPFO": r.scores[0], "BPFI": r.scores[1],
                    "FTF": r.scores[2], "BSF": r.scores[3],
                },
                "band_hz": r.band_hz,
                "band_auto": r.band_auto,
                "band_kurtosis": r.band_kurtosis,
                "samples_per_rev": r.samples_per_rev,
                "segments": r.segments,
                "flags": r.flags,
                "error": r.error,
                "notes": r.notes,
                "decoy_detected": r.decoy_detected.as_deref().map(kind_names),
                "call": r.call.map(|c| c.label()),
                "outcome": r.outcome.map(Outcome::name),
            })
        })
        .collect();
    let groups: Vec<Value> = totals(results)
        .into_iter()
        .map(|(g, t, c)| json!({ "group": g, "total": t, "correct": c }))
        .collect();
    json!({
        "data_dir": data_dir.display().to_string(),
        "records": records,
        "summary": {
            "total": total, "correct": correct, "errors": errors,
            "listed": results.len(), "groups": groups,
            "outcomes": outcome_json(results),
            "decoy": decoy_summary(results).map(|(alarms, watched)| json!({
                "watched": watched, "false_alarms": alarms,
            })),
        },
    })
}

/// Scored records per outcome, by fault type (`all` first).
fn outcome_rows(results: &[RecordResult]) -> Vec<(String, [usize; 5])> {
    let mut rows: Vec<(String, [usize; 5])> = Vec::new();
    for r in results {
        let Some(o) = r.outcome else { continue };
        let c = crate::validate_outcome::counts(core::iter::once(o));
        for g in ["all".to_string(), canonical_location(&r.fault_location)] {
            match rows.iter_mut().find(|e| e.0 == g) {
                Some(e) => e.1.iter_mut().zip(c).for_each(|(a, b)| *a += b),
                None => rows.push((g, c)),
            }
        }
    }
    rows
}

fn outcome_json(results: &[RecordResult]) -> Value {
    outcome_rows(results)
        .into_iter()
        .map(|(g, c)| {
            let mut m = serde_json::Map::new();
            m.insert("group".into(), json!(g));
            for (o, n) in Outcome::ALL.iter().zip(c) {
                m.insert(o.name().into(), json!(n));
            }
            Value::Object(m)
        })
        .collect()
}

/// Decoy false alarms over the records where a decoy bearing was watched:
/// `(records with a detection on it, records)`, `None` without a decoy.
pub fn decoy_summary(results: &[RecordResult]) -> Option<(usize, usize)> {
    let watched: Vec<&Vec<DefectKind>> = results
        .iter()
        .filter_map(|r| r.decoy_detected.as_ref())
        .collect();
    (!watched.is_empty()).then(|| {
        (
            watched.iter().filter(|d| !d.is_empty()).count(),
            watched.len(),
        )
    })
}

/// Runs `envord validate`.
pub fn run_cmd(args: &ValidateArgs) -> Result<(), CliError> {
    let results = validate_dir(
        &args.data_dir,
        args.band,
        args.channel.as_deref(),
        args.decoy,
        args.decoy_alone,
    )?;
    let total = results.iter().filter(|r| r.correct.is_some()).count();
    let correct = results.iter().filter(|r| r.correct == Some(true)).count();
    let errors = results.iter().filter(|r| r.error.is_some()).count();
    if args.json {
        let v = report_json(&args.data_dir, &results);
        println!(
            "{}",
            serde_json::to_string_pretty(&v).map_err(|e| CliError::Other(e.to_string()))?
        );
    } else {
        println!(
            "{:<40} {:>3} {:<5} {:>6} {:>6} {:>6} {:>6} {:>11} {:>4} {:<14} ok",
            "record", "ch", "want", "BPFO", "BPFI", "FTF", "BSF", "band Hz", "S/r", "detected"
        );
        for r in &results {
            let det = kind_names(&r.detected).join(",");
            println!(
                "{:<40} {:>3} {:<5} {:>6.1} {:>6.1} {:>6.1} {:>6.1} {:>5.0}-{:<5.0} {:>4} {:<14} {}",
                r.file,
                if r.channel.is_empty() { "-" } else { &r.channel },
                expected_name(r.expected),
                r.scores[0],
                r.scores[1],
                r.scores[2],
                r.scores[3],
                r.band_hz[0],
                r.band_hz[1],
                r.samples_per_rev,
                if det.is_empty() { "-" } else { &det },
                match (r.outcome, &r.error) {
                    (_, Some(e)) => format!("ERROR {e}"),
                    (Some(Outcome::Right), _) => "right".into(),
                    (Some(Outcome::KindUncertain), _) => "kind uncertain".into(),
                    (Some(Outcome::WrongKind), _) => "WRONG KIND".into(),
                    (Some(Outcome::Missed), _) => "missed".into(),
                    (Some(Outcome::FalseAlarm), _) => "FALSE ALARM".into(),
                    (None, _) => "(not scored)".into(),
                }
            );
            for n in &r.notes {
                println!("      note: {n}");
            }
            if let Some(d) = r.decoy_detected.as_ref().filter(|d| !d.is_empty()) {
                println!(
                    "      FALSE ALARM on the decoy bearing: {}",
                    kind_names(d).join(",")
                );
            }
            if args.detail {
                for d in &r.detail {
                    println!("      {d}");
                }
            }
        }
        println!();
        for (g, t, c) in totals(&results) {
            println!("{g:<28} {c:>3}/{t:<3}");
        }
        for (g, c) in outcome_rows(&results) {
            let parts: Vec<String> = Outcome::ALL
                .iter()
                .zip(c)
                .map(|(o, n)| format!("{} {n}", o.name()))
                .collect();
            println!("outcomes {g:<19} {}", parts.join(", "));
        }
        println!(
            "correct {correct} of {total} scored records ({} listed, {errors} with errors)",
            results.len()
        );
        if let Some((alarms, watched)) = decoy_summary(&results) {
            println!("decoy bearing: false alarms on {alarms} of {watched} records");
        }
    }
    if let (Some(max), Some((alarms, watched))) = (args.max_decoy_alarms, decoy_summary(&results)) {
        if alarms > max {
            return Err(CliError::Difference(format!(
                "validate: false alarms on the decoy bearing in {alarms} of {watched} records, \
                 more than --max-decoy-alarms {max}"
            )));
        }
    }
    match args.min_correct {
        Some(min) if correct < min => Err(CliError::Difference(format!(
            "validate: {correct} of {total} scored records right, fewer than --min-correct {min}"
        ))),
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// CWRU lists the drive-end "rolling element" multiple 4.7135, twice the
    /// ball spin 2.357 of Smith & Randall 2015 Table 2; MFPT's rig value
    /// 2.55456 (from its geometry, manifest) is already 1 x BSF.
    #[test]
    fn bsf_convention_from_kinematics() {
        assert!((single_sided_bsf(0.39828, 4.7135) - 2.357).abs() < 0.001);
        assert!((single_sided_bsf(0.40562, 2.55456) - 2.55456).abs() < 1e-6);
        // CWRU fan end 6203: 3.9874 listed, 1.994 in Smith & Randall Table 2.
        assert!((single_sided_bsf(0.3817, 3.9874) - 1.994).abs() < 0.001);
        // No simple rolling bearing (FTF >= 0.5, e.g. a planet bearing's
        // multiples of the carrier): taken as given.
        assert_eq!(single_sided_bsf(1.12, 4.73), 4.73);
    }

    #[test]
    fn judging() {
        let s = [20.0, 30.0, 0.0, 10.0];
        assert!(judge(
            Some(DefectKind::Bpfi),
            &[DefectKind::Bpfi, DefectKind::Bsf],
            &s
        ));
        assert!(!judge(
            Some(DefectKind::Bsf),
            &[DefectKind::Bpfi, DefectKind::Bsf],
            &s
        ));
        assert!(!judge(Some(DefectKind::Bpfo), &[], &s));
        assert!(judge(None, &[], &s));
        assert!(!judge(None, &[DefectKind::Ftf], &s));
        assert_eq!(expected_kind("outer_race"), Some(Some(DefectKind::Bpfo)));
        assert_eq!(expected_kind(" Inner race"), Some(Some(DefectKind::Bpfi)));
        assert_eq!(expected_kind("outer-race"), Some(Some(DefectKind::Bpfo)));
        assert_eq!(expected_kind("NONE"), Some(None));
        assert_eq!(expected_kind("faulty bearing; race not stated"), None);
        assert_eq!(expected_kind("inner race and ball"), None);
    }

    const HEAD: &str = r#"
[dataset]
name = "invented"

[bearings.drive_end]
n_rollers = 9
roller_diameter_in = 0.3126
pitch_diameter_in = 1.537

[bearings.fan_end]
n_balls = 8
ball_diameter_in = 0.2656
pitch_diameter_in = 1.122
bpfo_x = 3.0530
bpfi_x = 4.9469
ftf_x = 0.3817
bsf_x = 3.9874
"#;

    fn one(body: &str) -> Result<ManifestRecord, FieldError> {
        let text = format!("{HEAD}\n[[recording]]\n{body}");
        let mut v = parse_manifest(&text).unwrap();
        assert_eq!(v.len(), 1);
        v.remove(0).record
    }

    const BASE: &str = "file = \"a.wav\"\nsample_rate_hz = 12000\nshaft_rpm = 1772.0\n";

    #[test]
    fn manifest_geometry_aliases_units_and_fallbacks() {
        // CWRU field names (both aliases, equal) and an unknown field.
        let r = one(&format!(
            "{BASE}fault_location = \"ball\"\nchannel = \"DE\"\nn_balls = 9\nn_rollers = 9\n\
             ball_diameter_in = 0.3126\npitch_diameter_in = 1.537\nsomething_new = [1, 2]\n"
        ))
        .unwrap();
        assert!(matches!(
            r.kinematics,
            BearingKinematics::Geometry { rollers: 9, .. }
        ));
        assert!(r.notes.is_empty(), "{:?}", r.notes);
        // Millimetres: 6203 as 6.746 mm / 28.499 mm gives the fan-end BPFO.
        let r = one(&format!(
            "{BASE}fault_location = \"outer_race\"\nfaulted_bearing = \"fan end\"\n\
             n_balls = 8\nball_diameter_mm = 6.746\npitch_diameter_mm = 28.499\n"
        ))
        .unwrap();
        let m = Bearing {
            name: name_from("x"),
            shaft: 0,
            kinematics: r.kinematics,
        }
        .multiples()
        .unwrap();
        assert!((m.bpfo() - 3.053).abs() < 0.002, "{}", m.bpfo());
        // Multiples only (CWRU 2 x BSF convention halved).
        let r = one(&format!(
            "{BASE}fault_location = \"none\"\nbpfo_x = 3.5848\nbpfi_x = 5.4152\nftf_x = 0.39828\nbsf_x = 4.7135\n"
        ))
        .unwrap();
        assert!(matches!(
            r.kinematics,
            BearingKinematics::Multiples { bsf_x, .. } if (bsf_x - 2.35675).abs() < 1e-4
        ));
        // Partial geometry plus multiples: multiples, noted.
        let r = one(&format!(
            "{BASE}fault_location = \"none\"\nn_rollers = 9\nbpfo_x = 3.5848\nbpfi_x = 5.4152\nftf_x = 0.39828\nbsf_x = 4.7135\n"
        ))
        .unwrap();
        assert!(matches!(r.kinematics, BearingKinematics::Multiples { .. }));
        assert!(r.notes[0].contains("pitch_diameter_in"), "{:?}", r.notes);
        // Neither: the [bearings.<faulted_bearing>] table (fan end, 8 balls).
        let r = one(&format!(
            "{BASE}fault_location = \"inner_race\"\nfaulted_bearing = \"Fan End\"\n"
        ))
        .unwrap();
        assert!(matches!(
            r.kinematics,
            BearingKinematics::Geometry { rollers: 8, .. }
        ));
        assert!(
            r.notes.iter().any(|n| n.contains("fan_end")),
            "{:?}",
            r.notes
        );
        // Geometry and multiples that disagree (drive-end multiples beside
        // fan-end geometry): geometry used, noted.
        let r = one(&format!(
            "{BASE}fault_location = \"ball\"\nn_balls = 8\nball_diameter_in = 0.2656\npitch_diameter_in = 1.122\n\
             bpfo_x = 3.5848\nbpfi_x = 5.4152\nftf_x = 0.39828\nbsf_x = 4.7135\n"
        ))
        .unwrap();
        assert!(matches!(
            r.kinematics,
            BearingKinematics::Geometry { rollers: 8, .. }
        ));
        assert!(
            r.notes.iter().any(|n| n.contains("bpfo_x")),
            "{:?}",
            r.notes
        );
        // Numbers written as text are read.
        let r = one(
            "file = \"a.wav\"\nsample_rate_hz = \"97656\"\nshaft_rpm = 1500\nfault_location = \"none\"\n\
             n_rollers = 8\nroller_diameter_in = 0.235\npitch_diameter_in = 1.245\n",
        )
        .unwrap();
        assert_eq!(r.sample_rate_hz, 97_656.0);
    }

    #[test]
    fn manifest_errors_name_record_and_field() {
        let err = |body: &str| one(body).unwrap_err();
        let e = err("sample_rate_hz = 12000\n");
        assert_eq!(
            (e.record.as_str(), e.field.as_str()),
            ("recording #1", "file")
        );
        let e = err("file = \"x.wav\"\nshaft_rpm = 1000\nfault_location = \"none\"\n");
        assert_eq!(
            (e.record.as_str(), e.field.as_str()),
            ("x.wav", "sample_rate_hz")
        );
        let e = err(&format!("{BASE}fault_location = 3\n"));
        assert_eq!(e.field, "fault_location");
        let e = err(
            "file = \"a.wav\"\nsample_rate_hz = 12000\nshaft_rpm = -5\nfault_location = \"none\"\n",
        );
        assert_eq!(e.field, "shaft_rpm");
        let e = err("file = \"a.wav\"\nsample_rate_hz = \"fast\"\nshaft_rpm = 5\nfault_location = \"none\"\n");
        assert_eq!(e.field, "sample_rate_hz");
        assert!(e.to_string().contains("a.wav"), "{e}");
        let e = err(&format!(
            "{BASE}fault_location = \"none\"\nn_rollers = 9\nn_balls = 8\nroller_diameter_in = 0.3\npitch_diameter_in = 1.5\n"
        ));
        assert_eq!(e.field, "n_rollers/n_balls");
        let e = err(&format!(
            "{BASE}fault_location = \"none\"\nn_rollers = 9.5\nroller_diameter_in = 0.3\npitch_diameter_in = 1.5\n"
        ));
        assert_eq!(e.field, "n_rollers");
        let e = err(&format!(
            "{BASE}fault_location = \"none\"\nn_rollers = 9\nroller_diameter_in = 2\npitch_diameter_in = 1.5\n"
        ));
        assert!(e.field.contains("roller_diameter_in"), "{e}");
        // No bearing and no table to fall back on: two tables, no faulted_bearing.
        let e = err(&format!("{BASE}fault_location = \"none\"\n"));
        assert!(e.field.contains("bpfo_x"), "{e}");
        // Other records of the same manifest are still read.
        let text = format!(
            "{HEAD}\n[[recording]]\nfile = \"bad.wav\"\n\n[[recording]]\n{BASE}fault_location = \"none\"\nn_rollers = 9\nroller_diameter_in = 0.3126\npitch_diameter_in = 1.537\n"
        );
        let v = parse_manifest(&text).unwrap();
        assert!(v[0].record.is_err() && v[1].record.is_ok());
        assert_eq!(v[0].file, "bad.wav");
        assert!(parse_manifest("[dataset]\nname = 1\n").is_err());
        assert!(parse_manifest("not toml [").is_err());
    }

    fn rec(fs: f32, rpm: f32, k: BearingKinematics) -> ManifestRecord {
        ManifestRecord {
            file: "r.wav".into(),
            sample_rate_hz: fs,
            shaft_rpm: rpm,
            fault_location: "none".into(),
            channel: String::new(),
            faulted_bearing: String::new(),
            kinematics: k,
            notes: Vec::new(),
            decoy: None,
        }
    }

    const CWRU_DE: BearingKinematics = BearingKinematics::Geometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    };
    const MFPT: BearingKinematics = BearingKinematics::Geometry {
        rollers: 8,
        roller_diameter: 0.235,
        pitch_diameter: 1.245,
        contact_angle_deg: 0.0,
    };

    /// Segment-length rule: at least MIN_SEGMENTS segments where the record
    /// allows, the finest resolution that gives them.
    #[test]
    fn segment_rule() {
        let plan = |r: &ManifestRecord, n: usize| {
            validation_point(r, n).map(|p| (p.samples_per_rev, p.revolutions))
        };
        // CWRU 12 kHz, 10 s at 1772 rpm (295 revolutions): 4 x 64 revolutions.
        assert_eq!(
            plan(&rec(12_000.0, 1772.0, CWRU_DE), 122_136),
            Ok((64, 256))
        );
        // CWRU 48 kHz, 5.1 s at 1796 rpm (152 revolutions): 2 x 64.
        assert_eq!(
            plan(&rec(48_000.0, 1796.0, CWRU_DE), 243_938),
            Ok((64, 128))
        );
        // Record 174: 1.33 s (39 revolutions): 2 x 16 at 256 samples/rev.
        assert_eq!(plan(&rec(48_000.0, 1796.0, CWRU_DE), 63_788), Ok((256, 32)));
        // MFPT rig 3 s at 1500 rpm (75 revolutions): 2 x 32.
        assert_eq!(plan(&rec(48_828.0, 1500.0, MFPT), 146_484), Ok((128, 64)));
        // MFPT baseline 6 s at 97 656 S/s (150 revolutions): 2 x 64.
        assert_eq!(plan(&rec(97_656.0, 1500.0, MFPT), 585_936), Ok((64, 128)));
        // High multiples (wind-turbine intermediate shaft, BPFI 10.72): two
        // BPFI harmonics need more than 16 orders, so at least 128/rev.
        let hi = BearingKinematics::Multiples {
            bpfo_x: 8.2,
            bpfi_x: 10.72,
            ftf_x: 0.436,
            bsf_x: 3.84,
        };
        let (spr, _) = plan(&rec(48_828.0, 379.732, hi), 488_280).unwrap();
        assert!(spr >= 128, "{spr}");
        // Too short for one segment of the shortest length.
        let e = plan(&rec(12_000.0, 1772.0, CWRU_DE), 2_000).unwrap_err();
        assert!(e.contains("too short"), "{e}");
    }

    /// Minimum survey bandwidth: both sidebands of the 2nd harmonic of the
    /// fastest line. CWRU drive end at 1797 rpm: BPFI 5.4152 x 29.95 Hz =
    /// 162.2 Hz (CWRU multiples), so 648.8 Hz; a 2245-2828 Hz third-octave
    /// (583 Hz) is too narrow.
    #[test]
    fn survey_bandwidth_passes_second_harmonic_sidebands() {
        let p = validation_point(&rec(12_000.0, 1797.0, CWRU_DE), 122_000).unwrap();
        let bw = dsp_core::band_choice::min_bandwidth_hz(&p);
        assert!((bw - 4.0 * 5.4152 * 1797.0 / 60.0).abs() < 0.5, "{bw}");
        assert!(bw > 2828.4 - 2244.9);
    }

    /// The decoy: multiples scaled, watched beside the documented bearing
    /// (expectation kept) or alone (expected `none`, original in a note);
    /// factors too close to 1 or out of range are refused.
    #[test]
    fn decoy_entries() {
        let text = format!(
            "{HEAD}\n[[recording]]\n{BASE}fault_location = \"inner_race\"\n\
             bpfo_x = 3.5848\nbpfi_x = 5.4152\nftf_x = 0.39828\nbsf_x = 4.7135\n"
        );
        let entry = parse_manifest(&text).unwrap().remove(0);
        let beside = decoy_entry(&entry, 0.8, false);
        assert_eq!(beside.fault_location.as_deref(), Some("inner_race"));
        let rec = beside.record.unwrap();
        let Some(BearingKinematics::Multiples { bpfi_x, bsf_x, .. }) = rec.decoy else {
            panic!("{:?}", rec.decoy)
        };
        // bsf_x was read as CWRU's 2 x BSF and halved; the decoy scales 1 x BSF.
        assert!((bpfi_x - 0.8 * 5.4152).abs() < 1e-4, "{bpfi_x}");
        assert!((bsf_x - 0.8 * 4.7135 / 2.0).abs() < 1e-3, "{bsf_x}");
        let p = validation_point(&rec, 120_000).unwrap();
        assert_eq!(p.bearings.len(), 2);
        let alone = decoy_entry(&entry, 1.2, true);
        assert_eq!(alone.fault_location.as_deref(), Some("none"));
        let rec = alone.record.unwrap();
        assert!(rec.decoy.is_none());
        assert!(
            rec.notes.iter().any(|n| n.contains("was inner_race")),
            "{:?}",
            rec.notes
        );
        assert!(matches!(
            rec.kinematics,
            BearingKinematics::Multiples { bpfi_x, .. } if (bpfi_x - 1.2 * 5.4152).abs() < 1e-4
        ));
        assert_eq!(parse_decoy("0.87"), Ok(0.87));
        for bad in ["1.0", "1.01", "0.1", "5", "NaN", "x"] {
            assert!(parse_decoy(bad).is_err(), "{bad}");
        }
    }

    /// One bad record never stops the run: every entry is listed, failures
    /// name the file and field, a good record is analysed and judged.
    #[test]
    fn bad_records_are_listed_not_fatal() {
        let dir = tempfile::tempdir().unwrap();
        // Invented outer-race record: 12 kS/s, 1772 rpm, impacts at BPFO
        // (3.5848 x 29.53 Hz) ringing 3 kHz, plus noise; 10 s.
        let fs = 12_000.0f64;
        let f_imp = 3.5848 * 1772.0 / 60.0;
        let mut seed = 7u32;
        let x: Vec<f32> = (0..120_000)
            .map(|n| {
                seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
                let noise = f64::from(seed >> 8) / 16_777_216.0 - 0.5;
                let t = n as f64 / fs;
                let since = t - (t * f_imp).floor() / f_imp;
                let ring =
                    (-since * 600.0).exp() * (2.0 * std::f64::consts::PI * 3000.0 * since).sin();
                (0.3 * noise + ring) as f32
            })
            .collect();
        crate::wav::write_wav_f32(dir.path().join("good.wav"), 12_000, &[&x]).unwrap();
        crate::wav::write_wav_f32(dir.path().join("short.wav"), 12_000, &[&x[..3000]]).unwrap();
        let geo = "n_rollers = 9\nroller_diameter_in = 0.3126\npitch_diameter_in = 1.537\n";
        let manifest = format!(
            "[[recording]]\nfile = \"good.wav\"\nsample_rate_hz = 12000\nshaft_rpm = 1772\nfault_location = \"outer_race\"\nchannel = \"DE\"\n{geo}\
             \n[[recording]]\nfile = \"missing.wav\"\nsample_rate_hz = 12000\nshaft_rpm = 1772\nfault_location = \"inner_race\"\n{geo}\
             \n[[recording]]\nfile = \"good.wav\"\nsample_rate_hz = 12000\nfault_location = \"ball\"\n{geo}\
             \n[[recording]]\nfile = \"good.wav\"\nsample_rate_hz = 48000\nshaft_rpm = 1772\nfault_location = \"none\"\n{geo}\
             \n[[recording]]\nfile = \"good.wav\"\nsample_rate_hz = 12000\nshaft_rpm = 1772\nfault_location = \"bearing damaged, location not stated\"\n{geo}\
             \n[[recording]]\nfile = \"short.wav\"\nsample_rate_hz = 12000\nshaft_rpm = 1772\nfault_location = \"none\"\n{geo}"
        );
        std::fs::write(dir.path().join("manifest.toml"), manifest).unwrap();
        let res = validate_dir(dir.path(), BandRule::Auto, None, None, false).unwrap();
        assert_eq!(res.len(), 6);
        let good = &res[0];
        assert!(good.error.is_none(), "{:?}", good.error);
        assert_eq!(good.detected, vec![DefectKind::Bpfo]);
        assert_eq!(good.correct, Some(true));
        let e = |i: usize| res[i].error.clone().unwrap_or_default();
        assert!(
            e(1).contains("missing.wav") && e(1).contains("`file`"),
            "{}",
            e(1)
        );
        assert!(
            e(2).contains("good.wav") && e(2).contains("`shaft_rpm`"),
            "{}",
            e(2)
        );
        assert!(e(3).contains("`sample_rate_hz`"), "{}", e(3));
        assert!(res[4].error.is_none() && res[4].correct.is_none());
        assert!(
            e(5).contains("short.wav") && e(5).contains("too short"),
            "{}",
            e(5)
        );
        // Scored records with an error count as wrong.
        assert_eq!(res[1].correct, Some(false));
        // The JSON contract.
        let v = report_json(dir.path(), &res);
        let recs = v["records"].as_array().unwrap();
        assert_eq!(recs.len(), 6);
        for r in recs {
            assert!(r["file"].is_string() && r["expected"].is_string());
            assert!(r["detected"].is_array() && r["correct"].is_boolean());
        }
        assert_eq!(recs[0]["detected"], json!(["BPFO"]));
        assert_eq!(recs[0]["correct"], json!(true));
        assert_eq!(recs[4]["expected"], json!("-"));
        assert_eq!(recs[4]["scored"], json!(false));
        // Scored: good, missing, no-rpm, rate mismatch, short (none).
        assert_eq!(v["summary"]["total"], json!(5));
        assert_eq!(v["summary"]["correct"], json!(1));
        assert_eq!(v["summary"]["errors"], json!(4));
    }
}
