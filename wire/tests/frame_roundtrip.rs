//! Round trip of random reports through the full and reduced frames: every
//! field within the quantisation error stated in docs/frame-format.md.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use proptest::prelude::*;
use wire::frame::quantisation::{self as q, Linear};
use wire::frame::{
    decode, decode_reduced, encode, encode_reduced, BearingResult, DefectResult, FrameFlags,
    FrameReport, IsoZone, ReducedReport,
};

/// Expected decode of a linear field: NaN stays NaN, below 0 -> 0, above max
/// -> max, inside within step/2 (plus f32 rounding of the product).
fn check_linear(name: &str, f: &Linear, x: f32, y: f32) -> Result<(), TestCaseError> {
    if x.is_nan() {
        prop_assert!(y.is_nan(), "{name}: NaN must decode to NaN, got {y}");
    } else if x <= 0.0 {
        prop_assert_eq!(y, 0.0, "{}: {} must saturate to 0", name, x);
    } else if x >= f.max_value() {
        prop_assert_eq!(y, f.max_value(), "{}: {} must saturate to max", name, x);
    } else {
        let tol = f.step / 2.0 + x.abs() * 1e-6;
        prop_assert!((x - y).abs() <= tol, "{name}: {x} -> {y}, error over {tol}");
    }
    Ok(())
}

fn check_amp(x: f32, y: f32) -> Result<(), TestCaseError> {
    let max = q::amp_decode(q::AMP_MAX_CODE);
    if x.is_nan() {
        prop_assert!(y.is_nan());
    } else if x >= max {
        prop_assert_eq!(y, max);
    } else if x < q::AMP_MIN_G {
        // Below range: 0 or the first code, absolute error under AMP_MIN_G.
        prop_assert!(y == 0.0 || y == q::AMP_MIN_G, "{x} -> {y}");
        prop_assert!((x - y).abs() <= q::AMP_MIN_G);
    } else {
        let err_db = (20.0 * (y / x).log10()).abs();
        prop_assert!(err_db <= 0.25 + 1e-3, "amp {x} -> {y}: {err_db} dB");
    }
    Ok(())
}

fn finite_or_special(lo: f32, hi: f32) -> impl Strategy<Value = f32> {
    prop_oneof![
        8 => lo..hi,
        1 => Just(f32::NAN),
        1 => Just(f32::INFINITY),
        1 => Just(f32::NEG_INFINITY),
        1 => -1000.0f32..0.0,
        1 => hi..hi * 10.0,
    ]
}

fn defect() -> impl Strategy<Value = DefectResult> {
    (
        finite_or_special(0.0, 62.0),
        prop_oneof![8 => (-7.0f32..1.6).prop_map(|e| 10f32.powf(e)), 1 => Just(f32::NAN), 1 => Just(0.0f32)],
        0u8..=10,
        any::<bool>(),
    )
        .prop_map(|(s, a, h, d)| DefectResult {
            score_db: s,
            amplitude_1x_g: a,
            harmonics: h,
            detected: d,
            line: None,
        })
}

