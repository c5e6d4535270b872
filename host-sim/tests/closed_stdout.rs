//! `envord ... | head`: a command whose standard output is closed early
//! stops quietly with exit 0 (no "Broken pipe" panic, no exit 101 or 3).
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// Runs the binary with its stdout a pipe whose reading end is closed
/// before the command writes (as `head` does once it has its lines).
fn run_closed(args: &[&str], cwd: &Path) -> (Option<i32>, String) {
    let mut child = Command::new(BIN)
        .args(args)
        .current_dir(cwd)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    drop(child.stdout.take()); // the reader goes away
    let t0 = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if t0.elapsed() > Duration::from_secs(120) {
            child.kill().unwrap();
            panic!("{args:?} did not finish in 120 s");
        }
        std::thread::sleep(Duration::from_millis(10));
    };
    let mut e = String::new();
    use std::io::Read;
    child.stderr.take().unwrap().read_to_string(&mut e).unwrap();
    (status.code(), e)
}

#[test]
fn every_command_exits_quietly_on_a_closed_stdout() {
    let dir = tempfile::tempdir().unwrap();
    let frames: Vec<String> = (0..200u16).map(|s| hex(&frame(1, s, 5.0, false))).collect();
    std::fs::write(dir.path().join("in.txt"), frames.join("\n") + "\n").unwrap();
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "in.txt"],
        dir.path(),
    );
    assert!(o.status.success());
    let cases: Vec<Vec<&str>> = vec![
        vec!["--help"],
        vec!["gateway", "decode", "in.txt"],
        vec!["gateway", "decode", "--table", "in.txt"],
        vec!["gateway", "import", "--db", "gw2.sqlite", "in.txt"],
        vec!["gateway", "status", "--db", "gw.sqlite"],
        vec!["gateway", "status", "--db", "gw.sqlite", "--json"],
        vec![
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "1",
            "--bearing",
            "0",
        ],
        vec!["demo", "--out", "demo-out"],
    ];
    for args in &cases {
        let (code, err) = run_closed(args, dir.path());
        assert_eq!(code, Some(0), "{args:?}: stderr {err}");
        assert!(
            !err.contains("Broken pipe") && !err.contains("panicked"),
            "{args:?}: stderr {err}"
        );
    }
}
