//! `envord gateway import/status/trend/baseline` against the SQLite store.
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;
use std::process::Command;
use std::time::{Duration, Instant};

fn write_lines(path: &std::path::Path, frames: &[Vec<u8>]) {
    let text: Vec<String> = frames.iter().map(|f| hex(f)).collect();
    std::fs::write(path, text.join("\n") + "\n").unwrap();
}

#[test]
fn reimport_is_idempotent_and_schema_is_versioned() {
    let dir = tempfile::tempdir().unwrap();
    let frames: Vec<Vec<u8>> = (0..50u16)
        .map(|s| frame(1, s, 5.0, false))
        .chain([frame(1, 10, 5.0, false)])
        .collect();
    write_lines(&dir.path().join("a.txt"), &frames);
    std::fs::write(dir.path().join("b.txt"), "0102\n").unwrap();
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "a.txt", "b.txt"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(
        stdout(&o).contains("imported 50 new frame(s), 1 already stored, 1 rejected"),
        "{}",
        stdout(&o)
    );
    let db = dir.path().join("gw.sqlite");
    assert_eq!(db_count(&db, "reports"), 50);
    assert_eq!(db_count(&db, "defects"), 50 * 8);
    assert_eq!(db_count(&db, "rejects"), 1);
    // Same input again: nothing new, nothing lost.
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "a.txt", "b.txt"],
        dir.path(),
    );
    assert!(
        stdout(&o).contains("imported 0 new frame(s), 51 already stored, 1 rejected (0 new"),
        "{}",
        stdout(&o)
    );
    assert_eq!(db_count(&db, "reports"), 50);
    assert_eq!(db_count(&db, "rejects"), 1);
    let c = rusqlite::Connection::open(&db).unwrap();
    let v: i64 = c
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .unwrap();
    assert_eq!(v, host_sim::gateway::store::schema_version());
    // A store from a newer build is refused as bad input.
    c.pragma_update(None, "user_version", 9).unwrap();
    drop(c);
    let o = run(&["gateway", "status", "--db", "gw.sqlite"], dir.path());
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn status_frames_are_stored_apart_and_shown_per_node() {
    let dir = tempfile::tempdir().unwrap();
    // reports 0..4 of node 3 with status frames (their own sequence) between
    let frames = vec![
        frame(3, 0, 5.0, false),
        status(3, 0, 0, 0),
        frame(3, 1, 5.0, false),
        frame(3, 2, 5.0, false),
        status(3, 1, 7, 0),
        frame(3, 3, 5.0, false),
        status(3, 2, 7, 2),
    ];
    write_lines(&dir.path().join("a.txt"), &frames);
    let o = run(
        &[
            "gateway",
            "import",
            "--db",
            "gw.sqlite",
            "a.txt",
            "--verbose",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // no gap or backward event from the interleaved status sequence
    assert!(
        stdout(&o).contains("imported 7 new frame(s), 0 already stored, 0 rejected"),
        "{}",
        stdout(&o)
    );
    assert!(
        stdout(&o).contains(" 0 gap event(s)") && !stdout(&o).contains("backward"),
        "{}",
        stdout(&o)
    );
    let db = dir.path().join("gw.sqlite");
    assert_eq!(db_count(&db, "reports"), 4);
    assert_eq!(db_count(&db, "node_status"), 3);
    let o = run(&["gateway", "status", "--db", "gw.sqlite"], dir.path());
    let text = stdout(&o);
    assert!(text.contains("nodes (latest status frame)"), "{text}");
    let row = text
        .lines()
        .find(|l| l.trim_start().starts_with("3 ") && l.contains("bad_tag"))
        .unwrap_or_else(|| panic!("no node 3 status row in {text}"));
    assert!(row.contains("2520-5040") && row.contains("survey"), "{row}");
    let o = run(
        &["gateway", "status", "--db", "gw.sqlite", "--json"],
        dir.path(),
    );
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let n = &v["nodes"][0];
    assert_eq!(n["node"], 3);
    assert_eq!(n["downlink_counter"], 7);
    assert_eq!(n["refused_downlinks"], 2);
    assert_eq!(n["last_downlink"], "bad_tag");
    assert_eq!(v["links"][0]["frames"], 4);
    assert_eq!(v["links"][0]["missing"], 0);
    // decode prints status frames as their own line type
    let o = run(&["gateway", "decode", "a.txt"], dir.path());
    let kinds: Vec<String> = stdout(&o)
        .lines()
        .map(|l| serde_json::from_str::<serde_json::Value>(l).unwrap()["type"].to_string())
        .collect();
    assert_eq!(kinds.iter().filter(|k| k.contains("status")).count(), 3);
    assert_eq!(kinds.iter().filter(|k| k.contains("report")).count(), 4);
}

#[test]
fn interrupted_import_loses_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let mut frames = Vec::new();
    for i in 0..20_000u32 {
        frames.push(frame(
            (i % 4) as u16 + 1,
            (i / 4) as u16,
            (i % 30) as f32,
            i % 7 == 0,
        ));
    }
    // 500 repeats of earlier lines, as a gateway forwarding twice would give.
    for i in 0..500 {
        frames.push(frames[i * 37].clone());
    }
    write_lines(&dir.path().join("big.txt"), &frames);
    let db = dir.path().join("gw.sqlite");
    let mut child = Command::new(BIN)
        .args([
            "gateway",
            "import",
            "--db",
            "gw.sqlite",
            "big.txt",
            "--batch-size",
            "100",
            "--batch-pause-ms",
            "20",
        ])
        .current_dir(dir.path())
        .spawn()
        .unwrap();
    // Wait until some batches are committed, then kill the process hard.
    let t0 = Instant::now();
    let mut seen = 0;
    while seen < 300 && t0.elapsed() < Duration::from_secs(60) {
        std::thread::sleep(Duration::from_millis(10));
        if db.exists() {
            seen = rusqlite::Connection::open(&db)
                .and_then(|c| {
                    c.query_row("SELECT COUNT(*) FROM reports", [], |r| r.get::<_, i64>(0))
                })
                .unwrap_or(0);
        }
    }
    assert!(
        child.try_wait().unwrap().is_none(),
        "import finished before it could be interrupted"
    );
    child.kill().unwrap(); // SIGKILL on Unix
    child.wait().unwrap();
    let partial = db_count(&db, "reports");
    assert!(partial > 0 && partial < 20_000, "partial {partial}");
    // SQLite commits are atomic even on a killed process (sqlite.org, "Atomic
    // Commit In SQLite"), so only whole batches of 100 frames are in the store.
    assert_eq!(partial % 100, 0, "partial {partial}");
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "big.txt"],
        dir.path(),
    );
    assert!(o.status.success());
    assert_eq!(db_count(&db, "reports"), 20_000);
    assert_eq!(db_count(&db, "defects"), 20_000 * 8);
    let c = rusqlite::Connection::open(&db).unwrap();
    let distinct: i64 = c
        .query_row(
            "SELECT COUNT(*) FROM (SELECT DISTINCT node_id, seq FROM reports)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(distinct, 20_000);
}

