//! `envord gateway ...`: reading node frames at the plant gateway.
//!
//! * `decode`: frames (hex/base64 lines or raw binary) to JSON lines or a
//!   table, with sequence tracking and a reject log.
//! * `import`: into the SQLite store (docs/gateway.md), idempotent and safe
//!   against interruption (batched transactions, unique node+seq+payload).
//! * `status`: alarm state of every watched bearing, per sensor and per
//!   physical bearing (gateway map), plus link statistics.
//! * `trend`: one bearing's amplitude and state over receive time, as a
//!   table and an SVG plot (trend_cmd.rs).
//! * `limits`: alarm limits per measuring point in the store (limits_cmd.rs);
//!   `baseline`: set or clear a hand-set amplitude baseline.
//!   Reduced frames count as "as before" ([`as_before`]) in both.
//! * `downlink`: build a signed downlink (configuration, measure now, band
//!   survey) for a node from its key file; `provision`: make a node's key and
//!   identity record.
//! * `serve`: the long-running MQTT consumer (docs/gateway.md), storing
//!   through the same path as `import` ([`ingest`]) and publishing alarm
//!   changes ([`alarms`]).
//!
//! Every command that takes `--db` accepts an SQLite file or a
//! `postgres://` URL ([`db`]); the dashboard (`web`) reads SQLite only.

pub mod alarms;
pub mod as_before;
pub mod db;
pub mod downlink;
pub mod ingest;
pub mod input;
pub mod limits;
pub mod limits_cmd;
pub mod line_columns;
pub mod map;
pub mod plot;
pub mod seq;
pub mod series;
pub mod serve;
pub mod serve_config;
pub mod store;
pub mod timefmt;
pub mod trend;
pub mod trend_cmd;
pub mod web;

use crate::error::CliError;
use input::{read_inputs, InputFormat, InputItem};
use seq::{SeqEvent, SeqTracker};
use std::io::Write;
use trend::State;
use wire::frame::{decode_any, DefectKind, Frame};

/// Arguments of `envord gateway`.
#[derive(clap::Args, Debug)]
pub struct GatewayArgs {
    #[command(subcommand)]
    command: GatewayCommand,
}

#[derive(clap::Subcommand, Debug)]
enum GatewayCommand {
    /// Decode frames and print them (JSON lines by default).
    Decode(DecodeArgs),
    /// Store frames in the gateway database.
    Import(ImportArgs),
    /// Print the alarm state of every watched bearing and the link statistics.
    Status(StatusArgs),
    /// Print one bearing's amplitude and alarm state over time and plot them as SVG.
    Trend(trend_cmd::TrendArgs),
    /// Set, show or clear the alarm limits of measuring points (stored).
    Limits(limits_cmd::LimitsArgs),
    /// Set or clear the hand-set amplitude baseline of one defect.
    Baseline(BaselineArgs),
    /// Build a signed downlink for a node (configuration, measure now, band survey).
    Downlink(downlink::DownlinkArgs),
    /// Make a node's downlink key and identity record (provisioning).
    Provision(downlink::ProvisionArgs),
    /// Serve the plant dashboard (fleet, trends, alarm events) behind a login.
    Web(web::WebArgs),
    /// Manage the dashboard's users file (add a user, hash a password).
    User(web::UserArgs),
    /// Run the gateway service: MQTT uplinks into the store, alarm changes out.
    Serve(serve::ServeArgs),
}

#[derive(clap::Args, Debug)]
struct DecodeArgs {
    /// Input files (none or "-" for stdin).
    files: Vec<String>,
    /// How payloads are written.
    #[arg(long, value_enum, default_value = "auto")]
    format: InputFormat,
    /// Print a table instead of JSON lines.
    #[arg(long)]
    table: bool,
    /// Append rejected frames (JSON lines with the reason) to this file.
    #[arg(long)]
    rejects: Option<String>,
    /// Exit with code 2 if any frame was rejected.
    #[arg(long)]
    strict: bool,
}

