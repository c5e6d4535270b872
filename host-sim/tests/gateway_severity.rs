//! Severity at the gateway over a simulated growth series, as a user runs it:
//! `envord simulate` records, the node's pipeline (`envord analyze
//! --frame-hex`) makes the frames, `envord gateway import` stores them, and
//! `status` / `trend` grade them (docs/gateway.md "Alarms").
//!
//! The machine is invented: one shaft at 1480 rpm, an outer-race defect of a
//! 6205 bearing (defect multiples from the CWRU bearing specification text,
//! as host-sim/examples/machine.toml) whose impact amplitude rises 30 dB over
//! 20 records, after 5 healthy records. The envelope band is fixed.
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::{hex, run, stdout};
use serde_json::Value;
use std::path::Path;

const T0_S: i64 = 1_777_716_000; // 2026-05-02T10:00:00Z (date -u -d ... +%s)
const HEALTHY: usize = 5;
const GROWTH: usize = 20;

fn machine(noise_g: f64, fault: &str, impact_g: f64) -> String {
    format!(
        "name = \"growth stand (invented)\"\nfs_hz = 25600.0\nseconds = 11.0\ngears = []\n\
         [speed]\nkind = \"constant\"\nrpm = 1480.0\n\
         [[shafts]]\nname = \"input\"\nratio = 1.0\nimbalance_g = 0.04\n\
         [[bearings]]\nname = \"input-de\"\nshaft = \"input\"\nfault = \"{fault}\"\n\
         bpfo = 3.5848\nbpfi = 5.4152\nftf = 0.39828\nbsf = 2.357\nimpact_g = {impact_g}\n\
         slip = 0.01\nresonance_hz = 4500.0\ndamping_ratio = 0.04\n\
         [noise]\nrms_g = {noise_g}\n"
    )
}

fn point(band: [f64; 2]) -> String {
    format!(
        "[envelope]\nband_hz = [{:.1}, {:.1}]\n[speed]\nsource = \"tach\"\nmin_rpm = 700.0\nmax_rpm = 1800.0\n\
         [spectrum]\nsamples_per_rev = 128\nrevolutions = 256\n\
         [[shaft]]\nname = \"input\"\n\
         [[bearing]]\nname = \"input-de\"\nshaft = \"input\"\nbpfo_x = 3.5848\nbpfi_x = 5.4152\nftf_x = 0.39828\nbsf_x = 2.357\n",
        band[0], band[1]
    )
}

/// Impact amplitude of growth record i: 0.03 g rising 30 dB over 20 records.
fn impact_g(i: usize) -> f64 {
    0.03 * 10f64.powf(30.0 / 20.0 * i as f64 / (GROWTH - 1) as f64)
}

fn rfc3339(s: i64) -> String {
    let o = std::process::Command::new("date")
        .args(["-u", "-d", &format!("@{s}"), "+%Y-%m-%dT%H:%M:%SZ"])
        .output()
        .unwrap();
    String::from_utf8(o.stdout).unwrap().trim().to_string()
}

