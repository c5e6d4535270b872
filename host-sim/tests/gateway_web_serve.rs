//! The dashboard served by `envord gateway serve` (its `[web]` section) in
//! a real headless Chromium, over a store the service fills from the MQTT
//! replay of tests/serve_common (real Mosquitto; PostgreSQL from
//! .ci/services.sh): the fleet page shows the states `gateway status`
//! prints for the same store, a bearing page draws as many points as
//! `gateway trend` lists, no session gets the login page, a viewer cannot
//! acknowledge, a form without its CSRF token is refused. Run by
//! `.ci/browser.sh --service` (under .ci/services.sh); a server or browser
//! that cannot start FAILS it.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

#[path = "serve_common/mod.rs"]
mod serve_common;

use serve_common::{
    check_exact, day_stream, free_port, pg_database, publish, wait_stored, Broker, Gateway, GwSpec,
    BIN,
};
use std::io::Write;
use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

const MAP: &str = r#"
[[bearing]]
name = "KL-2 crusher drive, motor end"
sensors = [{ node = 0, bearing = 0 }, { node = 1, bearing = 1 }]
[[bearing]]
name = "KL-2 crusher drive, gearbox input"
sensors = [{ node = 7, bearing = 0 }]
[[bearing]]
name = "KL-2 return idler (not fitted)"
sensors = [{ node = 40, bearing = 0 }]
"#;

fn envord(args: &[&str], store: &str, cwd: &Path) -> Output {
    Command::new(BIN)
        .args(args)
        .args(["--db", store])
        .current_dir(cwd)
        .output()
        .unwrap()
}

fn add_user(dir: &Path, name: &str, role: &str, pass: &str) {
    let mut c = Command::new(BIN)
        .args([
            "gateway",
            "user",
            "add",
            "--users",
            "users.toml",
            "--name",
            name,
            "--role",
            role,
        ])
        .current_dir(dir)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    c.stdin
        .take()
        .unwrap()
        .write_all(format!("{pass}\n").as_bytes())
        .unwrap();
    let o = c.wait_with_output().unwrap();
    assert!(
        o.status.success(),
        "user add: {}",
        String::from_utf8_lossy(&o.stderr)
    );
}

fn chromium() -> String {
    for c in ["chromium", "chromium-browser"] {
        if Command::new(c)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
        {
            return c.into();
        }
    }
    panic!("Chromium is not installed (apt-get install -y chromium; .ci/browser.sh does it): the browser test cannot run");
}

/// Page state names: status's JSON spells these differently.
fn page_state(s: &str) -> String {
    match s {
        "not_covered" | "no_data" => "notcovered".into(),
        s => s.to_string(),
    }
}