#[derive(clap::Args, Debug)]
struct ImportArgs {
    /// Gateway store: SQLite file (created if missing) or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Input files (none or "-" for stdin).
    files: Vec<String>,
    /// How payloads are written.
    #[arg(long, value_enum, default_value = "auto")]
    format: InputFormat,
    /// Frames per transaction.
    #[arg(long, default_value_t = 500)]
    batch_size: usize,
    /// Pause after each committed batch (ms); lets tests interrupt an import.
    #[arg(long, default_value_t = 0, hide = true)]
    batch_pause_ms: u64,
    /// Print each sequence event, not only the summary.
    #[arg(long)]
    verbose: bool,
}

#[derive(clap::Args, Debug)]
struct StatusArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Gateway map (TOML) naming physical bearings.
    #[arg(long)]
    map: Option<String>,
    /// Print JSON instead of tables.
    #[arg(long)]
    json: bool,
    /// Reference time for staleness (RFC 3339); default: now.
    #[arg(long)]
    now: Option<String>,
}

#[derive(clap::Args, Debug)]
struct BaselineArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Node id.
    #[arg(long)]
    node: u16,
    /// Bearing index at the node.
    #[arg(long)]
    bearing: u8,
    /// Defect kind (bpfo, bpfi, ftf, bsf).
    #[arg(long)]
    defect: String,
    /// Baseline envelope amplitude in g (stored as this line's `baseline_g` limit).
    #[arg(long, conflicts_with = "clear", required_unless_present = "clear")]
    amplitude_g: Option<f64>,
    /// Remove the hand-set baseline (back to learning from the first reports).
    #[arg(long)]
    clear: bool,
}

/// Runs `envord gateway ...`.
pub fn run(args: GatewayArgs) -> Result<(), CliError> {
    match args.command {
        GatewayCommand::Decode(a) => decode_cmd(a),
        GatewayCommand::Import(a) => import_cmd(a),
        GatewayCommand::Status(a) => status_cmd(a),
        GatewayCommand::Trend(a) => trend_cmd::trend_cmd(&a),
        GatewayCommand::Limits(a) => limits_cmd::run(&a),
        GatewayCommand::Baseline(a) => baseline_cmd(a),
        GatewayCommand::Downlink(a) => downlink::downlink_cmd(&a),
        GatewayCommand::Provision(a) => downlink::provision_cmd(&a),
        GatewayCommand::Web(a) => web::web_cmd(&a),
        GatewayCommand::User(a) => web::user_cmd(&a),
        GatewayCommand::Serve(a) => serve::serve_cmd(&a),
    }
}

fn parse_kind(s: &str) -> Result<DefectKind, CliError> {
    DefectKind::ALL
        .iter()
        .copied()
        .find(|k| k.name().eq_ignore_ascii_case(s))
        .ok_or_else(|| {
            CliError::input(
                "--defect",
                format!("{s:?} is not one of bpfo, bpfi, ftf, bsf"),
            )
        })
}

/// Decodes one input item: the frame or the reject reason.
pub fn decode_item(item: &InputItem) -> Result<Frame, String> {
    let bytes = item
        .bytes
        .as_ref()
        .map_err(|e| format!("unreadable payload: {e}"))?;
    decode_any(bytes).map_err(|e| format!("{e}"))
}

fn seq_json(ev: &SeqEvent) -> serde_json::Value {
    match ev {
        SeqEvent::Gap { from, to, missing } => {
            serde_json::json!({"event": "gap", "from": from, "to": to, "missing": missing})
        }
        SeqEvent::Reset { from, to } => {
            serde_json::json!({"event": "reset", "from": from, "to": to})
        }
        SeqEvent::Backward { from, to } => {
            serde_json::json!({"event": "backward", "from": from, "to": to})
        }
        e => serde_json::json!({"event": e.name()}),
    }
}

fn out_err(e: std::io::Error) -> CliError {
    CliError::stdout(e)
}

