//! `envord compare`: the firmware-change check. Compares two JSON reports (or
//! two folders of them, matched by file name) and exits 1 when anything moved
//! beyond tolerance: a detection decision, a flag, a defect score or an
//! overall value by more than `--tolerance-db`, or the speed by more than
//! `--tolerance-pct`.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use clap::Args;
use serde_json::Value;

use crate::error::CliError;

/// Arguments of `envord compare`.
#[derive(Debug, Args)]
pub struct CompareArgs {
    /// Baseline report (JSON) or folder of reports.
    pub a: PathBuf,
    /// New report (JSON) or folder of reports.
    pub b: PathBuf,
    /// Largest change of a score or overall value that is not a difference, dB.
    #[arg(long, default_value_t = 0.5)]
    pub tolerance_db: f64,
    /// Largest change of the mean speed that is not a difference, percent.
    #[arg(long, default_value_t = 0.1)]
    pub tolerance_pct: f64,
}

/// What a change means for the diagnosis, for the summary line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ChangeKind {
    /// A defect is now detected that was not before.
    Appeared,
    /// A defect detected before is no longer detected.
    Vanished,
    /// A score, overall value or the speed moved beyond tolerance (same decision).
    Moved,
    /// Anything else: flags, a bearing, defect or file present on one side only.
    Other,
}

/// One change found between two reports.
#[derive(Debug, Clone, PartialEq)]
pub struct Change {
    /// Where: file, bearing, defect or field.
    pub what: String,
    /// Old value, in plain words.
    pub old: String,
    /// New value, in plain words.
    pub new: String,
    /// What the change means.
    pub kind: ChangeKind,
}

/// A JSON value in plain words: numbers as numbers, a missing value as "absent".
fn plain(v: Option<&Value>) -> String {
    match v {
        None | Some(Value::Null) => "absent".into(),
        Some(Value::String(s)) => s.clone(),
        Some(Value::Array(l)) if l.is_empty() => "none".into(),
        Some(Value::Array(l)) => l
            .iter()
            .map(|x| plain(Some(x)))
            .collect::<Vec<_>>()
            .join(", "),
        Some(other) => other.to_string(),
    }
}

/// A number in plain words, "absent" when missing.
fn plain_num(v: Option<f64>) -> String {
    v.map_or_else(|| "absent".into(), |x| format!("{x}"))
}

/// A detection decision in plain words.
fn decision(v: Option<bool>) -> String {
    match v {
        Some(true) => "detected".into(),
        Some(false) => "not detected".into(),
        None => "absent".into(),
    }
}

/// Counts of changes per kind: (appeared, vanished, moved, other).
pub fn summary(changes: &[Change]) -> (usize, usize, usize, usize) {
    let n = |k: ChangeKind| changes.iter().filter(|c| c.kind == k).count();
    (
        n(ChangeKind::Appeared),
        n(ChangeKind::Vanished),
        n(ChangeKind::Moved),
        n(ChangeKind::Other),
    )
}

fn load(path: &Path) -> Result<Value, CliError> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| CliError::input(path.display(), format!("cannot read: {e}")))?;
    let v: Value = serde_json::from_str(&text).map_err(|e| CliError::input(path.display(), e))?;
    if v.get("bearings").and_then(Value::as_array).is_none() {
        return Err(CliError::input(
            path.display(),
            "not an envord report (no `bearings` list)",
        ));
    }
    Ok(v)
}

fn num(v: &Value, ptr: &str) -> Option<f64> {
    v.pointer(ptr).and_then(Value::as_f64)
}

fn db_change(a: f64, b: f64) -> f64 {
    if a <= 0.0 || b <= 0.0 {
        if (a - b).abs() < f64::EPSILON {
            0.0
        } else {
            f64::INFINITY
        }
    } else {
        (20.0 * (b / a).log10()).abs()
    }
}

