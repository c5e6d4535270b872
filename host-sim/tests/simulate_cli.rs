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
        (2, 51_200, 76_800)
    );
    // The same run in-process (the demo machine is the default) gives the
    // same samples.
    let mut spec = MachineSpec::demo().unwrap();
    spec.seconds = 1.5;
    spec.speed = SpeedProfile::Constant { rpm: 1200.0 };
    spec.bearings[0].fault = Fault::Ball;
    let out = simulate(&spec, 3).unwrap();
    assert_eq!(w.channels[0], out.accel);
    assert_eq!(w.channels[1], out.tach);
    let e = read_edges_csv(&csv).unwrap();
    assert_eq!(e.to_seconds(51_200.0), out.true_edges_s); // exact text round trip
    assert_eq!(e.values.len(), 30); // 20 rev/s x 1.5 s
}

#[test]
fn bad_spec_is_exit_code_2_naming_the_file_and_key() {
    let spec = tmp("bad.toml");
    std::fs::write(
        &spec,
        "[[shaft]]\nname = \"input\"\n[[bearing]]\nshaft = \"input\"\nslip = 0.9\n",
    )
    .unwrap();
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
        msg.contains("bad.toml") && msg.contains("bearing[0].slip"),
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

/// `envord simulate` with no options is the demo machine, long enough for
/// the example point's revolutions: analysed with host-sim/examples/point.toml
/// its record is not flagged `incomplete_record` (the former default, 10 s
/// of another machine at 1480 rpm, always was). `--help` names the machine.
#[test]
fn default_record_is_the_demo_machine_and_complete_for_the_example_point() {
    let wav = tmp("default.wav");
    let st = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(["simulate", "--out"])
        .arg(&wav)
        .status()
        .unwrap();
    assert!(st.success());
    let w = read_wav(&wav, ReadOptions::strict()).unwrap();
    let demo = MachineSpec::demo().unwrap();
    let out = simulate(&demo, 1).unwrap();
    assert_eq!(w.channels[0], out.accel, "default = demo machine, seed 1");
    let point = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/point.toml");
    let o = Command::new(env!("CARGO_BIN_EXE_envord"))
        .arg("analyze")
        .arg(&wav)
        .args(["--point", point, "--tach-channel", "1", "--json"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let flags = v["flags"].to_string();
    assert!(!flags.contains("incomplete_record"), "{flags}");
    let help = Command::new(env!("CARGO_BIN_EXE_envord"))
        .args(["simulate", "--help"])
        .output()
        .unwrap();
    let help = String::from_utf8_lossy(&help.stdout);
    assert!(help.contains("demo-machine.toml"), "{help}");
}
