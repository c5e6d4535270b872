//! Tach validation against the analytic truth of synthetic pulse trains.
//! Speed definition used throughout: rpm = 60 · fs / (samples per revolution)
//! (definition of rotational speed). Fault thresholds (0.5x interval = extra
//! pulse, ~2x = missing pulse) are common practice for tach conditioning.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::expect_used,
    clippy::panic
)]

use dsp_core::speed::tach::{
    RevMark, SpeedSource, SpeedSummary, TachConfig, TachFlags, TachTracker,
};

const FS: f32 = 51_200.0;
const TICK_HZ: u32 = 1_000_000;

fn cfg() -> TachConfig {
    let mut c = TachConfig::default();
    c.tick_hz = TICK_HZ;
    c.sample_rate_hz = FS;
    c.pulses_per_rev = 1;
    c.min_rpm = 600.0;
    c.max_rpm = 3000.0;
    c.max_speed_change_pct = 10.0;
    c.min_good_revs = 8;
    c
}

/// Runs edges (ticks) through a tracker, advancing to each edge then to `end`.
fn run(c: TachConfig, ticks: &[u32], end_samples: u64) -> (SpeedSummary, Vec<RevMark>) {
    let mut t = TachTracker::new(&SpeedSource::Tach(c)).unwrap();
    let mut marks = Vec::new();
    for &k in ticks {
        t.push_edge(k, |m| marks.push(m));
        let now = (k.wrapping_sub(c.tick_at_sample0) as f64 * f64::from(FS) / f64::from(c.tick_hz))
            as u64;
        t.advance_to(now, |m| marks.push(m));
    }
    t.advance_to(end_samples, |m| marks.push(m));
    let s = t.finish(|m| marks.push(m));
    (s, marks)
}

/// Edge ticks of a constant speed, n pulses.
fn steady(rpm: f64, n: u32) -> Vec<u32> {
    let period = 60.0 * f64::from(TICK_HZ) / rpm;
    (0..n)
        .map(|k| (1000.0 + f64::from(k) * period).round() as u32)
        .collect()
}

fn end_of(ticks: &[u32]) -> u64 {
    (f64::from(*ticks.last().unwrap()) * f64::from(FS) / f64::from(TICK_HZ)) as u64 + 100
}

#[test]
fn clean_steady_speed() {
    let e = steady(1500.0, 40);
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert_eq!(marks.len(), 40);
    assert_eq!(s.revs, 39);
    assert!((s.mean_rpm - 1500.0).abs() < 0.05, "{}", s.mean_rpm);
    assert!(!s.flags.is_fault(), "{:?}", s.flags);
    assert!(marks[0].segment_start && !marks[1].segment_start);
}

/// Deterministic pseudo-random in [-1, 1).
fn lcg(state: &mut u64) -> f64 {
    *state = state
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    ((*state >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
}

#[test]
fn small_jitter_does_not_flag() {
    let period = 40_000.0;
    let mut st = 7;
    // ±1 % of a period of timing jitter on each edge.
    let e: Vec<u32> = (0..60)
        .map(|k| (1000.0 + f64::from(k) * period + 400.0 * lcg(&mut st)) as u32)
        .collect();
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert_eq!(marks.len(), 60);
    assert!(!s.flags.is_fault(), "jitter flagged: {:?}", s.flags);
    assert!((s.mean_rpm - 1500.0).abs() < 5.0);
}

#[test]
fn dropout_is_bridged_and_flagged() {
    let mut e = steady(1500.0, 40);
    let truth = e.clone();
    e.remove(10);
    e.remove(25); // a second, separate dropout (was index 26)
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::MISSING_PULSE));
    assert_eq!(s.missing_pulses, 2);
    assert_eq!(marks.len(), 40, "bridged marks keep the revolution count");
    assert!(marks[10].bridged && marks[26].bridged && !marks[11].bridged);
    let t_true = f64::from(truth[10]) * f64::from(FS) / f64::from(TICK_HZ);
    assert!((marks[10].time_samples - t_true).abs() < 0.5);
    // Two revolutions with a bridged end are not "good".
    assert!(s.good_revs <= 39 - 2);
}

