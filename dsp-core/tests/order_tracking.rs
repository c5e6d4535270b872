//! Computed order tracking against analytic angle-domain truth and rustfft.
//!
//! Speed profile: a linear run-up f(t) = f0·(1 + t/T) rev/s, so the shaft
//! angle is θ(t) = f0·(t + t²/(2T)) and its inverse t(θ) = T·(√(1 + 2θ/(f0·T)) − 1)
//! (calculus, exact). Defect order: CWRU drive-end bearing 6205-2RS BPFO =
//! 3.5848 × shaft speed (CWRU bearing specification, see
//! ../shared/data/cwru/README.md). Spectra: rustfft (reference FFT), Hann window.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::too_many_arguments,
    clippy::expect_used,
    clippy::panic
)]

use dsp_core::decimation_for;
use dsp_core::speed::order_track::{
    ring_needed, Interpolation, OrderFlags, OrderTrackConfig, OrderTracker,
};
use dsp_core::speed::tach::{
    EdgeDetector, RevMark, SpeedSource, SpeedSummary, TachConfig, TachTracker,
};
use rustfft::{num_complex::Complex, FftPlanner};
use std::f64::consts::PI;

const FS: f64 = 51_200.0;
const BPFO_DE: f64 = 3.5848; // CWRU 6205-2RS drive end, published multiple of shaft speed

/// Linear run-up: f0 rev/s at input time `t_start` (input samples), doubling after `t_ramp` seconds.
#[derive(Clone, Copy)]
struct Ramp {
    f0: f64,
    t_ramp: f64,
    t_start: f64,
}

impl Ramp {
    fn theta(&self, t_samples: f64) -> f64 {
        let t = (t_samples - self.t_start) / FS;
        self.f0 * (t + t * t / (2.0 * self.t_ramp))
    }
    fn time_of(&self, theta: f64) -> f64 {
        let t = self.t_ramp * ((1.0 + 2.0 * theta / (self.f0 * self.t_ramp)).sqrt() - 1.0);
        t * FS + self.t_start
    }
}

fn ot_cfg(s: u16, d: u16, delay: f32, min_rpm: f32, interp: Interpolation) -> OrderTrackConfig {
    let mut c = OrderTrackConfig::default();
    c.samples_per_rev = s;
    c.decimation = d;
    c.input_rate_hz = (FS / f64::from(d)) as f32;
    c.delay_input_samples = delay;
    c.min_rpm = min_rpm;
    c.interpolation = interp;
    c
}

/// Streams a record: decimated sample j describes input time j·D − delay;
/// marks are delivered once the input passed them. Returns the angle-domain output.
fn stream_exact_marks<const R: usize>(
    cfg: &OrderTrackConfig,
    marks: &[f64],
    n_dec: usize,
    env: impl Fn(f64) -> f64,
) -> (Vec<f32>, OrderTracker<R>) {
    let mut ot = OrderTracker::<R>::new(cfg).unwrap();
    let d = f64::from(cfg.decimation);
    let mut out = Vec::new();
    let mut next = 0;
    for j in 0..n_dec {
        let block_end = (j as f64 + 1.0) * d;
        while next < marks.len() && marks[next] < block_end {
            let m = RevMark {
                time_samples: marks[next],
                index: next as u32,
                segment_start: next == 0,
                bridged: false,
            };
            ot.push_mark(m, |y| out.push(y));
            next += 1;
        }
        let t = j as f64 * d - f64::from(cfg.delay_input_samples);
        ot.push_sample(env(t) as f32, |y| out.push(y));
    }
    ot.finish(|y| out.push(y));
    (out, ot)
}

fn rms_error(out: &[f32], s: usize, truth: impl Fn(f64) -> f64) -> f64 {
    let e: f64 = out
        .iter()
        .enumerate()
        .map(|(i, &y)| {
            let theta = i as f64 / s as f64;
            (f64::from(y) - truth(theta)).powi(2)
        })
        .sum();
    (e / out.len() as f64).sqrt()
}

