//! The fixed method for one record: the measuring point
//! ([`validation_point`]), the band ([`choose_band`]) and the analysis
//! ([`analyse_entry`]), and the run over a folder ([`validate_dir`]).

use std::path::Path;

use dsp_core::config::{name_from, Bearing, PointConfig, SpeedInput};
use dsp_core::pipeline::NodePipeline;
use dsp_core::survey::SurveyError;
use dsp_core::{DefectKind, ShaftRatio};

use super::manifest::{decoy_entry, expected_kind, parse_manifest, ManifestEntry, ManifestRecord};
use super::variant::{cepstral_prewhiten, Prewhiten, Variant};
use super::BandRule;
use crate::analysis::{run, Accel, Record};
use crate::error::CliError;
use crate::validate_outcome::{outcome, Outcome};
use crate::wav::{read_wav, ReadOptions};
use dsp_core::diagnosis::kind_call::{kind_call, KindCall};

/// Fewest spectrum segments [`validation_point`] averages when the record
/// allows (see docs/validation.md for the measurement behind the value).
pub const MIN_SEGMENTS: usize = 2;

/// Samples per revolution [`validation_point`] may choose, finest first.
pub const SAMPLES_PER_REV: [u16; 4] = [64, 128, 256, 512];

/// Most revolutions one record is analysed over (the node's default record).
pub const MAX_REVOLUTIONS: usize = 256;

/// Why no measuring point fits a record ([`validation_point`]).
#[derive(Debug, Clone, PartialEq)]
pub enum PlanError {
    /// A bearing's defect multiples are not usable.
    Multiples,
    /// The fastest defect line is too high for any samples per revolution.
    LineTooHigh {
        /// The fastest line, orders.
        top_line: f32,
        /// Harmonics a detection needs.
        harmonics: f32,
    },
    /// Too few revolutions for one segment.
    TooShort {
        /// Revolutions in the record.
        revs: usize,
        /// Revolutions needed.
        needed: usize,
    },
}

impl std::fmt::Display for PlanError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            PlanError::Multiples => f.write_str("bearing multiples out of range"),
            PlanError::LineTooHigh {
                top_line,
                harmonics,
            } => write!(
                f,
                "defect line at {top_line:.2} orders too high to search {harmonics} harmonics"
            ),
            PlanError::TooShort { revs, needed } => write!(
                f,
                "record too short: {revs} revolutions, at least {needed} needed"
            ),
        }
    }
}

impl std::error::Error for PlanError {}

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
pub fn validation_point(rec: &ManifestRecord, samples: usize) -> Result<PointConfig, PlanError> {
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
        .ok_or(PlanError::Multiples)?;
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
                PlanError::LineTooHigh {
                    top_line,
                    harmonics,
                }
            } else {
                let shortest = SAMPLES_PER_REV.last().map_or(8, |&s| 4096 / usize::from(s));
                PlanError::TooShort {
                    revs,
                    needed: shortest + 1,
                }
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

/// Why a record's band cannot be chosen ([`choose_band`]).
#[derive(Debug, Clone, PartialEq)]
pub enum BandError {
    /// A fixed band that does not fit below 0.9 x Nyquist.
    DoesNotFit {
        /// Lower edge, Hz.
        lo: f32,
        /// Upper edge after clipping, Hz.
        hi: f32,
        /// Sample rate, Hz.
        fs: f32,
    },
    /// The band survey failed.
    Survey(SurveyError),
}

impl std::fmt::Display for BandError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            BandError::DoesNotFit { lo, hi, fs } => {
                write!(f, "band {lo}-{hi} Hz does not fit fs {fs} Hz")
            }
            BandError::Survey(e) => write!(f, "band survey: {e}"),
        }
    }
}

impl std::error::Error for BandError {}

