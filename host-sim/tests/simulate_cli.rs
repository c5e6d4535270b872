//! `envord simulate` end to end: the files it writes, read back with the
//! crate's readers, and its exit codes (0 ok, 2 bad input; see error.rs).
#![allow(
    clippy::field_reassign_with_default,
    clippy::unwrap_used,
    clippy::indexing_slicing
)]

use host_sim::edges_csv::read_edges_csv;
use host_sim::simulate::{simulate, Fault, MachineSpec, SpeedProfile};
use host_sim::wav::{read_wav, ReadOptions, SampleFormat};
use std::process::Command;

fn tmp(name: &str) -> std::path::PathBuf {
    let d = std::env::temp_dir().join(format!("envord-sim-cli-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d.join(name)
}

#[test]
fn writes_two_channel_float_wav_and_edges() {
    let (wav, csv) = (tmp("a.wav"), tmp("a.csv"));
    let st = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args([
            "simulate",
            "--seconds",
            "1.5",
            "--rpm",
            "1200",
            "--fault",
            "ball",
            "--seed",
            "3",
        ])
        .arg("--out")
        .arg(&wav)
        .arg("--edges-csv")
        .arg(&csv)
        .status()
        .unwrap();
    assert!(st.success());
    let w = read_wav(&wav, ReadOptions::strict()).unwrap();
    assert_eq!(w.info.format, SampleFormat::Float32);
    assert_eq!(
        (w.info.channels, w.info.sample_rate, w.frames()),
        (2, 25_600, 38_400)
    );
    // The same run in-process gives the same samples.
    let mut spec = MachineSpec::default();
    spec.seconds = 1.5;
    spec.speed = SpeedProfile::Constant { rpm: 1200.0 };
    spec.bearings[0].fault = Fault::Ball;
    let out = simulate(&spec, 3).unwrap();
    assert_eq!(w.channels[0], out.accel);
    assert_eq!(w.channels[1], out.tach);
    let e = read_edges_csv(&csv).unwrap();
    assert_eq!(e.to_seconds(25_600.0), out.true_edges_s); // exact text round trip
    assert_eq!(e.values.len(), 30); // 20 rev/s x 1.5 s
}

#[test]
fn bad_spec_is_exit_code_2_naming_the_file_and_key() {
    let spec = tmp("bad.toml");
    std::fs::write(&spec, "[[bearings]]\nshaft = \"input\"\nslip = 0.9\n").unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(["simulate", "--out"])
        .arg(tmp("b.wav"))
        .arg("--spec")
        .arg(&spec)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let msg = String::from_utf8_lossy(&o.stderr);
    assert!(
        msg.contains("bad.toml") && msg.contains("bearings[0].slip"),
        "{msg}"
    );
    let o = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(["simulate", "--out"])
        .arg(tmp("c.wav"))
        .arg("--spec")
        .arg(tmp("missing.toml"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(!tmp("c.wav").exists());
}
