//! `envord energy` end to end: the budget's arithmetic is consistent, the
//! figures can come from a benchmark run, and bad input names its key.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    missing_docs
)]

use std::path::PathBuf;
use std::process::{Command, Output};

fn envord(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(args)
        .output()
        .unwrap()
}

fn demo_point() -> String {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("examples/demo-point.toml")
        .display()
        .to_string()
}

fn bad(args: &[&str], want: &[&str]) {
    let out = envord(args);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
    for w in want {
        assert!(err.contains(w), "{args:?}: {err} lacks {w:?}");
    }
}

#[test]
fn json_budget_adds_up() {
    let p = demo_point();
    let out = envord(&["energy", "--point", &p, "--rpm", "1300", "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // 256 revolutions at 1300 rpm at 51.2 kS/s, whole 256-sample blocks
    let samples = v["samples"].as_f64().unwrap();
    let record = 256.0 * 60.0 / 1300.0 * 51_200.0;
    assert!(samples >= record && samples < record + 256.0, "{samples}");
    // three bearings: 49-byte full frame (docs/frame-format.md), 11-byte reduced
    assert_eq!(v["full_frame_bytes"], 49);
    assert_eq!(v["reduced_frame_bytes"], 11);
    let full = &v["full"];
    let items = full["items"].as_array().unwrap();
    let sum: f64 = items
        .iter()
        .map(|i| i["charge_mas"].as_f64().unwrap())
        .sum();
    for i in items {
        let (t, c, q) = (
            i["time_s"].as_f64().unwrap(),
            i["current_ma"].as_f64().unwrap(),
            i["charge_mas"].as_f64().unwrap(),
        );
        assert!((t * c - q).abs() < 1e-9, "{i}");
    }
    let param = |k: &str| {
        v["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["key"] == k)
            .unwrap()["value"]
            .as_f64()
            .unwrap()
    };
    // CPU time: instructions x CPI / clock
    let instr =
        samples * param("cpu.instr_per_sample") + samples / 256.0 * param("cpu.instr_per_block");
    let cpu = items
        .iter()
        .find(|i| i["name"].as_str().unwrap().starts_with("CPU: pipeline"))
        .unwrap();
    let want_s = instr * param("mcu.cpi") / (param("mcu.clock_mhz") * 1e6);
    assert!((cpu["time_s"].as_f64().unwrap() - want_s).abs() < 1e-9);
    let intervals: Vec<f64> = v["every_cycle"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a["interval_s"].as_f64().unwrap())
        .collect();
    assert_eq!(intervals, [600.0, 3600.0, 21_600.0]);
    let sleep_ua = param("mcu.sleep_ua") + param("radio.sleep_ua") + param("board.quiescent_ua");
    for a in v["every_cycle"].as_array().unwrap() {
        let t = a["interval_s"].as_f64().unwrap();
        let sleep = sleep_ua / 1000.0 * (t - full["awake_s"].as_f64().unwrap());
        assert!((a["sleep_mas"].as_f64().unwrap() - sleep).abs() < 1e-9);
        let total = sum + sleep;
        assert!((a["total_mas"].as_f64().unwrap() - total).abs() < 1e-9);
        let avg_ma = total / t;
        // life = usable capacity / (consumption + self-discharge) per year of 8766 h
        let cap = param("cell.capacity_mah");
        let life = cap * param("cell.usable_pct")
            / 100.0
            / (avg_ma * 8766.0 + cap * param("cell.self_discharge_pct_per_year") / 100.0);
        assert!((a["life_years"].as_f64().unwrap() - life).abs() < 1e-9 * life);
    }
    // the break-even figure reproduces the goal's share when put back in
    let ips = v["instr_per_sample_for_goal_1h"].as_f64().unwrap();
    let dir = tempfile::tempdir().unwrap();
    let hw = dir.path().join("hw.toml");
    std::fs::write(&hw, format!("[cpu]\ninstr_per_sample = {ips}\n")).unwrap();
    let out = envord(&[
        "energy",
        "--point",
        &p,
        "--rpm",
        "1300",
        "--interval",
        "1h",
        "--hardware",
        hw.to_str().unwrap(),
        "--json",
    ]);
    let w: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let share = w["every_cycle"][0]["cpu_share"].as_f64().unwrap();
    assert!((share - 0.10).abs() < 1e-9, "{share}");
}

#[test]
fn text_table_has_the_three_intervals_and_the_goal() {
    let p = demo_point();
    let out = envord(&["energy", "--point", &p, "--rpm", "1300"]);
    assert!(out.status.success());
    let s = String::from_utf8(out.stdout).unwrap();
    for want in [
        "\n10 min ",
        "\n1 h ",
        "\n6 h ",
        "goal: CPU share below 10 % at one measurement per hour",
        "radio: uplink, 62 B at SF7 / 125 kHz",
        "cpu.instr_per_sample",
        "from memory",
    ] {
        assert!(s.contains(want), "missing {want:?} in\n{s}");
    }
}

#[test]
fn cpu_figures_from_a_benchmark_run() {
    let dir = tempfile::tempdir().unwrap();
    let b = dir.path().join("bench.json");
    let rows = |extra: &str| {
        format!(
            r#"{{"results": [{{"key": "pipeline_per_sample", "value": 100.0, "unit": "instr/sample", "what": ""}},
            {{"key": "pipeline_finish", "value": 500000.0}}, {{"key": "ring_push", "value": 600.0}}{extra}], "info": []}}"#
        )
    };
    std::fs::write(&b, rows(r#", {"key": "ring_pop", "value": 400.0}"#)).unwrap();
    let p = demo_point();
    let out = envord(&[
        "energy",
        "--point",
        &p,
        "--bench",
        b.to_str().unwrap(),
        "--json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let get = |k: &str| {
        v["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["key"] == k)
            .unwrap()
            .clone()
    };
    assert_eq!(get("cpu.instr_per_sample")["value"], 100.0);
    assert_eq!(get("cpu.instr_per_block")["value"], 1000.0);
    assert_eq!(get("cpu.instr_finish")["value"], 500_000.0);
    assert!(get("cpu.instr_per_sample")["origin"]
        .as_str()
        .unwrap()
        .contains("pipeline_per_sample"));
    // a tach point without --rpm: the slowest speed of the point (700 rpm)
    assert_eq!(v["rpm"], 700.0);
    // a result without ring_pop is refused with the row named
    std::fs::write(&b, rows("")).unwrap();
    bad(
        &["energy", "--point", &p, "--bench", b.to_str().unwrap()],
        &["bench.json", "ring_pop"],
    );
}

#[test]
fn bad_input_names_the_key() {
    let p = demo_point();
    let dir = tempfile::tempdir().unwrap();
    let hw = dir.path().join("hw.toml");
    let hw_s = hw.to_str().unwrap().to_string();
    for (text, key) in [
        ("[mcu]\nrun_mA = 3.0\n", "mcu.run_mA: unknown key"),
        (
            "[radio]\ntx_ma = \"lots\"\n",
            "radio.tx_ma: expected a number",
        ),
        ("[cell]\ncapacity_mah = 0\n", "cell.capacity_mah"),
        ("[radio]\nrx2_bw_khz = 100\n", "radio.rx2_bw_khz"),
    ] {
        std::fs::write(&hw, text).unwrap();
        bad(
            &["energy", "--point", &p, "--hardware", &hw_s],
            &["hw.toml", key],
        );
    }
    bad(
        &["energy", "--point", &p, "--interval", "5s"],
        &["--interval 5s", "every 10 s"],
    );
    bad(
        &["energy", "--point", &p, "--interval", "1w"],
        &["--interval"],
    );
    bad(
        &["energy", "--point", &p, "--sf", "13"],
        &["--sf", "spreading factor 13"],
    );
    bad(&["energy", "--point", &p, "--bw-khz", "100"], &["--bw-khz"]);
    bad(
        &["energy", "--point", &p, "--cpi", "0"],
        &["--cpi", "mcu.cpi"],
    );
    bad(&["energy", "--point", &p, "--rpm=-5"], &["--rpm"]);
    let pt = dir.path().join("point.toml");
    std::fs::write(
        &pt,
        std::fs::read_to_string(&p).unwrap() + "\n[report]\nfull_every = 0\n",
    )
    .unwrap();
    bad(
        &["energy", "--point", pt.to_str().unwrap()],
        &["point.toml", "report.full_every"],
    );
}