/// An invented gearbox: node 3 and node 4 both watch its output-shaft bearing
/// (their bearing index 0). Node 3's BPFO amplitude rises from a 2 mg baseline
/// and is detected from 4.5 mg on.
fn scenario(dir: &std::path::Path) {
    let mut frames = Vec::new();
    for (s, g) in [2e-3f32, 2e-3, 2e-3, 2e-3, 2e-3, 3e-3, 4.5e-3]
        .iter()
        .enumerate()
    {
        // the node detects the defect from 4.5 mg on (the gateway grades
        // detected findings; a quiet line's amplitude is noise)
        frames.push(frame_amp(3, s as u16, *g, *g > 4e-3));
    }
    frames.push(frame_amp(3, 9, 9e-3, true)); // 7 and 8 lost
    for s in 0..5u16 {
        frames.push(frame_amp(4, s, 2e-3, false));
    }
    frames.push(frame_amp(4, 5, 3.5e-3, false));
    write_lines(&dir.join("uplinks.txt"), &frames);
    std::fs::write(
        dir.join("map.toml"),
        "[[bearing]]\nname = \"demo gearbox output shaft\"\nsensors = [{ node = 3, bearing = 0 }, { node = 4, bearing = 0 }]\n\n[[bearing]]\nname = \"demo gearbox input shaft\"\nsensors = [{ node = 3, bearing = 1 }]\n",
    )
    .unwrap();
    let o = run(
        &[
            "gateway",
            "import",
            "--db",
            "gw.sqlite",
            "uplinks.txt",
            "--verbose",
        ],
        dir,
    );
    assert!(o.status.success());
    assert!(
        stdout(&o).contains("node 3 seq 9: gap: 2 lost between 6 and 9"),
        "{}",
        stdout(&o)
    );
}

