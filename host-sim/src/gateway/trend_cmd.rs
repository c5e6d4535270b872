//! `envord gateway trend`: one bearing's amplitude and state over receive
//! time, as a table and an SVG plot; and the grading of a whole store that
//! `status` and `trend` share.

use super::limits;
use super::plot;
use super::series;
use super::timefmt::{format_rfc3339, parse_rfc3339_ms};
use super::trend::{self, Line};
use crate::error::CliError;

/// The reference time for staleness: `--now` (RFC 3339) or the clock.
pub fn now_ms(now: Option<&str>) -> Result<Option<i64>, CliError> {
    match now {
        Some(t) => parse_rfc3339_ms(t).map(Some).ok_or_else(|| {
            CliError::input(
                "--now",
                format!("{t:?} is not an RFC 3339 time such as 2026-05-02T10:00:00Z"),
            )
        }),
        None => Ok(std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .ok()
            .and_then(|d| i64::try_from(d.as_millis()).ok())),
    }
}

/// Every line of the store, graded with its stored limits (an SQLite
/// connection; [`grade_db`] on either backend).
pub fn grade_store(
    conn: &rusqlite::Connection,
    db: &str,
    now: Option<i64>,
) -> Result<Vec<Line>, CliError> {
    grade_db(&mut super::db::SqliteRef(conn), db, now, None)
}

/// Every line of the store (of these nodes only when given), graded with
/// its stored limits. A line's grade depends only on its own node's rows,
/// so grading some nodes gives exactly the states grading the whole store
/// gives them (what the service's alarm evaluation relies on).
pub fn grade_db(
    conn: &mut dyn super::db::Db,
    db: &str,
    now: Option<i64>,
    nodes: Option<&[u16]>,
) -> Result<Vec<Line>, CliError> {
    let (mut lines, last) = grade_db_unstaled(conn, db, nodes)?;
    for l in &mut lines {
        let t = last.get(&l.state.node).copied();
        trend::mark_stale(&mut l.state, t, now);
    }
    Ok(lines)
}

/// [`grade_db`] with no reference time (no line stale) and each node's
/// newest receive time, so that a caller keeping the lines (the dashboard)
/// can judge staleness later with [`trend::mark_stale`] and get what
/// [`grade_db`] would give at that time.
pub fn grade_db_unstaled(
    conn: &mut dyn super::db::Db,
    db: &str,
    nodes: Option<&[u16]>,
) -> Result<(Vec<Line>, std::collections::BTreeMap<u16, i64>), CliError> {
    let shown = super::db::redact(db);
    let sql = |e: super::db::DbError| CliError::Other(format!("{shown}: {e}"));
    let mut points = series::points(conn, nodes).map_err(sql)?;
    // Each node's decided order (a late or replayed frame in its place, never
    // last); arrival order among equals. The sort is stable, so the rows of
    // one report keep their bearing and kind order.
    let (_, order) =
        super::ingest::decided_order(conn, super::seq::SeqTracker::new(), nodes).map_err(sql)?;
    points.sort_by_key(|p| (order.get(&p.report_id).copied(), p.report_id));
    // reduced frames read "as before" (reports by exception)
    let reduced = super::as_before::reduced_reports(conn, nodes).map_err(sql)?;
    let points = super::as_before::expand(points, &reduced);
    let rows = limits::rows(conn).map_err(sql)?;
    let last = trend::node_last(&points);
    let bad: std::cell::RefCell<Option<String>> = std::cell::RefCell::new(None);
    let lines = trend::evaluate(
        &points,
        &|n, b, k| {
            let l = limits::resolve(&rows, n, b, k);
            if let Err(m) = limits::check(&l) {
                bad.borrow_mut()
                    .get_or_insert(format!("node {n} bearing {b} {k}: {m}"));
            }
            l
        },
        None,
    );
    match bad.into_inner() {
        Some(m) => Err(CliError::input(
            &shown,
            format!("stored limits unusable ({m}); fix them with `envord gateway limits set`"),
        )),
        None => Ok((lines, last)),
    }
}

/// Arguments of `envord gateway trend`.
#[derive(clap::Args, Debug)]
pub struct TrendArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Node id.
    #[arg(long)]
    node: u16,
    /// Bearing index at the node.
    #[arg(long)]
    bearing: u8,
    /// Only this defect (bpfo, bpfi, ftf, bsf); all four by default.
    #[arg(long)]
    defect: Option<String>,
    /// Write an SVG plot here (one panel per defect kind).
    #[arg(long)]
    svg: Option<String>,
    /// Reference time for staleness (RFC 3339); default: now.
    #[arg(long)]
    now: Option<String>,
    /// Print JSON (every graded report) instead of the table.
    #[arg(long)]
    json: bool,
}

