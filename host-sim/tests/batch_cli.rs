//! `envord batch` runs the band survey when the point has no band, through
//! the same code as `envord analyze` (one shared path), and reports it.
//! Recording: the committed fictional test-stand excerpt
//! (boards/qemu-mps2/input, made by make_input.py).
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

use std::path::Path;
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_envord");
const INPUT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/../boards/qemu-mps2/input");

/// The stand's point file without its band (and optionally with a band).
fn point(dir: &Path, band: bool) -> std::path::PathBuf {
    let text = std::fs::read_to_string(Path::new(INPUT).join("point.toml")).unwrap();
    let text: String = text
        .lines()
        .filter(|l| band || !l.starts_with("band_hz"))
        .map(|l| format!("{l}\n"))
        .collect();
    let p = dir.join(if band { "banded.toml" } else { "point.toml" });
    std::fs::write(&p, text).unwrap();
    p
}

/// Two WAVs cut from the committed recording (different stretches).
fn recordings(dir: &Path) -> Vec<std::path::PathBuf> {
    let raw = std::fs::read(Path::new(INPUT).join("recording.i16")).unwrap();
    let x: Vec<i16> = raw
        .chunks_exact(2)
        .map(|b| i16::from_le_bytes([b[0], b[1]]))
        .collect();
    [(0, 70_400), (40_000, 110_400)]
        .iter()
        .enumerate()
        .map(|(i, &(a, b))| {
            let p = dir.join(format!("stand-{i}.wav"));
            host_sim::wav::write_wav_i16(&p, 25_600, &[&x[a..b]]).unwrap();
            p
        })
        .collect()
}

fn analyze_json(wav: &Path, point: &Path) -> serde_json::Value {
    let o = Command::new(BIN)
        .arg("analyze")
        .arg(wav)
        .arg("--point")
        .arg(point)
        .args(["--rpm", "1480", "--json"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).unwrap()
}

#[test]
fn batch_surveys_the_band_like_analyze_when_the_point_has_none() {
    let dir = tempfile::tempdir().unwrap();
    let wavs = recordings(dir.path());
    let p = point(dir.path(), false);
    let out = dir.path().join("out");
    let o = Command::new(BIN)
        .arg("batch")
        .arg(dir.path())
        .arg("--point")
        .arg(&p)
        .args(["--rpm", "1480", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let summary = std::fs::read_to_string(out.join("summary.md")).unwrap();
    for w in &wavs {
        let name = w.file_name().unwrap().to_str().unwrap();
        let b: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(out.join(format!("{name}.json"))).unwrap(),
        )
        .unwrap();
        let a = analyze_json(w, &p);
        assert_eq!(b["envelope"]["band_auto"], true, "{name}");
        // the same band, bit for bit (f32 written exactly as f64), and kurtosis
        assert_eq!(b["envelope"]["band_hz"], a["envelope"]["band_hz"], "{name}");
        assert_eq!(
            b["envelope"]["band_kurtosis"], a["envelope"]["band_kurtosis"],
            "{name}"
        );
        assert_eq!(b["bearings"], a["bearings"], "{name}");
        let row = summary.lines().find(|l| l.contains(name)).unwrap();
        assert!(row.contains("(survey)"), "{row}");
    }
    // with a band in the point file: no survey, the configured band
    let pb = point(dir.path(), true);
    let o = Command::new(BIN)
        .arg("batch")
        .arg(dir.path())
        .arg("--point")
        .arg(&pb)
        .args(["--rpm", "1480", "--out"])
        .arg(dir.path().join("out2"))
        .output()
        .unwrap();
    assert!(o.status.success());
    let b: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(dir.path().join("out2/stand-0.wav.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(b["envelope"]["band_auto"], false);
    assert_eq!(
        b["envelope"]["band_hz"],
        serde_json::json!([2000.0, 8000.0])
    );
}
