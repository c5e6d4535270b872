//! Faults through the whole pipeline: tach faults and ADC faults must come
//! back as quality flags in the Report (never a panic, never a silent
//! result). The tach-only behaviour is tested in tach_faults.rs; these tests
//! check that each fault survives the trip to `Report::flags`.
//!
//! Speed definition: rpm = 60 / (revolution period in s) (definition of
//! rotational speed). Thresholds for dropouts (about 2x the interval) and
//! double pulses (under 0.5x) are common practice for tach conditioning.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::expect_used,
    clippy::panic
)]

use dsp_core::config::{PointConfig, SpeedInput};
use dsp_core::pipeline::{Pipeline, ADC_BLOCK};
use dsp_core::report::{QualityFlags, Report};

const FS: f64 = 51_200.0;
const TICK_HZ: u32 = 1_000_000;

/// 1024-point spectrum, 64 samples/rev: 16 revolutions per segment.
type Small = Pipeline<1024, 512, 2048>;

fn point(revolutions: u16) -> PointConfig {
    let mut p = PointConfig::default();
    p.speed = SpeedInput::Tach {
        pulses_per_rev: 1,
        tick_hz: TICK_HZ,
        tick_at_sample0: 0,
    };
    p.revolutions = revolutions;
    // 600-3000 rpm: the default 300 rpm floor needs a longer resampler ring
    // than this pipeline's 2048 samples.
    p.min_rpm = 600.0;
    p.max_rpm = 3000.0;
    p
}