#[test]
fn cubic_beats_linear_under_a_speed_sweep() {
    // 600 → 1200 rpm over 8 s (2:1), orders 5.4 and 10.8, S = 64.
    let ramp = Ramp {
        f0: 10.0,
        t_ramp: 8.0,
        t_start: 1000.0,
    };
    let s = 64u16;
    let d = decimation_for(FS as f32, 1200.0, 12.0, s);
    assert_eq!(d, 32); // min(0.4·51200/(12·20), 51200/(1.25·64·20)) = min(85.3, 32)
    let n_dec = (8.0 * FS / f64::from(d)) as usize + 40;
    let last_theta = ramp.theta(n_dec as f64 * f64::from(d)).floor() as usize;
    let marks: Vec<f64> = (0..=last_theta).map(|k| ramp.time_of(k as f64)).collect();
    let delay = 37.5;
    for orders in [&[5.4][..], &[10.8], &[5.4, 10.8]] {
        let sig = |theta: f64| {
            orders
                .iter()
                .map(|o| (2.0 * PI * o * theta).sin())
                .sum::<f64>()
        };
        let sig_rms = (orders.len() as f64 * 0.5).sqrt();
        let mut res = Vec::new();
        for interp in [Interpolation::CatmullRom, Interpolation::Linear] {
            let cfg = ot_cfg(s, d, delay, 600.0, interp);
            let (out, ot) = stream_exact_marks::<1024>(&cfg, &marks, n_dec, |t| sig(ramp.theta(t)));
            assert!(ot.flags().is_empty(), "{:?}", ot.flags());
            assert!(ot.revs_emitted() >= 110, "{}", ot.revs_emitted());
            assert_eq!(out.len(), ot.revs_emitted() as usize * 64);
            res.push(rms_error(&out, 64, sig));
        }
        println!(
            "speed sweep 600->1200 rpm, orders {orders:?}, S=64, D=32: RMS error Catmull-Rom {:.5}, linear {:.5} (signal RMS {sig_rms:.3})",
            res[0], res[1]
        );
        assert!(
            res[0] < 0.25 * res[1],
            "cubic {} vs linear {}",
            res[0],
            res[1]
        );
        assert!(res[0] < 0.01 * sig_rms);
        // Same with 8x denser envelope samples (D = 4): what remains is the
        // angle-curve (PCHIP through the marks) error.
        let cfg = ot_cfg(s, 4, delay, 600.0, Interpolation::CatmullRom);
        let n4 = n_dec * 8;
        let (out, _) = stream_exact_marks::<8192>(&cfg, &marks, n4, |t| sig(ramp.theta(t)));
        let floor = rms_error(&out, 64, sig);
        println!("  same orders with D=4 (angle-curve floor): RMS error {floor:.6}");
        assert!(floor < 0.5 * res[0]);
    }
}

fn hann_spectrum(x: &[f32]) -> Vec<f64> {
    let n = x.len();
    let mean = x.iter().map(|&v| f64::from(v)).sum::<f64>() / n as f64;
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            let w = 0.5 - 0.5 * (2.0 * PI * i as f64 / n as f64).cos();
            Complex::new((f64::from(v) - mean) * w, 0.0)
        })
        .collect();
    FftPlanner::new().plan_fft_forward(n).process(&mut buf);
    buf[..n / 2].iter().map(|c| c.norm_sqr()).collect()
}

/// (peak bin, fraction of the band's power within ±2 bins of the peak).
fn concentration(p: &[f64], lo: usize, hi: usize) -> (usize, f64) {
    let band = &p[lo..=hi];
    let (k, _) = band
        .iter()
        .enumerate()
        .fold((0, 0.0), |a, (i, &v)| if v > a.1 { (i, v) } else { a });
    let k = k + lo;
    let total: f64 = band.iter().sum();
    let near: f64 = p[k - 2..=k + 2].iter().sum();
    (k, near / total)
}

