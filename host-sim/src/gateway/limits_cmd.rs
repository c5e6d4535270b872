//! `envord gateway limits set|show|clear`: alarm limits per measuring point
//! in the store (gateway/limits.rs), and the amplitude baseline of
//! `envord gateway baseline`.

use super::limits::{self, LimitRow, Limits};
use super::store;
use crate::error::CliError;
use wire::frame::DefectKind;

/// Arguments of `envord gateway limits`.
#[derive(clap::Args, Debug)]
pub struct LimitsArgs {
    #[command(subcommand)]
    command: LimitsCommand,
}

#[derive(clap::Subcommand, Debug)]
enum LimitsCommand {
    /// Store limits for every node, one node, one bearing or one defect.
    Set(SetArgs),
    /// Print the stored rows and the limits each watched line resolves to.
    Show(ShowArgs),
    /// Remove the stored row of one scope.
    Clear(ScopeArgs),
}

/// Which lines a row applies to.
#[derive(clap::Args, Debug)]
pub struct ScopeArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Node id (omit: every node).
    #[arg(long)]
    node: Option<u16>,
    /// Bearing index at the node, 0..=3 (omit: every bearing).
    #[arg(long)]
    bearing: Option<u8>,
    /// Defect kind: bpfo, bpfi, ftf, bsf (omit: every kind).
    #[arg(long)]
    defect: Option<String>,
}

#[derive(clap::Args, Debug)]
struct SetArgs {
    #[command(flatten)]
    scope: ScopeArgs,
    /// Quiet reports averaged into a learned baseline.
    #[arg(long)]
    baseline_count: Option<usize>,
    /// Alert at this rise of the amplitude over the baseline, dB.
    #[arg(long)]
    alert_db: Option<f64>,
    /// Danger at this rise over the baseline, dB (from the second report on).
    #[arg(long)]
    danger_db: Option<f64>,
    /// Alert at or above this amplitude, g (0: none).
    #[arg(long)]
    alert_abs_g: Option<f64>,
    /// Danger at or above this amplitude, g, even at a first detection (0: none).
    #[arg(long)]
    danger_abs_g: Option<f64>,
    /// Floor of "nothing found", g.
    #[arg(long)]
    floor_g: Option<f64>,
    /// Hand-set baseline amplitude, g (0: learn it again).
    #[arg(long)]
    baseline_g: Option<f64>,
    /// Stale after this many hours of silence (0: never).
    #[arg(long)]
    stale_after_h: Option<f64>,
}

#[derive(clap::Args, Debug)]
struct ShowArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Print JSON.
    #[arg(long)]
    json: bool,
}

/// Runs `envord gateway limits ...`.
pub fn run(a: &LimitsArgs) -> Result<(), CliError> {
    match &a.command {
        LimitsCommand::Set(s) => set_cmd(s),
        LimitsCommand::Show(s) => show_cmd(s),
        LimitsCommand::Clear(s) => clear_cmd(s),
    }
}

fn sql(path: &str) -> impl Fn(super::db::DbError) -> CliError + '_ {
    move |e| CliError::Other(format!("{}: {e}", super::db::redact(path)))
}

/// Parses a defect name to the frame's name (`BPFO`...).
pub fn kind_name(s: &str) -> Result<&'static str, CliError> {
    DefectKind::ALL
        .iter()
        .find(|k| k.name().eq_ignore_ascii_case(s))
        .map(|k| k.name())
        .ok_or_else(|| {
            CliError::input(
                "--defect",
                format!("{s:?} is not one of bpfo, bpfi, ftf, bsf"),
            )
        })
}

fn scope(s: &ScopeArgs) -> Result<LimitRow, CliError> {
    if s.bearing.is_some_and(|b| b > 3) {
        return Err(CliError::input("--bearing", "bearing index must be 0..=3"));
    }
    Ok(LimitRow {
        node: s.node,
        bearing: s.bearing,
        kind: s
            .defect
            .as_deref()
            .map(kind_name)
            .transpose()?
            .map(String::from),
        origin: "command".into(),
        ..LimitRow::default()
    })
}

fn scope_text(r: &LimitRow) -> String {
    format!(
        "node {} bearing {} defect {}",
        r.node.map_or("*".into(), |n| n.to_string()),
        r.bearing.map_or("*".into(), |b| b.to_string()),
        r.kind.as_deref().unwrap_or("*")
    )
}

/// Stores `row` after checking that every line it touches still resolves to
/// usable limits; prints what was stored.
pub fn store_row(db: &str, row: &LimitRow) -> Result<LimitRow, CliError> {
    // limits may be set before the first frame arrives: creates the store
    let mut conn = super::db::open(db)?;
    let tx = conn.as_mut();
    tx.begin().map_err(sql(db))?;
    let checked = (|| {
        let merged = limits::upsert(tx, row).map_err(sql(db))?;
        let rows = limits::rows(tx).map_err(sql(db))?;
        let probe = limits::resolve(
            &rows,
            merged.node.unwrap_or(0),
            merged.bearing.unwrap_or(0),
            merged.kind.as_deref().unwrap_or("BPFO"),
        );
        limits::check(&probe).map_err(|m| CliError::input("limits", m))?;
        Ok(merged)
    })();
    match checked {
        Ok(merged) => {
            tx.commit().map_err(sql(db))?;
            Ok(merged)
        }
        Err(e) => {
            tx.rollback();
            Err(e)
        }
    }
}