/// Chooses the band of one record by `rule`; returns the band, whether it
/// came from the survey, and the survey's kurtosis. The survey is the one the
/// analysis runs ([`crate::analysis::choose_band`]: the node's own rule,
/// [`dsp_core::survey::band_choice`], fed in ADC-sized blocks) for `point`.
pub fn choose_band(
    rule: BandRule,
    rec: &Record,
    point: &PointConfig,
) -> Result<([f32; 2], bool, Option<f32>), BandError> {
    let fs = rec.sample_rate_hz;
    let nyq = 0.5 * fs;
    match rule {
        BandRule::Fixed([lo, hi]) => {
            let hi = hi.min(0.9 * nyq);
            if lo >= hi {
                return Err(BandError::DoesNotFit { lo, hi, fs });
            }
            Ok(([lo, hi], false, None))
        }
        BandRule::Default => {
            let mut p = PointConfig::default();
            p.sample_rate_hz = fs;
            Ok((p.default_band_hz(), false, None))
        }
        BandRule::Auto | BandRule::Evidence => {
            let mut p = point.clone();
            p.band_hz = None;
            match crate::analysis::choose_band(&mut p, rec) {
                Ok(Some(r)) => Ok((r.band_hz, true, Some(r.kurtosis))),
                // Not reached: the band was cleared just above; the point's
                // default octave then, as for a survey that finds nothing.
                Ok(None) => choose_band(BandRule::Default, rec, point),
                Err(e) => Err(BandError::Survey(e)),
            }
        }
    }
}

/// [`BandRule::Evidence`] (issue 20 measurement): runs the point in every
/// band of the survey and keeps the band whose strongest family (any kind of
/// the first bearing) scores highest; the survey's own band on a tie (e.g.
/// nothing counted in any band).
fn evidence_band(
    rec: &Record,
    point: &PointConfig,
) -> Result<([f32; 2], bool, Option<f32>), BandError> {
    let mut p = point.clone();
    p.band_hz = None;
    let survey = match crate::analysis::choose_band(&mut p, rec) {
        Ok(Some(r)) => r,
        Ok(None) => return choose_band(BandRule::Default, rec, point),
        Err(e) => return Err(BandError::Survey(e)),
    };
    let mut best = (survey.band_hz, survey.kurtosis, 0.0f32);
    for b in &survey.bands {
        let mut q = point.clone();
        q.band_hz = Some(b.band_hz);
        let Ok(a) = run(&q, rec) else { continue };
        let score = a
            .report
            .bearings
            .first()
            .and_then(|b| b.diagnosis.as_ref())
            .map_or(0.0, |d| {
                d.results.iter().map(|r| r.score_db).fold(0.0f32, f32::max)
            });
        if score > best.2 {
            best = (b.band_hz, b.kurtosis, score);
        }
    }
    Ok((best.0, true, Some(best.1)))
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
    analyse_entry_with(dir, entry, rule, Variant::default())
}

/// [`analyse_entry`] with the issue 20 measurement options ([`Variant`]).
pub fn analyse_entry_with(
    dir: &Path,
    entry: &ManifestEntry,
    rule: BandRule,
    variant: Variant,
) -> RecordResult {
    let mut out = blank(entry);
    let res = match &entry.record {
        Err(e) => Err(e.to_string()),
        Ok(rec) => {
            out.notes.clone_from(&rec.notes);
            // The core never panics; the host's reading and glue are guarded
            // too, so one record cannot end the run.
            std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                // the record's `error` is text: converted here
                analyse_into(dir, rec, rule, variant, &mut out).map_err(|e| e.to_string())
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

/// Why one record could not be analysed (its text is the record's `error`
/// in the output); each names the record's file.
#[derive(Debug)]
enum AnalyseError {
    /// The WAV file could not be read.
    Wav {
        file: String,
        err: crate::wav::WavError,
    },
    /// The WAV file holds no samples.
    NoSamples { file: String },
    /// The manifest's rate differs from the file's.
    SampleRate { file: String, given: f32, wav: f32 },
    /// No analysis plan fits the record.
    Plan { file: String, err: PlanError },
    /// The fallback default band could not be set.
    DefaultBand(BandError),
    /// The band rule gave no band.
    Band { file: String, err: BandError },
    /// The analysis refused the record.
    Run { file: String, err: CliError },
    /// The report is not analysable (its flags say why).
    NotAnalysable {
        file: String,
        flags: dsp_core::QualityFlags,
    },
}

impl std::fmt::Display for AnalyseError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            AnalyseError::Wav { file, err } => write!(f, "{file} (`file`): {err}"),
            AnalyseError::NoSamples { file } => write!(f, "{file} (`file`): no samples"),
            AnalyseError::SampleRate { file, given, wav } => write!(
                f,
                "{file}: `sample_rate_hz` {given} differs from the WAV's {wav} Hz"
            ),
            AnalyseError::Plan { file, err } => write!(f, "{file}: {err}"),
            AnalyseError::DefaultBand(e) => write!(f, "{e}"),
            AnalyseError::Band { file, err } => write!(f, "{file}: {err}"),
            AnalyseError::Run { file, err } => write!(f, "{file}: {err}"),
            AnalyseError::NotAnalysable { file, flags } => {
                write!(f, "{file}: not analysable ({flags})")
            }
        }
    }
}