/// Envelope of an outer-race impulse train at BPFO_DE: decaying pulses (τ = 5 ms).
fn impulse_envelope(ramp: Ramp, t: f64) -> f64 {
    let tau = 0.005 * FS;
    let theta = ramp.theta(t);
    let n_last = (theta * BPFO_DE).floor();
    let mut v = 0.0;
    let mut n = n_last;
    while n >= 0.0 {
        let tn = ramp.time_of(n / BPFO_DE);
        let age = t - tn;
        if age > 10.0 * tau {
            break;
        }
        v += (-age / tau).exp();
        n -= 1.0;
    }
    v
}

#[test]
fn run_up_order_line_is_sharp_while_time_spectrum_smears() {
    // 600 → 1200 rpm within one record (2:1), 1 pulse/rev from a 1 MHz capture timer that wraps.
    let ramp = Ramp {
        f0: 10.0,
        t_ramp: 4.5,
        t_start: 2000.0,
    };
    let s = 64u16;
    let d = decimation_for(FS as f32, 1200.0, 12.0, s);
    let n_dec = (4.7 * FS / f64::from(d)) as usize;
    let mut tc = TachConfig::default();
    tc.tick_hz = 1_000_000;
    tc.tick_at_sample0 = u32::MAX - 1_000_000;
    tc.sample_rate_hz = FS as f32;
    tc.min_rpm = 500.0;
    tc.max_rpm = 1300.0;
    tc.max_speed_change_pct = 150.0;
    tc.min_good_revs = 32;
    let mut tach = TachTracker::new(&SpeedSource::Tach(tc)).unwrap();
    let cfg = ot_cfg(s, d, 0.0, 500.0, Interpolation::CatmullRom);
    let mut ot = OrderTracker::<1024>::new(&cfg).unwrap();
    let n_revs = ramp.theta(n_dec as f64 * f64::from(d)).floor() as usize;
    let edges: Vec<f64> = (0..=n_revs).map(|k| ramp.time_of(k as f64)).collect();
    let mut out = Vec::new();
    let mut env = Vec::new();
    let mut next = 0;
    for j in 0..n_dec {
        let end = (j + 1) * usize::from(d);
        while next < edges.len() && edges[next] < end as f64 {
            let tick = tc
                .tick_at_sample0
                .wrapping_add((edges[next] * 1e6 / FS).round() as u32);
            tach.push_edge(tick, |m| ot.push_mark(m, |y| out.push(y)));
            next += 1;
        }
        tach.advance_to(end as u64, |m| ot.push_mark(m, |y| out.push(y)));
        let x = impulse_envelope(ramp, j as f64 * f64::from(d)) as f32;
        env.push(x);
        ot.push_sample(x, |y| out.push(y));
    }
    let summary: SpeedSummary = tach.finish(|m| ot.push_mark(m, |y| out.push(y)));
    ot.finish(|y| out.push(y));
    assert!(!summary.flags.is_fault(), "{:?}", summary.flags);
    assert!(
        summary.min_rpm < 630.0 && summary.max_rpm > 1150.0,
        "{summary:?}"
    );
    assert!(ot.flags().is_empty(), "{:?}", ot.flags());

    // Order spectrum of the first 64 revolutions: bin width 1/64 order.
    let revs = 64usize;
    assert!(out.len() >= revs * 64);
    let p = hann_spectrum(&out[..revs * 64]);
    let lo = (BPFO_DE / 1.5 * revs as f64) as usize;
    let hi = (BPFO_DE * 1.5 * revs as f64) as usize;
    let (k_ord, c_ord) = concentration(&p, lo, hi);
    let expect_bin = BPFO_DE * revs as f64; // 229.4
                                            // Parabolic interpolation of the peak on log power (common practice).
    let (a, b, c) = (p[k_ord - 1].ln(), p[k_ord].ln(), p[k_ord + 1].ln());
    let k_fine = k_ord as f64 + 0.5 * (a - c) / (a - 2.0 * b + c);

    // Time spectrum of the same 64 revolutions of the decimated envelope.
    let fd = FS / f64::from(d);
    let j0 = (edges[0] / f64::from(d)).ceil() as usize;
    let j1 = (edges[revs] / f64::from(d)) as usize;
    let seg = &env[j0..j1];
    let pt = hann_spectrum(seg);
    let df = fd / seg.len() as f64;
    let (f_lo, f_hi) = (BPFO_DE * 10.0 * 0.95, BPFO_DE * 20.0 * 1.05);
    let (k_t, c_t) = concentration(&pt, (f_lo / df) as usize, (f_hi / df) as usize);
    println!(
        "run-up 600->1200 rpm, D={d}, S=64, 64 revs: order peak at {:.4} (bin {k_ord}, expected {:.2}), \
         power within +-2 bins {:.1} %; time spectrum peak {:.1} Hz, power within +-2 bins {:.1} % of {}..{} Hz",
        k_fine / revs as f64,
        expect_bin,
        100.0 * c_ord,
        k_t as f64 * df,
        100.0 * c_t,
        f_lo,
        f_hi
    );
    assert!(
        (k_fine - expect_bin).abs() < 0.2,
        "order peak {k_fine} vs {expect_bin}"
    );
    assert!(c_ord > 0.9, "order line not concentrated: {c_ord}");
    assert!(
        c_t < 0.2,
        "negative control: time spectrum should smear, {c_t}"
    );
}