fn report() -> impl Strategy<Value = FrameReport> {
    (
        (
            any::<u16>(),
            any::<u16>(),
            0u16..0x80,
            finite_or_special(0.0, 16383.5),
        ),
        (
            finite_or_special(0.0, 65.5),
            finite_or_special(0.0, 655.3),
            finite_or_special(0.0, 25.4),
            finite_or_special(0.0, 63.5),
            finite_or_special(0.0, 655.3),
            0u8..5,
        ),
        proptest::collection::vec(proptest::array::uniform4(defect()), 0..=4),
    )
        .prop_map(
            |((node, seq, flags, speed), (rms, pk, cf, ku, vel, zone), bs)| {
                let mut r = FrameReport {
                    node_id: node,
                    seq,
                    flags: FrameFlags::from_bits(flags),
                    speed_rpm: speed,
                    ..FrameReport::default()
                };
                r.overall.accel_rms_g = rms;
                r.overall.peak_g = pk;
                r.overall.crest_factor = cf;
                r.overall.kurtosis = ku;
                r.overall.velocity_rms_mm_s = vel;
                r.overall.iso_zone = [
                    None,
                    Some(IsoZone::A),
                    Some(IsoZone::B),
                    Some(IsoZone::C),
                    Some(IsoZone::D),
                ][zone as usize];
                for d in bs {
                    r.bearings.push(BearingResult { defects: d }).unwrap();
                }
                r
            },
        )
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(20_000))]

    #[test]
    fn full_frame_round_trip_within_quantisation(r in report()) {
        let mut buf = [0u8; 64];
        let n = encode(&r, &mut buf).unwrap();
        let d = decode(&buf[..n]).unwrap();
        prop_assert_eq!(d.node_id, r.node_id);
        prop_assert_eq!(d.seq, r.seq);
        prop_assert_eq!(d.flags, r.flags);
        prop_assert_eq!(d.overall.iso_zone, r.overall.iso_zone);
        check_linear("speed", &q::SPEED_RPM, r.speed_rpm, d.speed_rpm)?;
        check_linear("rms", &q::ACCEL_RMS_G, r.overall.accel_rms_g, d.overall.accel_rms_g)?;
        check_linear("peak", &q::PEAK_G, r.overall.peak_g, d.overall.peak_g)?;
        check_linear("crest", &q::CREST, r.overall.crest_factor, d.overall.crest_factor)?;
        check_linear("kurtosis", &q::KURTOSIS, r.overall.kurtosis, d.overall.kurtosis)?;
        check_linear("velocity", &q::VELOCITY_MM_S, r.overall.velocity_rms_mm_s, d.overall.velocity_rms_mm_s)?;
        prop_assert_eq!(d.bearings.len(), r.bearings.len());
        for (rb, db) in r.bearings.iter().zip(d.bearings.iter()) {
            for (rd, dd) in rb.defects.iter().zip(db.defects.iter()) {
                check_linear("score", &q::SCORE_DB, rd.score_db, dd.score_db)?;
                check_amp(rd.amplitude_1x_g, dd.amplitude_1x_g)?;
                prop_assert_eq!(dd.harmonics, rd.harmonics);
                prop_assert_eq!(dd.detected, rd.detected);
            }
        }
        // Decoding is exact on its own output: encoding the decoded report gives the same bytes.
        let mut again = [0u8; 64];
        let m = encode(&d, &mut again).unwrap();
        prop_assert_eq!(&again[..m], &buf[..n]);
    }

    #[test]
    fn reduced_frame_round_trip(r in report()) {
        let mut buf = [0u8; 11];
        prop_assert_eq!(encode_reduced(&r, &mut buf), Ok(11));
        let d = decode_reduced(&buf).unwrap();
        let want = ReducedReport::from_report(&r);
        prop_assert_eq!(d.node_id, want.node_id);
        prop_assert_eq!(d.seq, want.seq);
        prop_assert_eq!(d.flags, want.flags);
        prop_assert_eq!(d.worst.is_some(), !r.bearings.is_empty());
        if let (Some(a), Some(b)) = (want.worst, d.worst) {
            prop_assert_eq!((a.bearing, a.kind, a.detected), (b.bearing, b.kind, b.detected));
            check_linear("score", &q::SCORE_DB, a.score_db, b.score_db)?;
        }
    }
}

/// Sweeps each field densely over its range and prints the largest error
/// found; the bounds are those of docs/frame-format.md.
#[test]
fn measured_quantisation_errors() {
    let fields: [(&str, Linear); 7] = [
        ("speed_rpm", q::SPEED_RPM),
        ("accel_rms_g", q::ACCEL_RMS_G),
        ("peak_g", q::PEAK_G),
        ("crest_factor", q::CREST),
        ("kurtosis", q::KURTOSIS),
        ("velocity_rms_mm_s", q::VELOCITY_MM_S),
        ("score_db", q::SCORE_DB),
    ];
    for (name, f) in fields {
        let n = 200_000;
        let mut worst = 0.0f64;
        for i in 0..n {
            let x = f.max_value() * i as f32 / n as f32;
            let y = f.decode(f.encode(x));
            worst = worst.max((f64::from(x) - f64::from(y)).abs());
        }
        println!("{name}: step {} max |error| {worst:.6}", f.step);
        assert!(
            worst <= f64::from(f.step) / 2.0 * 1.001 + f64::from(f.max_value()) * 1e-7,
            "{name}"
        );
        assert!(
            worst >= f64::from(f.step) * 0.45,
            "{name}: sweep too coarse to see the step"
        );
    }
    let mut worst_db = 0.0f64;
    let n = 200_000;
    for i in 0..=n {
        // Log sweep over 1e-5 .. 21 g.
        let x = 1e-5f64 * 10f64.powf(6.32 * f64::from(i) / f64::from(n));
        let y = f64::from(q::amp_decode(q::amp_encode(x as f32)));
        worst_db = worst_db.max((20.0 * (y / x).log10()).abs());
    }
    println!("amplitude_1x_g: step 0.5 dB, max |error| {worst_db:.4} dB");
    assert!(worst_db <= 0.2501 && worst_db > 0.24);
}