/// One report frame from a simulated record through the node's pipeline, as
/// a `RX_TIME HEX` input line.
fn record_line(dir: &Path, n: usize, fault: &str, impact: f64, band: [f64; 2]) -> String {
    std::fs::write(dir.join("m.toml"), machine(0.002, fault, impact)).unwrap();
    std::fs::write(dir.join("p.toml"), point(band)).unwrap();
    let _ = std::fs::remove_file(dir.join("r.wav"));
    let seed = (100 + n).to_string();
    let o = run(
        &[
            "simulate", "--spec", "m.toml", "--out", "r.wav", "--seed", &seed,
        ],
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let seq = n.to_string();
    let o = run(
        &[
            "analyze",
            "--point",
            "p.toml",
            "--tach-channel",
            "1",
            "--frame-hex",
            "--node-id",
            "7",
            "--seq",
            &seq,
            "r.wav",
        ],
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    format!("{} {}", rfc3339(T0_S + 3600 * n as i64), stdout(&o).trim())
}

/// Input lines of 5 healthy records and 20 growth records.
fn growth_lines(dir: &Path) -> Vec<String> {
    (0..HEALTHY + GROWTH)
        .map(|n| {
            if n < HEALTHY {
                record_line(dir, n, "none", 0.03, [3000.0, 6000.0])
            } else {
                record_line(dir, n, "outer", impact_g(n - HEALTHY), [3000.0, 6000.0])
            }
        })
        .collect()
}

fn import(dir: &Path, lines: &[String]) {
    std::fs::write(dir.join("up.txt"), lines.join("\n") + "\n").unwrap();
    let o = run(&["gateway", "import", "--db", "gw.sqlite", "up.txt"], dir);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

const NOW: &str = "2026-05-03T12:00:00Z";

fn bpfo_state(dir: &Path) -> Value {
    bpfo_state_at(dir, NOW)
}

/// The BPFO line of node 7 bearing 0 as `status --json --now NOW` prints it.
fn bpfo_state_at(dir: &Path, now: &str) -> Value {
    let o = run(
        &[
            "gateway",
            "status",
            "--db",
            "gw.sqlite",
            "--json",
            "--now",
            now,
        ],
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: Value = serde_json::from_slice(&o.stdout).unwrap();
    v["defects"]
        .as_array()
        .unwrap()
        .iter()
        .find(|d| d["node"] == 7 && d["bearing"] == 0 && d["kind"] == "BPFO")
        .unwrap()
        .clone()
}

fn trend_history(dir: &Path) -> Vec<Value> {
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "7",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--json",
            "--now",
            NOW,
        ],
        dir,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["axis"], "receive_time");
    v["lines"][0]["history"].as_array().unwrap().clone()
}

#[test]
fn growth_series_tracks_amplitude_and_goes_normal_alert_danger() {
    let dir = tempfile::tempdir().unwrap();
    let lines = growth_lines(dir.path());
    // Import record by record and read the state `status` prints each time
    // (ten minutes after the record arrived).
    let mut states: Vec<String> = Vec::new();
    for n in 0..lines.len() {
        import(dir.path(), &lines[n..=n]);
        let now = rfc3339(T0_S + 3600 * n as i64 + 600);
        let d = bpfo_state_at(dir.path(), &now);
        states.push(d["state"].as_str().unwrap().to_string());
    }
    // A day and more of silence after the last report, a danger stays a
    // danger (flagged stale); a quiet line would be stale.
    let later = rfc3339(T0_S + 3600 * lines.len() as i64 + 2 * 86_400);
    let d = bpfo_state_at(dir.path(), &later);
    assert_eq!(
        (d["state"].as_str(), d["stale"].as_bool()),
        (Some("danger"), Some(true))
    );
    let history = trend_history(dir.path());
    assert_eq!(history.len(), HEALTHY + GROWTH);
    // The trend's state per report is the state status printed after it.
    let trend_states: Vec<&str> = history
        .iter()
        .map(|g| g["state"].as_str().unwrap())
        .collect();
    assert_eq!(trend_states, states);
    let mut order: Vec<&str> = states.iter().map(String::as_str).collect();
    order.dedup();
    assert_eq!(
        order,
        ["learning", "normal", "alert", "danger"],
        "{states:?}"
    );
    // The first detection over the quiet baseline is an alert.
    let first = history
        .iter()
        .position(|g| g["point"]["detected"] == true)
        .unwrap();
    assert_eq!(history[first]["state"], "alert");
    assert_eq!(history[first - 1]["state"], "normal");
    // The reported amplitude follows the simulated defect within 3 dB: the
    // rise of each record's amplitude relative to the last record equals the
    // rise of the impact amplitude (both in dB).
    let amp = |i: usize| {
        history[HEALTHY + i]["point"]["amplitude_g"]
            .as_f64()
            .unwrap()
    };
    let mut worst = 0.0f64;
    println!("record impact_g amplitude_g rise_true_dB rise_reported_dB state");
    for i in 0..GROWTH {
        let true_db = 20.0 * (impact_g(i) / impact_g(GROWTH - 1)).log10();
        let rep_db = 20.0 * (amp(i) / amp(GROWTH - 1)).log10();
        worst = worst.max((rep_db - true_db).abs());
        println!(
            "{i:>6} {:>8.4} {:>11.3e} {true_db:>12.1} {rep_db:>16.1} {}",
            impact_g(i),
            amp(i),
            history[HEALTHY + i]["state"]
        );
    }
    println!("worst tracking error {worst:.2} dB");
    assert!(worst <= 3.0, "amplitude tracking error {worst:.2} dB");
    let total = 20.0 * (amp(GROWTH - 1) / amp(0)).log10();
    assert!((total - 30.0).abs() <= 3.0, "reported rise {total:.1} dB");
    // The table shows the same, with time on its axis and the amplitude.
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "7",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--svg",
            "t.svg",
            "--now",
            NOW,
        ],
        dir.path(),
    );
    let text = stdout(&o);
    assert!(text.starts_with("time axis: receive time (UTC)"), "{text}");
    assert!(text.contains("2026-05-03T10:00:00Z BPFO"), "{text}");
    let svg = std::fs::read_to_string(dir.path().join("t.svg")).unwrap();
    assert!(svg.contains("receive time (UTC)") && svg.contains("2026-05-03 00:00"));
}