#[test]
fn constant_speed_equals_perfect_tach() {
    let s = 128u16;
    let d = 16u16;
    let cfg = ot_cfg(s, d, 12.0, 1000.0, Interpolation::CatmullRom);
    let n_in: u64 = 51_200 * 3;
    let env = |t: f64| 1.0 + 0.5 * (t * 0.0123).sin() + 0.25 * (t * 0.0711 + 1.0).cos();
    let run = |src: SpeedSource, tick_hz: u32| {
        let mut tach = TachTracker::new(&src).unwrap();
        let mut ot = OrderTracker::<1024>::new(&cfg).unwrap();
        let mut out = Vec::new();
        let per_rev_ticks = 2048u64 * u64::from(tick_hz) / 51_200; // 1500 rpm
        let mut k = 0u64;
        for j in 0..n_in / u64::from(d) {
            let end = (j + 1) * u64::from(d);
            while k * 2048 < end {
                tach.push_edge((k * per_rev_ticks) as u32, |m| {
                    ot.push_mark(m, |y| out.push(y))
                });
                k += 1;
            }
            tach.advance_to(end, |m| ot.push_mark(m, |y| out.push(y)));
            let t = (j * u64::from(d)) as f64 - 12.0;
            ot.push_sample(env(t) as f32, |y| out.push(y));
        }
        tach.finish(|m| ot.push_mark(m, |y| out.push(y)));
        ot.finish(|y| out.push(y));
        (out, ot.revs_emitted())
    };
    let mut tc = TachConfig::default();
    tc.tick_hz = 51_200_000;
    let (a, ra) = run(SpeedSource::Tach(tc), tc.tick_hz);
    let (b, rb) = run(
        SpeedSource::Constant {
            rpm: 1500.0,
            sample_rate_hz: 51_200.0,
        },
        tc.tick_hz,
    );
    assert_eq!(ra, rb);
    assert!(ra >= 70, "{ra}");
    assert_eq!(a.len(), b.len());
    let worst = a
        .iter()
        .zip(&b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0f32, f32::max);
    assert!(worst < 1e-5, "max difference {worst}");
}

#[test]
fn ring_overflow_is_flagged_not_panicking() {
    // Configured for >= 600 rpm, fed 100 rpm: revolutions no longer fit the ring.
    let cfg = ot_cfg(32, 32, 0.0, 600.0, Interpolation::CatmullRom);
    assert!(ring_needed(1600.0, 600.0) <= 1024);
    let period = FS * 60.0 / 100.0;
    let marks: Vec<f64> = (0..10).map(|k| 500.0 + k as f64 * period).collect();
    let (out, ot) = stream_exact_marks::<1024>(&cfg, &marks, 1600 * 3, |_| 1.0);
    assert!(
        ot.flags().contains(OrderFlags::RING_OVERFLOW),
        "{:?}",
        ot.flags()
    );
    assert!(ot.revs_skipped() > 0);
    assert_eq!(out.len(), ot.revs_emitted() as usize * 32);
    // And the constructor refuses a ring too small for the configured range.
    let slow = ot_cfg(32, 32, 0.0, 100.0, Interpolation::CatmullRom);
    assert!(OrderTracker::<512>::new(&slow).is_err());
}

