//! EdgeDetector against analytically known edge times, and a property test
//! that arbitrary edge streams never panic the tracker.
//! Reference: linear interpolation is exact on a linear ramp (Lagrange
//! interpolation of degree 1); the hysteresis comparator (Schmitt trigger)
//! suppresses noise smaller than half the threshold gap (common practice).
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::expect_used,
    clippy::panic
)]

use dsp_core::speed::order_track::{OrderTrackConfig, OrderTracker};
use dsp_core::speed::tach::{EdgeDetector, SpeedSource, TachConfig, TachTracker};
use proptest::prelude::*;

/// Pulse wave with linear edges of `rise` samples; the 0.5 level is crossed exactly at each edge time.
fn pulse_wave(n: usize, edges: &[f64], rise: f64, width: f64) -> Vec<f32> {
    (0..n)
        .map(|i| {
            let t = i as f64;
            let mut v: f64 = 0.0;
            for &e in edges {
                let up = ((t - e) / rise + 0.5).clamp(0.0, 1.0);
                let down = ((t - e - width) / rise + 0.5).clamp(0.0, 1.0);
                v = v.max(up - down);
            }
            v as f32
        })
        .collect()
}

fn detect(x: &[f32], low: f32, high: f32, block: usize) -> Vec<f64> {
    let mut d = EdgeDetector::new(low, high).unwrap();
    let mut out = Vec::new();
    for b in x.chunks(block) {
        d.process(b, |t| out.push(t));
    }
    out
}

#[test]
fn sub_sample_edge_times_on_linear_edges() {
    let truth: Vec<f64> = (0..20).map(|k| 100.37 + k as f64 * 512.29).collect();
    let x = pulse_wave(11_000, &truth, 4.0, 200.0);
    for block in [1, 7, 256, 11_000] {
        let e = detect(&x, 0.3, 0.7, block);
        assert_eq!(e.len(), truth.len(), "block {block}");
        for (a, b) in e.iter().zip(&truth) {
            assert!((a - b).abs() < 1e-5, "block {block}: {a} vs {b}");
        }
    }
}

#[test]
fn sub_sample_edge_times_on_smooth_edges() {
    // tanh edges: the linear interpolation error is small but non-zero.
    let truth: Vec<f64> = (0..10).map(|k| 50.81 + k as f64 * 300.13).collect();
    let x: Vec<f32> = (0..3100)
        .map(|i| {
            let t = i as f64;
            let v: f64 = truth
                .iter()
                .map(|&e| {
                    0.5 * (1.0 + ((t - e) / 1.5).tanh())
                        - 0.5 * (1.0 + ((t - e - 100.0) / 1.5).tanh())
                })
                .sum();
            v as f32
        })
        .collect();
    let e = detect(&x, 0.25, 0.75, 64);
    assert_eq!(e.len(), truth.len());
    let worst = e
        .iter()
        .zip(&truth)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    println!("tanh edges: worst edge-time error {worst:.4} samples");
    assert!(worst < 0.05);
}

#[test]
fn hysteresis_rejects_chatter() {
    let truth: Vec<f64> = (0..20).map(|k| 100.5 + k as f64 * 400.0).collect();
    let mut x = pulse_wave(8200, &truth, 40.0, 150.0); // slow edges: 40 samples in the noise band
    let mut st: u64 = 3;
    for v in &mut x {
        st = st
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let r = ((st >> 40) as f32 / (1u64 << 24) as f32) * 2.0 - 1.0;
        *v += 0.15 * r; // noise below half the hysteresis gap (0.2)
    }
    let e = detect(&x, 0.3, 0.7, 128);
    assert_eq!(
        e.len(),
        truth.len(),
        "hysteresis must give one edge per transition"
    );
    for (a, b) in e.iter().zip(&truth) {
        assert!((a - b).abs() < 8.0, "{a} vs {b}");
    }
    // Negative control: a 0.02 gap chatters on the same signal.
    let chatter = detect(&x, 0.49, 0.51, 128);
    assert!(
        chatter.len() > truth.len() + 5,
        "control found {} edges",
        chatter.len()
    );
}

