//! The overall-only core against closed-form values: the RMS (A/sqrt 2),
//! peak and crest factor (sqrt 2) of a sampled sine over whole periods, a
//! square wave's RMS = peak, and the speed from pulse spacing. These follow
//! from the definitions in one line each (common practice); no handbook is
//! relied on.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]
use dsp_core::QualityFlags;
use firmware::config::PointRecord;
use firmware::hal::MeasurementCore;
use firmware::overall_core::{OverallCore, OverallError, FRAME_KIND, FRAME_LEN};

fn sine(n: usize, amp: f64, offset: f64, cycles_per_sample: f64) -> Vec<i16> {
    (0..n)
        .map(|i| {
            (offset + amp * (2.0 * std::f64::consts::PI * cycles_per_sample * i as f64).sin())
                .round() as i16
        })
        .collect()
}

#[test]
fn sine_rms_peak_crest_match_handbook() {
    // RMS of a sine is A/sqrt(2), crest factor sqrt(2) (from the definition:
    // the mean of sin^2 over whole periods is 1/2).
    let cfg = PointRecord::default();
    let mut core = OverallCore::new();
    core.start(&cfg).unwrap();
    // whole number of periods (100 samples each) so the mean is the offset
    let x = sine(25_600, 1000.0, 50.0, 0.01);
    for b in x.chunks(256) {
        core.push_block(b);
    }
    core.finish(QualityFlags::empty()).unwrap();
    let o = core.result().unwrap();
    assert!((o.rms - 707.107).abs() < 0.5, "rms {}", o.rms);
    assert!((o.peak - 1000.0).abs() < 1.0, "peak {}", o.peak);
    assert!(
        (o.crest - std::f32::consts::SQRT_2).abs() < 2e-3,
        "crest {}",
        o.crest
    );
}

#[test]
fn speed_from_edges() {
    // 1 pulse/rev, 25.6 kHz ticks, 1480 rpm -> 25600*60/1480 = 1037.84 ticks per revolution
    let cfg = PointRecord::default();
    let mut core = OverallCore::new();
    core.start(&cfg).unwrap();
    core.push_block(&[0, 1, -1, 0]);
    for k in 0..11u32 {
        core.push_edge(5 + (f64::from(k) * 25_600.0 * 60.0 / 1480.0).round() as u32);
    }
    core.finish(QualityFlags::empty()).unwrap();
    assert!((core.result().unwrap().speed_rpm - 1480.0).abs() < 0.2);
}

#[test]
fn frame_layout() {
    let cfg = PointRecord::default();
    let mut core = OverallCore::new();
    core.start(&cfg).unwrap();
    let mut buf = [0u8; 64];
    assert_eq!(core.encode(&mut buf), Err(OverallError::NotFinished));
    core.push_block(&[100, -100, 100, -100]); // rms 100, peak 100, crest 1
    core.push_edge(0);
    core.push_edge(25_600); // one revolution per second = 60 rpm
    core.finish(QualityFlags::CLIPPING).unwrap();
    let n = core.encode(&mut buf).unwrap();
    assert_eq!(n, FRAME_LEN);
    assert_eq!(
        buf[..n],
        [FRAME_KIND, 0x02, 0xE8, 0x03, 100, 0, 0xE8, 0x03, 0x58, 0x02, 0, 0]
    );
    assert_eq!(
        core.encode(&mut buf[..5]),
        Err(OverallError::BufferTooSmall)
    );
}
