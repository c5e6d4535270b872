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
//! the bearing's kind call ([`dsp_core::diagnosis::kind_call`]) names its
//! kind (BPFI, BPFO, BSF): detected, highest score, and a clear margin. A
//! fault record reported "damaged, kind uncertain" is neither right nor a
//! wrong kind ([`crate::validate_outcome`]). Records with another fault
//! text are listed, not scored.
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
//!
//! The command in parts: [`manifest`] (reading `manifest.toml`), [`method`]
//! (the fixed method: point, band, analysis of one record), [`score`]
//! (judging and counting) and [`output`] (the table and the JSON document).

use std::path::PathBuf;

use clap::Args;

use crate::error::CliError;

pub mod manifest;
pub mod method;
pub mod output;
pub mod score;
pub mod variant;

pub use manifest::{
    canonical_location, decoy_entry, expected_kind, parse_manifest, single_sided_bsf, FieldError,
    ManifestEntry, ManifestError, ManifestRecord,
};
pub use method::{
    analyse_entry, analyse_entry_with, choose_band, validate_dir, validate_dir_with,
    validation_point, BandError, PlanError, RecordResult, MAX_REVOLUTIONS, MIN_SEGMENTS,
    SAMPLES_PER_REV,
};
pub use output::report_json;
pub use score::{decoy_summary, judge, totals};

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

/// A `--band` value that is none of `auto`, `default`, `LO,HI`.
#[derive(Debug, Clone, PartialEq)]
pub struct BandRuleError {
    /// The text given.
    pub text: String,
}

impl std::fmt::Display for BandRuleError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "`{}`: give `auto`, `default`, `evidence` or `LO,HI` in Hz",
            self.text
        )
    }
}

impl std::error::Error for BandRuleError {}

impl std::str::FromStr for BandRule {
    type Err = BandRuleError;
    fn from_str(s: &str) -> Result<Self, BandRuleError> {
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
                    _ => Err(BandRuleError {
                        text: other.to_string(),
                    }),
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
    /// Exit 1 when more fault records than this have a wrong kind named
    /// (a CI ceiling, issue 20: a wrong kind orders the wrong repair).
    #[arg(long)]
    pub max_wrong_kind: Option<usize>,
    /// Issue 20 measurement: demodulation, `abs` (the fixed method) or
    /// `square` (squared envelope).
    #[arg(long, default_value = "abs", value_parser = variant::parse_rectifier)]
    pub rectifier: dsp_core::Rectifier,
    /// Issue 20 measurement: pre-whitening of the raw record, `none` (the
    /// fixed method) or `cepstral` (host only).
    #[arg(long, default_value = "none")]
    pub prewhiten: variant::Prewhiten,
}

/// A `--decoy` factor that is not a number, or out of its range.
#[derive(Debug, Clone, PartialEq)]
pub enum DecoyError {
    /// Not a number.
    Number {
        /// The text given.
        text: String,
        /// Why it does not parse.
        error: std::num::ParseFloatError,
    },
    /// Outside 0.25-4 or within 2 % of 1.
    Range {
        /// The text given.
        text: String,
    },
}

impl std::fmt::Display for DecoyError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            DecoyError::Number { text, error } => write!(f, "{text}: {error}"),
            DecoyError::Range { text } => write!(
                f,
                "{text}: a decoy factor lies in 0.25-4 and at least 2 % away from 1"
            ),
        }
    }
}

impl std::error::Error for DecoyError {}

fn parse_decoy(s: &str) -> Result<f32, DecoyError> {
    let f: f32 = s.trim().parse().map_err(|error| DecoyError::Number {
        text: s.to_string(),
        error,
    })?;
    if f.is_finite() && (0.25..=4.0).contains(&f) && (f - 1.0).abs() >= 0.02 {
        Ok(f)
    } else {
        Err(DecoyError::Range {
            text: s.to_string(),
        })
    }
}

/// Runs `envord validate`.
pub fn run_cmd(args: &ValidateArgs) -> Result<(), CliError> {
    let results = validate_dir_with(
        &args.data_dir,
        args.band,
        args.channel.as_deref(),
        args.decoy,
        args.decoy_alone,
        variant::Variant {
            rectifier: args.rectifier,
            prewhiten: args.prewhiten,
        },
    )?;
    let total = results.iter().filter(|r| r.correct.is_some()).count();
    let correct = results.iter().filter(|r| r.correct == Some(true)).count();
    if args.json {
        let v = output::report_json(&args.data_dir, &results);
        println!(
            "{}",
            serde_json::to_string_pretty(&v).map_err(|e| CliError::Other(e.to_string()))?
        );
    } else {
        output::print_table(&results, args.detail);
    }
    if let (Some(max), Some((alarms, watched))) = (args.max_decoy_alarms, decoy_summary(&results)) {
        if alarms > max {
            return Err(CliError::Difference(format!(
                "validate: false alarms on the decoy bearing in {alarms} of {watched} records, \
                 more than --max-decoy-alarms {max}"
            )));
        }
    }
    let wrong = results
        .iter()
        .filter(|r| r.outcome == Some(crate::validate_outcome::Outcome::WrongKind))
        .count();
    if let Some(max) = args.max_wrong_kind.filter(|&m| wrong > m) {
        return Err(CliError::Difference(format!(
            "validate: a wrong kind named on {wrong} fault records, more than --max-wrong-kind {max}"
        )));
    }
    match args.min_correct {
        Some(min) if correct < min => Err(CliError::Difference(format!(
            "validate: {correct} of {total} scored records right, fewer than --min-correct {min}"
        ))),
        _ => Ok(()),
    }
}