fn decode_cmd(a: DecodeArgs) -> Result<(), CliError> {
    let items = read_inputs(&a.files, a.format)?;
    let mut tracker = SeqTracker::new();
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    let mut reject_log = match &a.rejects {
        Some(p) => Some(
            std::fs::OpenOptions::new()
                .create(true)
                .append(true)
                .open(p)
                .map_err(|e| CliError::Other(format!("{p}: {e}")))?,
        ),
        None => None,
    };
    let mut first_reject: Option<String> = None;
    if a.table {
        writeln!(
            out,
            "{:<16} {:>5} {:<8} {:>6} {:>6} {:>9} {:<22} detail",
            "source:line", "node", "frame", "seq", "flags", "speed", "sequence"
        )
        .map_err(out_err)?;
    }
    for item in &items {
        match decode_item(item) {
            Ok(frame) => {
                let (node, seq) = store::node_seq(&frame);
                // status frames count their own sequence: not link-tracked
                let bytes = item.bytes.as_deref().unwrap_or(&[]);
                let ev = if store::is_report(&frame) {
                    Some(tracker.observe(node, seq, bytes))
                } else {
                    tracker.observe_status(node, seq, bytes); // restart evidence
                    None
                };
                let ev_text = ev.as_ref().map_or("-".to_string(), |e| e.describe());
                if a.table {
                    let (kind, flags, speed, detail) = match &frame {
                        Frame::Full(r) => {
                            let worst = wire::frame::ReducedReport::from_report(r).worst;
                            (
                                "full",
                                r.flags.to_bits(),
                                format!("{:.2}", r.speed_rpm),
                                worst_text(worst),
                            )
                        }
                        Frame::Reduced(r) => (
                            "reduced",
                            r.flags.to_bits(),
                            "-".into(),
                            worst_text(r.worst),
                        ),
                        Frame::Status(r) => {
                            ("status", r.flags.to_bits(), "-".into(), status_text(r))
                        }
                    };
                    writeln!(
                        out,
                        "{:<16} {:>5} {:<8} {:>6} {:>#6x} {:>9} {:<22} {}",
                        format!("{}:{}", item.source, item.line),
                        node,
                        kind,
                        seq,
                        flags,
                        speed,
                        ev_text,
                        detail
                    )
                    .map_err(out_err)?;
                } else {
                    let v = match &ev {
                        Some(ev) => serde_json::json!({
                            "type": "report", "source": item.source, "line": item.line,
                            "rx_time": item.rx_time, "sequence": seq_json(ev), "report": frame,
                        }),
                        None => serde_json::json!({
                            "type": "status", "source": item.source, "line": item.line,
                            "rx_time": item.rx_time, "status": frame,
                        }),
                    };
                    writeln!(out, "{v}").map_err(out_err)?;
                }
            }
            Err(reason) => {
                let v = serde_json::json!({
                    "type": "reject", "source": item.source, "line": item.line,
                    "rx_time": item.rx_time, "text": item.text, "reason": reason,
                });
                if a.table {
                    writeln!(
                        out,
                        "{:<16} REJECT {}: {}",
                        format!("{}:{}", item.source, item.line),
                        reason,
                        item.text
                    )
                    .map_err(out_err)?;
                } else {
                    writeln!(out, "{v}").map_err(out_err)?;
                }
                if let Some(f) = reject_log.as_mut() {
                    writeln!(f, "{v}").map_err(|e| CliError::Other(format!("reject log: {e}")))?;
                }
                first_reject.get_or_insert(format!("{}:{}: {reason}", item.source, item.line));
            }
        }
    }
    out.flush().map_err(out_err)?;
    match first_reject {
        Some(r) if a.strict => Err(CliError::Input(format!("rejected frame(s), first at {r}"))),
        _ => Ok(()),
    }
}

fn status_text(r: &wire::frame::StatusReport) -> String {
    let name = |v: serde_json::Value| v.as_str().unwrap_or("?").to_string();
    format!(
        "counter {} last downlink {} refused {} band {:.0}-{:.0} Hz ({}{}) survey {}",
        r.downlink_counter,
        name(serde_json::json!(r.last_downlink)),
        r.refused_downlinks,
        r.band_hz[0],
        r.band_hz[1],
        name(serde_json::json!(r.band_source)),
        if r.band_kurtosis.is_finite() {
            format!(", kurtosis {:.2}", r.band_kurtosis)
        } else {
            String::new()
        },
        name(serde_json::json!(r.survey)),
    )
}