/// Deterministic noise in ADC counts (uniform, +-amp), xorshift64.
fn noise(n: usize, amp: f64, seed: u64) -> Vec<f64> {
    let mut s = seed | 1;
    (0..n)
        .map(|_| {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            ((s >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0) * amp
        })
        .collect()
}

fn counts(x: &[f64]) -> Vec<i16> {
    x.iter()
        .map(|v| v.round().clamp(-32768.0, 32767.0) as i16)
        .collect()
}

/// Tach ticks of a constant speed from t = 1 ms for `secs`.
fn steady_ticks(rpm: f64, secs: f64) -> Vec<u32> {
    let period = 60.0 * f64::from(TICK_HZ) / rpm;
    let n = (secs * f64::from(TICK_HZ) / period) as u32;
    (0..n)
        .map(|k| (1000.0 + f64::from(k) * period).round() as u32)
        .collect()
}

fn tick_to_sample(t: u32) -> f64 {
    f64::from(t) * FS / f64::from(TICK_HZ)
}

/// Feeds blocks of counts, pushing each edge before the block it falls in
/// (as the firmware does), optionally raising flags, and finishes.
fn run_i16(p: &mut Small, samples: &[i16], ticks: &[u32]) -> Report {
    let mut next = 0;
    for (b, block) in samples.chunks(ADC_BLOCK).enumerate() {
        let end = ((b + 1) * ADC_BLOCK) as f64;
        while next < ticks.len() && tick_to_sample(ticks[next]) < end {
            p.push_edge(ticks[next]);
            next += 1;
        }
        p.push_i16(block);
    }
    p.finish()
}

fn run(point: &PointConfig, samples: &[i16], ticks: &[u32]) -> Report {
    let mut p = Small::new(point).unwrap();
    run_i16(&mut p, samples, ticks)
}

const SECS: f64 = 2.0;

fn clean_signal() -> Vec<i16> {
    counts(&noise((SECS * FS) as usize, 2000.0, 7))
}

/// The baseline: with a clean tach and signal nothing is flagged, so every
/// flag in the tests below is caused by its fault.
#[test]
fn clean_record_has_no_flags() {
    let r = run(&point(32), &clean_signal(), &steady_ticks(1500.0, SECS));
    assert_eq!(r.flags, QualityFlags::empty(), "{}", r.flags);
    assert!(r.analysed());
    assert!((r.speed.mean_rpm - 1500.0).abs() < 1.0);
}

#[test]
fn tach_dropout_flags_irregular() {
    let mut t = steady_ticks(1500.0, SECS);
    t.remove(20);
    let r = run(&point(32), &clean_signal(), &t);
    assert!(
        r.flags.contains(QualityFlags::TACH_IRREGULAR),
        "{}",
        r.flags
    );
    assert_eq!(r.speed.missing_pulses, 1);
    // A bridged dropout keeps the record usable.
    assert!(r.analysed());
}

#[test]
fn tach_double_pulse_flags_irregular() {
    let mut t = steady_ticks(1500.0, SECS);
    // A second edge 3 % of a period after pulse 20 (contact bounce).
    let extra = t[20] + 1200;
    t.insert(21, extra);
    let r = run(&point(32), &clean_signal(), &t);
    assert!(
        r.flags.contains(QualityFlags::TACH_IRREGULAR),
        "{}",
        r.flags
    );
    assert_eq!(r.speed.extra_pulses, 1);
    assert!(r.analysed());
}

#[test]
fn no_tach_pulses_flags_missing_and_is_not_analysed() {
    let r = run(&point(32), &clean_signal(), &[]);
    assert!(r.flags.contains(QualityFlags::TACH_MISSING), "{}", r.flags);
    assert!(!r.analysed());
}

#[test]
fn small_tach_jitter_is_tolerated_large_jitter_is_flagged() {
    let base = steady_ticks(1500.0, SECS);
    let jitter = |frac: f64, seed: u64| -> Vec<u32> {
        // +-frac of the 40 000-tick period, uniform.
        let j = noise(base.len(), frac * 40_000.0, seed);
        base.iter()
            .zip(&j)
            .map(|(&t, &d)| (f64::from(t) + d).round() as u32)
            .collect()
    };
    let small = run(&point(32), &clean_signal(), &jitter(0.002, 3));
    assert!(
        !small.flags.intersects(QualityFlags(
            QualityFlags::TACH_IRREGULAR.0 | QualityFlags::SPEED_UNSTABLE.0
        )),
        "{}",
        small.flags
    );
    let large = run(&point(32), &clean_signal(), &jitter(0.3, 3));
    assert!(
        large.flags.intersects(QualityFlags(
            QualityFlags::TACH_IRREGULAR.0 | QualityFlags::SPEED_UNSTABLE.0
        )),
        "{}",
        large.flags
    );
}

#[test]
fn speed_above_range_is_flagged() {
    // 3600 rpm against max_rpm 3000.
    let r = run(&point(32), &clean_signal(), &steady_ticks(3600.0, SECS));
    assert!(
        r.flags.contains(QualityFlags::SPEED_OUT_OF_RANGE),
        "{}",
        r.flags
    );
}

#[test]
fn speed_below_range_is_flagged() {
    // 500 rpm against min_rpm 600: 32 revolutions take 3.84 s.
    let secs = 4.5;
    let x = counts(&noise((secs * FS) as usize, 2000.0, 11));
    let r = run(&point(32), &x, &steady_ticks(500.0, secs));
    assert!(
        r.flags.contains(QualityFlags::SPEED_OUT_OF_RANGE),
        "{}",
        r.flags
    );
}

#[test]
fn stop_during_record_is_flagged() {
    // Pulses for the first second only, samples for two.
    let t = steady_ticks(1500.0, 1.0);
    let r = run(&point(32), &clean_signal(), &t);
    assert!(
        r.flags.contains(QualityFlags::TACH_IRREGULAR),
        "{}",
        r.flags
    );
    assert!(r
        .speed
        .flags
        .contains(dsp_core::speed::tach::TachFlags::STOP));
    // 25 revolutions cannot fill two 16-revolution segments.
    assert!(r.flags.contains(QualityFlags::INCOMPLETE), "{}", r.flags);
}

#[test]
fn adc_clipping_is_flagged_and_heavy_clipping_is_a_sensor_fault() {
    let mut x = clean_signal();
    // 0.1 % of samples at full scale: clipping only.
    for k in (0..x.len()).step_by(1000) {
        x[k] = i16::MAX;
    }
    let r = run(&point(32), &x, &steady_ticks(1500.0, SECS));
    assert!(r.flags.contains(QualityFlags::CLIPPING), "{}", r.flags);
    assert!(!r.flags.contains(QualityFlags::SENSOR_FAULT), "{}", r.flags);
    // 5 % at full scale (beyond the 1 % saturation share): sensor fault.
    for k in (0..x.len()).step_by(20) {
        x[k] = -i16::MAX;
    }
    let r = run(&point(32), &x, &steady_ticks(1500.0, SECS));
    assert!(r.flags.contains(QualityFlags::CLIPPING), "{}", r.flags);
    assert!(r.flags.contains(QualityFlags::SENSOR_FAULT), "{}", r.flags);
    assert!(!r.analysed());
}

#[test]
fn flat_channel_is_a_sensor_fault() {
    // Disconnected input: a constant bias, no vibration.
    let x = vec![517i16; (SECS * FS) as usize];
    let r = run(&point(32), &x, &steady_ticks(1500.0, SECS));
    assert!(r.flags.contains(QualityFlags::SENSOR_FAULT), "{}", r.flags);
    assert!(!r.analysed());
}

#[test]
fn dc_offset_drift_neither_flags_nor_changes_the_envelope_spectrum() {
    let n = (SECS * FS) as usize;
    let base = noise(n, 2000.0, 7);
    // The bias drifts by 8000 counts over the record (a slow thermal drift),
    // far below the 5-10 kHz band: the band-pass must remove it.
    let drift: Vec<f64> = base
        .iter()
        .enumerate()
        .map(|(k, v)| v + 8000.0 * k as f64 / n as f64 - 4000.0)
        .collect();
    let ticks = steady_ticks(1500.0, SECS);
    let mut a = Small::new(&point(32)).unwrap();
    let ra = run_i16(&mut a, &counts(&base), &ticks);
    let mut b = Small::new(&point(32)).unwrap();
    let rb = run_i16(&mut b, &counts(&drift), &ticks);
    assert_eq!(rb.flags, QualityFlags::empty(), "{}", rb.flags);
    let (sa, sb) = (a.spectrum(), b.spectrum());
    let peak = sa.iter().fold(0.0f32, |m, v| m.max(*v));
    // Skip bin 0 (the envelope mean); elsewhere within 2 % of the peak.
    let worst = sa
        .iter()
        .zip(sb)
        .skip(1)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0f32, f32::max);
    assert!(worst < 0.02 * peak, "worst {worst} peak {peak}");
    assert!(ra.analysed() && rb.analysed());
}