/// Compares two reports; `prefix` names the file in the changes.
pub fn compare_reports(
    a: &Value,
    b: &Value,
    prefix: &str,
    tol_db: f64,
    tol_pct: f64,
) -> Vec<Change> {
    let mut out = Vec::new();
    let mut push = |what: String, old: String, new: String, kind: ChangeKind| {
        out.push(Change {
            what,
            old,
            new,
            kind,
        });
    };
    let fa = a.get("flags").cloned().unwrap_or(Value::Null);
    let fb = b.get("flags").cloned().unwrap_or(Value::Null);
    if fa != fb {
        push(
            format!("{prefix}flags"),
            plain(Some(&fa)),
            plain(Some(&fb)),
            ChangeKind::Other,
        );
    }
    match (num(a, "/speed_rpm"), num(b, "/speed_rpm")) {
        (Some(x), Some(y)) if x > 0.0 && ((y - x) / x).abs() * 100.0 <= tol_pct => {}
        (x, y) if x == y => {}
        (x, y) => push(
            format!("{prefix}speed_rpm"),
            plain_num(x),
            plain_num(y),
            ChangeKind::Moved,
        ),
    }
    for key in [
        "rms_g",
        "peak_g",
        "crest_factor",
        "kurtosis",
        "velocity_rms_mm_s",
    ] {
        let p = format!("/overall/{key}");
        if let (Some(x), Some(y)) = (num(a, &p), num(b, &p)) {
            if db_change(x, y) > tol_db {
                push(
                    format!("{prefix}overall.{key}"),
                    x.to_string(),
                    y.to_string(),
                    ChangeKind::Moved,
                );
            }
        } else if a.pointer(&p) != b.pointer(&p) {
            push(
                format!("{prefix}overall.{key}"),
                plain(a.pointer(&p)),
                plain(b.pointer(&p)),
                ChangeKind::Other,
            );
        }
    }
    let bearings = |v: &Value| -> BTreeMap<String, Value> {
        v.get("bearings")
            .and_then(Value::as_array)
            .map(|l| {
                l.iter()
                    .map(|b| {
                        (
                            b.get("name")
                                .and_then(Value::as_str)
                                .unwrap_or("?")
                                .to_string(),
                            b.clone(),
                        )
                    })
                    .collect()
            })
            .unwrap_or_default()
    };
    let (ba, bb) = (bearings(a), bearings(b));
    for name in ba.keys().chain(bb.keys().filter(|k| !ba.contains_key(*k))) {
        let (Some(x), Some(y)) = (ba.get(name), bb.get(name)) else {
            push(
                format!("{prefix}bearing {name}"),
                if ba.contains_key(name) {
                    "present"
                } else {
                    "absent"
                }
                .into(),
                if bb.contains_key(name) {
                    "present"
                } else {
                    "absent"
                }
                .into(),
                ChangeKind::Other,
            );
            continue;
        };
        let defects = |v: &Value| -> BTreeMap<String, Value> {
            v.get("defects")
                .and_then(Value::as_array)
                .map(|l| {
                    l.iter()
                        .map(|d| {
                            (
                                d.get("kind")
                                    .and_then(Value::as_str)
                                    .unwrap_or("?")
                                    .to_string(),
                                d.clone(),
                            )
                        })
                        .collect()
                })
                .unwrap_or_default()
        };
        let (da, db) = (defects(x), defects(y));
        for kind in da.keys().chain(db.keys().filter(|k| !da.contains_key(*k))) {
            let where_ = format!("{prefix}{name} {kind}");
            let (Some(p), Some(q)) = (da.get(kind), db.get(kind)) else {
                let side = |m: &BTreeMap<String, Value>| {
                    if m.contains_key(kind) {
                        "searched"
                    } else {
                        "absent"
                    }
                };
                push(
                    where_,
                    side(&da).into(),
                    side(&db).into(),
                    ChangeKind::Other,
                );
                continue;
            };
            let det = |d: &Value| d.get("detected").and_then(Value::as_bool);
            if det(p) != det(q) {
                let kind = match (det(p), det(q)) {
                    (Some(true), _) => ChangeKind::Vanished,
                    (_, Some(true)) => ChangeKind::Appeared,
                    _ => ChangeKind::Other,
                };
                push(
                    format!("{where_} decision"),
                    decision(det(p)),
                    decision(det(q)),
                    kind,
                );
            }
            let sc = |d: &Value| d.get("score_db").and_then(Value::as_f64);
            match (sc(p), sc(q)) {
                (Some(s), Some(t)) if (s - t).abs() <= tol_db => {}
                (s, t) if s == t => {}
                (s, t) => push(
                    format!("{where_} score_db"),
                    s.map_or("absent".into(), |v| format!("{v:.2}")),
                    t.map_or("absent".into(), |v| format!("{v:.2}")),
                    ChangeKind::Moved,
                ),
            }
        }
    }
    out
}

fn json_files(dir: &Path) -> Result<BTreeMap<String, PathBuf>, CliError> {
    let mut m = BTreeMap::new();
    let rd = std::fs::read_dir(dir)
        .map_err(|e| CliError::input(dir.display(), format!("cannot list: {e}")))?;
    for e in rd.flatten() {
        let p = e.path();
        if p.extension().is_some_and(|x| x == "json") {
            if let Some(n) = p.file_name().and_then(|n| n.to_str()) {
                m.insert(n.to_string(), p.clone());
            }
        }
    }
    Ok(m)
}

/// The change table and the per-decision summary line, as printed.
pub fn changes_table(changes: &[Change]) -> String {
    let mut s = format!("{:<48} {:>20} {:>20}\n", "changed", "was", "now");
    for c in changes {
        s.push_str(&format!("{:<48} {:>20} {:>20}\n", c.what, c.old, c.new));
    }
    let (appeared, vanished, moved, other) = summary(changes);
    s.push_str(&format!(
        "summary: {appeared} finding(s) appeared, {vanished} vanished, {moved} value(s) moved \
         beyond tolerance, {other} other change(s)\n"
    ));
    s
}

