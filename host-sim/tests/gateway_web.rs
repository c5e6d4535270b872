//! `envord gateway web` in a real headless Chromium (DevTools protocol,
//! host-sim/tests/browser/drive.mjs) over a store filled by `gateway import`:
//! the fleet page shows the states `gateway status` prints, a bearing page
//! draws as many points as `gateway trend` lists, no session gets the login
//! page, a viewer cannot acknowledge, a form without its CSRF token is
//! refused. Chromium missing or not starting FAILS this test (.ci/browser.sh
//! installs it).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing
)]
#![allow(clippy::cast_possible_truncation, missing_docs)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::{hex, run, stdout, BIN};
use host_sim::gateway::web::clock;
use std::io::{Read, Write};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};
use wire::frame::{encode, BearingResult, DefectResult, FrameReport};

/// A full frame with per-bearing BPFO scores (other kinds quiet).
fn frame(node: u16, seq: u16, bpfo: &[f32], low_battery: bool) -> Vec<u8> {
    let mut r = FrameReport {
        node_id: node,
        seq,
        speed_rpm: 1480.0,
        ..FrameReport::default()
    };
    r.flags.low_battery = low_battery;
    for (b, s) in bpfo.iter().enumerate() {
        let mut br = BearingResult::default();
        for (k, d) in br.defects.iter_mut().enumerate() {
            let score = if k == 0 {
                *s
            } else {
                2.0 + k as f32 + 0.1 * b as f32
            };
            *d = DefectResult {
                score_db: score,
                amplitude_1x_g: 0.002 * 10f32.powf(score / 20.0),
                harmonics: if k == 0 && *s > 14.0 { 3 } else { 1 },
                detected: k == 0 && *s > 14.0,
            };
        }
        r.bearings.push(br).unwrap();
    }
    let mut buf = [0u8; 96];
    let n = encode(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

fn status_frame(node: u16, seq: u16, band: [f32; 2], refused: u8) -> Vec<u8> {
    use wire::frame::status::{
        encode_status, BandSource, DownlinkResult, StatusReport, SurveyStatus,
    };
    let r = StatusReport {
        node_id: node,
        seq,
        provisioned: true,
        downlink_counter: 4,
        last_downlink: if refused > 0 {
            DownlinkResult::BadTag
        } else {
            DownlinkResult::ConfigApplied
        },
        refused_downlinks: refused,
        survey: SurveyStatus::Stored,
        band_source: BandSource::Survey,
        band_hz: band,
        band_kurtosis: 5.5,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 32];
    let n = encode_status(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

const MAP: &str = r#"
[[bearing]]
name = "CV-7 reducer, intermediate shaft, drive end"
sensors = [{ node = 3, bearing = 0 }, { node = 4, bearing = 1 }]
[[bearing]]
name = "CV-7 reducer, input shaft, drive end"
sensors = [{ node = 3, bearing = 1 }]
[[bearing]]
name = "CV-7 reducer, output shaft, non-drive end"
sensors = [{ node = 7, bearing = 0 }]
[[bearing]]
name = "CV-7 tail pulley, south side"
sensors = [{ node = 9, bearing = 0 }]
[[bearing]]
name = "CV-7 take-up pulley"
sensors = [{ node = 12, bearing = 0 }]
"#;

/// Uplink lines of the invented CV-7 conveyor (Corrin Vale quarry): an
/// outer-race defect developing on the intermediate shaft (nodes 3 and 4),
/// the output shaft steady (node 7, one lost frame), the tail pulley's node
/// new and silent for two days (node 9), the take-up pulley not yet fitted.
fn uplinks(now_ms: i64) -> String {
    let step = 600_000; // one report per 10 min
    let n = 40;
    let t0 = now_ms - step * n;
    let mut s = String::new();
    let line = |s: &mut String, t: i64, b: &[u8]| {
        s.push_str(&format!("{} {}\n", clock::rfc3339(t), hex(b)))
    };
    line(
        &mut s,
        t0 - 60_000,
        &status_frame(3, 0, [2000.0, 4000.0], 0),
    );
    line(
        &mut s,
        t0 - 60_000,
        &status_frame(7, 0, [2500.0, 5000.0], 1),
    );
    for i in 0..n {
        let t = t0 + i * step;
        let rise = (i as f32 - 10.0).max(0.0) * 0.7; // starts after 10 reports
        line(&mut s, t, &frame(3, i as u16, &[6.0 + rise, 5.0], false));
        line(
            &mut s,
            t + 20_000,
            &frame(4, i as u16, &[4.0, 5.0 + rise * 0.35], i > 35),
        );
        if i != 17 {
            line(
                &mut s,
                t + 40_000,
                &frame(7, i as u16, &[8.0 + 0.2 * (i % 3) as f32], false),
            );
        }
        if i == 20 {
            line(
                &mut s,
                t + 30_000,
                &status_frame(3, 1, [2519.842, 5039.684], 0),
            );
        }
    }
    for i in 0..3 {
        line(
            &mut s,
            now_ms - 2 * 86_400_000 + i * step,
            &frame(9, i as u16, &[9.0], false),
        );
    }
    s
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

/// One raw HTTP/1.1 request on loopback; (status, headers, body).
fn http(port: u16, req: &str) -> (u16, String, String) {
    let mut s = std::net::TcpStream::connect(("127.0.0.1", port)).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(20))).unwrap();
    s.write_all(req.as_bytes()).unwrap();
    let mut buf = Vec::new();
    s.read_to_end(&mut buf).unwrap();
    let text = String::from_utf8_lossy(&buf).into_owned();
    let (head, body) = text.split_once("\r\n\r\n").unwrap_or((&text, ""));
    let code = head
        .split_whitespace()
        .nth(1)
        .and_then(|c| c.parse().ok())
        .unwrap_or(0);
    (code, head.to_string(), body.to_string())
}

struct Server(Child);
impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
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

#[test]
fn dashboard_in_headless_chromium() {
    let browser = chromium();
    let dir = tempfile::tempdir().unwrap();
    let now = clock::now_ms() / 60_000 * 60_000;
    std::fs::write(dir.path().join("uplinks.txt"), uplinks(now)).unwrap();
    std::fs::write(dir.path().join("map.toml"), MAP).unwrap();
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "uplinks.txt"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    add_user(dir.path(), "lena", "operator", "quarry-shift-7");
    add_user(dir.path(), "tomas", "viewer", "conveyor-view-2");

    // What the terminal commands print for the same store.
    let o = run(
        &[
            "gateway",
            "status",
            "--db",
            "gw.sqlite",
            "--map",
            "map.toml",
            "--json",
        ],
        dir.path(),
    );
    let status: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "3",
            "--bearing",
            "0",
        ],
        dir.path(),
    );
    // report rows only (not the time-axis line, the header, band-change
    // lines or the amplitude note)
    let trend_rows = stdout(&o)
        .lines()
        .filter(|l| {
            l.split_whitespace()
                .next()
                .is_some_and(|w| w.parse::<i64>().is_ok())
        })
        .count();
    assert!(trend_rows > 0);

    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let child = Command::new(BIN)
        .args([
            "gateway",
            "web",
            "--db",
            "gw.sqlite",
            "--users",
            "users.toml",
            "--map",
            "map.toml",
        ])
        .args(["--listen", &format!("127.0.0.1:{port}")])
        .current_dir(dir.path())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let _server = Server(child);
    let start = Instant::now();
    loop {
        if std::net::TcpStream::connect(("127.0.0.1", port)).is_ok() {
            break;
        }
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "gateway web did not listen on 127.0.0.1:{port} in 20 s"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
    let (code, _, body) = http(
        port,
        "GET /health HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n",
    );
    assert_eq!(code, 200, "{body}");
    let (code, head, body) = http(
        port,
        "GET /export/fleet.csv HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n",
    );
    assert_eq!(code, 401, "an export without a session: {head}");
    assert!(body.contains("id=\"login\""));

    let shots = std::env::var("ENVORD_WEB_SHOTS").unwrap_or_default();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/browser/drive.mjs");
    let o = Command::new("node")
        .arg("--experimental-websocket")
        .arg("--no-warnings")
        .arg(&script)
        .env("BASE", format!("http://127.0.0.1:{port}"))
        .env("CHROMIUM", &browser)
        .env("SHOTS", &shots)
        .env("OP_USER", "lena")
        .env("OP_PASS", "quarry-shift-7")
        .env("VIEW_USER", "tomas")
        .env("VIEW_PASS", "conveyor-view-2")
        .env("BEARING_PATH", "/bearing/3/0")
        .env("NODE", "3")
        .output()
        .expect("node (Node.js) must be installed to drive Chromium");
    assert!(
        o.status.success(),
        "the browser run failed: {}{}",
        String::from_utf8_lossy(&o.stderr),
        stdout(&o)
    );
    let v: serde_json::Value = serde_json::from_str(stdout(&o).trim()).unwrap();
    eprintln!("browser: {}", v["browser"]);

    // No session: the login page; a wrong password is refused.
    assert_eq!(v["unauth"]["hasLogin"], true, "{v}");
    assert!(
        v["wrongPassword"]
            .as_str()
            .unwrap()
            .contains("Wrong user or password"),
        "{v}"
    );
    assert_eq!(v["afterLogin"], "/");

    // Fleet: the channel states equal `gateway status`'s bearings.
    let want: Vec<(u64, u64, String)> = status["bearings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| {
            (
                b["node"].as_u64().unwrap(),
                b["bearing"].as_u64().unwrap(),
                // the page's CSS/filter name of not_covered
                b["worst"]["state"]
                    .as_str()
                    .unwrap()
                    .replace("not_covered", "notcovered"),
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
    got.sort();
    let mut want_sorted = want.clone();
    want_sorted.sort();
    assert_eq!(got, want_sorted, "fleet page vs gateway status");
    // the states differ (a developing fault next to healthy channels; node 9,
    // still learning and silent for 2 days, is STALE under the amplitude grading)
    let kinds: std::collections::BTreeSet<&str> = want.iter().map(|w| w.2.as_str()).collect();
    assert!(
        kinds.contains("danger") && kinds.contains("normal") && kinds.contains("stale"),
        "{kinds:?}"
    );
    // worst first by default
    assert_eq!(v["fleet"][0]["state"], "danger", "{}", v["fleet"]);
    assert!(v["fleetDanger"]
        .as_array()
        .unwrap()
        .iter()
        .all(|s| s == "danger"));
    // physical bearings: the combined states of `status --map`; no data = not covered
    let phys: Vec<(String, String)> = status["physical"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            let s = p["state"].as_str().unwrap();
            (
                p["name"].as_str().unwrap().to_string(),
                // status's JSON spells no data `no_data` (snake_case)
                if s == "no_data" || s == "not_covered" {
                    "notcovered".into()
                } else {
                    s.to_string()
                },
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
    gotp.sort();
    let mut phys = phys;
    phys.sort();
    assert_eq!(gotp, phys, "physical bearings vs gateway status --map");

    // Bearing page: node 3 bearing 0 draws as many points as `gateway trend` lists.
    let series = v["bearing"].as_array().unwrap();
    let mine: Vec<&serde_json::Value> = series.iter().filter(|s| s["sensor"] == "3-0").collect();
    let drawn: u64 = mine.iter().map(|s| s["drawn"].as_u64().unwrap()).sum();
    let points: u64 = mine.iter().map(|s| s["points"].as_u64().unwrap()).sum();
    assert_eq!(
        points as usize, trend_rows,
        "page points vs gateway trend rows"
    );
    assert_eq!(
        drawn as usize, trend_rows,
        "drawn points vs gateway trend rows"
    );
    assert!(
        series.iter().any(|s| s["sensor"] == "4-1"),
        "the mesh's second sensor is on the page"
    );
    assert_eq!(v["timeAxis"], true);
    assert!(
        v["eta"].as_str().unwrap().contains("node 4 b1: about"),
        "{}",
        v["eta"]
    );

    // Node page: status frames and the lost frame of node 7 is not node 3's.
    assert_eq!(v["node"]["statusFrames"], 2);

    // Alarm events, CSRF and roles.
    assert!(v["events"].as_u64().unwrap() >= 2, "{v}");
    assert!(v["opAckButtons"].as_u64().unwrap() >= 1);
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
            .contains("acknowledged by lena"),
        "{}",
        v["ackNotice"]
    );
    assert_eq!(v["ackedRows"], 1);
    assert_eq!(v["viewer"]["ackButtons"], 0);
    assert!(
        v["viewer"]["ackResult"]
            .as_str()
            .unwrap()
            .contains("needs the operator role"),
        "{}",
        v["viewer"]
    );
    // only the operator's acknowledgement is stored
    let c = rusqlite::Connection::open(dir.path().join("gw.sqlite")).unwrap();
    let acked: i64 = c
        .query_row(
            "SELECT COUNT(*) FROM alarm_events WHERE acked_by IS NOT NULL",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(acked, 1);
}

#[test]
fn web_refuses_bad_users_file_and_missing_store() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("users.toml"),
        "[[user]]\nname = \"lena\"\nrole = \"boss\"\nhash = \"x\"\n",
    )
    .unwrap();
    let o = run(
        &[
            "gateway",
            "web",
            "--db",
            "gw.sqlite",
            "--users",
            "users.toml",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&o.stderr).contains("users.toml"),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    std::fs::remove_file(dir.path().join("users.toml")).unwrap();
    add_user(dir.path(), "lena", "operator", "quarry-shift-7-long");
    let o = run(
        &[
            "gateway",
            "web",
            "--db",
            "missing.sqlite",
            "--users",
            "users.toml",
        ],
        dir.path(),
    );
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(
        !dir.path().join("missing.sqlite").exists(),
        "no store created by a typo"
    );
}
