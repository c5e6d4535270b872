//! One output rule for every command: an existing file is never replaced
//! unless `--force` is given (exit 2 naming the path and "use --force to
//! replace it"); files appear whole (written aside, then put in place); a
//! node's identity record is created owner-only.
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
use std::os::unix::fs::PermissionsExt;
use std::path::Path;

const KEEP: &[u8] = b"# an existing file the user did not ask to replace\n";

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

fn mode(p: &Path) -> u32 {
    std::fs::metadata(p).unwrap().permissions().mode() & 0o777
}

/// Asserts a refusal: exit 2, the path and the way out named, file kept.
fn assert_refused(o: &std::process::Output, file: &Path, what: &str) {
    let e = stderr(o);
    assert_eq!(o.status.code(), Some(2), "{what}: {e}");
    let name = file.file_name().unwrap().to_string_lossy();
    assert!(e.contains(name.as_ref()), "{what}: {e}");
    assert!(e.contains("use --force to replace it"), "{what}: {e}");
    assert_eq!(std::fs::read(file).unwrap(), KEEP, "{what}: file changed");
}

#[test]
fn provision_never_overwrites_an_identity_and_writes_it_owner_only() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("other.id"), KEEP).unwrap();
    // The identity of another node is in the way: refused, and no key made
    // for an identity that cannot be written.
    let o = run(
        &[
            "gateway",
            "provision",
            "--node-id",
            "7",
            "--key-out",
            "n7.key",
            "--identity-out",
            "other.id",
        ],
        d,
    );
    assert_refused(&o, &d.join("other.id"), "provision");
    assert!(
        !d.join("n7.key").exists(),
        "a key was left without identity"
    );
    // A fresh identity is created owner-only (with the mode, not chmod later:
    // under a permissive umask it is still 0600).
    let o = std::process::Command::new("sh")
        .arg("-c")
        .arg(format!(
            "umask 000 && exec {BIN} gateway provision --node-id 7 --key-out n7.key --identity-out n7.id"
        ))
        .current_dir(d)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(mode(&d.join("n7.id")), 0o600);
    assert_eq!(mode(&d.join("n7.key")), 0o600);
    // --force replaces both, still owner-only.
    let before = std::fs::read(d.join("n7.id")).unwrap();
    let o = run(
        &[
            "gateway",
            "provision",
            "--node-id",
            "7",
            "--key-out",
            "n7.key",
            "--identity-out",
            "n7.id",
            "--force",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_ne!(std::fs::read(d.join("n7.id")).unwrap(), before);
    assert_eq!(mode(&d.join("n7.id")), 0o600);
    assert_eq!(listing(d), ["n7.id", "n7.key", "other.id"]);
}

#[test]
fn simulate_never_overwrites_its_outputs_unless_forced() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("point.toml"), KEEP).unwrap();
    std::fs::write(d.join("edges.csv"), KEEP).unwrap();
    let o = run(&["simulate", "--out", "point.toml", "--seconds", "1"], d);
    assert_refused(&o, &d.join("point.toml"), "simulate --out");
    let o = run(
        &[
            "simulate",
            "--out",
            "new.wav",
            "--edges-csv",
            "edges.csv",
            "--seconds",
            "1",
        ],
        d,
    );
    assert_refused(&o, &d.join("edges.csv"), "simulate --edges-csv");
    assert!(!d.join("new.wav").exists(), "outputs are checked first");
    let o = run(
        &[
            "simulate",
            "--out",
            "point.toml",
            "--seconds",
            "1",
            "--force",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(&std::fs::read(d.join("point.toml")).unwrap()[..4], b"RIFF");
    // --force also before the subcommand (a global option)
    let o = run(
        &[
            "--force",
            "simulate",
            "--out",
            "point.toml",
            "--seconds",
            "1",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    // nothing half-written or temporary is left beside the outputs
    assert_eq!(listing(d), ["edges.csv", "point.toml"]);
}

#[test]
fn demo_twice_refuses_to_replace_its_files_and_an_empty_folder_is_fine() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir(d.join("empty")).unwrap();
    let o = run(&["demo", "--out", "empty"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    let files = ["demo-report.json", "demo-spectrum.png", "demo-spectrum.svg"];
    assert_eq!(listing(&d.join("empty")), files);
    let before: Vec<Vec<u8>> = files
        .iter()
        .map(|f| std::fs::read(d.join("empty").join(f)).unwrap())
        .collect();
    let o = run(&["demo", "--out", "empty", "--seed", "8"], d);
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{e}");
    assert!(
        e.contains("demo-report.json") && e.contains("use --force to replace it"),
        "{e}"
    );
    let after: Vec<Vec<u8>> = files
        .iter()
        .map(|f| std::fs::read(d.join("empty").join(f)).unwrap())
        .collect();
    assert_eq!(before, after);
    let o = run(&["demo", "--out", "empty", "--seed", "8", "--force"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_ne!(
        std::fs::read(d.join("empty/demo-report.json")).unwrap(),
        before[0]
    );
    assert_eq!(listing(&d.join("empty")), files);
}

#[test]
fn analyze_plot_and_batch_outputs_are_not_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir(d.join("rec")).unwrap();
    let o = run(
        &[
            "simulate",
            "--out",
            "rec/a.wav",
            "--seconds",
            "12",
            "--fault",
            "outer",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let point = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/demo-point.toml");
    std::fs::write(d.join("plot.svg"), KEEP).unwrap();
    let o = run(
        &[
            "analyze",
            "rec/a.wav",
            "--point",
            point,
            "--tach-channel",
            "1",
            "--plot",
            "plot.svg",
        ],
        d,
    );
    assert_refused(&o, &d.join("plot.svg"), "analyze --plot");
    std::fs::create_dir(d.join("out")).unwrap();
    std::fs::write(d.join("out/summary.md"), KEEP).unwrap();
    let o = run(
        &[
            "batch",
            "rec",
            "--point",
            point,
            "--tach-channel",
            "1",
            "--out",
            "out",
        ],
        d,
    );
    assert_refused(&o, &d.join("out/summary.md"), "batch");
    assert_eq!(listing(&d.join("out")), ["summary.md"], "checked first");
    let o = run(
        &[
            "batch",
            "rec",
            "--point",
            point,
            "--tach-channel",
            "1",
            "--out",
            "out",
            "--force",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_ne!(std::fs::read(d.join("out/summary.md")).unwrap(), KEEP);
}

#[test]
fn gateway_outputs_are_not_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let frames: Vec<String> = (0..4u16).map(|s| hex(&frame(1, s, 5.0, false))).collect();
    std::fs::write(d.join("in.txt"), frames.join("\n") + "\n").unwrap();
    let o = run(&["gateway", "import", "--db", "gw.sqlite", "in.txt"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(d.join("trend.svg"), KEEP).unwrap();
    let o = run(
        &[
            "gateway",
            "trend",
            "--db",
            "gw.sqlite",
            "--node",
            "1",
            "--bearing",
            "0",
            "--svg",
            "trend.svg",
        ],
        d,
    );
    assert_refused(&o, &d.join("trend.svg"), "trend --svg");
    let o = run(
        &[
            "gateway",
            "provision",
            "--node-id",
            "1",
            "--key-out",
            "n.key",
            "--identity-out",
            "n.id",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(d.join("dl.bin"), KEEP).unwrap();
    let o = run(
        &[
            "gateway",
            "downlink",
            "--node-id",
            "1",
            "--key",
            "n.key",
            "--counter",
            "1",
            "--out",
            "dl.bin",
            "survey",
        ],
        d,
    );
    assert_refused(&o, &d.join("dl.bin"), "downlink --out");
}