#[test]
fn detector_to_tracker_speed() {
    // 51.2 kHz tach channel, 1 pulse per rev at 1234.5 rpm.
    let period = 51_200.0 * 60.0 / 1234.5;
    let truth: Vec<f64> = (0..30).map(|k| 10.2 + k as f64 * period).collect();
    let x = pulse_wave(75_000, &truth, 3.0, 300.0);
    let mut cfg = TachConfig::default();
    cfg.min_good_revs = 20;
    let mut tr = TachTracker::new(&SpeedSource::Tach(cfg)).unwrap();
    let mut d = EdgeDetector::new(0.3, 0.7).unwrap();
    let mut n = 0;
    for b in x.chunks(1024) {
        d.process(b, |t| tr.push_edge_time(t, |_| n += 1));
        tr.advance_to(d.samples_seen(), |_| n += 1);
    }
    let s = tr.finish(|_| n += 1);
    assert_eq!(n, 30);
    assert!((s.mean_rpm - 1234.5).abs() < 0.01, "{}", s.mean_rpm);
    assert!(!s.flags.is_fault());
}

#[test]
fn bad_thresholds_rejected() {
    assert!(EdgeDetector::new(0.7, 0.3).is_err());
    assert!(EdgeDetector::new(f32::NAN, 0.3).is_err());
}

#[derive(Debug, Clone)]
enum Op {
    Edge(u32),
    Advance(u64),
    Sample(f32),
}

fn op() -> impl Strategy<Value = Op> {
    prop_oneof![
        any::<u32>().prop_map(Op::Edge),
        any::<u64>().prop_map(Op::Advance),
        (0u64..10_000_000).prop_map(Op::Advance),
        any::<f32>().prop_map(Op::Sample),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1024))]
    // Fuzz-like: any edge values in any order, any advance positions and
    // envelope samples (NaN included) never panic and always give a summary.
    #[test]
    fn arbitrary_streams_never_panic(
        ops in proptest::collection::vec(op(), 0..300),
        tick_hz in 1u32..,
        tick0 in any::<u32>(),
        ppr in 1u8..,
        min_rpm in 1.0f32..1000.0,
        span in 1.01f32..100.0,
    ) {
        let mut c = TachConfig::default();
        c.tick_hz = tick_hz;
        c.tick_at_sample0 = tick0;
        c.pulses_per_rev = ppr;
        c.min_rpm = min_rpm;
        c.max_rpm = min_rpm * span;
        let mut tr = TachTracker::new(&SpeedSource::Tach(c)).unwrap();
        let mut oc = OrderTrackConfig::default();
        oc.samples_per_rev = 16;
        oc.decimation = 64;
        oc.input_rate_hz = 800.0;
        oc.min_rpm = 600.0;
        let mut ot = OrderTracker::<512>::new(&oc).unwrap();
        let mut out = 0usize;
        let mut times: Vec<f64> = Vec::new();
        for o in ops {
            let mut sink = |m: dsp_core::speed::tach::RevMark| {
                times.push(m.time_samples);
                ot.push_mark(m, |_| out += 1);
            };
            match o {
                Op::Edge(t) => tr.push_edge(t, &mut sink),
                Op::Advance(n) => tr.advance_to(n, &mut sink),
                Op::Sample(x) => ot.push_sample(x, |_| out += 1),
            }
        }
        let s = tr.finish(|m| {
            times.push(m.time_samples);
            ot.push_mark(m, |_| out += 1);
        });
        ot.finish(|_| out += 1);
        prop_assert!(s.revs >= s.good_revs);
        prop_assert!(s.mean_rpm.is_finite() && s.min_rpm.is_finite() && s.max_rpm.is_finite(), "{:?}", s);
        prop_assert!(times.windows(2).all(|w| w[1] > w[0]), "marks not increasing: {:?}", times);
        prop_assert!(tr.speed_series().iter().all(|r| r.is_finite() && *r > 0.0));
        prop_assert_eq!(out, ot.revs_emitted() as usize * 16);
    }
}

