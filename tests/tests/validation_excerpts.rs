//! The node pipeline on committed excerpts of open bearing data
//! (tests/data/validation/README.md: CWRU Bearing Data Center seeded-fault
//! records and MFPT fault data sets; labels, speeds and bearing geometry from
//! each dataset's documentation). The method is the one of `envord validate`
//! (the full-set check, run by CI when ../shared/data exists): the band of
//! highest spectral kurtosis from the band survey (at least 3 x the highest
//! defect frequency wide), 64 samples per revolution, whole segments, default
//! search thresholds. Clear inner- and outer-race cases must be diagnosed
//! (both datasets' inner/outer-race records are diagnosable by envelope
//! analysis: Smith & Randall 2015, MSSP 64-65, for CWRU; common practice for
//! MFPT), and the normal record must give no detection.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::cast_sign_loss
)]

use std::path::PathBuf;

use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::kinematics::{BearingGeometry, DefectKind, ShaftRatio};
use dsp_core::pipeline::{NodePipeline, ADC_BLOCK};
use dsp_core::survey::{BandSurvey, SurveyConfig};

struct Excerpt {
    file: &'static str,
    fs: f32,
    rpm: f32,
    geometry: (u16, f32, f32),
    expected: Option<DefectKind>,
}

/// CWRU drive-end 6205-2RS (CWRU bearing specification: ball 0.3126 in,
/// pitch 1.537 in, 9 balls); MFPT rig (8 rollers, 0.235 in, 1.245 in).
const CWRU: (u16, f32, f32) = (9, 0.3126, 1.537);
const MFPT: (u16, f32, f32) = (8, 0.235, 1.245);

const EXCERPTS: [Excerpt; 5] = [
    Excerpt {
        file: "cwru-12k-de-ir007-1hp.de_0-48000.f32",
        fs: 12_000.0,
        rpm: 1772.0,
        geometry: CWRU,
        expected: Some(DefectKind::Bpfi),
    },
    Excerpt {
        file: "cwru-12k-de-or007at6-1hp.de_0-48000.f32",
        fs: 12_000.0,
        rpm: 1773.0,
        geometry: CWRU,
        expected: Some(DefectKind::Bpfo),
    },
    Excerpt {
        file: "cwru-48k-normal-0hp-seg1.de_0-121969.f32",
        fs: 48_000.0,
        rpm: 1796.0,
        geometry: CWRU,
        expected: None,
    },
    Excerpt {
        file: "mfpt-ir-050lb_0-131836.f32",
        fs: 48_828.0,
        rpm: 1500.0,
        geometry: MFPT,
        expected: Some(DefectKind::Bpfi),
    },
    Excerpt {
        file: "mfpt-or-025lb_0-131836.f32",
        fs: 48_828.0,
        rpm: 1500.0,
        geometry: MFPT,
        expected: Some(DefectKind::Bpfo),
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

/// (detected kinds, scores by kind index, band).
fn diagnose(e: &Excerpt) -> (Vec<DefectKind>, [f32; 4], [f32; 2]) {
    let x = read_f32(e.file);
    let (n, d, pd) = e.geometry;
    let geo = BearingGeometry {
        rollers: n,
        roller_diameter: d,
        pitch_diameter: pd,
        contact_angle_deg: 0.0,
    };
    let top_hz = geo
        .multiples()
        .unwrap()
        .orders(ShaftRatio::TACH)
        .lines()
        .iter()
        .fold(0.0f32, |a, &l| a.max(l))
        * e.rpm
        / 60.0;
    let mut sc = SurveyConfig::default();
    sc.min_bandwidth_hz = 3.0 * top_hz;
    let mut survey = BandSurvey::with_config(e.fs, sc).unwrap();
    for b in x.chunks(ADC_BLOCK) {
        survey.push_f32(b);
    }
    let band = survey.finish().unwrap().band_hz;

    let mut p = PointConfig::default();
    p.sample_rate_hz = e.fs;
    p.speed = SpeedInput::Constant { rpm: e.rpm };
    p.min_rpm = 0.9 * e.rpm;
    p.max_rpm = 1.1 * e.rpm;
    p.samples_per_rev = 64;
    let revs = (x.len() as f32 / e.fs * e.rpm / 60.0) as u16;
    p.revolutions = ((revs - 1) / 64).clamp(1, 4) * 64;
    p.band_hz = Some(band);
    p.bearings
        .push(Bearing {
            name: name_from("documented"),
            shaft: 0,
            kinematics: BearingKinematics::Geometry {
                rollers: n,
                roller_diameter: d,
                pitch_diameter: pd,
                contact_angle_deg: 0.0,
            },
        })
        .unwrap();
    let mut pipe = Box::new(NodePipeline::new(&p).unwrap());
    for b in x.chunks(ADC_BLOCK) {
        if pipe.complete() {
            break;
        }
        pipe.push_f32(b);
    }
    let r = pipe.finish();
    assert!(r.analysed(), "{}: {}", e.file, r.flags);
    let diag = r.bearings[0].diagnosis.as_ref().unwrap();
    let mut scores = [0.0f32; 4];
    for d in &diag.results {
        scores[d.kind.index()] = d.score_db;
    }
    (diag.detected().collect(), scores, band)
}

#[test]
fn excerpts_are_diagnosed() {
    for e in &EXCERPTS {
        let (det, scores, band) = diagnose(e);
        println!(
            "{:44} band {:.0}-{:.0} Hz, detected {:?}, scores {:?}",
            e.file, band[0], band[1], det, scores
        );
        match e.expected {
            // Normal record: no detection.
            None => assert!(det.is_empty(), "{}: {det:?}", e.file),
            // Fault: its kind detected and scoring highest among the detections.
            Some(k) => {
                assert!(det.contains(&k), "{}: {det:?}", e.file);
                for d in &det {
                    assert!(
                        scores[d.index()] <= scores[k.index()],
                        "{}: {d} outscores {k}: {scores:?}",
                        e.file
                    );
                }
            }
        }
    }
}

/// The excerpts are the documented ones (tests/data/validation/README.md):
/// sizes match the sample ranges, so a truncated copy fails here.
#[test]
fn excerpt_sizes() {
    for (e, n) in EXCERPTS
        .iter()
        .zip([48_000usize, 48_000, 121_969, 131_836, 131_836])
    {
        assert_eq!(read_f32(e.file).len(), n, "{}", e.file);
    }
}