#[test]
fn double_pulses_are_dropped_and_flagged() {
    let truth = steady(1500.0, 40);
    let mut e = truth.clone();
    e.insert(11, truth[10] + 300); // bounce just after a real edge
    e.insert(21, truth[20] - 250); // spurious just before a real edge (index shifted by 1)
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::EXTRA_PULSE));
    assert_eq!(s.extra_pulses, 2);
    assert_eq!(marks.len(), 40);
    for (m, &k) in marks.iter().zip(&truth) {
        let t = f64::from(k) * f64::from(FS) / f64::from(TICK_HZ);
        assert!(
            (m.time_samples - t).abs() < 1e-6,
            "kept the wrong edge at {}",
            m.index
        );
    }
}

#[test]
fn no_pulses_flags() {
    let (s, marks) = run(cfg(), &[], 51_200 * 5);
    assert!(marks.is_empty());
    assert!(s.flags.contains(TachFlags::NO_PULSES));
    assert!(s.flags.contains(TachFlags::TOO_FEW_REVS));
    assert_eq!(s.revs, 0);
}

#[test]
fn too_few_revolutions_flag() {
    let e = steady(1500.0, 5);
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::TOO_FEW_REVS));
    assert!(!s.flags.contains(TachFlags::NO_PULSES));
}

#[test]
fn speed_outside_range_flags() {
    let e = steady(500.0, 20);
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::BELOW_MIN_RPM), "{:?}", s.flags);
    assert!((s.mean_rpm - 500.0).abs() < 0.05);
    let e = steady(3500.0, 40);
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::ABOVE_MAX_RPM), "{:?}", s.flags);
    let e = steady(2900.0, 40);
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(!s.flags.is_fault());
}

/// Edge ticks of a linear speed ramp from rpm0 to rpm1 over n revolutions.
fn ramp(rpm0: f64, rpm1: f64, n: u32) -> Vec<u32> {
    // Revolution k has speed rpm0 + (rpm1-rpm0)·k/n; edges are cumulative periods.
    let mut t: f64 = 1000.0;
    let mut v = Vec::new();
    for k in 0..n {
        v.push(t.round() as u32);
        let rpm = rpm0 + (rpm1 - rpm0) * f64::from(k) / f64::from(n);
        t += 60.0 * f64::from(TICK_HZ) / rpm;
    }
    v
}

#[test]
fn speed_change_beyond_limit_flags() {
    let e = ramp(1500.0, 1800.0, 60); // 20 % change, limit 10 %
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::SPEED_CHANGE), "{:?}", s.flags);
    assert!(
        !s.flags.contains(TachFlags::MISSING_PULSE) && !s.flags.contains(TachFlags::EXTRA_PULSE)
    );
    let e = ramp(1500.0, 1530.0, 60); // 2 %
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(!s.flags.contains(TachFlags::SPEED_CHANGE));
    assert!(s.min_rpm >= 1499.9 && s.max_rpm <= 1530.1);
}

#[test]
fn stop_during_record_flags_and_restarts() {
    let mut e = steady(1500.0, 20);
    let last = *e.last().unwrap();
    e.extend((1..=20).map(|k| last + 10 * 40_000 + k * 40_000)); // 10 revolutions without pulses
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::STOP), "{:?}", s.flags);
    assert!(
        !s.flags.contains(TachFlags::MISSING_PULSE),
        "a stop must not be bridged"
    );
    assert_eq!(marks.len(), 40);
    assert!(marks[20].segment_start);
    assert_eq!(s.revs, 38, "no revolution spans the stop");
}

#[test]
fn stop_before_end_of_record_flags() {
    let e = steady(1500.0, 20);
    let end = end_of(&e) + 51_200 * 3; // 3 s (75 revolutions) without pulses
    let (s, _) = run(cfg(), &e, end);
    assert!(s.flags.contains(TachFlags::STOP));
    let (s, _) = run(cfg(), &e, end_of(&e));
    assert!(!s.flags.contains(TachFlags::STOP));
}