#[test]
fn non_finite_samples_are_flagged() {
    let x: Vec<f32> = noise((SECS * FS) as usize, 2000.0, 7)
        .iter()
        .map(|v| (*v as f32) * (50.0 / 32768.0))
        .collect();
    for bad in [f32::NAN, f32::INFINITY, f32::NEG_INFINITY] {
        let mut y = x.clone();
        y[30_000] = bad;
        let mut p = Small::new(&point(32)).unwrap();
        let ticks = steady_ticks(1500.0, SECS);
        let mut next = 0;
        for (b, block) in y.chunks(ADC_BLOCK).enumerate() {
            let end = ((b + 1) * ADC_BLOCK) as f64;
            while next < ticks.len() && tick_to_sample(ticks[next]) < end {
                p.push_edge(ticks[next]);
                next += 1;
            }
            p.push_f32(block);
        }
        let r = p.finish();
        assert!(
            r.flags.contains(QualityFlags::NON_FINITE),
            "{bad}: {}",
            r.flags
        );
        // The rest of the record stays finite.
        assert!(r.overall.rms_ac.is_finite(), "{bad}");
        assert!(p.spectrum().iter().all(|v| v.is_finite()), "{bad}");
    }
}

#[test]
fn dma_overrun_raised_by_the_firmware_reaches_the_report() {
    let mut p = Small::new(&point(32)).unwrap();
    p.raise(QualityFlags::OVERRUN);
    let r = run_i16(&mut p, &clean_signal(), &steady_ticks(1500.0, SECS));
    assert_eq!(r.flags, QualityFlags::OVERRUN, "{}", r.flags);
    // An overrun is reported, not a reason to drop the diagnosis.
    assert!(r.analysed());
    // And a fresh pipeline does not inherit it.
    let r = run(&point(32), &clean_signal(), &steady_ticks(1500.0, SECS));
    assert!(!r.flags.contains(QualityFlags::OVERRUN));
}
