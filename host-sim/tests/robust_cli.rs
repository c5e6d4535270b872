//! Bad files given to the built `envord analyze`: each must end with exit
//! code 2 (the bad-input contract in src/error.rs) and a message on stderr
//! naming the file at fault; never a panic (exit 101) and never a report.
//! WAV layouts per the RIFF/WAVE spec (Microsoft Multimedia Programming
//! Interface and Data Specifications 1.0).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic
)]

mod wav_util;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use host_sim::wav::encode_wav_f32;
use wav_util::{chunk, fmt_plain, riff, temp_file, wav};

const POINT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/point.toml");

fn analyze(recording: &Path, extra: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_envord"))
        .arg("analyze")
        .arg(recording)
        .args(["--point", POINT])
        .args(extra)
        .output()
        .expect("run envord")
}

/// Exit 2, no report on stdout, stderr names `names` (the file at fault).
fn assert_bad_input(out: &Output, names: &Path, what: &str) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(
        out.status.code(),
        Some(2),
        "{what}: status {:?}, stderr: {err}",
        out.status
    );
    let shown = names.display().to_string();
    assert!(
        err.contains(&shown),
        "{what}: stderr does not name {shown}: {err}"
    );
    assert!(!err.contains("panicked"), "{what}: {err}");
    assert!(out.stdout.is_empty(), "{what}: printed a report");
}

/// One second of a 51.2 kHz mono float WAV, a few counts of noise.
fn good_f32() -> Vec<u8> {
    let x: Vec<f32> = (0..51_200u32)
        .map(|k| 0.01 * ((k.wrapping_mul(2_654_435_761) >> 16) as f32 / 65_536.0 - 0.5))
        .collect();
    encode_wav_f32(51_200, &[&x]).unwrap()
}

/// A `fmt ` body with any field values (wrapping, unlike `fmt_plain`), for
/// headers that lie.
fn fmt_raw(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let block = channels.wrapping_mul(bits / 8);
    let mut v = Vec::new();
    v.extend_from_slice(&tag.to_le_bytes());
    v.extend_from_slice(&channels.to_le_bytes());
    v.extend_from_slice(&rate.to_le_bytes());
    v.extend_from_slice(&rate.wrapping_mul(u32::from(block)).to_le_bytes());
    v.extend_from_slice(&block.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    chunk(b"fmt ", 16, &v)
}

fn tmp(name: &str, bytes: &[u8]) -> PathBuf {
    temp_file(&format!("robust_cli_{name}"), bytes)
}

#[test]
fn a_good_file_is_analysed() {
    // The contrast for every test below: the same command succeeds.
    let p = tmp("good.wav", &good_f32());
    let out = analyze(&p, &["--rpm", "1200", "--json"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(!out.stdout.is_empty());
}

#[test]
fn missing_recording() {
    let p = PathBuf::from("/nonexistent/envord/robust/none.wav");
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "missing file");
}

#[test]
fn empty_recording() {
    let p = tmp("empty.wav", &[]);
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "empty file");
}

#[test]
fn wrong_format_recording() {
    // A text file and a RIFF container of another form type (AVI).
    let p = tmp("text.wav", b"time_s\n0.1\n0.2\n");
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "text file");
    let mut avi = riff(&[chunk(b"data", 4, &[0; 4])]);
    avi[8..12].copy_from_slice(b"AVI ");
    let p = tmp("avi.wav", &avi);
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "AVI form");
    // 8-bit PCM: a depth the reader does not take.
    let p = tmp("pcm8.wav", &wav(&fmt_plain(1, 1, 51_200, 8), &[0x80; 64]));
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "8-bit PCM");
}

#[test]
fn wrong_channel_count() {
    // Mono file, channel 1 asked for.
    let p = tmp("mono.wav", &good_f32());
    assert_bad_input(
        &analyze(&p, &["--rpm", "1200", "--channel", "1"]),
        &p,
        "accel channel beyond the file",
    );
    assert_bad_input(
        &analyze(&p, &["--tach-channel", "3"]),
        &p,
        "tach channel beyond the file",
    );
    // A header declaring zero channels.
    let p = tmp("zero_ch.wav", &wav(&fmt_plain(3, 0, 51_200, 32), &[0; 64]));
    assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, "zero channels");
}