fn worst_text(w: Option<wire::frame::WorstDefect>) -> String {
    match w {
        Some(w) => format!(
            "worst: bearing {} {} {:.0} dB{}",
            w.bearing,
            w.kind.name(),
            w.score_db,
            if w.detected { " detected" } else { "" }
        ),
        None => "no bearings".into(),
    }
}

fn sql_err(e: db::DbError) -> CliError {
    CliError::Other(format!("database: {e}"))
}

fn import_cmd(a: ImportArgs) -> Result<(), CliError> {
    if a.batch_size == 0 {
        return Err(CliError::input("--batch-size", "must be at least 1"));
    }
    let items = read_inputs(&a.files, a.format)?;
    let mut conn = db::open(&a.db)?;
    // Seed the tracker with what is stored so events refer to the full history.
    let (mut tracker, _) = decided_order(conn.as_mut())?;
    let (mut new, mut known, mut rejected, mut new_rejects) = (0u64, 0u64, 0u64, 0u64);
    let mut events: Vec<String> = Vec::new();
    for batch in items.chunks(a.batch_size) {
        let uplinks: Vec<ingest::Uplink> = batch.iter().map(ingest::Uplink::from_item).collect();
        // The same path as `gateway serve`: one transaction per batch (on
        // SQLite BEGIN IMMEDIATE: the batch reads the band of the latest
        // status frame and writes; taking the write lock first lets a
        // concurrent importer wait instead of failing with "database is locked").
        let outcomes =
            ingest::store_batch(conn.as_mut(), &mut tracker, &uplinks).map_err(sql_err)?;
        for (o, item) in outcomes.iter().zip(batch) {
            match o {
                ingest::Outcome::New { frame, seq } => {
                    new += 1;
                    let (node, sq) = store::node_seq(frame);
                    if let Some(ev) = seq {
                        if !matches!(ev, SeqEvent::InOrder | SeqEvent::First) {
                            events.push(format!(
                                "{}:{}: node {node} seq {sq}: {}",
                                item.source,
                                item.line,
                                ev.describe()
                            ));
                        }
                    }
                }
                ingest::Outcome::Known { .. } => known += 1,
                ingest::Outcome::Rejected { reason, new } => {
                    rejected += 1;
                    if *new {
                        new_rejects += 1;
                    }
                    events.push(format!("{}:{}: rejected: {reason}", item.source, item.line));
                }
            }
        }
        if a.batch_pause_ms > 0 {
            std::thread::sleep(std::time::Duration::from_millis(a.batch_pause_ms));
        }
    }
    if a.verbose {
        for e in &events {
            println!("{e}");
        }
    }
    let gaps = events.iter().filter(|e| e.contains(": gap")).count();
    println!(
        "imported {new} new frame(s), {known} already stored, {rejected} rejected ({new_rejects} new in the reject table), {gaps} gap event(s); see `envord gateway status`"
    );
    Ok(())
}

