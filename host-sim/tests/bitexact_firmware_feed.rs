//! Bit-exactness of the host against the node: `envord analyze --json` on an
//! int16 WAV must give exactly the report that the core gives when driven
//! the way the firmware drives it: a `NodePipeline` fed ADC_BLOCK-sample
//! blocks of raw counts, with the tach edges captured during a block pushed
//! (as 1 MHz capture-timer ticks) before that block, and acquisition stopped
//! once the pipeline reports the record complete.
//!
//! The feeding loop below is written here, independently of
//! `host_sim::analysis::run`. Every f32 of the report is compared bit for
//! bit: the binary's JSON text must equal, byte for byte, the JSON text of
//! the firmware-fed report (numbers are printed from f32 through f64 as the
//! shortest text that reads back exactly, so equal text means equal bits);
//! the contract fields are also read back and compared to the `Report`'s
//! f32 values bit for bit. (serde_json's default number parser may be one
//! f64 ulp off, its docs say, which rounding to f32 removes.)
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_sign_loss,
    clippy::cast_precision_loss
)]

mod roundtrip_common;

use std::path::{Path, PathBuf};
use std::process::Command;

use dsp_core::config::PointConfig;
use dsp_core::diagnosis::kinematics::DefectKind;
use dsp_core::pipeline::{NodePipeline, ADC_BLOCK};
use dsp_core::report::Report;
use host_sim::cmd_demo::to_counts;
use host_sim::report_json::to_json;
use host_sim::simulate::{simulate, Fault, SpeedProfile};
use roundtrip_common::{machine, point_text, IMPACT_G, NOISE_G};
use serde_json::Value;

