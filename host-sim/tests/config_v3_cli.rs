//! One configuration (issue 15): what `analyze` accepts, the node can be
//! sent, or `analyze` refuses it naming the key; `gateway downlink config`
//! prints the report frame size of the point and the slowest EU868 data
//! rate that carries it, the size of the downlink, and the lines the point
//! cannot search, and refuses (exit 1, nothing written) unsearchable lines
//! or an oversize downlink unless told to accept them. The node applying
//! the v3 record (the firmware's own `Node`, on the firmware tests' mock
//! board) ends up with the measuring point `analyze` builds from the same
//! point file. EU868 payload limits 51/115/222 bytes: LoRaWAN Regional
//! Parameters RP002-1.0.x, from memory.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

#[path = "../../firmware/tests/common/mod.rs"]
mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use dsp_core::config::PointConfig;
use firmware::cycle::DownlinkOutcome;
use wire::config::StoredConfig;

const BIN: &str = env!("CARGO_BIN_EXE_envord");
const INPUT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/../boards/qemu-mps2/input");

fn run(args: &[&str], cwd: &Path) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(cwd)
        .output()
        .unwrap()
}

fn stand() -> String {
    std::fs::read_to_string(Path::new(INPUT).join("point.toml")).unwrap()
}

/// The stand's point with every setting record version 2 could not carry:
/// samples_per_rev, flat-top window, square rectifier, search settings,
/// ISO class, a second shaft and a gear mesh with its mate.
fn rich() -> String {
    stand()
        .replace(
            "[spectrum]\nrevolutions = 64",
            "[spectrum]\nrevolutions = 64\nsamples_per_rev = 128\nwindow = \"flattop\"\n\n\
             [search]\nharmonics = 6\nprominence_db = 9.5\nsideband_db = 7.0\n\n\
             [iso]\ngroup = 1\nsupport = \"flexible\"",
        )
        .replace("poles = 4", "poles = 4\nrectifier = \"square\"")
        // 128 samples per revolution: the node's resampler ring holds a
        // 1400-1600 rpm range (not 1400-3600)
        .replace("max_rpm = 3600.0", "max_rpm = 1600.0")
        + "\n[[shaft]]\nname = \"input\"\n\n[[shaft]]\nname = \"inter\"\ndriven_by = \"input\"\n\
           teeth = [20, 31]\n\n[[mesh]]\nname = \"stage-1\"\nshaft = \"input\"\nteeth = 20\n\
           mate_shaft = \"inter\"\n"
}

fn key(dir: &Path) -> PathBuf {
    let p = dir.join("node.key");
    let hex: String = common::KEY.iter().map(|b| format!("{b:02x}")).collect();
    std::fs::write(&p, format!("{hex}\n")).unwrap();
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o600)).unwrap();
    }
    p
}