#[test]
fn bad_config_rejected() {
    let mut c = ot_cfg(100, 8, 0.0, 600.0, Interpolation::CatmullRom);
    assert!(OrderTracker::<4096>::new(&c).is_err()); // not a power of two
    c.samples_per_rev = 128;
    c.delay_input_samples = f32::NAN;
    assert!(OrderTracker::<4096>::new(&c).is_err());
    assert_eq!(decimation_for(f32::NAN, 1.0, 1.0, 64), 1);
    assert_eq!(decimation_for(51_200.0, 30.0, 1.0, 8), 1024); // clamped
}

#[test]
fn ram_sizes() {
    // Figures for the report (RAM budget), checked against the ring payload.
    let tt = std::mem::size_of::<TachTracker>();
    let ed = std::mem::size_of::<EdgeDetector>();
    let o512 = std::mem::size_of::<OrderTracker<512>>();
    let o2048 = std::mem::size_of::<OrderTracker<2048>>();
    let o4096 = std::mem::size_of::<OrderTracker<4096>>();
    println!(
        "RAM: TachTracker {tt} B, EdgeDetector {ed} B, SpeedSummary {} B, OrderTracker<512> {o512} B, <2048> {o2048} B, <4096> {o4096} B",
        std::mem::size_of::<SpeedSummary>()
    );
    println!(
        "ring_needed at 1600 Hz decimated: 600 rpm {}, 300 rpm {}; 30 rpm with D=160 (320 Hz): {}",
        ring_needed(1600.0, 600.0),
        ring_needed(1600.0, 300.0),
        ring_needed(320.0, 30.0)
    );
    assert!(tt < 4 * 1024 + 512, "series dominates: {tt}");
    assert!(o2048 <= 4 * 2048 + 512);
}

mod fuzz {
    use super::*;
    use proptest::prelude::*;

    #[derive(Debug, Clone)]
    enum Op {
        Mark(f64, bool),
        Sample(f32),
        Samples(u16),
    }

    fn op() -> impl Strategy<Value = Op> {
        prop_oneof![
            (any::<f64>(), any::<bool>()).prop_map(|(t, s)| Op::Mark(t, s)),
            (-1e6f64..1e7, any::<bool>()).prop_map(|(t, s)| Op::Mark(t, s)),
            any::<f32>().prop_map(Op::Sample),
            (0u16..3000).prop_map(Op::Samples),
        ]
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(512))]
        // Arbitrary mark times (NaN, inf, backwards) and samples never panic,
        // and the output is always whole revolutions.
        #[test]
        fn arbitrary_marks_never_panic(ops in proptest::collection::vec(op(), 0..200), delay in -1e4f32..1e4) {
            let cfg = ot_cfg(16, 8, delay, 600.0, Interpolation::CatmullRom);
            let mut ot = OrderTracker::<4096>::new(&cfg).unwrap();
            let mut out = 0usize;
            for (i, o) in ops.into_iter().enumerate() {
                match o {
                    Op::Mark(t, s) => ot.push_mark(RevMark { time_samples: t, index: i as u32, segment_start: s, bridged: false }, |_| out += 1),
                    Op::Sample(x) => ot.push_sample(x, |_| out += 1),
                    Op::Samples(n) => for k in 0..n { ot.push_sample(f32::from(k), |_| out += 1) },
                }
            }
            ot.finish(|_| out += 1);
            prop_assert_eq!(out, ot.revs_emitted() as usize * 16);
        }
    }
}
