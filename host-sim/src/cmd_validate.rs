//! `envord validate <data-dir>`: the diagnosis checked on labelled open
//! bearing data (a folder with a `manifest.toml` laid out like the CWRU and
//! MFPT folders of the shared data).
//!
//! One fixed method for every record, no per-file tuning: the bearing and
//! speed documented for the record, [`validation_point`] (64 samples per
//! revolution, up to 256 revolutions, default search thresholds) and one
//! band rule for all (by default the automatic band survey, see
//! [`dsp_core::survey`]). A record with fault location `none` is correct
//! when nothing is detected; an inner-race, outer-race or ball record when
//! its kind (BPFI, BPFO, BSF) is detected and scores highest among the
//! detections; records with another fault text are listed, not scored.
//!
//! Manifest fields used: `file`, `sample_rate_hz`, `shaft_rpm`,
//! `fault_location`, optional `channel`, and either the geometry
//! (`n_rollers`, `roller_diameter_in`, `pitch_diameter_in`,
//! `contact_angle_deg`, preferred) or the multiples `bpfo_x`, `bpfi_x`,
//! `ftf_x`, `bsf_x`. Datasets differ in what `bsf_x` means (CWRU lists
//! 2 x BSF, MFPT 1 x BSF), so multiples-only records are checked against the
//! kinematics: for a zero contact angle `d/D = 1 - 2 FTF` and
//! `BSF = (1 - (d/D)^2) / (2 d/D)`; a `bsf_x` nearer twice that value is
//! halved.

use std::path::{Path, PathBuf};

use clap::Args;
use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::kinematics::{DefectKind, ShaftRatio};
use dsp_core::survey::{BandSurvey, SurveyConfig, SurveyError, SurveyResult};
use serde_json::{json, Value};

use crate::analysis::{run, Accel, Record};
use crate::error::CliError;
use crate::wav::{read_wav, ReadOptions};

/// How the envelope band is chosen for every record.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BandRule {
    /// The spectral-kurtosis band survey on each record ([`dsp_core::survey`]).
    Auto,
    /// One octave ending at 0.8 x Nyquist, at most 10 kHz
    /// ([`PointConfig::default_band_hz`]).
    Default,
    /// The same band for every record (clipped to 0.9 x Nyquist).
    Fixed([f32; 2]),
}