impl std::error::Error for AnalyseError {}

/// Analyses one record into `out`; errors name the file and the field.
fn analyse_into(
    dir: &Path,
    rec: &ManifestRecord,
    rule: BandRule,
    variant: Variant,
    out: &mut RecordResult,
) -> Result<(), AnalyseError> {
    let file = || rec.file.clone();
    let path = dir.join(&rec.file);
    let wav = read_wav(&path, ReadOptions::accept_truncated())
        .map_err(|err| AnalyseError::Wav { file: file(), err })?;
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
        .ok_or_else(|| AnalyseError::NoSamples { file: file() })?;
    #[allow(clippy::cast_precision_loss)]
    let fs = wav.info.sample_rate as f32;
    if (fs - rec.sample_rate_hz).abs() > 0.5 {
        return Err(AnalyseError::SampleRate {
            file: file(),
            given: rec.sample_rate_hz,
            wav: fs,
        });
    }
    let mut point =
        validation_point(rec, x.len()).map_err(|err| AnalyseError::Plan { file: file(), err })?;
    point.rectifier = variant.rectifier;
    let x = match variant.prewhiten {
        Prewhiten::None => x,
        Prewhiten::Cepstral => cepstral_prewhiten(&x),
    };
    out.samples_per_rev = point.samples_per_rev;
    let planned = usize::from(point.revolutions) / (4096 / usize::from(point.samples_per_rev));
    if planned < MIN_SEGMENTS {
        out.notes.push(format!(
            "short record: {planned} segment(s) of {} revolutions, fewer than {MIN_SEGMENTS}",
            4096 / usize::from(point.samples_per_rev)
        ));
    }
    let record = Record {
        sample_rate_hz: fs,
        accel: Accel::G(x),
        edges_s: None,
    };
    let chosen = if rule == BandRule::Evidence {
        evidence_band(&record, &point)
    } else {
        choose_band(rule, &record, &point)
    };
    let (band, auto, k) = match chosen {
        Ok(b) => b,
        // Lines too fast for any survey band of the minimum width: the
        // default octave, noted.
        Err(e) if matches!(rule, BandRule::Auto | BandRule::Evidence) => {
            out.notes.push(format!("{e}: default band used"));
            choose_band(BandRule::Default, &record, &point).map_err(AnalyseError::DefaultBand)?
        }
        Err(err) => return Err(AnalyseError::Band { file: file(), err }),
    };
    out.band_hz = band;
    out.band_auto = auto;
    out.band_kurtosis = k;
    point.band_hz = Some(band);
    let a = run(&point, &record).map_err(|err| AnalyseError::Run { file: file(), err })?;
    let rep = &a.report;
    out.segments = rep.segments;
    out.flags = rep.flags.to_string();
    if !rep.analysed() {
        return Err(AnalyseError::NotAnalysable {
            file: file(),
            flags: rep.flags,
        });
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
fn detail_lines(d: &dsp_core::BearingDiagnosis, prefix: &str) -> Vec<String> {
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
    validate_dir_with(dir, rule, channel, decoy, alone, Variant::default())
}

/// [`validate_dir`] with the issue 20 measurement options ([`Variant`]).
pub fn validate_dir_with(
    dir: &Path,
    rule: BandRule,
    channel: Option<&str>,
    decoy: Option<f32>,
    alone: bool,
    variant: Variant,
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
        .map(|r| analyse_entry_with(dir, r, rule, variant))
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::validate::report_json;
    use dsp_core::config::BearingKinematics;
    use serde_json::json;

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
        assert!(e.to_string().contains("too short"), "{e}");
    }

    /// Minimum survey bandwidth: both sidebands of the 2nd harmonic of the
    /// fastest line. CWRU drive end at 1797 rpm: BPFI 5.4152 x 29.95 Hz =
    /// 162.2 Hz (CWRU multiples), so 648.8 Hz; a 2245-2828 Hz third-octave
    /// (583 Hz) is too narrow.
    #[test]
    fn survey_bandwidth_passes_second_harmonic_sidebands() {
        let p = validation_point(&rec(12_000.0, 1797.0, CWRU_DE), 122_000).unwrap();
        let bw = dsp_core::survey::band_choice::min_bandwidth_hz(&p);
        assert!((bw - 4.0 * 5.4152 * 1797.0 / 60.0).abs() < 0.5, "{bw}");
        assert!(bw > 2828.4 - 2244.9);
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