#[test]
fn first_detection_is_alert_unless_an_absolute_danger_level_is_crossed() {
    let dir = tempfile::tempdir().unwrap();
    let lines = growth_lines(dir.path());
    import(dir.path(), &lines[..=HEALTHY]);
    // A floor far below the healthy amplitude: the baseline is the learned
    // noise (about 2e-5 g) and the first detection is some 40 dB over it.
    let o = run(
        &[
            "gateway",
            "limits",
            "set",
            "--db",
            "gw.sqlite",
            "--node",
            "7",
            "--floor-g",
            "1e-6",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let d = bpfo_state(dir.path());
    assert!(d["severity_db"].as_f64().unwrap() > 30.0, "{d}");
    assert_eq!(d["baseline_origin"], "learned");
    assert_eq!(d["state"], "alert");
    // It persists at the next report: danger.
    import(dir.path(), &lines[HEALTHY + 1..=HEALTHY + 1]);
    assert_eq!(bpfo_state(dir.path())["state"], "danger");
    // With an absolute danger level under its amplitude, the first detection
    // is already danger.
    let first_amp = trend_history(dir.path())[HEALTHY]["point"]["amplitude_g"]
        .as_f64()
        .unwrap();
    let level = format!("{}", first_amp * 0.9);
    let o = run(
        &[
            "gateway",
            "limits",
            "set",
            "--db",
            "gw.sqlite",
            "--node",
            "7",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--danger-abs-g",
            &level,
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let h = trend_history(dir.path());
    assert_eq!(h[HEALTHY]["state"], "danger");
    // The other kinds keep the node's limits (no absolute level).
    let o = run(
        &["gateway", "limits", "show", "--db", "gw.sqlite", "--json"],
        dir.path(),
    );
    let v: Value = serde_json::from_slice(&o.stdout).unwrap();
    let line = |k: &str| {
        v["lines"]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["node"] == 7 && l["kind"] == k)
            .unwrap()["limits"]
            .clone()
    };
    assert!(line("BPFO")["danger_abs_g"].is_number());
    assert!(line("BPFI")["danger_abs_g"].is_null());
    assert_eq!(line("BPFI")["floor_g"], 1e-6);
}

/// A node status frame of node 7 announcing its band.
fn status_line(seq: u16, band: [f32; 2], at_s: i64) -> String {
    use wire::frame::status::{encode_status, BandSource, StatusReport};
    let r = StatusReport {
        node_id: 7,
        seq,
        provisioned: true,
        band_source: BandSource::Configured,
        band_hz: band,
        band_kurtosis: f32::NAN,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 32];
    let n = encode_status(&r, &mut buf).unwrap();
    format!("{} {}", rfc3339(at_s), hex(&buf[..n]))
}

#[test]
fn a_band_change_is_marked_and_learning_restarts() {
    let dir = tempfile::tempdir().unwrap();
    let lo = [3000.0, 6000.0];
    let hi = [6000.0, 12000.0];
    let mut lines = vec![status_line(0, [3000.0, 6000.0], T0_S - 60)];
    for n in 0..8 {
        lines.push(record_line(dir.path(), n, "none", 0.03, lo));
    }
    lines.push(status_line(1, [6000.0, 12000.0], T0_S + 3600 * 8 - 60));
    for n in 8..16 {
        lines.push(record_line(dir.path(), n, "none", 0.03, hi));
    }
    import(dir.path(), &lines);
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "7",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--svg",
            "band.svg",
            "--now",
            NOW,
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = stdout(&o);
    let rows: Vec<&str> = text.lines().collect();
    let mark = rows
        .iter()
        .position(|l| l.contains("band changed to 6000-12000 Hz"))
        .unwrap_or_else(|| panic!("no band mark in {text}"));
    // the mark stands right before the first report made in the new band
    assert!(rows[mark + 1].contains("2026-05-02T18:00:00Z"), "{text}");
    assert!(
        rows[mark + 1].contains("LEARNING") && rows[mark - 1].contains("NORMAL"),
        "{text}"
    );
    assert_eq!(text.matches("band changed").count(), 1);
    let svg = std::fs::read_to_string(dir.path().join("band.svg")).unwrap();
    assert!(svg.contains("band change:") && svg.contains("6000-12000 Hz"));
    let d = bpfo_state(dir.path());
    assert_eq!(d["band_changes"], 1);
    assert_eq!(d["band_hz"][1], 12000.0);
}

/// The node's alert/danger levels (its configuration record) are the levels
/// the gateway grades with, when the configuration downlink names the store.
#[test]
fn node_levels_sent_by_a_config_downlink_become_the_node_limits() {
    let dir = tempfile::tempdir().unwrap();
    let point = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../boards/qemu-mps2/input/point.toml"
    );
    let o = run(
        &[
            "gateway",
            "provision",
            "--node-id",
            "7",
            "--key-out",
            "k.hex",
            "--identity-out",
            "id.bin",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = run(
        &[
            "gateway",
            "downlink",
            "--node-id",
            "7",
            "--key",
            "k.hex",
            "--counter",
            "1",
            "config",
            "--point",
            point,
            "--alert-db",
            "5",
            "--danger-db",
            "15",
            "--db",
            "gw.sqlite",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("node 7 limits set to the levels sent"));
    let lines = growth_lines(dir.path());
    import(dir.path(), &lines[..=HEALTHY]);
    let d = bpfo_state(dir.path());
    assert_eq!(d["limits"]["alert_db"], 5.0);
    assert_eq!(d["limits"]["danger_db"], 15.0);
    let o = run(
        &["gateway", "limits", "show", "--db", "gw.sqlite"],
        dir.path(),
    );
    assert!(
        stdout(&o).contains("node 7 bearing * defect *: baseline_count - alert_db 5 danger_db 15"),
        "{}",
        stdout(&o)
    );
    assert!(stdout(&o).contains("(origin node config)"));
    // A danger level under the alert level is refused by the node's record
    // before anything is stored.
    let o = run(
        &[
            "gateway",
            "downlink",
            "--node-id",
            "7",
            "--key",
            "k.hex",
            "--counter",
            "2",
            "config",
            "--point",
            point,
            "--alert-db",
            "9",
            "--danger-db",
            "3",
            "--db",
            "gw.sqlite",
        ],
        dir.path(),
    );
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert_eq!(bpfo_state(dir.path())["limits"]["danger_db"], 15.0);
}

/// A line the node's setting cannot search (`defects.searched` = 0, as the
/// schema-3 column holds it) is not covered, never normal; `amplitude_g`,
/// when a frame carries it, is graded in place of the 1x amplitude.
#[test]
fn a_line_not_searched_is_not_covered_and_amplitude_g_is_preferred() {
    let dir = tempfile::tempdir().unwrap();
    let lines = growth_lines(dir.path());
    import(dir.path(), &lines[..HEALTHY]);
    assert_eq!(bpfo_state(dir.path())["state"], "normal");
    let c = rusqlite::Connection::open(dir.path().join("gw.sqlite")).unwrap();
    let last: i64 = c
        .query_row("SELECT MAX(id) FROM reports", [], |r| r.get(0))
        .unwrap();
    c.execute(
        "UPDATE defects SET searched = 0 WHERE report_id = ?1 AND kind = 'BPFO'",
        [last],
    )
    .unwrap();
    c.execute(
        "UPDATE defects SET amplitude_g = 0.05 WHERE report_id = ?1 AND kind = 'BPFI'",
        [last],
    )
    .unwrap();
    drop(c);
    let o = run(
        &[
            "gateway",
            "status",
            "--db",
            "gw.sqlite",
            "--json",
            "--now",
            NOW,
        ],
        dir.path(),
    );
    let v: Value = serde_json::from_slice(&o.stdout).unwrap();
    let line = |k: &str| {
        v["defects"]
            .as_array()
            .unwrap()
            .iter()
            .find(|d| d["node"] == 7 && d["kind"] == k)
            .unwrap()
            .clone()
    };
    assert_eq!(line("BPFO")["state"], "not_covered");
    assert_eq!(line("BPFI")["amplitude_g"], 0.05);
    assert_eq!(line("BPFI")["amplitude_source"], "amplitude_g");
    // 50 mg over the 1 mg floor with nothing detected: a rise without the
    // node's detection is not graded (a quiet line's amplitude is noise), and
    // the quiet report is learned into the baseline.
    assert_eq!(line("BPFI")["state"], "normal");
    let o = run(
        &["gateway", "status", "--db", "gw.sqlite", "--now", NOW],
        dir.path(),
    );
    let row = stdout(&o)
        .lines()
        .find(|l| l.trim_start().starts_with("7 "))
        .unwrap()
        .to_string();
    // the bearing's worst line is the one that cannot be searched: never NORMAL
    assert!(row.contains("NOT COVERED"), "{row}");
}
