//! Page times of `envord gateway web` on a large generated SQLite store:
//! 500 nodes x 2,000 reports (1,000,000 reports, 8,000,000 defect rows, two
//! bearings of four kinds each), one report per node every 263 min (a year),
//! a status frame every 100 reports, a developing fault on every 20th node.
//! Prints figures only; nothing is asserted.
//!
//! ```text
//! cargo run --release --example web_bench [-- STORE.sqlite]
//! ```
//!
//! With a path the store is kept (and reused when it exists); the runs
//! without indexes use a copy beside it, removed afterwards.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    missing_docs
)]

use host_sim::gateway::map::GatewayMap;
use host_sim::gateway::web::auth::{Role, Session, Users};
use host_sim::gateway::web::{clock, data::SqliteWeb, App, WebConfig};
use std::time::Instant;

const NODES: u16 = 500;
const PER_NODE: u32 = 2_000;
const STEP_MS: i64 = 263 * 60_000;

fn generate(path: &str) {
    let conn = host_sim::gateway::store::open(path).unwrap();
    conn.execute_batch("PRAGMA synchronous = OFF;").unwrap();
    let t0 = clock::now_ms() - i64::from(PER_NODE) * STEP_MS;
    let start = Instant::now();
    conn.execute_batch("BEGIN").unwrap();
    {
        let mut rep = conn
            .prepare("INSERT INTO reports (node_id, seq, frame_type, payload, rx_time, source, line, flags, speed_rpm, json)
                      VALUES (?1, ?2, 'full', ?3, ?4, 'bench', ?5, 0, 1480.0, '{\"version\":1}')")
            .unwrap();
        let mut def = conn
            .prepare("INSERT INTO defects (report_id, bearing, kind, score_db, amplitude_1x_g, harmonics, detected)
                      VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)")
            .unwrap();
        let mut st = conn
            .prepare("INSERT INTO node_status (node_id, seq, payload, rx_time, source, line, flags, downlink_counter,
                        last_downlink, refused_downlinks, survey, band_source, band_lo_hz, band_hi_hz, band_kurtosis, json)
                      VALUES (?1, ?2, ?3, ?4, 'bench', 0, 0, 3, 'config_applied', 0, 'stored', 'survey', ?5, ?6, 5.0, '{}')")
            .unwrap();
        // Time-major order, as a gateway receives them.
        let mut line = 0i64;
        for i in 0..PER_NODE {
            for n in 0..NODES {
                let t = t0 + i64::from(i) * STEP_MS + i64::from(n) * 1000;
                let rx = clock::rfc3339(t);
                let seq = (i % 65_536) as u16;
                line += 1;
                rep.execute(rusqlite::params![
                    n,
                    seq,
                    [n.to_be_bytes(), seq.to_be_bytes()].concat(),
                    rx,
                    line
                ])
                .unwrap();
                let id = conn.last_insert_rowid();
                let faulty = n % 20 == 0 && i > PER_NODE / 2;
                for b in 0..2u8 {
                    for (k, kind) in ["bpfo", "bpfi", "ftf", "bsf"].iter().enumerate() {
                        let wobble = ((i * 7 + u32::from(n) * 3 + k as u32) % 11) as f64 * 0.2;
                        let mut s = 4.0 + k as f64 + wobble;
                        if faulty && b == 0 && k == 0 {
                            s += f64::from(i - PER_NODE / 2) * 0.02;
                        }
                        def.execute(rusqlite::params![
                            id,
                            b,
                            kind,
                            s,
                            0.002 * 10f64.powf(s / 20.0),
                            1,
                            s > 14.0
                        ])
                        .unwrap();
                    }
                }
                if i % 100 == 0 {
                    let lo = if i < PER_NODE / 2 { 2000.0 } else { 2519.842 };
                    st.execute(rusqlite::params![
                        n,
                        i / 100,
                        [n.to_be_bytes(), seq.to_be_bytes()].concat(),
                        rx,
                        lo,
                        lo * 2.0
                    ])
                    .unwrap();
                }
            }
        }
    }
    conn.execute_batch("COMMIT").unwrap();
    println!(
        "generated {path}: {} reports, {} defect rows in {:.1} s",
        NODES as u32 * PER_NODE,
        NODES as u32 * PER_NODE * 8,
        start.elapsed().as_secs_f64()
    );
}

fn map() -> GatewayMap {
    let mut t = String::new();
    for n in 0..NODES {
        for b in 0..2 {
            t.push_str(&format!("[[bearing]]\nname = \"line {} drive {n} bearing {b}\"\nsensors = [{{ node = {n}, bearing = {b} }}]\n", n / 50));
        }
    }
    GatewayMap::parse("bench map", &t).unwrap()
}

fn time_pages(app: &App, s: &Session, label: &str, pages: &[(&str, &str, &str)]) {
    println!("\n{label}");
    println!(
        "{:<28} {:>9} {:>9} {:>9} {:>10}",
        "page", "first ms", "median ms", "max ms", "bytes"
    );
    for (name, path, query) in pages {
        let mut ms = Vec::new();
        let mut bytes = 0;
        for _ in 0..5 {
            let t = Instant::now();
            let (_, body) = app.render(path, query, s).unwrap().unwrap();
            ms.push(t.elapsed().as_secs_f64() * 1000.0);
            bytes = body.len();
        }
        let first = ms[0];
        ms.sort_by(f64::total_cmp);
        println!(
            "{name:<28} {first:>9.1} {:>9.1} {:>9.1} {bytes:>10}",
            ms[2], ms[4]
        );
    }
}

fn main() {
    let arg = std::env::args().nth(1);
    let dir = tempfile::tempdir().unwrap();
    let path = arg.unwrap_or_else(|| {
        dir.path()
            .join("bench.sqlite")
            .to_string_lossy()
            .into_owned()
    });
    if !std::path::Path::new(&path).exists() {
        generate(&path);
    }
    let cfg = || WebConfig {
        users: Users::default(),
        map: Some(map()),
        secure_cookie: false,
        stale_after_ms: 3 * 3_600_000,
    };
    let s = Session {
        user: "bench".into(),
        role: Role::Operator,
        csrf: "x".into(),
        expires_ms: i64::MAX,
    };
    let t = Instant::now();
    let app = App::new(cfg(), Box::new(SqliteWeb::open(&path).unwrap())).unwrap();
    println!(
        "start-up (one pass over the store into the summary, alarm events derived): {:.0} ms",
        t.elapsed().as_secs_f64() * 1000.0
    );
    let pages = [
        ("fleet (1000 channels)", "/", ""),
        ("fleet, danger only", "/", "state=danger"),
        ("bearing node 0 b0", "/bearing/0/0", ""),
        ("bearing node 250 b1", "/bearing/250/1", ""),
        ("node 0", "/node/0", ""),
        ("alarm events", "/events", ""),
        ("export fleet.csv", "/export/fleet.csv", ""),
        ("export fleet.json", "/export/fleet.json", ""),
        (
            "export trend.csv node 0 b0",
            "/export/trend.csv",
            "node=0&bearing=0",
        ),
    ];
    time_pages(&app, &s, "SQLite, schema with migration 4 indexes", &pages);
    postgres_note();
    // One new report per node since start-up: what a refresh costs.
    drop(app);
    let c = rusqlite::Connection::open(&path).unwrap();
    for (name, sql) in [
        ("reports of one sensor", "EXPLAIN QUERY PLAN SELECT r.id FROM reports r CROSS JOIN defects d ON d.report_id = r.id AND d.bearing = 0 WHERE r.node_id = 7 ORDER BY r.id, d.kind"),
        ("status frames of one node", "EXPLAIN QUERY PLAN SELECT id FROM node_status WHERE node_id = 7 ORDER BY id"),
        ("latest status per node", "EXPLAIN QUERY PLAN SELECT node_id FROM node_status WHERE id IN (SELECT MAX(id) FROM node_status GROUP BY node_id)"),
        ("event already stored?", "EXPLAIN QUERY PLAN SELECT 1 FROM alarm_events WHERE report_id = 5 AND node_id = 1 AND bearing = '0' AND kind = 'bpfo' AND event = 'enter' AND state_to = 'alert'"),
    ] {
        let mut st = c.prepare(sql).unwrap();
        let plan: Vec<String> = st.query_map([], |r| r.get::<_, String>(3)).unwrap().map(Result::unwrap).collect();
        println!("plan, {name}: {}", plan.join(" / "));
    }
    // Without the dashboard's indexes (migration 4) and without reports_by_node
    // (v3), on a copy: never drop indexes of a store the caller named.
    let copy = format!("{path}.noidx");
    std::fs::copy(&path, &copy).unwrap();
    let path = copy;
    c.execute_batch(
        "DROP INDEX IF EXISTS node_status_by_node; DROP INDEX IF EXISTS alarm_events_by_report;",
    )
    .unwrap();
    drop(c);
    let app = App::new(
        cfg(),
        Box::new(SqliteWeb::from_connection(
            rusqlite::Connection::open(&path).unwrap(),
        )),
    )
    .unwrap();
    time_pages(
        &app,
        &s,
        "SQLite without migration 4's indexes",
        &pages[2..6],
    );
    drop(app);
    let c = rusqlite::Connection::open(&path).unwrap();
    c.execute_batch("DROP INDEX IF EXISTS reports_by_node;")
        .unwrap();
    drop(c);
    let app = App::new(
        cfg(),
        Box::new(SqliteWeb::from_connection(
            rusqlite::Connection::open(&path).unwrap(),
        )),
    )
    .unwrap();
    time_pages(
        &app,
        &s,
        "SQLite without reports_by_node (schema v3's index) either",
        &pages[2..5],
    );
}

fn postgres_note() {
    println!("\nPostgreSQL: not measured (no PostgreSQL store behind the dashboard's WebStore trait in this build).");
}