fn f(x: Option<f64>, prec: usize) -> String {
    x.map_or("-".into(), |v| format!("{v:.prec$}"))
}

fn g(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3e}"))
}

/// Runs `envord gateway trend`.
pub fn trend_cmd(a: &TrendArgs) -> Result<(), CliError> {
    let only = a
        .defect
        .as_deref()
        .map(super::limits_cmd::kind_name)
        .transpose()?;
    let mut conn = super::db::open_mode(&a.db, super::db::Mode::ReadOnly)?;
    let all = grade_db(conn.as_mut(), &a.db, now_ms(a.now.as_deref())?, None)?;
    let mut lines: Vec<&Line> = all
        .iter()
        .filter(|l| l.state.node == a.node && l.state.bearing == a.bearing)
        .filter(|l| only.is_none_or(|k| l.state.kind == k))
        .filter(|l| !l.history.is_empty())
        .collect();
    // frame order (BPFO, BPFI, FTF, BSF), as the report and the spectrum plot
    lines.sort_by_key(|l| {
        wire::frame::DefectKind::ALL
            .iter()
            .position(|k| k.name() == l.state.kind)
            .unwrap_or(usize::MAX)
    });
    if lines.is_empty() {
        return Err(CliError::input(
            &a.db,
            format!("no reports for node {} bearing {}", a.node, a.bearing),
        ));
    }
    let axis = plot::axis_of(&lines);
    if a.json {
        let v: Vec<serde_json::Value> = lines
            .iter()
            .map(|l| serde_json::json!({"line": l.state, "history": l.history}))
            .collect();
        println!(
            "{}",
            serde_json::json!({"axis": match axis { plot::Axis::Time => "receive_time", plot::Axis::Arrival => "arrival_order" }, "lines": v})
        );
    } else {
        match axis {
            plot::Axis::Time => println!("time axis: receive time (UTC)"),
            plot::Axis::Arrival => println!(
                "time axis: arrival order (some reports have no receive time; `report` is the arrival number)"
            ),
        }
        println!(
            "{:>6} {:>6} {:<20} {:<4} {:>10} {:>10} {:>8} {:>6} {:<3} {:<11} band Hz",
            "report", "seq", "time", "kind", "amp g", "baseline", "sev dB", "score", "det", "state"
        );
        for l in &lines {
            for gr in &l.history {
                let p = &gr.point;
                if gr.band_changed {
                    println!(
                        "------ band changed to {}: amplitudes before and after are not comparable; baseline learned again",
                        p.band_hz.map_or("?".into(), |b| format!("{:.0}-{:.0} Hz", b[0], b[1]))
                    );
                }
                let time = match (p.time_ms, &p.rx_time) {
                    (Some(t), _) => format_rfc3339(t),
                    (None, Some(t)) => t.clone(),
                    (None, None) => "-".into(),
                };
                println!(
                    "{:>6} {:>6} {:<20} {:<4} {:>10} {:>10} {:>8} {:>6} {:<3} {:<11} {}",
                    p.report_id,
                    p.seq,
                    time,
                    p.kind,
                    if p.searched {
                        g(p.amplitude_g)
                    } else {
                        "not searched".into()
                    },
                    g(Some(gr.levels.baseline_g)),
                    f(gr.severity_db, 1),
                    f(p.score_db, 1),
                    if p.detected { "yes" } else { "no" },
                    gr.state.label(),
                    p.band_hz
                        .map_or("-".into(), |b| format!("{:.0}-{:.0}", b[0], b[1]))
                );
            }
        }
        if lines
            .iter()
            .flat_map(|l| l.history.iter())
            .any(|gr| gr.point.amplitude_source == "amplitude_1x_g")
        {
            println!("amplitude: the 1x amplitude (the frame carries no amplitude summed over harmonics)");
        }
    }
    if let Some(path) = &a.svg {
        let p = std::path::Path::new(path);
        let title = format!(
            "node {} bearing {}: envelope amplitude and alarm state",
            a.node, a.bearing
        );
        crate::output::write_with(p, |tmp| {
            plot::write_svg(tmp, &plot::PlotInfo { title: &title }, &lines)
        })?;
        println!("wrote {path}");
    }
    Ok(())
}