fn tmpdir(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("envord-bitexact-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// The firmware's loop: edges as capture ticks (1 MHz timer started with the
/// first ADC sample), pushed before the block during which they occurred.
fn firmware_feed(point: &PointConfig, counts: &[i16], fs: f64, edges_s: &[f64]) -> Report {
    let mut p = Box::new(NodePipeline::new(point).unwrap());
    let tick_hz = 1_000_000.0;
    let ticks: Vec<u32> = edges_s
        .iter()
        .map(|&t| ((t * tick_hz).round() as u64 % (1u64 << 32)) as u32)
        .collect();
    let mut next = 0;
    // The point's passes one after the other, switching at a block boundary
    // once a pass completes (firmware/src/pipeline_core.rs).
    let mut merged: Option<Report> = None;
    for (k, block) in counts.chunks(ADC_BLOCK).enumerate() {
        if p.complete() {
            if p.pass() + 1 >= p.pass_count() {
                break;
            }
            let r = p.finish();
            match &mut merged {
                Some(m) => m.merge_pass(r),
                None => merged = Some(r),
            }
            let _ = p.next_pass();
        }
        let block_end_s = (k * ADC_BLOCK + block.len()) as f64 / fs;
        while next < edges_s.len() && edges_s[next] < block_end_s {
            p.push_edge(ticks[next]);
            next += 1;
        }
        p.push_i16(block);
    }
    let r = p.finish();
    match merged {
        Some(mut m) => {
            m.merge_pass(r);
            m
        }
        None => r,
    }
}

/// The f32 a JSON number was printed from.
fn json_f32(v: &Value, what: &str) -> f32 {
    let got = v
        .as_f64()
        .unwrap_or_else(|| panic!("{what}: {v} is not a number"));
    let as32 = got as f32;
    // Within one f64 ulp of an f32 value (see the module doc).
    let ulp = f64::from(as32).abs() * f64::EPSILON;
    assert!(
        (got - f64::from(as32)).abs() <= ulp,
        "{what}: {got} is not an f32 value"
    );
    as32
}

/// Asserts `v` is a JSON number holding exactly the f32 `x`.
fn same_f32(v: &Value, x: f32, what: &str) {
    let got = json_f32(v, what);
    assert_eq!(got.to_bits(), x.to_bits(), "{what}: binary {got}, core {x}");
}

/// Paths (and both values) where two JSON documents differ.
fn diff(path: &str, a: &Value, b: &Value, out: &mut Vec<String>) {
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            for k in x.keys().chain(y.keys().filter(|k| !x.contains_key(*k))) {
                diff(
                    &format!("{path}.{k}"),
                    x.get(k).unwrap_or(&Value::Null),
                    y.get(k).unwrap_or(&Value::Null),
                    out,
                );
            }
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => {
            for (i, (p, q)) in x.iter().zip(y).enumerate() {
                diff(&format!("{path}[{i}]"), p, q, out);
            }
        }
        (Value::Number(_), Value::Number(_))
            if json_f32(a, path).to_bits() != json_f32(b, path).to_bits() =>
        {
            out.push(format!("{path}: binary {a}, firmware-fed {b}"));
        }
        (Value::Number(_), Value::Number(_)) => {}
        _ if a != b => out.push(format!("{path}: binary {a}, firmware-fed {b}")),
        _ => {}
    }
}

fn run_binary(wav: &Path, point: &Path, edges_csv: &Path) -> String {
    let o = Command::new(env!("CARGO_BIN_EXE_envord"))
        .arg("analyze")
        .arg(wav)
        .arg("--point")
        .arg(point)
        .arg("--tach")
        .arg(edges_csv)
        .arg("--json")
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8(o.stdout).unwrap()
}

fn check_case(tag: &str, profile: SpeedProfile, fault: Fault, seed: u64) {
    let dir = tmpdir(tag);
    let (lo, hi) = profile.rpm_bounds();
    let text = point_text(lo, hi);
    let point = host_sim::point::parse(&text).unwrap();
    let spec = machine(profile, fault, IMPACT_G, NOISE_G);
    let sim = simulate(&spec, seed).unwrap();
    let counts = to_counts(&sim.accel, point.counts_to_g);
    let wav = dir.join("rec_i16.wav");
    host_sim::wav::write_wav_i16(&wav, sim.fs as u32, &[&counts]).unwrap();
    let pfile = dir.join("point.toml");
    std::fs::write(&pfile, &text).unwrap();
    // Edge times written as shortest round-trip decimal text (Rust's f64
    // Display), so the binary reads the very same f64 values.
    let mut csv = String::from("time_s\n");
    for t in &sim.pulse_edges_s {
        csv.push_str(&format!("{t}\n"));
    }
    let cfile = dir.join("edges.csv");
    std::fs::write(&cfile, csv).unwrap();

    let text = run_binary(&wav, &pfile, &cfile);
    let json: Value = serde_json::from_str(&text).unwrap();
    let report = firmware_feed(&point, &counts, sim.fs, &sim.pulse_edges_s);
    assert!(report.analysed(), "{tag}: {}", report.flags);

    // Whole document: every field, numbers compared as f64 (exact).
    let mut mine = to_json(&report, Some(&wav.display().to_string()));
    // `analyze` adds the point's coinciding lines (from the point alone).
    mine["line_coincidences"] = host_sim::cmd_analyze::coincidences(&point).1;
    let mut diffs = Vec::new();
    diff("", &json, &mine, &mut diffs);
    assert!(
        diffs.is_empty(),
        "{tag}: binary and firmware-fed reports differ at {} places: {:#?}",
        diffs.len(),
        &diffs[..diffs.len().min(20)]
    );
    // Byte-identical text: every number bit-identical.
    let mine_text = serde_json::to_string_pretty(&mine).unwrap() + "\n";
    assert!(text == mine_text, "{tag}: JSON texts differ");

    // The contract fields, bit for bit against the Report itself.
    same_f32(&json["speed_rpm"], report.speed.mean_rpm, "speed_rpm");
    same_f32(&json["speed"]["min_rpm"], report.speed.min_rpm, "min_rpm");
    same_f32(&json["speed"]["max_rpm"], report.speed.max_rpm, "max_rpm");
    same_f32(&json["overall"]["rms_g"], report.overall.rms_ac, "rms");
    same_f32(
        &json["overall"]["kurtosis"],
        report.overall.kurtosis,
        "kurt",
    );
    assert_eq!(json["flags"].as_array().unwrap().len(), 0, "{tag}: flags");
    let bearings = json["bearings"].as_array().unwrap();
    assert_eq!(bearings.len(), report.bearings.len());
    let mut any_detected = false;
    for (jb, b) in bearings.iter().zip(&report.bearings) {
        assert_eq!(jb["name"], b.name.as_str());
        let defects = jb["defects"].as_array().unwrap();
        // a bearing of a later pass that this short record does not reach
        // is not searched (and the whole document matched above)
        let Some(d) = b.diagnosis.as_ref() else {
            assert!(
                defects.iter().all(|jd| jd["searched"] == false),
                "{tag}: {jb}"
            );
            continue;
        };
        assert_eq!(defects.len(), 4);
        for (jd, k) in defects.iter().zip(DefectKind::ALL) {
            let r = d.get(k).unwrap();
            let what = format!("{tag} {} {}", b.name.as_str(), k.name());
            assert_eq!(jd["kind"], k.name(), "{what}");
            assert_eq!(jd["detected"], r.detected, "{what}");
            same_f32(&jd["order"], b.orders.line(k), &format!("{what} order"));
            same_f32(&jd["score_db"], r.score_db, &format!("{what} score"));
            let hs = jd["harmonics"].as_array().unwrap();
            assert_eq!(hs.len(), r.harmonics.len());
            for (jh, h) in hs.iter().zip(&r.harmonics) {
                same_f32(&jh["amplitude"], h.amplitude, &format!("{what} amp"));
                same_f32(&jh["floor"], h.floor, &format!("{what} floor"));
            }
            any_detected |= r.detected;
        }
    }
    // The case must exercise a detection, or the decision fields prove little.
    assert!(any_detected, "{tag}: no detection to compare");
}

#[test]
fn analyze_json_equals_firmware_fed_core_on_int16_ramp() {
    check_case(
        "ramp",
        SpeedProfile::Ramp {
            start_rpm: 750.0,
            end_rpm: 1500.0,
        },
        Fault::Inner,
        5,
    );
}

#[test]
fn analyze_json_equals_firmware_fed_core_on_int16_constant() {
    check_case(
        "const",
        SpeedProfile::Constant { rpm: 2400.0 },
        Fault::Outer,
        6,
    );
}
