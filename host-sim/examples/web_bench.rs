//! Page times of `envord gateway web` on a large generated store: 500 nodes
//! x 2,000 reports (1,000,000 reports, 8,000,000 defect rows, two bearings
//! of four kinds each), one report per node every 263 min (a year), a
//! status frame every 100 reports, a developing fault on every 20th node.
//! Measured on SQLite and, when `ENVORD_TEST_PG_URL` names a PostgreSQL
//! database (`.ci/services.sh` starts one), on a copy of the same rows in
//! PostgreSQL. Also times the refresh after new reports (the graded state
//! is kept; only nodes with new reports are graded again). Prints figures
//! only; nothing is asserted.
//!
//! ```text
//! .ci/services.sh cargo run --release -p host-sim --example web_bench [-- STORE.sqlite]
//! ```
//!
//! With a path the store is kept (and reused when it exists); the run
//! without the dashboard's indexes uses a copy beside it, removed afterwards.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    missing_docs
)]

use host_sim::gateway::db::{self, Db, Val};
use host_sim::gateway::map::GatewayMap;
use host_sim::gateway::web::auth::{Role, Session, Users};
use host_sim::gateway::web::{clock, data::StoreWeb, App, WebConfig};
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

const PAGES: [(&str, &str, &str); 9] = [
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

fn cfg() -> WebConfig {
    WebConfig {
        users: Users::default(),
        map: Some(map()),
        secure_cookie: false,
        stale_after_ms: 3 * 3_600_000,
        record_events: true,
    }
}

fn session() -> Session {
    Session {
        user: "bench".into(),
        role: Role::Operator,
        csrf: "x".into(),
        expires_ms: i64::MAX,
    }
}

/// Stores one new report (8 defect rows) for each of `nodes` through the
/// store trait (what the service's ingest adds between two page views).
fn add_reports(db: &mut dyn Db, nodes: &[u16], round: u16) {
    let now = clock::now_ms();
    db.begin().unwrap();
    for &n in nodes {
        let seq = 2_000 + round;
        let r = db
            .query(
                "INSERT INTO reports (node_id, seq, frame_type, payload, rx_time, rx_time_ms, source, line, flags, speed_rpm, json)
                 VALUES (?1, ?2, 'full', ?3, ?4, ?5, 'bench', 0, 0, 1480.0, '{}') RETURNING id",
                &[
                    n.into(),
                    seq.into(),
                    Val::Blob([n.to_be_bytes(), seq.to_be_bytes()].concat()),
                    clock::rfc3339(now).into(),
                    now.into(),
                ],
            )
            .unwrap();
        let id = r[0][0].int("id").unwrap();
        for b in 0..2u8 {
            for kind in ["bpfo", "bpfi", "ftf", "bsf"] {
                db.execute(
                    "INSERT INTO defects (report_id, bearing, kind, score_db, amplitude_1x_g, harmonics, detected)
                     VALUES (?1, ?2, ?3, 5.0, 0.0036, 1, 0)",
                    &[id.into(), b.into(), kind.into()],
                )
                .unwrap();
            }
        }
    }
    db.commit().unwrap();
}

/// Start-up, every page, then the refresh after new reports.
fn run(label: &str, url: &str) {
    let s = session();
    let t = Instant::now();
    let app = App::new(cfg(), Box::new(StoreWeb::open(url).unwrap())).unwrap();
    println!(
        "\n{label}: start-up (one pass over the store, every node graded, alarm events derived): {:.0} ms",
        t.elapsed().as_secs_f64() * 1000.0
    );
    time_pages(
        &app,
        &s,
        &format!("{label}, pages (graded state kept)"),
        &PAGES,
    );
    println!("\n{label}, after new reports (render = refresh of the new reports' nodes + page)");
    println!(
        "{:<40} {:>10} {:>8} {:>14}",
        "new reports", "fleet ms", "graded", "next fleet ms"
    );
    let mut w = db::open(url).unwrap();
    for (round, nodes) in [
        vec![7u16],
        (0..10u16).map(|n| n * 50).collect(),
        (0..50u16).map(|n| n * 10).collect::<Vec<u16>>(),
    ]
    .iter()
    .enumerate()
    {
        add_reports(w.as_mut(), nodes, round as u16);
        let t = Instant::now();
        let r = app.refresh(clock::now_ms()).unwrap();
        app.render("/", "", &s).unwrap().unwrap();
        let ms = t.elapsed().as_secs_f64() * 1000.0;
        let t = Instant::now();
        app.render("/", "", &s).unwrap().unwrap();
        let next = t.elapsed().as_secs_f64() * 1000.0;
        println!(
            "{:<40} {ms:>10.1} {:>8} {next:>14.1}",
            format!("1 report on each of {} node(s)", nodes.len()),
            r.nodes_graded
        );
    }
    // the bench's new reports are left out of the next run's store
    w.execute("DELETE FROM alarm_events", &[]).unwrap();
    w.execute(
        "DELETE FROM defects WHERE report_id IN (SELECT id FROM reports WHERE source = 'bench' AND line = 0)",
        &[],
    )
    .unwrap();
    w.execute(
        "DELETE FROM reports WHERE source = 'bench' AND line = 0",
        &[],
    )
    .unwrap();
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
    run("SQLite", &path);
    let c = rusqlite::Connection::open(&path).unwrap();
    for (name, sql) in [
        ("one node's points (regrade)", "EXPLAIN QUERY PLAN SELECT r.id FROM defects d JOIN reports r ON r.id = d.report_id WHERE 1 = 1 AND r.node_id IN (7) ORDER BY r.id, d.bearing, d.kind"),
        ("reports of one sensor", "EXPLAIN QUERY PLAN SELECT r.id FROM reports r CROSS JOIN defects d ON d.report_id = r.id AND d.bearing = 0 WHERE r.node_id = 7 ORDER BY r.id, d.kind"),
        ("new reports", "EXPLAIN QUERY PLAN SELECT r.id FROM reports r LEFT JOIN defects d ON d.report_id = r.id WHERE r.id > 5 AND r.id <= 9 ORDER BY r.id, d.bearing, d.kind"),
        ("status frames of one node", "EXPLAIN QUERY PLAN SELECT id FROM node_status WHERE node_id = 7 ORDER BY id"),
        ("latest status per node", "EXPLAIN QUERY PLAN SELECT node_id FROM node_status WHERE id IN (SELECT MAX(id) FROM node_status GROUP BY node_id)"),
    ] {
        let mut st = c.prepare(sql).unwrap();
        let plan: Vec<String> = st.query_map([], |r| r.get::<_, String>(3)).unwrap().map(Result::unwrap).collect();
        println!("SQLite plan, {name}: {}", plan.join(" / "));
    }
    drop(c);
    match std::env::var("ENVORD_TEST_PG_URL") {
        Ok(url) => postgres(&path, &url),
        Err(_) => println!(
            "\nPostgreSQL: not measured (ENVORD_TEST_PG_URL unset; run under .ci/services.sh)"
        ),
    }
    // Without reports_by_node (the index every per-node read and the
    // regrade lead with), on a copy: never drop indexes of a store the
    // caller named.
    let copy = format!("{path}.noidx");
    // VACUUM INTO: a consistent copy (a file copy can miss pages in the WAL)
    let _ = std::fs::remove_file(&copy);
    rusqlite::Connection::open(&path)
        .unwrap()
        .execute_batch(&format!("VACUUM INTO '{copy}'"))
        .unwrap();
    let c = rusqlite::Connection::open(&copy).unwrap();
    c.execute_batch(
        "DROP INDEX IF EXISTS reports_by_node; DROP INDEX IF EXISTS node_status_by_node;",
    )
    .unwrap();
    drop(c);
    let s = session();
    let mut w = db::open(&copy).unwrap();
    let app = App::new(cfg(), Box::new(StoreWeb::open(&copy).unwrap())).unwrap();
    time_pages(
        &app,
        &s,
        "SQLite without reports_by_node and node_status_by_node",
        &PAGES[2..5],
    );
    add_reports(w.as_mut(), &[7], 0);
    let t = Instant::now();
    app.render("/", "", &s).unwrap().unwrap();
    println!(
        "fleet after 1 new report (node 7 graded again): {:.1} ms",
        t.elapsed().as_secs_f64() * 1000.0
    );
    drop(app);
    let _ = std::fs::remove_file(&copy);
}

/// Copies the generated rows into PostgreSQL (COPY, schema by the gateway's
/// own migrations), then runs the same measurements.
fn postgres(path: &str, url: &str) {
    let mut pg = postgres::Client::connect(url, postgres::NoTls).unwrap();
    pg.batch_execute("DROP SCHEMA public CASCADE; CREATE SCHEMA public;")
        .unwrap();
    drop(db::open(url).unwrap()); // creates the schema (migrations)
    let c = rusqlite::Connection::open(path).unwrap();
    let t = Instant::now();
    for table in ["reports", "defects", "node_status"] {
        let cols: Vec<String> = c
            .prepare(&format!("SELECT name FROM pragma_table_info('{table}')"))
            .unwrap()
            .query_map([], |r| r.get(0))
            .unwrap()
            .map(Result::unwrap)
            .collect();
        let list = cols.join(", ");
        let mut w = pg
            .copy_in(&format!("COPY {table} ({list}) FROM STDIN"))
            .unwrap();
        let mut st = c.prepare(&format!("SELECT {list} FROM {table}")).unwrap();
        let mut rows = st.query([]).unwrap();
        let mut buf = String::new();
        while let Some(r) = rows.next().unwrap() {
            for i in 0..cols.len() {
                if i > 0 {
                    buf.push('\t');
                }
                use rusqlite::types::ValueRef as V;
                match r.get_ref(i).unwrap() {
                    V::Null => buf.push_str("\\N"),
                    V::Integer(v) => buf.push_str(&v.to_string()),
                    V::Real(v) => buf.push_str(&format!("{v:?}")),
                    V::Text(t) => {
                        for ch in String::from_utf8_lossy(t).chars() {
                            match ch {
                                '\\' => buf.push_str("\\\\"),
                                '\t' => buf.push_str("\\t"),
                                '\n' => buf.push_str("\\n"),
                                '\r' => buf.push_str("\\r"),
                                c => buf.push(c),
                            }
                        }
                    }
                    V::Blob(b) => {
                        buf.push_str("\\\\x");
                        for x in b {
                            buf.push_str(&format!("{x:02x}"));
                        }
                    }
                }
            }
            buf.push('\n');
            if buf.len() > 1 << 20 {
                std::io::Write::write_all(&mut w, buf.as_bytes()).unwrap();
                buf.clear();
            }
        }
        std::io::Write::write_all(&mut w, buf.as_bytes()).unwrap();
        w.finish().unwrap();
        if cols.iter().any(|c| c == "id") {
            pg.batch_execute(&format!(
                "SELECT setval(pg_get_serial_sequence('{table}', 'id'), (SELECT MAX(id) FROM {table}))"
            ))
            .unwrap();
        }
    }
    pg.batch_execute("ANALYZE").unwrap();
    println!(
        "\nPostgreSQL {}: copied the same rows in {:.1} s",
        pg.query_one("SHOW server_version", &[])
            .unwrap()
            .get::<_, String>(0),
        t.elapsed().as_secs_f64()
    );
    run("PostgreSQL", url);
    for (name, sql) in [
        ("one node's points (regrade)", "EXPLAIN SELECT r.id FROM defects d JOIN reports r ON r.id = d.report_id WHERE 1 = 1 AND r.node_id IN (7) ORDER BY r.id, d.bearing, d.kind"),
        ("reports of one sensor", "EXPLAIN SELECT r.id FROM reports r JOIN defects d ON d.report_id = r.id AND d.bearing = 0 WHERE r.node_id = 7 ORDER BY r.id, d.kind"),
        ("status frames of one node", "EXPLAIN SELECT id FROM node_status WHERE node_id = 7 ORDER BY id"),
    ] {
        let plan: Vec<String> = pg
            .query(sql, &[])
            .unwrap()
            .iter()
            .map(|r| r.get::<_, String>(0).trim().to_string())
            .collect();
        println!("PostgreSQL plan, {name}: {}", plan.join(" / "));
    }
}
