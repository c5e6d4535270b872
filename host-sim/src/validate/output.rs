//! What `envord validate` prints: the `--json` document and the names it
//! uses for kinds and expectations.

use std::path::Path;

use dsp_core::DefectKind;
use serde_json::{json, Value};

use super::method::RecordResult;
use super::score::{decoy_summary, outcome_rows, totals};
use crate::validate_outcome::Outcome;

/// `summary.outcomes`: per group, the scored records per outcome.
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

/// The table `envord validate` prints without `--json` (with `detail`, the
/// harmonics each kind found under every record).
pub fn print_table(results: &[RecordResult], detail: bool) {
    let total = results.iter().filter(|r| r.correct.is_some()).count();
    let correct = results.iter().filter(|r| r.correct == Some(true)).count();
    let errors = results.iter().filter(|r| r.error.is_some()).count();
    println!(
        "{:<40} {:>3} {:<5} {:>6} {:>6} {:>6} {:>6} {:>11} {:>4} {:<14} ok",
        "record", "ch", "want", "BPFO", "BPFI", "FTF", "BSF", "band Hz", "S/r", "detected"
    );
    for r in results {
        let det = kind_names(&r.detected).join(",");
        println!(
            "{:<40} {:>3} {:<5} {:>6.1} {:>6.1} {:>6.1} {:>6.1} {:>5.0}-{:<5.0} {:>4} {:<14} {}",
            r.file,
            if r.channel.is_empty() {
                "-"
            } else {
                &r.channel
            },
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
        if detail {
            for d in &r.detail {
                println!("      {d}");
            }
        }
    }
    println!();
    for (g, t, c) in totals(results) {
        println!("{g:<28} {c:>3}/{t:<3}");
    }
    for (g, c) in outcome_rows(results) {
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
    if let Some((alarms, watched)) = decoy_summary(results) {
        println!("decoy bearing: false alarms on {alarms} of {watched} records");
    }
}