fn service_filled_dashboard(label: &str, store: &str, dir: &Path) {
    let browser = chromium();
    let t0 = Instant::now();
    std::fs::write(dir.join("map.toml"), MAP).unwrap();
    add_user(dir, "ines", "operator", "kiln-shift-4");
    add_user(dir, "pavel", "viewer", "kiln-view-9");
    let broker = Broker::start(dir);
    let web_port = free_port();
    let extra = format!(
        "\n[web]\nlisten = \"127.0.0.1:{web_port}\"\nusers = {:?}\nmap = {:?}\nrefresh_s = 2\n",
        dir.join("users.toml").to_string_lossy(),
        dir.join("map.toml").to_string_lossy()
    );
    let gw = Gateway::start(
        dir,
        "gw-web",
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-web",
            topics: &["plant/+/up"],
            store,
            raw: false,
            alarm_topic: None,
            extra: &extra,
            alarms_extra: "eval_ms = 500\n",
        },
    );
    // 20 nodes x 144 slots: nodes 0..4 ramp into danger, node 7 a sensor
    // fault, gaps, duplicates, corrupt messages (serve_common::day_stream)
    let s = day_stream(20, 144, false, "plant");
    publish(broker.port, &s.messages, 1000, |_| {});
    wait_stored(store, s.reports.len() + s.statuses.len() + s.bad, 120);
    let (reports, statuses, rejects) = check_exact(store, &s);
    // the service's alarm evaluation records the line changes (every 500 ms)
    let t = Instant::now();
    while !gw.log_text().contains("alarm change") && t.elapsed() < Duration::from_secs(30) {
        std::thread::sleep(Duration::from_millis(200));
    }
    std::thread::sleep(Duration::from_secs(2));

    // What the terminal commands print for the same store.
    let o = envord(
        &["gateway", "status", "--map", "map.toml", "--json"],
        store,
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let status: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let o = envord(
        &["gateway", "trend", "--node", "0", "--bearing", "0"],
        store,
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let trend_rows = String::from_utf8_lossy(&o.stdout)
        .lines()
        .filter(|l| {
            l.split_whitespace()
                .next()
                .is_some_and(|w| w.parse::<i64>().is_ok())
        })
        .count();
    assert!(trend_rows > 50, "{trend_rows} trend rows");

    // The dashboard of the same process.
    let t = Instant::now();
    while std::net::TcpStream::connect(("127.0.0.1", web_port)).is_err() {
        assert!(
            t.elapsed() < Duration::from_secs(60),
            "the dashboard of gateway serve did not listen on 127.0.0.1:{web_port} in 60 s:\n{}",
            gw.log_text()
        );
        std::thread::sleep(Duration::from_millis(100));
    }
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/browser/drive.mjs");
    let o = Command::new("node")
        .arg("--experimental-websocket")
        .arg("--no-warnings")
        .arg(&script)
        .env("BASE", format!("http://127.0.0.1:{web_port}"))
        .env("CHROMIUM", &browser)
        .env("SHOTS", "")
        .env("OP_USER", "ines")
        .env("OP_PASS", "kiln-shift-4")
        .env("VIEW_USER", "pavel")
        .env("VIEW_PASS", "kiln-view-9")
        .env("BEARING_PATH", "/bearing/0/0")
        .env("NODE", "0")
        .output()
        .expect("node (Node.js) must be installed to drive Chromium");
    assert!(
        o.status.success(),
        "the browser run failed: {}{}",
        String::from_utf8_lossy(&o.stderr),
        String::from_utf8_lossy(&o.stdout)
    );
    let v: serde_json::Value =
        serde_json::from_str(String::from_utf8_lossy(&o.stdout).trim()).unwrap();

    assert_eq!(
        v["unauth"]["hasLogin"], true,
        "no session: the login page; {v}"
    );
    assert_eq!(v["afterLogin"], "/");
    // Fleet == `gateway status` (every channel's worst state).
    let mut want: Vec<(u64, u64, String)> = status["bearings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| {
            (
                b["node"].as_u64().unwrap(),
                b["bearing"].as_u64().unwrap(),
                page_state(b["worst"]["state"].as_str().unwrap()),
            )
        })
        .collect();
    let mut got: Vec<(u64, u64, String)> = v["fleet"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            (
                r["node"].as_u64().unwrap(),
                r["bearing"].as_u64().unwrap(),
                r["state"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    want.sort();
    got.sort();
    assert_eq!(got.len(), 40, "20 nodes x 2 bearings on the fleet page");
    assert_eq!(got, want, "fleet page vs gateway status ({label})");
    assert!(got.iter().any(|g| g.2 == "danger"), "{got:?}");
    let mut phys: Vec<(String, String)> = status["physical"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            (
                p["name"].as_str().unwrap().to_string(),
                page_state(p["state"].as_str().unwrap()),
            )
        })
        .collect();
    let mut gotp: Vec<(String, String)> = v["physical"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            (
                p["name"].as_str().unwrap().to_string(),
                p["state"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    phys.sort();
    gotp.sort();
    assert_eq!(
        gotp, phys,
        "physical bearings vs gateway status --map ({label})"
    );
    // Bearing page: node 0 bearing 0 draws as many points as `gateway trend` lists.
    let series = v["bearing"].as_array().unwrap();
    let mine: Vec<&serde_json::Value> = series.iter().filter(|s| s["sensor"] == "0-0").collect();
    let points: u64 = mine.iter().map(|s| s["points"].as_u64().unwrap()).sum();
    let drawn: u64 = mine.iter().map(|s| s["drawn"].as_u64().unwrap()).sum();
    assert_eq!(
        points as usize, trend_rows,
        "page points vs gateway trend rows"
    );
    assert_eq!(
        drawn as usize, trend_rows,
        "drawn points vs gateway trend rows"
    );
    assert!(
        series.iter().any(|s| s["sensor"] == "1-1"),
        "the mesh's second sensor"
    );
    // Events (recorded by the service), CSRF and roles.
    assert!(v["events"].as_u64().unwrap() >= 5, "{v}");
    assert!(
        v["forged"]
            .as_str()
            .unwrap()
            .contains("CSRF token is missing or wrong"),
        "{}",
        v["forged"]
    );
    assert!(
        v["ackNotice"]
            .as_str()
            .unwrap()
            .contains("acknowledged by ines"),
        "{}",
        v["ackNotice"]
    );
    assert_eq!(v["viewer"]["ackButtons"], 0);
    assert!(
        v["viewer"]["ackResult"]
            .as_str()
            .unwrap()
            .contains("needs the operator role"),
        "{}",
        v["viewer"]
    );
    gw.stop();
    println!(
        "dashboard in gateway serve, {label}: {reports} reports + {statuses} status, {rejects} rejects from {} messages; {} channels == gateway status, {trend_rows} trend points; {:.1} s",
        s.messages.len(),
        got.len(),
        t0.elapsed().as_secs_f64()
    );
}

#[test]
fn served_dashboard_sqlite() {
    let dir = tempfile::tempdir().unwrap();
    let store = dir.path().join("gw.sqlite").to_string_lossy().into_owned();
    service_filled_dashboard("SQLite", &store, dir.path());
}

#[test]
fn served_dashboard_postgres() {
    let dir = tempfile::tempdir().unwrap();
    let store = pg_database("envord_web_serve");
    service_filled_dashboard("PostgreSQL", &store, dir.path());
}
