//! `envord simulate` then `envord analyze --tach-channel 1 --json`, the
//! built binary end to end: a float32 two-channel WAV (acceleration in g,
//! tach pulse in V), the point file on disk, the JSON contract parsed back.
//! Each fault kind must come out as that kind on the faulty bearing, with
//! the highest score of that bearing (the cage line of a rolling-element
//! fault left out, see `roundtrip_common::companions`), and the mean speed
//! must be the simulated one.
//!
//! Outside references as in roundtrip_detect.rs (CWRU 6205 multiples;
//! defect signatures after Randall & Antoni 2011, from memory).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

mod roundtrip_common;

use std::path::PathBuf;
use std::process::Command;

use host_sim::simulate::{Fault, SpeedProfile};
use roundtrip_common::*;
use serde_json::Value;

fn tmpdir() -> PathBuf {
    let d = std::env::temp_dir().join(format!("envord-roundtrip-cli-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn envord(args: &[&std::ffi::OsStr]) -> std::process::Output {
    let o = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(args)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "envord {args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    o
}

fn roundtrip(fault: Fault, profile: SpeedProfile, seed: u64) {
    let dir = tmpdir();
    let tag = format!("{fault:?}-{seed}");
    let spec = machine(profile, fault, IMPACT_G, NOISE_G);
    let spec_file = dir.join(format!("{tag}-machine.toml"));
    std::fs::write(&spec_file, toml::to_string(&spec).unwrap()).unwrap();
    let (lo, hi) = profile.rpm_bounds();
    let point_file = dir.join(format!("{tag}-point.toml"));
    std::fs::write(&point_file, point_text(lo, hi)).unwrap();
    let wav = dir.join(format!("{tag}.wav"));
    let edges_file = dir.join(format!("{tag}-edges.csv"));
    let seed_s = seed.to_string();
    envord(&[
        "simulate".as_ref(),
        "--spec".as_ref(),
        spec_file.as_os_str(),
        "--seed".as_ref(),
        seed_s.as_ref(),
        "--out".as_ref(),
        wav.as_os_str(),
        "--edges-csv".as_ref(),
        edges_file.as_os_str(),
    ]);
    let o = envord(&[
        "analyze".as_ref(),
        wav.as_os_str(),
        "--point".as_ref(),
        point_file.as_os_str(),
        "--tach-channel".as_ref(),
        "1".as_ref(),
        "--json".as_ref(),
    ]);
    let v: Value = serde_json::from_slice(&o.stdout).unwrap();

    // Mean speed: the mean over the report's revolutions of the true
    // per-revolution speeds (60 / period, from the simulator's true rev
    // times), within 0.5 % (the tach edges carry 2 us jitter).
    let rpm = v["speed_rpm"].as_f64().unwrap();
    let revs = v["speed"]["revolutions"].as_u64().unwrap() as usize;
    let t = host_sim::edges_csv::read_edges_csv(&edges_file)
        .unwrap()
        .to_seconds(FS_HZ);
    assert!(
        t.len() > revs,
        "{tag}: {revs} revolutions, {} true edges",
        t.len()
    );
    let want_rpm = t
        .windows(2)
        .take(revs)
        .map(|w| 60.0 / (w[1] - w[0]))
        .sum::<f64>()
        / revs as f64;
    assert!(
        (rpm - want_rpm).abs() <= 0.005 * want_rpm,
        "{tag}: speed_rpm {rpm}, simulated {want_rpm} over {revs} revolutions"
    );
    assert_eq!(
        v["flags"].as_array().unwrap().len(),
        0,
        "{tag}: {}",
        v["flags"]
    );

    let want = kind_of(fault).unwrap().name();
    let b = v["bearings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|b| b["name"] == FAULTY)
        .unwrap();
    let defects = b["defects"].as_array().unwrap();
    let own = defects.iter().find(|d| d["kind"] == want).unwrap();
    assert_eq!(own["detected"], true, "{tag}: {want} not detected: {b}");
    let own_score = own["score_db"].as_f64().unwrap();
    let skip: Vec<&str> = companions(fault).iter().map(|k| k.name()).collect();
    for d in defects {
        if d["kind"] != want && !skip.iter().any(|s| d["kind"] == *s) {
            assert!(
                d["score_db"].as_f64().unwrap() < own_score,
                "{tag}: {} outscores {want}: {b}",
                d["kind"]
            );
        }
    }
    // The watched line is the published one (CWRU 6205; 2 x BSF for BSF).
    let [bpfo, bpfi, _, bsf] = CWRU_6205;
    let line = match fault {
        Fault::Outer => bpfo,
        Fault::Inner => bpfi,
        _ => 2.0 * bsf,
    };
    let order = own["order"].as_f64().unwrap();
    assert!((order - line).abs() < 2e-4 * line, "{tag}: order {order}");
}

#[test]
fn cli_outer_race_constant_1800_rpm() {
    roundtrip(Fault::Outer, SpeedProfile::Constant { rpm: 1800.0 }, 21);
}

#[test]
fn cli_inner_race_ramp_1200_to_2400_rpm() {
    roundtrip(
        Fault::Inner,
        SpeedProfile::Ramp {
            start_rpm: 1200.0,
            end_rpm: 2400.0,
        },
        22,
    );
}

#[test]
fn cli_rolling_element_ramp_2000_to_1000_rpm() {
    roundtrip(
        Fault::Ball,
        SpeedProfile::Ramp {
            start_rpm: 2000.0,
            end_rpm: 1000.0,
        },
        23,
    );
}
