//! Reading `manifest.toml`: one [`ManifestEntry`] per `[[recording]]`
//! table, usable or carrying the [`FieldError`] that names the record and
//! the field (see the module doc of [`crate::validate`]).
//!
//! A walk over `toml::Table` rather than `serde` derive with aliases: the
//! manifest accepts two spellings of one key given together when they agree
//! (`n_balls` and `n_rollers`; `_mm` and `_in` lengths) and names the record
//! and the key when they disagree, takes a number as integer, float or text,
//! and lists one bad record while analysing the others. `#[serde(alias)]`
//! makes the first a "duplicate field" error and stops at the first bad
//! record, so derive would need a custom `Deserialize` per field: the same
//! walk in another shape.

use dsp_core::config::{name_from, Bearing, BearingKinematics};
use dsp_core::{BearingGeometry, DefectKind, DefectMultiples};

use crate::bearing_len::{length_mm, mm_from_in, BothGiven};

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

    /// A length in millimetres from `<stem>_in` or `<stem>_mm` (and
    /// aliases), converted as the point file does ([`crate::bearing_len`]);
    /// both given must agree within 0.5 %.
    fn length_mm(&self, stems: &[&str]) -> Result<Option<(f32, String)>, FieldError> {
        let inch: Vec<String> = stems.iter().map(|s| format!("{s}_in")).collect();
        let mm: Vec<String> = stems.iter().map(|s| format!("{s}_mm")).collect();
        let inch = self.alias(&inch.iter().map(String::as_str).collect::<Vec<_>>())?;
        let mm = self.alias(&mm.iter().map(String::as_str).collect::<Vec<_>>())?;
        let key = inch.as_ref().or(mm.as_ref()).map(|(_, k)| k.clone());
        match length_mm(mm.as_ref().map(|m| m.0), inch.as_ref().map(|i| i.0)) {
            Ok(v) => Ok(v.zip(key)),
            Err(BothGiven { mm: m, inch: i }) => {
                let (ik, mk) = (
                    inch.map(|x| x.1).unwrap_or_default(),
                    mm.map(|x| x.1).unwrap_or_default(),
                );
                let from_in = mm_from_in(i);
                if (m - from_in).abs() > 0.005 * from_in {
                    return Err(
                        self.err(&format!("{ik}/{mk}"), format!("disagree ({i} in, {m} mm)"))
                    );
                }
                Ok(Some((from_in, ik)))
            }
        }
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
        let d = self.length_mm(&["roller_diameter", "ball_diameter"])?;
        let pd = self.length_mm(&["pitch_diameter"])?;
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

/// Why a manifest cannot be read at all (each record's own trouble is a
/// [`FieldError`] in its entry).
#[derive(Debug, Clone, PartialEq)]
pub enum ManifestError {
    /// Not TOML.
    Toml(toml::de::Error),
    /// No `[[recording]]` array.
    NoRecordings,
}

impl std::fmt::Display for ManifestError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            ManifestError::Toml(e) => write!(f, "{e}"),
            ManifestError::NoRecordings => f.write_str("no [[recording]] tables"),
        }
    }
}

impl std::error::Error for ManifestError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            ManifestError::Toml(e) => Some(e),
            ManifestError::NoRecordings => None,
        }
    }
}

/// Parses a manifest. Only an unreadable manifest (not TOML, no
/// `[[recording]]` array) is an error; each record is usable or carries its
/// own [`FieldError`].
pub fn parse_manifest(text: &str) -> Result<Vec<ManifestEntry>, ManifestError> {
    let doc: toml::Table = toml::from_str(text).map_err(ManifestError::Toml)?;
    let recs = doc
        .get("recording")
        .and_then(toml::Value::as_array)
        .ok_or(ManifestError::NoRecordings)?;
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::validate::{parse_decoy, validation_point};

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
        // Inches become millimetres by the point file's one conversion, so
        // the same bearing written in either file gives the same numbers.
        let BearingKinematics::Geometry {
            roller_diameter,
            pitch_diameter,
            ..
        } = r.kinematics
        else {
            panic!("{:?}", r.kinematics)
        };
        assert_eq!(roller_diameter, crate::bearing_len::mm_from_in(0.3126));
        let from_point = crate::point::parse(
            "[[bearing]]\nname = \"de\"\nrollers = 9\nroller_diameter_in = 0.3126\n\
             pitch_diameter_in = 1.537\n",
        )
        .unwrap();
        assert!(matches!(
            from_point.bearings[0].kinematics,
            BearingKinematics::Geometry { roller_diameter: d, pitch_diameter: pd, .. }
                if d == roller_diameter && pd == pitch_diameter
        ));
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
}