/// Runs `envord compare`.
pub fn run(args: &CompareArgs) -> Result<(), CliError> {
    if !(args.tolerance_db.is_finite() && args.tolerance_db >= 0.0) {
        return Err(CliError::input("--tolerance-db", "must be a number >= 0"));
    }
    let mut changes = Vec::new();
    let mut compared = 0usize;
    match (args.a.is_dir(), args.b.is_dir()) {
        (true, true) => {
            let (fa, fb) = (json_files(&args.a)?, json_files(&args.b)?);
            for (name, pa) in &fa {
                match fb.get(name) {
                    Some(pb) => {
                        changes.extend(compare_reports(
                            &load(pa)?,
                            &load(pb)?,
                            &format!("{name}: "),
                            args.tolerance_db,
                            args.tolerance_pct,
                        ));
                        compared += 1;
                    }
                    None => changes.push(Change {
                        what: name.clone(),
                        old: "present".into(),
                        new: "missing".into(),
                        kind: ChangeKind::Other,
                    }),
                }
            }
            for name in fb.keys().filter(|n| !fa.contains_key(*n)) {
                changes.push(Change {
                    what: name.clone(),
                    old: "missing".into(),
                    new: "present".into(),
                    kind: ChangeKind::Other,
                });
            }
        }
        (false, false) => {
            changes = compare_reports(
                &load(&args.a)?,
                &load(&args.b)?,
                "",
                args.tolerance_db,
                args.tolerance_pct,
            );
            compared = 1;
        }
        _ => {
            return Err(CliError::input(
                args.b.display(),
                "compare two files or two folders, not one of each",
            ))
        }
    }
    if changes.is_empty() {
        println!(
            "no change beyond {} dB / {} % in {compared} report(s)",
            args.tolerance_db, args.tolerance_pct
        );
        return Ok(());
    }
    print!("{}", changes_table(&changes));
    Err(CliError::Difference(format!(
        "{} change(s) beyond tolerance in {compared} report(s)",
        changes.len()
    )))
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn report(score: f64, detected: bool) -> Value {
        json!({"speed_rpm": 1500.0, "flags": [], "overall": {"rms_g": 0.5},
               "bearings": [{"name": "b", "defects": [{"kind": "BPFO", "order": 3.5,
               "detected": detected, "score_db": score}]}]})
    }

    #[test]
    fn equal_reports_have_no_change() {
        assert!(compare_reports(&report(20.0, true), &report(20.2, true), "", 0.5, 0.1).is_empty());
    }

    #[test]
    fn score_and_decision_changes_are_found() {
        let c = compare_reports(&report(20.0, true), &report(21.0, true), "", 0.5, 0.1);
        assert_eq!(c.len(), 1);
        assert!(c[0].what.contains("score_db"));
        let c = compare_reports(&report(20.0, true), &report(20.0, false), "", 0.5, 0.1);
        assert!(c[0].what.contains("decision"));
    }

    /// Values print as plain words (no `Some(false)`), and the summary
    /// counts findings that appeared, vanished and moved.
    #[test]
    fn changes_print_in_plain_words_with_a_summary() {
        let mut a = report(20.0, false);
        a["bearings"][0]["defects"]
            .as_array_mut()
            .unwrap()
            .push(json!({"kind": "BPFI", "order": 5.4, "detected": true, "score_db": 18.0}));
        let mut b = report(20.0, true);
        b["bearings"][0]["defects"]
            .as_array_mut()
            .unwrap()
            .push(json!({"kind": "BPFI", "order": 5.4, "detected": false, "score_db": 18.0}));
        b["overall"]["rms_g"] = json!(0.7);
        b["speed_rpm"] = Value::Null;
        let c = compare_reports(&a, &b, "", 0.5, 0.1);
        let t = changes_table(&c);
        assert!(!t.contains("Some("), "{t}");
        assert!(!t.contains("None"), "{t}");
        assert!(t.contains("not detected") && t.contains("absent"), "{t}");
        assert_eq!(summary(&c), (1, 1, 2, 0), "{c:?}");
        assert!(
            t.contains("summary: 1 finding(s) appeared, 1 vanished, 2 value(s) moved"),
            "{t}"
        );
    }

    #[test]
    fn speed_and_overall_changes_are_found() {
        let mut b = report(20.0, true);
        b["speed_rpm"] = json!(1510.0);
        b["overall"]["rms_g"] = json!(0.6);
        let c = compare_reports(&report(20.0, true), &b, "", 0.5, 0.1);
        assert_eq!(c.len(), 2, "{c:?}");
    }
}