fn status_cmd(a: StatusArgs) -> Result<(), CliError> {
    let gmap = match &a.map {
        Some(p) => Some(map::GatewayMap::load(p)?),
        None => None,
    };
    let mut conn = db::open_mode(&a.db, db::Mode::ReadOnly)?;
    let conn = conn.as_mut();
    let now = trend_cmd::now_ms(a.now.as_deref())?;
    let states: Vec<trend::DefectState> = trend_cmd::grade_db(conn, &a.db, now, None)?
        .into_iter()
        .map(|l| l.state)
        .collect();
    let (tracker, _) = decided_order(conn)?;
    let rejects = store::count(conn, "rejects").map_err(sql_err)?;
    let nodes = store::latest_status(conn).map_err(sql_err)?;
    let combined = gmap
        .as_ref()
        .map(|m| combine(m, &states))
        .unwrap_or_default();
    if a.json {
        let links: Vec<serde_json::Value> = tracker
            .stats()
            .iter()
            .map(|(n, s)| serde_json::json!({"node": n, "frames": s.frames, "missing": s.missing, "gaps": s.gaps, "duplicates": s.duplicates, "conflicts": s.conflicts, "resets": s.resets, "backward": s.backward, "last_seq": s.last}))
            .collect();
        let v = serde_json::json!({"defects": states, "bearings": bearing_states(&states), "physical": combined, "links": links, "nodes": nodes, "rejects": rejects});
        println!("{v}");
        return Ok(());
    }
    println!(
        "bearings (state = worst line; severity = amplitude over the baseline; limits: `envord gateway limits show`)"
    );
    println!(
        "{:>5} {:>7} {:<11} {:<5} {:>10} {:>10} {:>7} {:>9}  name",
        "node", "bearing", "state", "worst", "amp g", "baseline", "sev dB", "levels dB"
    );
    for b in bearing_states(&states) {
        let name = gmap
            .as_ref()
            .and_then(|m| m.name_of(b.node, b.bearing))
            .unwrap_or("-");
        let w = &b.worst;
        println!(
            "{:>5} {:>7} {:<11} {:<5} {:>10} {:>10} {:>7} {:>9}  {name}{}",
            b.node,
            b.bearing,
            w.state.label(),
            w.kind,
            fmt_g(w.amplitude_g),
            fmt_g(w.baseline_g),
            fmt_db(w.severity_db),
            format!("+{}/+{}", w.limits.alert_db, w.limits.danger_db),
            if w.stale && w.state != State::Stale {
                " (node silent: stale)"
            } else {
                ""
            }
        );
    }
    if !combined.is_empty() {
        println!("\nphysical bearings (sensors combined: worst latest amplitude, sensors detecting / sensors)");
        for p in &combined {
            println!("{:<9} {}", p.state.label(), p.name);
            for d in &p.defects {
                println!(
                    "          {:<5} worst {:>7}  detected by {}/{}  state {}",
                    d.kind,
                    fmt_g(d.worst_amplitude_g),
                    d.detecting,
                    p.sensors,
                    d.state.label()
                );
            }
        }
    }
    println!("\nlinks");
    println!(
        "{:>5} {:>8} {:>8} {:>5} {:>10} {:>9} {:>6} {:>8} {:>8}",
        "node",
        "frames",
        "missing",
        "gaps",
        "duplicates",
        "conflicts",
        "resets",
        "backward",
        "last_seq"
    );
    for (n, s) in tracker.stats() {
        println!(
            "{n:>5} {:>8} {:>8} {:>5} {:>10} {:>9} {:>6} {:>8} {:>8}",
            s.frames,
            s.missing,
            s.gaps,
            s.duplicates,
            s.conflicts,
            s.resets,
            s.backward,
            s.last.map_or("-".into(), |x| x.to_string())
        );
    }
    if !nodes.is_empty() {
        println!("\nnodes (latest status frame)");
        println!(
            "{:>5} {:>8} {:<17} {:>7} {:<15} {:<11} {:>17} {:>8}",
            "node",
            "counter",
            "last_downlink",
            "refused",
            "survey",
            "band_source",
            "band Hz",
            "kurtosis"
        );
        for n in &nodes {
            println!(
                "{:>5} {:>8} {:<17} {:>7} {:<15} {:<11} {:>17} {:>8}",
                n.node,
                n.downlink_counter,
                n.last_downlink,
                n.refused_downlinks,
                n.survey,
                n.band_source,
                format!("{:.0}-{:.0}", n.band_hz[0], n.band_hz[1]),
                n.band_kurtosis.map_or("-".into(), |k| format!("{k:.2}"))
            );
        }
    }
    println!("rejected inputs stored: {rejects}");
    Ok(())
}

/// Replays the stored history through a tracker: status frames first (the
/// restart evidence; the two tables keep no common arrival order), then the
/// reports in arrival order, giving each report id its decided place.
pub(crate) fn decided_order(
    conn: &mut dyn db::Db,
) -> Result<(SeqTracker, std::collections::HashMap<i64, seq::Order>), CliError> {
    ingest::decided_order(conn, SeqTracker::new(), None).map_err(sql_err)
}

fn fmt_db(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.1}"))
}

fn fmt_g(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3e}"))
}

/// State of one sensor channel (node + bearing index): its worst defect.
#[derive(Debug, serde::Serialize)]
pub struct BearingState {
    /// Node.
    pub node: u16,
    /// Bearing index.
    pub bearing: u8,
    /// The defect in the worst state (highest severity on ties).
    pub worst: trend::DefectState,
}

