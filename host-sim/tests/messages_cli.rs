//! Messages of the built `envord` for careless input: each names the
//! setting, file or option to change (not the stage that tripped), and the
//! outputs say what their figures mean. Exit codes per src/error.rs (2 bad
//! input, 3 unwritable output; clap usage errors are 2 as well).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss
)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const BIN: &str = env!("CARGO_BIN_EXE_envord");
const POINT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/point.toml");

fn envord(args: &[&str]) -> Output {
    Command::new(BIN).args(args).output().expect("run envord")
}

fn err(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn noise(n: usize, scale: f32) -> Vec<f32> {
    (0..n)
        .map(|k| scale * (((k as u32).wrapping_mul(2_654_435_761) >> 16) as f32 / 65_536.0 - 0.5))
        .collect()
}

/// A float WAV whose header claims `rate` (byte rate wrapping like a
/// careless writer's), samples written at 51.2 kHz.
fn wav_with_rate(dir: &Path, name: &str, rate: u32, chans: &[&[f32]]) -> PathBuf {
    let mut b = host_sim::wav::encode_wav_f32(51_200, chans).unwrap();
    let fmt = b.windows(4).position(|w| w == b"fmt ").unwrap();
    let block = u32::from(u16::from_le_bytes([b[fmt + 20], b[fmt + 21]]));
    b[fmt + 12..fmt + 16].copy_from_slice(&rate.to_le_bytes());
    b[fmt + 16..fmt + 20].copy_from_slice(&rate.wrapping_mul(block).to_le_bytes());
    let p = dir.join(name);
    std::fs::write(&p, b).unwrap();
    p
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn impossible_sample_rates_say_what_to_check() {
    let dir = tempfile::tempdir().unwrap();
    let x = noise(51_200, 0.05);
    for rate in [4_000_000_000u32, 1] {
        let w = wav_with_rate(dir.path(), &format!("r{rate}.wav"), rate, &[&x]);
        let o = envord(&["analyze", s(&w), "--point", POINT, "--rpm", "1480"]);
        let e = err(&o);
        assert_eq!(o.status.code(), Some(2), "{e}");
        assert!(
            e.contains(&format!("sample rate {rate} Hz")) && e.contains("header"),
            "{rate}: {e}"
        );
        assert!(!e.contains("ring") && !e.contains("Nyquist"), "{rate}: {e}");
    }
}

#[test]
fn rpm_out_of_range_is_explained() {
    let dir = tempfile::tempdir().unwrap();
    let w = wav_with_rate(dir.path(), "ok.wav", 51_200, &[&noise(51_200 * 2, 0.05)]);
    for rpm in ["-5", "1e9", "0"] {
        let o = envord(&["analyze", s(&w), "--point", POINT, "--rpm", rpm]);
        let e = err(&o);
        assert_eq!(o.status.code(), Some(2), "{rpm}: {e}");
        assert!(
            e.contains("--rpm") && e.contains("revolutions per minute"),
            "{rpm}: {e}"
        );
        assert!(!e.contains("speed range must be"), "{rpm}: {e}");
    }
}

#[test]
fn rpm_beside_a_tach_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let n = 51_200 * 2;
    let tach: Vec<f32> = (0..n)
        .map(|k| if k % 2048 < 100 { 1.0 } else { 0.0 })
        .collect();
    let w = wav_with_rate(dir.path(), "t.wav", 51_200, &[&noise(n, 0.05), &tach]);
    let o = envord(&[
        "analyze",
        s(&w),
        "--point",
        POINT,
        "--tach-channel",
        "1",
        "--rpm",
        "1200",
    ]);
    let e = err(&o);
    assert_eq!(o.status.code(), Some(2), "{e}");
    assert!(e.contains("--rpm") && e.contains("--tach-channel"), "{e}");
    assert!(o.stdout.is_empty());
}

/// An empty point file (every default) with a 51.2 kHz tach: the message
/// names the [speed] settings and a value that works.
#[test]
fn defaults_too_wide_for_the_resampler_name_the_setting() {
    let dir = tempfile::tempdir().unwrap();
    let n = 51_200 * 12;
    let tach: Vec<f32> = (0..n)
        .map(|k| if k % 2048 < 100 { 1.0 } else { 0.0 })
        .collect();
    let w = wav_with_rate(dir.path(), "t.wav", 51_200, &[&noise(n, 0.05), &tach]);
    let empty = dir.path().join("empty.toml");
    std::fs::write(&empty, "").unwrap();
    let o = envord(&[
        "analyze",
        s(&w),
        "--point",
        s(&empty),
        "--tach-channel",
        "1",
    ]);
    let e = err(&o);
    assert_eq!(o.status.code(), Some(2), "{e}");
    assert!(
        e.contains("[speed] min_rpm") && e.contains("raise [speed] min_rpm to at least"),
        "{e}"
    );
    // and the value it names works
    let at_least: f32 = e
        .split("at least ")
        .nth(1)
        .and_then(|t| t.split(' ').next())
        .and_then(|t| t.parse().ok())
        .unwrap();
    let fixed = dir.path().join("fixed.toml");
    std::fs::write(&fixed, format!("[speed]\nmin_rpm = {at_least}\n")).unwrap();
    let o = envord(&[
        "analyze",
        s(&w),
        "--point",
        s(&fixed),
        "--tach-channel",
        "1",
    ]);
    assert!(o.status.success(), "{}", err(&o));
}

/// A record with no finite sample has no ISO zone (it was "zone A").
#[test]
fn an_all_nan_record_has_no_zone() {
    let dir = tempfile::tempdir().unwrap();
    // the writer refuses NaN: write zeros, then NaN over every sample
    let zeros = vec![0.0f32; 51_200 * 6];
    let w = wav_with_rate(dir.path(), "nan.wav", 51_200, &[&zeros]);
    let mut b = std::fs::read(&w).unwrap();
    let data = b.windows(4).position(|x| x == b"data").unwrap() + 8;
    for c in b[data..].chunks_exact_mut(4) {
        c.copy_from_slice(&f32::NAN.to_le_bytes());
    }
    std::fs::write(&w, b).unwrap();
    let band = dir.path().join("band.toml");
    std::fs::write(&band, "[envelope]\nband_hz = [6000.0, 12000.0]\n").unwrap();
    let o = envord(&[
        "analyze",
        s(&w),
        "--point",
        s(&band),
        "--rpm",
        "1500",
        "--json",
    ]);
    assert!(o.status.success(), "{}", err(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(
        v["overall"]["iso20816_zone"],
        serde_json::Value::Null,
        "{v}"
    );
    let o = envord(&["analyze", s(&w), "--point", s(&band), "--rpm", "1500"]);
    let table = String::from_utf8_lossy(&o.stdout);
    assert!(!table.contains("zone"), "{table}");
}

#[test]
fn plot_to_a_missing_folder_names_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let w = wav_with_rate(dir.path(), "ok.wav", 51_200, &[&noise(51_200 * 6, 0.05)]);
    let bad = dir.path().join("no-such-folder").join("p.svg");
    let o = envord(&[
        "analyze",
        s(&w),
        "--point",
        POINT,
        "--rpm",
        "1480",
        "--plot",
        s(&bad),
    ]);
    let e = err(&o);
    assert_eq!(o.status.code(), Some(3), "{e}");
    assert!(e.contains(s(&bad)) && e.contains("does not exist"), "{e}");
}

#[test]
fn a_duplicate_bearing_name_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let w = wav_with_rate(dir.path(), "ok.wav", 51_200, &[&noise(51_200, 0.05)]);
    let b = "bpfo_x = 3.0\nbpfi_x = 5.0\nftf_x = 0.4\nbsf_x = 2.0\n";
    let p = dir.path().join("dup.toml");
    std::fs::write(
        &p,
        format!("[[bearing]]\nname = \"gear-de\"\n{b}[[bearing]]\nname = \"gear-de\"\n{b}"),
    )
    .unwrap();
    let o = envord(&["analyze", s(&w), "--point", s(&p), "--rpm", "1480"]);
    let e = err(&o);
    assert_eq!(o.status.code(), Some(2), "{e}");
    assert!(e.contains("`gear-de`") && e.contains(s(&p)), "{e}");
}

/// The table says what the zone letter means for the point's group and
/// gives the envelope amplitude's unit; analyze and demo word the zone alike.
#[test]
fn zone_and_amplitude_are_explained_and_worded_alike() {
    let dir = tempfile::tempdir().unwrap();
    let w = wav_with_rate(dir.path(), "ok.wav", 51_200, &[&noise(51_200 * 6, 0.05)]);
    let o = envord(&["analyze", s(&w), "--point", POINT, "--rpm", "1480"]);
    assert!(o.status.success(), "{}", err(&o));
    let t = String::from_utf8_lossy(&o.stdout);
    assert!(t.contains("(ISO 20816-3 zone A)"), "{t}");
    assert!(t.contains("typical of newly commissioned machines"), "{t}");
    assert!(t.contains("group 2, rigid support: A up to 1.4"), "{t}");
    assert!(t.contains("1x amp g "), "{t}");
    let out = dir.path().join("demo");
    let o = envord(&["demo", "--out", s(&out)]);
    assert!(o.status.success(), "{}", err(&o));
    let d = String::from_utf8_lossy(&o.stdout);
    assert!(d.contains("(ISO 20816-3 zone "), "{d}");
}

/// `envord gateway --help`'s description names all of the subcommands or
/// none (it named four of seven).
#[test]
fn gateway_help_does_not_name_a_part_of_its_subcommands() {
    let o = envord(&["gateway", "--help"]);
    let h = String::from_utf8_lossy(&o.stdout);
    let about = h.lines().next().unwrap();
    let names: Vec<&str> = h
        .split("Commands:")
        .nth(1)
        .unwrap()
        .split("Options:")
        .next()
        .unwrap()
        .lines()
        .filter_map(|l| l.split_whitespace().next())
        .filter(|n| *n != "help")
        .collect();
    assert!(names.len() >= 7, "{names:?}");
    let named = names.iter().filter(|n| about.contains(*n)).count();
    assert!(
        named == 0 || named == names.len(),
        "about line names {named} of {} subcommands: {about}",
        names.len()
    );
    let top = String::from_utf8_lossy(&envord(&["--help"]).stdout).into_owned();
    let line = top
        .lines()
        .find(|l| l.trim_start().starts_with("gateway"))
        .unwrap();
    let named = names.iter().filter(|n| line.contains(*n)).count();
    assert!(named == 0 || named == names.len(), "{line}");
}

/// The batch summary's dB columns name the bearing each highest score
/// belongs to, and the ISO zone column is explained for the point's group.
#[test]
fn batch_summary_names_bearings_and_explains_zones() {
    let dir = tempfile::tempdir().unwrap();
    let rec = dir.path().join("rec");
    std::fs::create_dir(&rec).unwrap();
    wav_with_rate(&rec, "a.wav", 51_200, &[&noise(51_200 * 6, 0.05)]);
    let out = dir.path().join("out");
    let o = envord(&[
        "batch",
        s(&rec),
        "--point",
        POINT,
        "--rpm",
        "1480",
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", err(&o));
    let md = std::fs::read_to_string(out.join("summary.md")).unwrap();
    assert!(md.contains("| BPFO dB (bearing) |"), "{md}");
    assert!(md.contains("| ISO zone |"), "{md}");
    let row = md.lines().find(|l| l.starts_with("| a.wav")).unwrap();
    let named = ["input-nde", "inter-de", "output-de"]
        .iter()
        .filter(|b| row.contains(&format!("({b})")))
        .count();
    assert!(named >= 1, "{row}");
    assert!(
        md.contains("ISO 20816-3 zones (group 2, rigid support"),
        "{md}"
    );
    assert!(
        md.contains("- A: typical of newly commissioned machines"),
        "{md}"
    );
    let csv = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    let head: Vec<&str> = csv.lines().next().unwrap().split(',').collect();
    let row: Vec<&str> = csv.lines().nth(1).unwrap().split(',').collect();
    assert_eq!(head.len(), row.len(), "{csv}");
    // the older columns keep their positions
    assert_eq!(
        &head[..10],
        &[
            "file",
            "speed_rpm",
            "flags",
            "band_hz",
            "bpfo_db",
            "bpfi_db",
            "ftf_db",
            "bsf_db",
            "detected",
            "error"
        ]
    );
}