#[test]
fn counter_wrap_is_not_a_fault() {
    let mut c = cfg();
    c.tick_at_sample0 = u32::MAX - 200_000;
    let e: Vec<u32> = (0..40u32)
        .map(|k| c.tick_at_sample0.wrapping_add(1000 + k * 40_000))
        .collect();
    assert!(e.windows(2).any(|w| w[1] < w[0]), "the sequence must wrap");
    let (s, marks) = run(c, &e, 40 * 2048 + 200);
    assert!(!s.flags.is_fault(), "{:?}", s.flags);
    assert_eq!(marks.len(), 40);
    assert!((s.mean_rpm - 1500.0).abs() < 0.01);
    assert!((marks[0].time_samples - 51.2).abs() < 1e-9);
}

#[test]
fn ten_minutes_keep_sub_sample_precision() {
    // 51.2 MHz capture clock: 1000 ticks per sample; wraps every 83.9 s, i.e. 7 times here.
    let mut c = cfg();
    c.tick_hz = 51_200_000;
    let mut t = TachTracker::new(&SpeedSource::Tach(c)).unwrap();
    let mut marks = Vec::new();
    let period_ticks: u64 = 2_048_123; // 2048.123 samples per revolution
    let n = 15_000u64; // > 10 min at ~1500 rpm
    for k in 0..n {
        let tick = k * period_ticks + 777;
        t.push_edge((tick & 0xFFFF_FFFF) as u32, |m| marks.push(m));
        t.advance_to(tick / 1000, |m| marks.push(m));
    }
    let s = t.finish(|m| marks.push(m));
    assert_eq!(marks.len() as u64, n);
    let last = marks.last().unwrap();
    let exact = ((n - 1) * period_ticks + 777) as f64 / 1000.0;
    assert!(exact > 3.0e7);
    assert!(
        (last.time_samples - exact).abs() < 1e-4,
        "{} vs {}",
        last.time_samples,
        exact
    );
    assert!(s.flags.contains(TachFlags::SERIES_TRUNCATED));
    assert_eq!(t.speed_series().len(), dsp_core::speed::tach::SERIES_CAP);
    assert_eq!(s.revs as u64, n - 1, "stats cover all revolutions");
    assert!(!s.flags.is_fault(), "{:?}", s.flags);
}

#[test]
fn out_of_order_edge_is_dropped_and_flagged() {
    let mut e = steady(1500.0, 20);
    e.insert(10, e[5]);
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::OUT_OF_ORDER));
    assert_eq!(marks.len(), 20);
}

#[test]
fn several_pulses_per_rev() {
    let mut c = cfg();
    c.pulses_per_rev = 4;
    let e = steady(1500.0 * 4.0, 81); // 4 pulses per revolution at 1500 rpm
    let (s, marks) = run(c, &e, end_of(&e));
    assert_eq!(marks.len(), 21);
    assert!((s.mean_rpm - 1500.0).abs() < 0.05);
    assert!(!s.flags.is_fault(), "{:?}", s.flags);
}

#[test]
fn constant_speed_virtual_marks() {
    let src = SpeedSource::Constant {
        rpm: 1500.0,
        sample_rate_hz: FS,
    };
    let mut t = TachTracker::new(&src).unwrap();
    let mut marks = Vec::new();
    for b in 1..=100u64 {
        t.advance_to(b * 1000, |m| marks.push(m));
    }
    let s = t.finish(|m| marks.push(m));
    // 100 000 samples / 2048 per rev: marks at 0, 2048, ... 98304 → 49 marks.
    assert_eq!(marks.len(), 49);
    assert_eq!(marks[3].time_samples, 3.0 * 2048.0);
    assert!(s.constant_speed && s.mean_rpm == 1500.0 && s.revs == 48);
    assert!(!s.flags.is_fault());
}

#[test]
fn bad_configs_are_typed_errors() {
    let mut c = cfg();
    c.min_rpm = f32::NAN;
    assert!(TachTracker::new(&SpeedSource::Tach(c)).is_err());
    let mut c = cfg();
    c.tick_hz = 0;
    assert!(TachTracker::new(&SpeedSource::Tach(c)).is_err());
    let mut c = cfg();
    c.pulses_per_rev = 0;
    assert!(TachTracker::new(&SpeedSource::Tach(c)).is_err());
    assert!(TachTracker::new(&SpeedSource::Constant {
        rpm: -1.0,
        sample_rate_hz: FS
    })
    .is_err());
}