#[test]
fn huge_header_values() {
    // 65535 channels, a 4 GHz sample rate, and a data chunk declaring 4 GiB
    // in a 100-byte file: refused or truncated by name, never allocated.
    let cases: [(&str, Vec<u8>); 2] = [
        (
            "huge_channels.wav",
            riff(&[
                fmt_raw(3, u16::MAX, 51_200, 32),
                chunk(b"data", 64, &[0; 64]),
            ]),
        ),
        (
            "huge_data.wav",
            riff(&[
                fmt_raw(3, 1, 51_200, 32),
                chunk(b"data", u32::MAX, &[0; 64]),
            ]),
        ),
    ];
    for (name, bytes) in cases {
        let p = tmp(name, &bytes);
        assert_bad_input(&analyze(&p, &["--rpm", "1200"]), &p, name);
    }
    // A 4 GHz sample rate: the reader accepts it and the pipeline refuses
    // the point built from it. Exit 2 without a panic, and the message names
    // the recording whose header set the rate, and the rate.
    let p = tmp(
        "huge_rate.wav",
        &riff(&[fmt_raw(3, 1, u32::MAX, 32), chunk(b"data", 64, &[0; 64])]),
    );
    let out = analyze(&p, &["--rpm", "1200"]);
    assert_bad_input(&out, &p, "4 GHz sample rate");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("sample rate 429496") && err.contains("header"),
        "{err}"
    );
    // The same file in a batch folder: listed with the same reason.
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(&p, dir.path().join("huge_rate.wav")).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_envord"))
        .arg("batch")
        .arg(dir.path())
        .args(["--point", POINT, "--rpm", "1200", "--out"])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let summary = std::fs::read_to_string(dir.path().join("out/summary.md")).unwrap();
    let shown = dir.path().join("huge_rate.wav").display().to_string();
    assert!(
        summary.contains(&shown) && summary.contains("sample rate 429496"),
        "{summary}"
    );
}

#[test]
fn bad_point_file_and_tach_csv_are_named() {
    let rec = tmp("good2.wav", &good_f32());
    let point = tmp("bad_point.toml", b"[sensor]\nsample_rate_hz = \"fast\"\n");
    let out = Command::new(env!("CARGO_BIN_EXE_envord"))
        .arg("analyze")
        .arg(&rec)
        .arg("--point")
        .arg(&point)
        .args(["--rpm", "1200"])
        .output()
        .unwrap();
    assert_bad_input(&out, &point, "bad point file");
    let csv = PathBuf::from("/nonexistent/envord/robust/edges.csv");
    let out = analyze(&rec, &["--tach", csv.to_str().unwrap()]);
    assert_bad_input(&out, &csv, "missing tach CSV");
}

#[test]
fn non_finite_samples_in_a_float_file_are_flagged_not_hidden() {
    // NaN and infinity in a float32 WAV: analysed, with the flag set.
    let mut x: Vec<f32> = (0..51_200u32)
        .map(|k| 0.01 * ((k.wrapping_mul(2_654_435_761) >> 16) as f32 / 65_536.0 - 0.5))
        .collect();
    x[1000] = f32::NAN;
    x[2000] = f32::INFINITY;
    // Written by hand: the WAV writer refuses non-finite samples.
    let data: Vec<u8> = x.iter().flat_map(|v| v.to_le_bytes()).collect();
    let p = tmp("nan.wav", &wav(&fmt_plain(3, 1, 51_200, 32), &data));
    let out = analyze(&p, &["--rpm", "1200", "--json"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let flags: Vec<&str> = v["flags"]
        .as_array()
        .expect("flags array")
        .iter()
        .filter_map(|f| f.as_str())
        .collect();
    assert!(flags.contains(&"non_finite_samples"), "{flags:?}");
}
