//! The WAV reader on real files: excerpts of CWRU record 131 (see
//! tests/data/README.md). Expected values were read from the same files with
//! scipy.io.wavfile / numpy and Python's `wave` module by
//! tests/data/make_excerpts.py (its printed output is quoted below).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing
)]

use host_sim::wav::{read_wav, ReadOptions, SampleFormat};
use std::path::PathBuf;

fn data(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
}

#[test]
fn cwru_float32_excerpt_header_and_samples_match_scipy() {
    let w = read_wav(data("cwru131_de_excerpt_f32.wav"), ReadOptions::strict()).unwrap();
    // Header: scipy.io.wavfile.read gives fs 12000, dtype float32, shape (2000,).
    assert_eq!(w.info.sample_rate, 12_000);
    assert_eq!(w.info.channels, 1);
    assert_eq!(w.info.format, SampleFormat::Float32);
    assert!(!w.info.extensible);
    assert_eq!(w.frames(), 2000);
    assert!(w.truncation.is_none());
    assert_eq!(w.non_finite, 0);
    assert!(w.raw_i16.is_none());
    let x = &w.channels[0];
    // First samples as printed by numpy (repr of float(float32)): exact equality,
    // the reader must not alter float samples.
    let first8: [f64; 8] = [
        -0.11045588552951813,
        0.2156326323747635,
        0.07999929785728455,
        -0.3179667592048645,
        0.02314700558781624,
        0.17746037244796753,
        0.0998976081609726,
        -0.23187614977359772,
    ];
    for (i, (&got, &want)) in x.iter().zip(first8.iter()).enumerate() {
        assert_eq!(f64::from(got), want, "sample {i}");
    }
    assert_eq!(f64::from(x[1000]), -0.27776408195495605);
    assert_eq!(f64::from(x[1999]), -1.0769449472427368);
    // numpy: sum (float64) 6.847452431858983, max 2.8243408203125 at index 519.
    let sum: f64 = x.iter().map(|&v| f64::from(v)).sum();
    assert!((sum - 6.847452431858983).abs() < 1e-9, "sum {sum}");
    let (imax, &vmax) = x
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .unwrap();
    assert_eq!((imax, f64::from(vmax)), (519, 2.8243408203125));
}

#[test]
fn cwru_int16_stereo_excerpt_matches_python_wave() {
    let w = read_wav(data("cwru131_de_fe_excerpt_i16.wav"), ReadOptions::strict()).unwrap();
    // Python wave: nchannels=2, sampwidth=2, framerate=12000, nframes=2000.
    assert_eq!(w.info.sample_rate, 12_000);
    assert_eq!(w.info.channels, 2);
    assert_eq!(w.info.format, SampleFormat::Int16);
    assert_eq!(w.frames(), 2000);
    let raw = w.raw_i16.as_ref().unwrap();
    // wave.readframes, interleaved: [-905, -635, 1766, 3730, 655, -1754, -2605, -806, 190, -232].
    let inter = [
        -905i16, -635, 1766, 3730, 655, -1754, -2605, -806, 190, -232,
    ];
    for (k, pair) in inter.chunks_exact(2).enumerate() {
        assert_eq!(raw[0][k], pair[0], "DE frame {k}");
        assert_eq!(raw[1][k], pair[1], "FE frame {k}");
    }
    // Last frame [-8822, 2239]; channel sums 56111 (DE) and 562870 (FE).
    assert_eq!((raw[0][1999], raw[1][1999]), (-8822, 2239));
    let s0: i64 = raw[0].iter().map(|&c| i64::from(c)).sum();
    let s1: i64 = raw[1].iter().map(|&c| i64::from(c)).sum();
    assert_eq!((s0, s1), (56_111, 562_870));
    // The f32 view is the counts over 32768 (full scale [-1, 1)).
    assert_eq!(w.channels[0][0], -905.0 / 32768.0);
    assert_eq!(w.channels[1][1999], 2239.0 / 32768.0);
}