impl std::str::FromStr for BandRule {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "auto" => Ok(BandRule::Auto),
            "default" => Ok(BandRule::Default),
            other => {
                let parts: Vec<&str> = other.split(',').collect();
                let nums: Result<Vec<f32>, _> = parts.iter().map(|p| p.trim().parse()).collect();
                match nums.as_deref() {
                    Ok([lo, hi]) if lo.is_finite() && hi.is_finite() && *lo > 0.0 && hi > lo => {
                        Ok(BandRule::Fixed([*lo, *hi]))
                    }
                    _ => Err(format!(
                        "`{other}`: give `auto`, `default` or `LO,HI` in Hz"
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
    /// (octave below 0.8 x Nyquist) or `LO,HI` in Hz for every record.
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
}

/// One manifest record.
#[derive(Debug, Clone)]
pub struct ManifestRecord {
    /// WAV file name, relative to the data folder.
    pub file: String,
    /// Sample rate, Hz.
    pub sample_rate_hz: f32,
    /// Constant shaft speed, rpm.
    pub shaft_rpm: f32,
    /// `inner_race`, `outer_race`, `ball`, `none` or free text.
    pub fault_location: String,
    /// Sensor channel (`DE`, `FE`, `BA`) or empty.
    pub channel: String,
    /// The documented bearing.
    pub kinematics: BearingKinematics,
}

/// The defect kind a fault location should produce; `Some(None)` for a
/// healthy record, `None` when the location is not one of the scored ones.
pub fn expected_kind(fault_location: &str) -> Option<Option<DefectKind>> {
    match fault_location {
        "inner_race" => Some(Some(DefectKind::Bpfi)),
        "outer_race" => Some(Some(DefectKind::Bpfo)),
        "ball" => Some(Some(DefectKind::Bsf)),
        "none" => Some(None),
        _ => None,
    }
}

fn num(t: &toml::Table, key: &str) -> Option<f32> {
    match t.get(key)? {
        toml::Value::Float(f) => {
            #[allow(clippy::cast_possible_truncation)]
            let v = *f as f32;
            Some(v)
        }
        toml::Value::Integer(i) => {
            #[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
            let v = *i as f32;
            Some(v)
        }
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

/// Parses a manifest; errors name the record and key.
pub fn parse_manifest(text: &str) -> Result<Vec<ManifestRecord>, String> {
    let doc: toml::Table = toml::from_str(text).map_err(|e| e.to_string())?;
    let recs = doc
        .get("recording")
        .and_then(toml::Value::as_array)
        .ok_or("no [[recording]] tables")?;
    let mut out = Vec::new();
    for (i, r) in recs.iter().enumerate() {
        let t = r
            .as_table()
            .ok_or_else(|| format!("recording {i}: not a table"))?;
        let s = |k: &str| t.get(k).and_then(toml::Value::as_str).map(str::to_string);
        let file = s("file").ok_or_else(|| format!("recording {i}: `file` missing"))?;
        let need = |k: &str| num(t, k).ok_or_else(|| format!("{file}: `{k}` missing"));
        let sample_rate_hz = need("sample_rate_hz")?;
        let shaft_rpm = need("shaft_rpm")?;
        let fault_location =
            s("fault_location").ok_or_else(|| format!("{file}: `fault_location` missing"))?;
        let geometry = (
            t.get("n_rollers").and_then(toml::Value::as_integer),
            num(t, "roller_diameter_in"),
            num(t, "pitch_diameter_in"),
        );
        let kinematics = match geometry {
            (Some(n), Some(d), Some(pd)) => BearingKinematics::Geometry {
                rollers: u16::try_from(n).map_err(|_| format!("{file}: `n_rollers` {n}"))?,
                roller_diameter: d,
                pitch_diameter: pd,
                contact_angle_deg: num(t, "contact_angle_deg").unwrap_or(0.0),
            },
            _ => {
                let (o, i2, f, b) = (
                    need("bpfo_x")?,
                    need("bpfi_x")?,
                    need("ftf_x")?,
                    need("bsf_x")?,
                );
                BearingKinematics::Multiples {
                    bpfo_x: o,
                    bpfi_x: i2,
                    ftf_x: f,
                    bsf_x: single_sided_bsf(f, b),
                }
            }
        };
        out.push(ManifestRecord {
            file,
            sample_rate_hz,
            shaft_rpm,
            fault_location,
            channel: s("channel").unwrap_or_default(),
            kinematics,
        });
    }
    Ok(out)
}

/// The one measuring point used for every record: the documented bearing
/// on the tach shaft, constant speed, 64 samples per revolution (doubled
/// until one 4096-sample segment fits the record), the longest whole number
/// of segments the record holds (at most 256 revolutions), default search
/// thresholds; the band is set by the caller.
pub fn validation_point(rec: &ManifestRecord, samples: usize) -> PointConfig {
    let mut p = PointConfig::default();
    p.sample_rate_hz = rec.sample_rate_hz;
    p.speed = SpeedInput::Constant { rpm: rec.shaft_rpm };
    p.min_rpm = 0.9 * rec.shaft_rpm;
    p.max_rpm = 1.1 * rec.shaft_rpm;
    #[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
    let revs =
        (samples as f64 / f64::from(rec.sample_rate_hz) * f64::from(rec.shaft_rpm) / 60.0) as usize;
    // 64 samples/rev (64-revolution segments), doubled while the record is
    // shorter than one segment (finer angle sampling, shorter segments).
    p.samples_per_rev = 64;
    while 4096 / usize::from(p.samples_per_rev) > revs.saturating_sub(1) && p.samples_per_rev < 1024
    {
        p.samples_per_rev *= 2;
    }
    let seg_revs = 4096 / usize::from(p.samples_per_rev);
    let segs = (revs.saturating_sub(1) / seg_revs).clamp(1, 256 / seg_revs);
    p.revolutions = u16::try_from(segs * seg_revs).unwrap_or(256);
    p.band_hz = None;
    p.bearings.clear();
    let _ = p.bearings.push(Bearing {
        name: name_from("documented"),
        shaft: 0,
        kinematics: rec.kinematics,
    });
    p
}

/// Outcome of one record.
#[derive(Debug, Clone)]
pub struct RecordResult {
    /// The manifest record.
    pub record: ManifestRecord,
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
    /// Segments averaged.
    pub segments: u32,
    /// Quality flags of the report.
    pub flags: String,
    /// `Some(correct)` for scored records.
    pub correct: Option<bool>,
    /// Why the record could not be analysed, if so.
    pub error: Option<String>,
    /// Found harmonics per kind, as text (`h2@10.81(17dB)`, `*` = not counted).
    pub detail: Vec<String>,
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
/// came from the survey, and the survey's kurtosis.
pub fn choose_band(
    rule: BandRule,
    x: &[f32],
    fs: f32,
    min_bw_hz: f32,
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
        BandRule::Auto => {
            let r = survey_record(x, fs, min_bw_hz).map_err(|e| format!("band survey: {e}"))?;
            Ok((r.band_hz, true, Some(r.kurtosis)))
        }
    }
}

/// Narrowest band the survey may choose for a point: 3 x the highest defect
/// line frequency of its bearings at the point's top speed, so the band
/// passes the defect's modulation sidebands (common practice: a band a few
/// times wider than the fault frequency; the factor 3 is from memory).
pub fn survey_min_bandwidth_hz(point: &PointConfig) -> f32 {
    let rpm = match point.speed {
        SpeedInput::Constant { rpm } => rpm,
        SpeedInput::Tach { .. } => point.max_rpm,
    };
    let mut top = 0.0f32;
    for b in &point.bearings {
        let m = b.multiples().ok();
        let ratio = point
            .shafts
            .get(usize::from(b.shaft))
            .and_then(|s| ShaftRatio::new(s.ratio).ok());
        if let (Some(m), Some(r)) = (m, ratio) {
            for l in m.orders(r).lines() {
                top = top.max(l * rpm / 60.0);
            }
        }
    }
    3.0 * top
}

/// Runs the band survey ([`BandSurvey`]) over a whole record in ADC-sized
/// blocks, as the node would over a capture.
pub fn survey_record(
    x: &[f32],
    fs: f32,
    min_bandwidth_hz: f32,
) -> Result<SurveyResult, SurveyError> {
    let mut cfg = SurveyConfig::default();
    cfg.min_bandwidth_hz = min_bandwidth_hz;
    let mut s = BandSurvey::with_config(fs, cfg)?;
    for block in x.chunks(dsp_core::pipeline::ADC_BLOCK) {
        s.push_f32(block);
    }
    s.finish()
}

/// Analyses one record with the fixed method.
pub fn analyse_record(dir: &Path, rec: &ManifestRecord, rule: BandRule) -> RecordResult {
    let expected = expected_kind(&rec.fault_location);
    let mut out = RecordResult {
        record: rec.clone(),
        expected,
        detected: Vec::new(),
        scores: [0.0; 4],
        band_hz: [0.0; 2],
        band_auto: false,
        band_kurtosis: None,
        segments: 0,
        flags: String::new(),
        correct: None,
        error: None,
        detail: Vec::new(),
    };
    let path = dir.join(&rec.file);
    let res = (|| -> Result<(), String> {
        let wav = read_wav(&path, ReadOptions::strict()).map_err(|e| e.to_string())?;
        let x = wav.channels.into_iter().next().ok_or("no channel")?;
        #[allow(clippy::cast_precision_loss)]
        let fs = wav.info.sample_rate as f32;
        if (fs - rec.sample_rate_hz).abs() > 0.5 {
            return Err(format!(
                "WAV rate {fs} Hz differs from the manifest's {} Hz",
                rec.sample_rate_hz
            ));
        }
        let mut point = validation_point(rec, x.len());
        let (band, auto, k) = choose_band(rule, &x, fs, survey_min_bandwidth_hz(&point))?;
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
        .map_err(|e| e.to_string())?;
        let rep = &a.report;
        out.segments = rep.segments;
        out.flags = rep.flags.to_string();
        if !rep.analysed() {
            return Err(format!("not analysable ({})", rep.flags));
        }
        if let Some(d) = rep.bearings.first().and_then(|b| b.diagnosis.as_ref()) {
            out.detected = d.detected().collect();
            for r in &d.results {
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
                out.detail.push(format!(
                    "{} sb {} {}",
                    r.kind.name(),
                    r.sideband_db.map_or("-".into(), |s| format!("{s:.0}")),
                    f.join(" ")
                ));
            }
            for r in &d.results {
                if let Some(s) = out.scores.get_mut(r.kind.index()) {
                    *s = r.score_db;
                }
            }
        }
        Ok(())
    })();
    match res {
        Ok(()) => out.correct = expected.map(|e| judge(e, &out.detected, &out.scores)),
        Err(e) => {
            out.correct = expected.map(|_| false);
            out.error = Some(e);
        }
    }
    out
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

/// Summary counts: (group, total, correct), by fault type and by channel.
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
        let ch = if r.record.channel.is_empty() {
            "-"
        } else {
            r.record.channel.as_str()
        };
        add("all".into(), ok);
        add(format!("fault {}", r.record.fault_location), ok);
        add(format!("channel {ch}"), ok);
        add(format!("{} / {ch}", r.record.fault_location), ok);
    }
    groups
}

/// Runs `envord validate`.
pub fn run_cmd(args: &ValidateArgs) -> Result<(), CliError> {
    let mpath = args.data_dir.join("manifest.toml");
    let text = std::fs::read_to_string(&mpath)
        .map_err(|e| CliError::input(mpath.display(), format!("cannot read: {e}")))?;
    let mut recs = parse_manifest(&text).map_err(|e| CliError::input(mpath.display(), e))?;
    if let Some(ch) = &args.channel {
        recs.retain(|r| r.channel.eq_ignore_ascii_case(ch));
    }
    let results: Vec<RecordResult> = recs
        .iter()
        .map(|r| analyse_record(&args.data_dir, r, args.band))
        .collect();
    let total = results.iter().filter(|r| r.correct.is_some()).count();
    let correct = results.iter().filter(|r| r.correct == Some(true)).count();
    if args.json {
        let records: Vec<Value> = results
            .iter()
            .map(|r| {
                json!({
                    "file": r.record.file,
                    "expected": expected_name(r.expected),
                    "fault_location": r.record.fault_location,
                    "channel": r.record.channel,
                    "detected": kind_names(&r.detected),
                    "correct": r.correct,
                    "scores_db": {
                        "BPFO": r.scores[0], "BPFI": r.scores[1],
                        "FTF": r.scores[2], "BSF": r.scores[3],
                    },
                    "band_hz": r.band_hz,
                    "band_auto": r.band_auto,
                    "band_kurtosis": r.band_kurtosis,
                    "segments": r.segments,
                    "flags": r.flags,
                    "error": r.error,
                })
            })
            .collect();
        let groups: Vec<Value> = totals(&results)
            .into_iter()
            .map(|(g, t, c)| json!({ "group": g, "total": t, "correct": c }))
            .collect();
        let v = json!({
            "data_dir": args.data_dir.display().to_string(),
            "records": records,
            "summary": { "total": total, "correct": correct, "groups": groups },
        });
        println!(
            "{}",
            serde_json::to_string_pretty(&v).map_err(|e| CliError::Other(e.to_string()))?
        );
    } else {
        println!(
            "{:<40} {:>3} {:<5} {:>6} {:>6} {:>6} {:>6} {:>11} {:<14} ok",
            "record", "ch", "want", "BPFO", "BPFI", "FTF", "BSF", "band Hz", "detected"
        );
        for r in &results {
            let det = kind_names(&r.detected).join(",");
            println!(
                "{:<40} {:>3} {:<5} {:>6.1} {:>6.1} {:>6.1} {:>6.1} {:>5.0}-{:<5.0} {:<14} {}",
                r.record.file,
                if r.record.channel.is_empty() {
                    "-"
                } else {
                    &r.record.channel
                },
                expected_name(r.expected),
                r.scores[0],
                r.scores[1],
                r.scores[2],
                r.scores[3],
                r.band_hz[0],
                r.band_hz[1],
                if det.is_empty() { "-" } else { &det },
                match (r.correct, &r.error) {
                    (_, Some(e)) => format!("ERROR {e}"),
                    (Some(true), _) => "right".into(),
                    (Some(false), _) => "WRONG".into(),
                    (None, _) => "(not scored)".into(),
                }
            );
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
        println!("correct {correct} of {total} scored records");
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
        assert_eq!(expected_kind("faulty bearing; race not stated"), None);
    }

    #[test]
    fn manifest_records() {
        let text = r#"
[[recording]]
file = "a.wav"
sample_rate_hz = 12000
shaft_rpm = 1772.0
fault_location = "inner_race"
channel = "DE"
n_rollers = 9
roller_diameter_in = 0.3126
pitch_diameter_in = 1.537
contact_angle_deg = 0.0
bsf_x = 4.7135

[[recording]]
file = "b.wav"
sample_rate_hz = 48828
shaft_rpm = 379.7
fault_location = "faulty bearing"
bpfi_x = 10.72
bpfo_x = 8.2
ftf_x = 0.436
bsf_x = 3.84
"#;
        let r = parse_manifest(text).unwrap();
        assert_eq!(r.len(), 2);
        assert!(matches!(
            r[0].kinematics,
            BearingKinematics::Geometry { rollers: 9, .. }
        ));
        assert!(matches!(
            r[1].kinematics,
            BearingKinematics::Multiples { bsf_x, .. } if (bsf_x - 3.84).abs() < 1e-6
        ));
        let err = parse_manifest("[[recording]]\nfile = \"x.wav\"\n").unwrap_err();
        assert!(err.contains("sample_rate_hz"), "{err}");
        // A record shorter than one 64-revolution segment gets 128 samples/rev.
        let p = validation_point(&r[1], 488_280);
        assert_eq!(p.samples_per_rev, 128);
        let p = validation_point(&r[0], 122_000);
        assert_eq!((p.samples_per_rev, p.revolutions), (64, 256));
    }
}