/// Stores the alert/danger levels a configuration downlink carries to a
/// node as that node's limits (origin `node config`); says so on stderr.
pub fn record_node_levels(
    db: &str,
    node: u16,
    alert_db: f32,
    danger_db: f32,
) -> Result<(), CliError> {
    let row = LimitRow {
        node: Some(node),
        // f32 on the node; 0.01 dB is finer than any level anyone sets
        alert_db: Some((f64::from(alert_db) * 100.0).round() / 100.0),
        danger_db: Some((f64::from(danger_db) * 100.0).round() / 100.0),
        origin: "node config".into(),
        ..LimitRow::default()
    };
    store_row(db, &row)?;
    eprintln!(
        "envord: {db}: node {node} limits set to the levels sent: alert +{alert_db} dB, danger +{danger_db} dB"
    );
    Ok(())
}

fn set_cmd(a: &SetArgs) -> Result<(), CliError> {
    let mut row = scope(&a.scope)?;
    for (name, v) in [
        ("--alert-db", a.alert_db),
        ("--danger-db", a.danger_db),
        ("--alert-abs-g", a.alert_abs_g),
        ("--danger-abs-g", a.danger_abs_g),
        ("--floor-g", a.floor_g),
        ("--baseline-g", a.baseline_g),
        ("--stale-after-h", a.stale_after_h),
    ] {
        if v.is_some_and(|x| !x.is_finite() || x < 0.0) {
            return Err(CliError::input(name, "must be a finite number >= 0"));
        }
    }
    row.baseline_count = a.baseline_count;
    row.alert_db = a.alert_db;
    row.danger_db = a.danger_db;
    row.alert_abs_g = a.alert_abs_g;
    row.danger_abs_g = a.danger_abs_g;
    row.floor_g = a.floor_g;
    row.baseline_g = a.baseline_g;
    row.stale_after_s = a.stale_after_h.map(|h| h * 3600.0);
    let merged = store_row(&a.scope.db, &row)?;
    println!(
        "limits of {} stored: {}",
        scope_text(&merged),
        row_text(&merged)
    );
    Ok(())
}

fn opt(v: Option<f64>, unit: &str) -> String {
    v.map_or("-".into(), |x| format!("{x}{unit}"))
}

fn row_text(r: &LimitRow) -> String {
    format!(
        "baseline_count {} alert_db {} danger_db {} alert_abs_g {} danger_abs_g {} floor_g {} baseline_g {} stale_after_h {} (origin {})",
        r.baseline_count.map_or("-".into(), |c| c.to_string()),
        opt(r.alert_db, ""),
        opt(r.danger_db, ""),
        opt(r.alert_abs_g, ""),
        opt(r.danger_abs_g, ""),
        opt(r.floor_g, ""),
        opt(r.baseline_g, ""),
        opt(r.stale_after_s.map(|s| s / 3600.0), ""),
        r.origin
    )
}

/// One line of the resolved-limits table.
pub fn limits_text(l: &Limits) -> String {
    format!(
        "alert +{} dB, danger +{} dB over baseline; absolute alert {} danger {}; floor {} g; baseline {}; {} quiet reports learned; stale after {}",
        l.alert_db,
        l.danger_db,
        opt(l.alert_abs_g, " g"),
        opt(l.danger_abs_g, " g"),
        l.floor_g,
        l.baseline_g
            .map_or("learned".into(), |b| format!("{b} g (hand-set)")),
        l.baseline_count,
        opt(l.stale_after_s.map(|s| s / 3600.0), " h")
    )
}

fn show_cmd(a: &ShowArgs) -> Result<(), CliError> {
    let mut conn = super::db::open_mode(&a.db, super::db::Mode::ReadOnly)?;
    let rows = limits::rows(conn.as_mut()).map_err(sql(&a.db))?;
    let lines = store::observations(conn.as_mut()).map_err(sql(&a.db))?;
    let mut keys: Vec<(u16, u8, String)> = lines
        .iter()
        .map(|o| (o.node, o.bearing, o.kind.clone()))
        .collect();
    keys.sort();
    keys.dedup();
    if a.json {
        let resolved: Vec<serde_json::Value> = keys
            .iter()
            .map(|(n, b, k)| {
                serde_json::json!({"node": n, "bearing": b, "kind": k,
                    "limits": limits::resolve(&rows, *n, *b, k)})
            })
            .collect();
        println!(
            "{}",
            serde_json::json!({"rows": rows, "defaults": Limits::default(), "lines": resolved})
        );
        return Ok(());
    }
    println!("stored rows (most specific wins, setting by setting; '-' defers):");
    if rows.is_empty() {
        println!("  none: every line uses the defaults");
    }
    for r in &rows {
        println!("  {}: {}", scope_text(r), row_text(r));
    }
    println!("defaults: {}", limits_text(&Limits::default()));
    println!("lines with reports:");
    for (n, b, k) in &keys {
        println!(
            "  node {n} bearing {b} {k:<4}: {}",
            limits_text(&limits::resolve(&rows, *n, *b, k))
        );
    }
    Ok(())
}

fn clear_cmd(a: &ScopeArgs) -> Result<(), CliError> {
    let row = scope(a)?;
    let mut conn = super::db::open_mode(&a.db, super::db::Mode::Existing)?;
    let had = limits::clear(conn.as_mut(), row.node, row.bearing, row.kind.as_deref())
        .map_err(sql(&a.db))?;
    if had {
        println!("limits of {} removed", scope_text(&row));
    } else {
        println!("no limits stored for {}", scope_text(&row));
    }
    Ok(())
}