#[derive(Debug, Clone, Copy)]
enum Glitch {
    Clean,
    Jitter(i32),
    Drop,
    Double(u32),
    Gap(u32),
}

fn glitch() -> impl Strategy<Value = Glitch> {
    prop_oneof![
        6 => Just(Glitch::Clean),
        3 => (-300i32..300).prop_map(Glitch::Jitter),
        1 => Just(Glitch::Drop),
        1 => (1u32..39_000).prop_map(Glitch::Double),
        1 => (1u32..20).prop_map(Glitch::Gap),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1024))]
    // Plausible pulse trains (1500 rpm, 1 MHz timer) with random dropouts,
    // double pulses, jitter and stops, through tach and order tracker: no
    // panic, whole revolutions only, and every glitch kind leaves its flag.
    #[test]
    fn glitched_pulse_trains_flag_and_stay_whole(
        g in proptest::collection::vec(glitch(), 10..80),
        tick0 in any::<u32>(),
    ) {
        use dsp_core::speed::tach::TachFlags;
        let mut c = TachConfig::default();
        c.tick_at_sample0 = tick0;
        c.min_rpm = 600.0;
        c.max_rpm = 3000.0;
        let mut tr = TachTracker::new(&SpeedSource::Tach(c)).unwrap();
        let mut oc = OrderTrackConfig::default();
        oc.samples_per_rev = 32;
        oc.decimation = 32;
        oc.input_rate_hz = 1600.0;
        oc.min_rpm = 600.0;
        let mut ot = OrderTracker::<1024>::new(&oc).unwrap();
        let mut out = 0usize;
        let mut tick: u64 = 5_000;
        let mut edges: Vec<u64> = Vec::new();
        for &x in &g {
            tick += 40_000;
            match x {
                Glitch::Clean => edges.push(tick),
                Glitch::Jitter(j) => edges.push(tick.saturating_add_signed(i64::from(j))),
                Glitch::Drop => {}
                Glitch::Double(d) => { edges.push(tick); edges.push(tick + u64::from(d) / 8); }
                Glitch::Gap(n) => { tick += u64::from(n) * 40_000 * 4; edges.push(tick); }
            }
        }
        let mut next = 0;
        let end = tick * 512 / 10_000 + 2_000; // input samples (51.2 per tick·1000)
        let mut j = 0u64;
        while j * 32 < end {
            while next < edges.len() && edges[next] * 512 / 10_000 < (j + 1) * 32 {
                tr.push_edge(tick0.wrapping_add(edges[next] as u32), |m| ot.push_mark(m, |_| out += 1));
                next += 1;
            }
            tr.advance_to((j + 1) * 32, |m| ot.push_mark(m, |_| out += 1));
            ot.push_sample(1.0, |_| out += 1);
            j += 1;
        }
        let s = tr.finish(|m| ot.push_mark(m, |_| out += 1));
        ot.finish(|_| out += 1);
        prop_assert_eq!(out, ot.revs_emitted() as usize * 32);
        // A gap counts only after a first edge (a late start is no stop).
        let gap_after_edge = g.iter().enumerate().any(|(i, x)| {
            matches!(x, Glitch::Gap(_)) && g[..i].iter().any(|y| !matches!(y, Glitch::Drop))
        });
        if gap_after_edge {
            prop_assert!(s.flags.contains(TachFlags::STOP) || s.flags.contains(TachFlags::MISSING_PULSE));
        }
        if g.iter().any(|x| matches!(x, Glitch::Double(_))) {
            prop_assert!(s.flags.contains(TachFlags::EXTRA_PULSE), "{:?}", s.flags);
        }
        // A dropout is observable between two edges (not at the very start or end).
        let dropped = g.iter().enumerate().any(|(i, x)| {
            matches!(x, Glitch::Drop)
                && g[..i].iter().any(|y| !matches!(y, Glitch::Drop))
                && g[i + 1..].iter().any(|y| !matches!(y, Glitch::Drop))
        });
        if dropped && !g.iter().any(|x| matches!(x, Glitch::Gap(_))) {
            prop_assert!(s.flags.is_fault(), "{:?}", s.flags);
        }
    }
}
