//! Tach channel and speed profiles against closed-form kinematics: for a
//! linear speed ramp f(t) = f0 + (f1 - f0) t / T the shaft angle is
//! theta(t) = f0 t + (f1 - f0) t^2 / (2T) (calculus), so rev k is at the
//! positive root of theta(t) = k + phase.
#![allow(
    clippy::field_reassign_with_default,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

mod sim_util;
use host_sim::simulate::{simulate, MachineSpec, SpeedProfile};
use sim_util::*;

fn quiet(seconds: f64, speed: SpeedProfile) -> MachineSpec {
    let mut s = MachineSpec::default();
    s.seconds = seconds;
    s.speed = speed;
    s
}

#[test]
fn constant_speed_edges_are_one_period_apart() {
    let out = simulate(&quiet(3.0, SpeedProfile::Constant { rpm: 1500.0 }), 1).unwrap();
    // 25 rev/s, first edge at phase 0.25 rev -> 0.01 s, then every 0.04 s.
    assert_eq!(out.true_edges_s.len(), 75);
    for (k, t) in out.true_edges_s.iter().enumerate() {
        let want = (k as f64 + 0.25) / 25.0;
        assert!((t - want).abs() < 1e-9, "rev {k}: {t} vs {want}");
    }
}

#[test]
fn ramp_edges_match_closed_form_and_the_pulse_channel() {
    // 2:1 sweep, 600 -> 1200 rpm over 4 s.
    let (f0, f1, tt, phase) = (10.0, 20.0, 4.0, 0.25);
    let out = simulate(
        &quiet(
            tt,
            SpeedProfile::Ramp {
                start_rpm: 600.0,
                end_rpm: 1200.0,
            },
        ),
        2,
    )
    .unwrap();
    let a = (f1 - f0) / tt; // Hz/s
    let revs_total = f0 * tt + 0.5 * a * tt * tt; // 60 rev
    let n_expected = (revs_total - phase).floor() as usize + 1;
    assert_eq!(out.true_edges_s.len(), n_expected);
    for (k, t) in out.true_edges_s.iter().enumerate() {
        let th = k as f64 + phase;
        let want = (-f0 + (f0 * f0 + 2.0 * a * th).sqrt()) / a;
        assert!((t - want).abs() < 1e-9, "rev {k}: {t} vs {want}");
    }
    // The pulse channel: mid-level rising crossings, interpolated, land on
    // the true edges (no jitter configured).
    let seen = rising_edges(&out.tach, out.fs, 0.5);
    assert_eq!(seen.len(), out.true_edges_s.len());
    let worst = seen
        .iter()
        .zip(&out.true_edges_s)
        .map(|(s, t)| (s - t).abs())
        .fold(0.0, f64::max);
    eprintln!(
        "ramp: {} edges, worst pulse-channel edge error {worst:.3e} s",
        seen.len()
    );
    assert!(worst < 1e-7, "worst edge error {worst} s");
    // Recorded speed is the ramp.
    for (i, &f) in out.speed_hz.iter().enumerate().step_by(997) {
        let want = f0 + a * i as f64 / out.fs;
        assert!((f64::from(f) - want).abs() < 1e-4, "speed at {i}");
    }
    // Pulse width is the duty (5 %) of the local period.
    assert!((out.tach.iter().copied().fold(0.0f32, f32::max) - 1.0).abs() < 1e-6);
}

#[test]
fn random_walk_stays_in_bounds_and_edges_follow_the_speed() {
    let spec = quiet(
        20.0,
        SpeedProfile::RandomWalk {
            start_rpm: 1000.0,
            min_rpm: 900.0,
            max_rpm: 1100.0,
            step_rpm_per_sqrt_s: 200.0,
        },
    );
    let out = simulate(&spec, 9).unwrap();
    let (lo, hi) = out
        .speed_hz
        .iter()
        .fold((f32::MAX, f32::MIN), |(l, h), &v| (l.min(v), h.max(v)));
    assert!(
        lo >= 15.0 - 1e-4 && hi <= 1100.0 / 60.0 + 1e-4,
        "speed {lo}..{hi} Hz"
    );
    assert!(hi - lo > 1.0, "the walk should move: {lo}..{hi}");
    // Revolutions from a plain rectangle-rule sum of the recorded speed.
    let revs: f64 = out.speed_hz.iter().map(|&v| f64::from(v)).sum::<f64>() / out.fs;
    let n = out.true_edges_s.len() as f64;
    assert!(
        (n - (revs - 0.25).floor() - 1.0).abs() <= 1.0,
        "{n} edges for {revs} revs"
    );
    // Between consecutive edges the shaft turns one revolution: the mean
    // recorded speed over the interval times its length is 1 (within the
    // rectangle-rule error of ~1 sample in ~1600 per rev).
    for w in out.true_edges_s.windows(2) {
        let (i0, i1) = (
            (w[0] * out.fs).ceil() as usize,
            (w[1] * out.fs).floor() as usize,
        );
        let mean = out.speed_hz[i0..=i1]
            .iter()
            .map(|&v| f64::from(v))
            .sum::<f64>()
            / (i1 - i0 + 1) as f64;
        assert!(
            ((w[1] - w[0]) * mean - 1.0).abs() < 2e-3,
            "interval {} at {mean} Hz",
            w[1] - w[0]
        );
    }
}

#[test]
fn jitter_and_dropouts_are_as_configured() {
    let mut spec = quiet(40.0, SpeedProfile::Constant { rpm: 1500.0 });
    spec.tach.jitter_s = 20e-6;
    spec.tach.dropout_prob = 0.1;
    let out = simulate(&spec, 4).unwrap();
    let n = out.true_edges_s.len(); // 1000 revs
    assert_eq!(n, 1000);
    // Binomial(1000, 0.1): mean 100, s.d. 9.5; allow 4 s.d.
    assert!(
        (62..=138).contains(&out.dropped_pulses),
        "dropped {}",
        out.dropped_pulses
    );
    let seen = rising_edges(&out.tach, out.fs, 0.5);
    assert_eq!(seen.len(), n - out.dropped_pulses);
    assert_eq!(seen.len(), out.pulse_edges_s.len());
    // Timing error of each seen edge against its nearest true rev.
    let errs: Vec<f64> = seen
        .iter()
        .map(|s| {
            let k = (s * 25.0 - 0.25).round();
            s - (k + 0.25) / 25.0
        })
        .collect();
    let rms = (errs.iter().map(|e| e * e).sum::<f64>() / errs.len() as f64).sqrt();
    eprintln!(
        "jitter: {} dropped of {n}, edge timing rms {rms:.3e} s (set 2e-5)",
        out.dropped_pulses
    );
    // Sample RMS of ~900 normal draws: within 10 % of sigma.
    assert!((rms / 20e-6 - 1.0).abs() < 0.1, "rms {rms}");
    // A missing pulse leaves a double-length gap in the pulse channel.
    let gaps = seen.windows(2).filter(|w| w[1] - w[0] > 0.06).count();
    assert!(gaps > 0);
}