#[test]
fn status_states_baselines_and_combined_view() {
    let dir = tempfile::tempdir().unwrap();
    scenario(dir.path());
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
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let find = |node: u64, b: u64, k: &str| {
        v["defects"]
            .as_array()
            .unwrap()
            .iter()
            .find(|d| d["node"] == node && d["bearing"] == b && d["kind"] == k)
            .unwrap()
            .clone()
    };
    let d = find(3, 0, "BPFO");
    let f = |v: &serde_json::Value| v.as_f64().unwrap();
    // frame amplitudes are quantised in 0.5 dB steps (docs/frame-format.md)
    assert!((f(&d["baseline_g"]) / 2e-3 - 1.0).abs() < 0.03, "{d}");
    assert_eq!(d["baseline_origin"], "learned");
    // 9 mg over 2 mg = +13.1 dB >= +12 dB (common practice: +6 / +12 dB),
    // and the report before was an alert (4.5 mg = +7 dB): danger
    assert!((f(&d["severity_db"]) - 13.1).abs() < 0.5, "{d}");
    assert_eq!(d["state"], "danger");
    assert_eq!(find(4, 0, "BPFO")["state"], "normal"); // 3.5 / 2 mg = +4.9 dB < 6
    assert_eq!(find(3, 1, "BSF")["state"], "normal");
    let phys = v["physical"].as_array().unwrap();
    assert_eq!(phys[0]["name"], "demo gearbox output shaft");
    assert_eq!(phys[0]["state"], "danger");
    assert!((f(&phys[0]["defects"][0]["worst_amplitude_g"]) / 9e-3 - 1.0).abs() < 0.03);
    assert_eq!(phys[0]["defects"][0]["detecting"], 1);
    assert_eq!(phys[0]["sensors"], 2);
    assert_eq!(phys[1]["state"], "normal");
    let link3 = v["links"]
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["node"] == 3)
        .unwrap();
    assert_eq!(link3["missing"], 2);
    // Limits stored for node 4 are the ones its lines are graded with.
    let o = run(
        &[
            "gateway",
            "limits",
            "set",
            "--db",
            "gw.sqlite",
            "--node",
            "4",
            "--alert-db",
            "3",
            "--danger-db",
            "20",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = run(
        &["gateway", "status", "--db", "gw.sqlite", "--json"],
        dir.path(),
    );
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let n4 = v["defects"]
        .as_array()
        .unwrap()
        .iter()
        .find(|d| d["node"] == 4 && d["bearing"] == 0 && d["kind"] == "BPFO")
        .unwrap();
    // node 4's +4.9 dB is over the stored 3 dB but not detected: not graded
    assert_eq!(n4["state"], "normal");
    assert_eq!(n4["limits"]["alert_db"], 3.0);
    // A hand-set baseline replaces the learned one; a detection stays an alert.
    let o = run(
        &[
            "gateway",
            "baseline",
            "--db",
            "gw.sqlite",
            "--node",
            "3",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--amplitude-g",
            "0.006",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = run(
        &[
            "gateway",
            "status",
            "--db",
            "gw.sqlite",
            "--map",
            "map.toml",
        ],
        dir.path(),
    );
    let table = stdout(&o);
    let row = table
        .lines()
        .find(|l| l.contains("demo gearbox output shaft") && l.trim_start().starts_with('3'))
        .unwrap();
    assert!(row.contains("ALERT") && row.contains("6.000e-3"), "{row}");
    // Bad limits are bad input and leave the store as it was.
    let o = run(
        &[
            "gateway",
            "limits",
            "set",
            "--db",
            "gw.sqlite",
            "--node",
            "4",
            "--alert-db",
            "25",
        ],
        dir.path(),
    );
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let o = run(
        &["gateway", "limits", "show", "--db", "gw.sqlite"],
        dir.path(),
    );
    let shown = stdout(&o);
    assert!(
        shown.contains("node 4 bearing * defect *: baseline_count - alert_db 3 danger_db 20"),
        "{shown}"
    );
}

#[test]
fn bad_map_names_the_file() {
    let dir = tempfile::tempdir().unwrap();
    scenario(dir.path());
    std::fs::write(
        dir.path().join("bad.toml"),
        "[[bearing]]\nname = \"x\"\nsensors = [{ node = 3, bearing = 7 }]\n",
    )
    .unwrap();
    let o = run(
        &[
            "gateway",
            "status",
            "--db",
            "gw.sqlite",
            "--map",
            "bad.toml",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("bad.toml"));
}

#[test]
fn trend_plots_one_bearing() {
    let dir = tempfile::tempdir().unwrap();
    scenario(dir.path());
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
            "--defect",
            "bpfo",
            "--svg",
            "trend.svg",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = stdout(&o);
    // axis line + header + 8 reports + amplitude note + "wrote" line
    assert_eq!(text.lines().count(), 12, "{text}");
    assert!(text.starts_with("time axis: arrival order"), "{text}");
    let states: Vec<&str> = text
        .lines()
        .filter(|l| l.contains(" BPFO "))
        .map(|l| l.split_whitespace().nth(9).unwrap())
        .collect();
    assert_eq!(
        states,
        ["LEARNING", "LEARNING", "LEARNING", "LEARNING", "NORMAL", "NORMAL", "ALERT", "DANGER"]
    );
    let svg = std::fs::read_to_string(dir.path().join("trend.svg")).unwrap();
    assert!(svg.starts_with("<svg"));
    assert!(svg.contains("arrival order (receive times missing)"));
    assert!(svg.contains("danger level (+12 dB)"));
    // an existing plot is not overwritten
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
            "--svg",
            "trend.svg",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(2));
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "99",
            "--bearing",
            "0",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(2));
}