/// Worst defect state per (node, bearing).
pub fn bearing_states(states: &[trend::DefectState]) -> Vec<BearingState> {
    let mut out: Vec<BearingState> = Vec::new();
    for s in states {
        let key = |d: &trend::DefectState| (d.state, d.severity_db.unwrap_or(f64::NEG_INFINITY));
        match out
            .iter_mut()
            .find(|b| b.node == s.node && b.bearing == s.bearing)
        {
            Some(b) => {
                if key(s) > key(&b.worst) {
                    b.worst = s.clone();
                }
            }
            None => out.push(BearingState {
                node: s.node,
                bearing: s.bearing,
                worst: s.clone(),
            }),
        }
    }
    out
}

/// Combined view of one defect of a physical bearing.
#[derive(Debug, serde::Serialize)]
pub struct CombinedDefect {
    /// Defect kind name.
    pub kind: String,
    /// Worst latest amplitude over the sensors, g.
    pub worst_amplitude_g: Option<f64>,
    /// Sensors whose latest report detects this defect.
    pub detecting: usize,
    /// Worst state over the sensors.
    pub state: State,
}

/// Combined view of a physical bearing of the gateway map.
#[derive(Debug, serde::Serialize)]
pub struct CombinedBearing {
    /// Name from the map.
    pub name: String,
    /// Sensors mapped to it.
    pub sensors: usize,
    /// Worst state over sensors and defects.
    pub state: State,
    /// Per defect kind.
    pub defects: Vec<CombinedDefect>,
}

/// Combines the sensors of each physical bearing.
pub fn combine(m: &map::GatewayMap, states: &[trend::DefectState]) -> Vec<CombinedBearing> {
    m.bearing
        .iter()
        .map(|pb| {
            let defects: Vec<CombinedDefect> = DefectKind::ALL
                .iter()
                .map(|k| {
                    let mine: Vec<&trend::DefectState> = states
                        .iter()
                        .filter(|s| {
                            s.kind == k.name()
                                && pb.sensors.contains(&map::SensorRef {
                                    node: s.node,
                                    bearing: s.bearing,
                                })
                        })
                        .collect();
                    CombinedDefect {
                        kind: k.name().to_string(),
                        worst_amplitude_g: mine
                            .iter()
                            .filter_map(|s| s.amplitude_g)
                            .reduce(f64::max),
                        detecting: mine.iter().filter(|s| s.detected).count(),
                        state: mine.iter().map(|s| s.state).max().unwrap_or(State::NoData),
                    }
                })
                .collect();
            CombinedBearing {
                name: pb.name.clone(),
                sensors: pb.sensors.len(),
                state: defects
                    .iter()
                    .map(|d| d.state)
                    .max()
                    .unwrap_or(State::NoData),
                defects,
            }
        })
        .collect()
}

fn baseline_cmd(a: BaselineArgs) -> Result<(), CliError> {
    // a write to an existing store: a mistyped path is refused, not created
    drop(db::open_mode(&a.db, db::Mode::Existing)?);
    let kind = parse_kind(&a.defect)?;
    if a.bearing > 3 {
        return Err(CliError::input("--bearing", "bearing index must be 0..=3"));
    }
    if let Some(v) = a.amplitude_g {
        if !v.is_finite() || v <= 0.0 {
            return Err(CliError::input(
                "--amplitude-g",
                "must be a positive amplitude in g",
            ));
        }
    }
    let row = limits::LimitRow {
        node: Some(a.node),
        bearing: Some(a.bearing),
        kind: Some(kind.name().to_string()),
        // 0 clears the hand-set baseline: back to learning
        baseline_g: Some(a.amplitude_g.unwrap_or(0.0)),
        origin: "command".into(),
        ..limits::LimitRow::default()
    };
    limits_cmd::store_row(&a.db, &row)?;
    match a.amplitude_g {
        Some(x) => println!(
            "baseline of node {} bearing {} {} set to {x} g",
            a.node,
            a.bearing,
            kind.name()
        ),
        None => println!(
            "baseline of node {} bearing {} {} cleared (learned from quiet reports again)",
            a.node,
            a.bearing,
            kind.name()
        ),
    }
    Ok(())
}