#[test]
fn late_double_pulse_after_commit_is_dropped() {
    // The held pulse is committed by advance_to (0.6 period later); a bounce
    // edge 0.1 period after the real one arrives only afterwards.
    let c = cfg();
    let mut t = TachTracker::new(&SpeedSource::Tach(c)).unwrap();
    let mut marks = Vec::new();
    for k in 0..30u32 {
        let tick = 1000 + k * 40_000;
        t.push_edge(tick, |m| marks.push(m));
        let after = u64::from(tick + 24_000) * 512 / 10_000;
        t.advance_to(after, |m| marks.push(m));
        if k == 12 {
            t.push_edge(tick + 4000, |m| marks.push(m));
        }
    }
    let s = t.finish(|m| marks.push(m));
    assert!(s.flags.contains(TachFlags::EXTRA_PULSE), "{:?}", s.flags);
    assert_eq!(marks.len(), 30);
    for (k, m) in marks.iter().enumerate() {
        let exact = f64::from(1000 + k as u32 * 40_000) * 0.0512;
        assert!((m.time_samples - exact).abs() < 1e-6, "mark {k}");
    }
}

#[test]
fn glitch_in_the_first_interval_does_not_mislead() {
    // 700 rpm (near min_rpm = 600): a period is 4389 samples, far above the
    // 0.5 x 1024-sample minimum interval, so only the boot median catches these.
    let truth = steady(700.0, 30);
    let exact: Vec<f64> = truth.iter().map(|&k| f64::from(k) * 0.0512).collect();
    // Missing pulse right after the first one.
    let mut e = truth.clone();
    e.remove(1);
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::MISSING_PULSE), "{:?}", s.flags);
    assert_eq!(marks.len(), 30);
    assert!((marks[1].time_samples - exact[1]).abs() < 0.5);
    assert!((s.min_rpm - 700.0).abs() < 0.1, "{s:?}");
    // Double pulse 0.3 period after the first one.
    let mut e = truth.clone();
    e.insert(1, truth[0] + 25_700);
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert!(s.flags.contains(TachFlags::EXTRA_PULSE), "{:?}", s.flags);
    assert!(!s.flags.contains(TachFlags::MISSING_PULSE) && !s.flags.contains(TachFlags::STOP));
    assert_eq!(marks.len(), 30);
    for (m, x) in marks.iter().zip(&exact) {
        assert!((m.time_samples - x).abs() < 1e-6);
    }
}

#[test]
fn boot_median_needs_sorting_and_stop_is_seen_while_booting() {
    // Missing pulse at the second interval: boot intervals [T, 2T, T]; the median is T.
    let truth = steady(700.0, 30);
    let mut e = truth.clone();
    e.remove(2);
    let (s, marks) = run(cfg(), &e, end_of(&e));
    assert_eq!(marks.len(), 30, "{s:?}");
    assert!(
        (s.min_rpm - 700.0).abs() < 0.1 && (s.max_rpm - 700.0).abs() < 0.1,
        "{s:?}"
    );
    // Three edges, then silence: the stop is flagged live (before finish).
    let mut t = TachTracker::new(&SpeedSource::Tach(cfg())).unwrap();
    for &k in &truth[..3] {
        t.push_edge(k, |_| {});
    }
    t.advance_to(51_200 * 2, |_| {});
    assert!(t.flags().contains(TachFlags::STOP), "{:?}", t.flags());
}

#[test]
fn constant_mode_huge_jump_is_flagged_not_hanging() {
    let src = SpeedSource::Constant {
        rpm: 1500.0,
        sample_rate_hz: FS,
    };
    let mut t = TachTracker::new(&src).unwrap();
    let mut n = 0u64;
    t.advance_to(10_000, |_| n += 1);
    assert_eq!(n, 5);
    t.advance_to(u64::MAX, |_| n += 1);
    let s = t.finish(|_| {});
    assert!(s.flags.contains(TachFlags::TIME_JUMP));
    assert!(n <= 5 + 65_537, "{n}");
    assert!(TachTracker::new(&SpeedSource::Constant {
        rpm: 1e30,
        sample_rate_hz: FS
    })
    .is_err());
}