fn downlink(dir: &Path, point: &str, extra: &[&str]) -> Output {
    let k = key(dir);
    let node = common::NODE_ID.to_string();
    let mut args = vec![
        "gateway",
        "downlink",
        "--node-id",
        &node,
        "--key",
        k.to_str().unwrap(),
        "--counter",
        "5",
        "--out",
        "dl.bin",
        "config",
        "--point",
        point,
    ];
    args.extend_from_slice(extra);
    run(&args, dir)
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// The stand's committed recording as a WAV (the first 2.75 s).
fn stand_wav(dir: &Path) -> PathBuf {
    let raw = std::fs::read(Path::new(INPUT).join("recording.i16")).unwrap();
    let x: Vec<i16> = raw
        .chunks_exact(2)
        .map(|b| i16::from_le_bytes([b[0], b[1]]))
        .collect();
    let p = dir.join("stand.wav");
    host_sim::wav::write_wav_i16(&p, 25_600, &[&x[..70_400]]).unwrap();
    p
}

fn without_names(mut p: PointConfig) -> PointConfig {
    for s in p.shafts.iter_mut() {
        s.name.clear();
    }
    for b in p.bearings.iter_mut() {
        b.name.clear();
    }
    for m in p.meshes.iter_mut() {
        m.name.clear();
    }
    p
}

#[test]
fn the_node_applies_the_v3_record_and_measures_the_point_analyze_builds() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("rich.toml"), rich()).unwrap();
    let o = downlink(dir.path(), "rich.toml", &[]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    let frame = std::fs::read(dir.path().join("dl.bin")).unwrap();
    // 1 bearing, 1 mesh: report frame 21 + 18 + 4 = 43 bytes (frame v2)
    assert!(
        err.contains("report frame (format 2) 43 bytes") && err.contains("DR0 (SF12/125 kHz)"),
        "{err}"
    );
    // record 76 + 2 shafts 8 + search 28 + geometry 14 + mesh 3 + CRC 4 =
    // 133; downlink = 7 header + 1 command + 133 + 8 tag = 149 bytes: DR4
    assert_eq!(frame.len(), 149);
    assert!(
        err.contains("149 bytes, slowest EU868 data rate that carries it: DR4"),
        "{err}"
    );

    // what analyze builds from the same file
    let analysed = host_sim::point::parse(&rich()).unwrap();
    // the node: verified, parsed, stored with its counter, then read back
    // after a power cycle from the config slot
    let (mut node, _log) = common::Bench::new(8, 256).build();
    assert_eq!(node.apply_downlink(&frame), DownlinkOutcome::ConfigApplied);
    let applied = wire::point::point_config(node.config()).unwrap();
    assert_eq!(without_names(applied), without_names(analysed.clone()));
    let slot = node.devices().storage.slots["config"].clone();
    let stored = StoredConfig::decode(&slot).unwrap();
    assert_eq!(stored.counter, 5);
    assert_eq!(slot[4 + 2], 3, "stored as record version 3");
    let mut bench = common::Bench::new(8, 256);
    bench.storage.slots.insert("config", slot);
    let (rebooted, _) = bench.build();
    let again = wire::point::point_config(rebooted.config()).unwrap();
    assert_eq!(without_names(again), without_names(analysed.clone()));
    // and the node-sized pipeline accepts it
    let check = dsp_core::pipeline::NodePipeline::check(&analysed);
    assert!(check.is_ok(), "{check:?}");

    // analyze accepts the same point (it could be sent)
    let wav = stand_wav(dir.path());
    let o = run(
        &[
            "analyze",
            wav.to_str().unwrap(),
            "--point",
            "rich.toml",
            "--rpm",
            "1480",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
}

#[test]
fn analyze_refuses_a_point_the_node_could_not_be_sent() {
    let dir = tempfile::tempdir().unwrap();
    let wav = stand_wav(dir.path());
    // (point-file change, the key the refusal names)
    let cases = [
        ("tick_hz = 25600", "tick_hz = 500", "speed.tick_hz"),
        (
            "band_hz = [2000.0, 8000.0]",
            "band_hz = [0.5, 8000.0]",
            "envelope.band_hz",
        ),
        (
            "counts_to_g = 0.008789",
            "counts_to_g = 2000.0",
            "sensor.counts_to_g",
        ),
    ];
    for (from, to, key) in cases {
        let text = stand().replace(from, to);
        assert_ne!(text, stand(), "{key}: case did not apply");
        std::fs::write(dir.path().join("p.toml"), &text).unwrap();
        // dsp-core alone accepts it: only the record cannot carry it
        assert!(host_sim::point::parse(&text).is_ok(), "{key}");
        let o = run(
            &[
                "analyze",
                wav.to_str().unwrap(),
                "--point",
                "p.toml",
                "--rpm",
                "1480",
            ],
            dir.path(),
        );
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{key}: {err}");
        assert!(
            err.contains("p.toml") && err.contains(key) && err.contains("could not be sent"),
            "{key}: {err}"
        );
        assert!(o.stdout.is_empty(), "{key}: nothing analysed");
        // and the downlink refuses it the same way
        let o = downlink(dir.path(), "p.toml", &[]);
        assert_eq!(o.status.code(), Some(2), "{key}");
        assert!(stderr(&o).contains(key), "{key}: {}", stderr(&o));
        assert!(!dir.path().join("dl.bin").exists());
    }
}

#[test]
fn downlink_config_refuses_unsearchable_lines_unless_accepted() {
    let dir = tempfile::tempdir().unwrap();
    // a 1/400 output shaft: its bearing cannot be searched at any setting
    // (dsp_core::diagnosis::coverage: 16 bins per shaft order)
    let slow = stand()
        + "\n[[shaft]]\nname = \"input\"\n\n[[shaft]]\nname = \"output\"\nratio = 0.0025\n\n\
           [[bearing]]\nname = \"out-de\"\nshaft = \"output\"\nbpfo_x = 3.5848\nbpfi_x = 5.4152\n\
           ftf_x = 0.39828\nbsf_x = 2.35675\n";
    std::fs::write(dir.path().join("slow.toml"), slow).unwrap();
    let o = downlink(dir.path(), "slow.toml", &[]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("bearing out-de BPFO: not searched") && err.contains("--accept-gaps"),
        "{err}"
    );
    assert!(err.contains("report frame (format 2) 57 bytes"), "{err}");
    assert!(!dir.path().join("dl.bin").exists(), "nothing written");
    let o = downlink(dir.path(), "slow.toml", &["--accept-gaps"]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(dir.path().join("dl.bin").exists());
}

#[test]
fn a_downlink_longer_than_the_largest_eu868_payload_is_refused_unless_accepted() {
    let dir = tempfile::tempdir().unwrap();
    // 8 bearings by orders on 4 shafts, 4 meshes, custom search: record
    // 76 + 16 + 28 + 8 x 17 + 4 x 3 + 4 = 272, downlink 288 bytes > 222
    let mut text = stand()
        .replace(
            "[spectrum]\nrevolutions = 64",
            "[spectrum]\nrevolutions = 256\n\n[search]\nharmonics = 4",
        )
        .lines()
        .take_while(|l| !l.starts_with("[[bearing]]"))
        .map(|l| format!("{l}\n"))
        .collect::<String>();
    text += "[[shaft]]\nname = \"s0\"\n";
    for (i, r) in [(1, 0.8), (2, 0.6), (3, 0.5)] {
        text += &format!("[[shaft]]\nname = \"s{i}\"\nratio = {r}\n");
    }
    for i in 0..8 {
        let scale = 1.0 + 0.013 * f64::from(i);
        text += &format!(
            "[[bearing]]\nname = \"b{i}\"\nshaft = \"s{}\"\nbpfo_x = {}\nbpfi_x = {}\nftf_x = \
             0.39\nbsf_x = {}\n",
            i % 4,
            3.05 * scale,
            4.95 * scale,
            1.99 * scale
        );
    }
    for i in 0..4 {
        text += &format!(
            "[[mesh]]\nname = \"m{i}\"\nshaft = \"s{}\"\nteeth = {}\nmate_shaft = \"s{}\"\n",
            i % 4,
            7 + i,
            (i + 1) % 4
        );
    }
    std::fs::write(dir.path().join("big.toml"), &text).unwrap();
    host_sim::point::parse(&text).unwrap();
    let o = downlink(dir.path(), "big.toml", &["--accept-gaps"]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("288 bytes") && err.contains("222") && err.contains("not split"),
        "{err}"
    );
    // 8 bearings, 4 meshes: report frame 21 + 144 + 16 = 181 bytes, DR4
    assert!(err.contains("report frame (format 2) 181 bytes"), "{err}");
    assert!(!dir.path().join("dl.bin").exists(), "nothing written");
    let o = downlink(
        dir.path(),
        "big.toml",
        &["--accept-gaps", "--accept-oversize"],
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let frame = std::fs::read(dir.path().join("dl.bin")).unwrap();
    assert_eq!(frame.len(), 288);
    // the node takes it whole (its downlink buffer holds the largest record)
    let (mut node, _) = common::Bench::new(8, 256).build();
    assert_eq!(node.apply_downlink(&frame), DownlinkOutcome::ConfigApplied);
    assert_eq!(node.config().bearings.len(), 8);
    assert_eq!(node.config().meshes.len(), 4);
}
