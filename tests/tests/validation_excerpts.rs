//! `envord validate` on committed excerpts of open bearing data
//! (tests/data/validation/README.md: CWRU Bearing Data Center seeded-fault
//! records and MFPT fault data sets; labels, speeds and bearing geometry from
//! each dataset's documentation). The excerpts are written as WAV files with
//! a manifest into a temporary folder and run through the command's own
//! method ([`host_sim::validate::validate_dir`]: segment length by rule,
//! band of highest spectral kurtosis from the band survey, default search
//! thresholds), so this check needs no `../shared/data`; CI runs the full
//! development set as well when it is there. Clear inner- and outer-race
//! cases must be diagnosed (both datasets' inner/outer-race records are
//! diagnosable by envelope analysis: Smith & Randall 2015, MSSP 64-65, for
//! CWRU, from memory; common practice for MFPT) with nothing else detected,
//! and the normal record must give no detection.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::cast_sign_loss
)]

use std::path::{Path, PathBuf};

use dsp_core::DefectKind;
use host_sim::validate::{validate_dir, BandRule, RecordResult};

struct Excerpt {
    file: &'static str,
    fs: u32,
    rpm: f32,
    geometry: (u16, f32, f32),
    location: &'static str,
    expected: Option<DefectKind>,
    /// Samples per revolution and averaged segments the rule must choose.
    plan: (u16, u32),
}

/// CWRU drive-end 6205-2RS (CWRU bearing specification: ball 0.3126 in,
/// pitch 1.537 in, 9 balls); MFPT rig (8 rollers, 0.235 in, 1.245 in).
const CWRU: (u16, f32, f32) = (9, 0.3126, 1.537);
const MFPT: (u16, f32, f32) = (8, 0.235, 1.245);

/// Segment plans: 4 s at 1772 rpm is 118 revolutions (64/rev gives one
/// 64-revolution segment, so 128/rev: three of 32); 2.54 s at 1796 rpm is
/// 76 (128/rev: two of 32); 2.7 s at 1500 rpm is 67 (128/rev: two of 32);
/// 1.33 s at 1796 rpm (the length of CWRU record 174) is 39 (256/rev: two
/// of 16).
const EXCERPTS: [Excerpt; 6] = [
    Excerpt {
        file: "cwru-12k-de-ir007-1hp.de_0-48000.f32",
        fs: 12_000,
        rpm: 1772.0,
        geometry: CWRU,
        location: "inner_race",
        expected: Some(DefectKind::Bpfi),
        plan: (128, 3),
    },
    Excerpt {
        file: "cwru-12k-de-or007at6-1hp.de_0-48000.f32",
        fs: 12_000,
        rpm: 1773.0,
        geometry: CWRU,
        location: "outer_race",
        expected: Some(DefectKind::Bpfo),
        plan: (128, 3),
    },
    Excerpt {
        file: "cwru-48k-de-ir007-0hp.de_0-63788.f32",
        fs: 48_000,
        rpm: 1796.0,
        geometry: CWRU,
        location: "inner_race",
        expected: Some(DefectKind::Bpfi),
        plan: (256, 2),
    },
    Excerpt {
        file: "cwru-48k-normal-0hp-seg1.de_0-121969.f32",
        fs: 48_000,
        rpm: 1796.0,
        geometry: CWRU,
        location: "none",
        expected: None,
        plan: (128, 2),
    },
    Excerpt {
        file: "mfpt-ir-050lb_0-131836.f32",
        fs: 48_828,
        rpm: 1500.0,
        geometry: MFPT,
        location: "inner_race",
        expected: Some(DefectKind::Bpfi),
        plan: (128, 2),
    },
    Excerpt {
        file: "mfpt-or-025lb_0-131836.f32",
        fs: 48_828,
        rpm: 1500.0,
        geometry: MFPT,
        location: "outer_race",
        expected: Some(DefectKind::Bpfo),
        plan: (128, 2),
    },
];

fn read_f32(name: &str) -> Vec<f32> {
    let p = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("data/validation")
        .join(name);
    let b = std::fs::read(&p).unwrap_or_else(|e| panic!("{p:?}: {e}"));
    assert_eq!(b.len() % 4, 0, "{p:?} truncated");
    b.chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect()
}

/// Writes every excerpt as a float WAV plus a manifest laid out like the
/// shared data's, and validates the folder.
fn validate_excerpts(dir: &Path) -> Vec<RecordResult> {
    let mut manifest = String::new();
    for e in &EXCERPTS {
        let wav = e.file.replace(".f32", ".wav");
        host_sim::wav::write_wav_f32(dir.join(&wav), e.fs, &[&read_f32(e.file)]).unwrap();
        let (n, d, pd) = e.geometry;
        manifest.push_str(&format!(
            "[[recording]]\nfile = \"{wav}\"\nsample_rate_hz = {}\nshaft_rpm = {}\n\
             fault_location = \"{}\"\nn_rollers = {n}\nroller_diameter_in = {d}\n\
             pitch_diameter_in = {pd}\ncontact_angle_deg = 0.0\n\n",
            e.fs, e.rpm, e.location
        ));
    }
    std::fs::write(dir.join("manifest.toml"), manifest).unwrap();
    validate_dir(dir, BandRule::Auto, None, None, false).unwrap()
}

#[test]
fn excerpts_are_diagnosed() {
    let dir = tempfile::tempdir().unwrap();
    let results = validate_excerpts(dir.path());
    assert_eq!(results.len(), EXCERPTS.len());
    for (e, r) in EXCERPTS.iter().zip(&results) {
        println!(
            "{:44} {} S/rev x {} segments, band {:.0}-{:.0} Hz, detected {:?}, scores {:?}",
            e.file, r.samples_per_rev, r.segments, r.band_hz[0], r.band_hz[1], r.detected, r.scores
        );
        assert!(r.error.is_none(), "{}: {:?}", e.file, r.error);
        // Short excerpts still get averaging (at least two segments).
        assert_eq!((r.samples_per_rev, r.segments), e.plan, "{}", e.file);
        match e.expected {
            // Normal record: no detection.
            None => assert!(r.detected.is_empty(), "{}: {:?}", e.file, r.detected),
            // Fault: its kind detected and nothing else (on these clear
            // cases no other family survives attribution).
            Some(k) => assert_eq!(r.detected, vec![k], "{}", e.file),
        }
        assert_eq!(r.correct, Some(true), "{}", e.file);
    }
}

/// The excerpts are the documented ones (tests/data/validation/README.md):
/// sizes match the sample ranges, so a truncated copy fails here.
#[test]
fn excerpt_sizes() {
    for (e, n) in EXCERPTS
        .iter()
        .zip([48_000usize, 48_000, 63_788, 121_969, 131_836, 131_836])
    {
        assert_eq!(read_f32(e.file).len(), n, "{}", e.file);
    }
}
