//! The core alone on a recording: runs one `NodePipeline` measurement per
//! pass over a raw little-endian f32 file (acceleration in g) at constant
//! speed and prints wall times as JSON (best of REPEATS): one record on one
//! thread; RECORDS records on THREADS threads (each record the same bits as
//! alone); and the 8-pole band-pass alone over the record (the sequential
//! IIR cascade, bound by its recurrence latency). Also prints the choices the
//! scipy mirror needs (decimations, angle-domain rate). Used by
//! `tests/reference/bench_vs_scipy.py`.
//!
//! Usage: `cargo run --release -p dsp-core --example throughput -- FILE.f32 RPM [REPEATS [RECORDS THREADS [FS]]]`
//! (FS: sample rate of the file, default 51200 Hz).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::cast_precision_loss,
    clippy::indexing_slicing,
    missing_docs
)]

use dsp_core::config::{Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::pipeline::{NodePipeline, ADC_BLOCK};
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if args.len() < 3 {
        eprintln!("usage: throughput FILE.f32 RPM [REPEATS [RECORDS THREADS [FS]]]");
        std::process::exit(2);
    }
    let bytes = std::fs::read(&args[1]).expect("read recording");
    let x: Vec<f32> = bytes
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect();
    let rpm: f32 = args[2].parse().expect("rpm");
    let repeats: usize = args.get(3).map_or(5, |r| r.parse().expect("repeats"));
    let mut point = PointConfig::default();
    point.speed = SpeedInput::Constant { rpm };
    point.sample_rate_hz = args
        .get(6)
        .map_or(point.sample_rate_hz, |f| f.parse().expect("sample rate"));
    point.band_hz = Some([5000.0, 10000.0]);
    point.rectifier = dsp_core::frontend::rectify::Rectifier::Square;
    for (name, rollers, d, pd) in [
        ("drive-end", 9u16, 7.9f32, 39.0f32),
        ("fan-end", 8, 6.7, 31.0),
    ] {
        point
            .bearings
            .push(Bearing {
                name: dsp_core::config::name_from(name),
                shaft: 0,
                kinematics: BearingKinematics::Geometry {
                    rollers,
                    roller_diameter: d,
                    pitch_diameter: pd,
                    contact_angle_deg: 0.0,
                },
            })
            .unwrap();
    }
    let one = |x: &[f32]| {
        let mut p = Box::new(NodePipeline::new(&point).expect("point"));
        for blk in x.chunks(ADC_BLOCK) {
            p.push_f32(blk);
        }
        p.finish()
    };
    let mut best = f64::INFINITY;
    let mut segments = 0u32;
    for _ in 0..repeats {
        let t0 = Instant::now();
        let r = one(&x);
        segments = r.segments;
        best = best.min(t0.elapsed().as_secs_f64());
    }
    // RECORDS records over THREADS threads, each thread taking the next.
    let records: usize = args.get(4).map_or(8, |r| r.parse().expect("records"));
    let threads: usize = args.get(5).map_or(2, |r| r.parse().expect("threads"));
    let mut best_many = f64::INFINITY;
    for _ in 0..repeats {
        let next = std::sync::atomic::AtomicUsize::new(0);
        let t0 = Instant::now();
        std::thread::scope(|s| {
            for _ in 0..threads {
                s.spawn(|| {
                    while next.fetch_add(1, std::sync::atomic::Ordering::Relaxed) < records {
                        std::hint::black_box(one(&x));
                    }
                });
            }
        });
        best_many = best_many.min(t0.elapsed().as_secs_f64());
    }
    // The band-pass alone (8 poles, the point's band), in place over a copy.
    let p = NodePipeline::new(&point).expect("point");
    let sos = dsp_core::frontend::design::butter_bandpass(5000.0, 10000.0, point.sample_rate_hz, 8)
        .expect("band");
    let mut best_bp = f64::INFINITY;
    let mut y = x.clone();
    for _ in 0..repeats {
        y.copy_from_slice(&x);
        let mut bp = dsp_core::frontend::biquad::BiquadCascade::new(sos);
        let t0 = Instant::now();
        bp.process(&mut y);
        best_bp = best_bp.min(t0.elapsed().as_secs_f64());
        std::hint::black_box(&y);
    }
    // Further parts alone: overall statistics, velocity path, and the front
    // end with velocity off (statistics + envelope band-pass, rectifier and
    // decimator), each over the whole record, best of REPEATS.
    let best_of = |f: &mut dyn FnMut()| {
        let mut b = f64::INFINITY;
        for _ in 0..repeats {
            let t0 = Instant::now();
            f();
            b = b.min(t0.elapsed().as_secs_f64());
        }
        b
    };
    let t_stats = best_of(&mut || {
        let mut acc = dsp_core::overall::OverallAcc::new();
        y.copy_from_slice(&x);
        for blk in y.chunks_mut(ADC_BLOCK) {
            acc.add_block(blk);
        }
        std::hint::black_box(acc.snapshot());
    });
    let t_vel = best_of(&mut || {
        let mut v = dsp_core::overall::velocity::VelocityMeter::new(
            point.sample_rate_hz,
            &dsp_core::overall::velocity::VelocityConfig::default(),
        )
        .expect("velocity");
        for blk in x.chunks(ADC_BLOCK) {
            v.process(blk);
        }
        std::hint::black_box(v.rms_mm_s());
    });
    let t_env = best_of(&mut || {
        let mut cfg = dsp_core::frontend::FrontEndConfig::default();
        cfg.sample_rate_hz = point.sample_rate_hz;
        cfg.decimation = p.decimation();
        cfg.velocity.enabled = false;
        let mut fe = dsp_core::frontend::FrontEnd::new(&cfg).expect("front end");
        let mut sink = 0f32;
        for blk in x.chunks(ADC_BLOCK) {
            fe.push_f32(blk, |v| sink += v);
        }
        std::hint::black_box(sink);
    });
    let vel = dsp_core::overall::velocity::velocity_decimation(point.sample_rate_hz);
    println!(
        "{{\"seconds\": {best:.6}, \"samples\": {n}, \"segments\": {segments}, \
         \"msps\": {:.3}, \"records\": {records}, \"threads\": {threads}, \
         \"seconds_records\": {best_many:.6}, \"bandpass_seconds\": {best_bp:.6}, \
         \"stats_seconds\": {t_stats:.6}, \"velocity_seconds\": {t_vel:.6}, \
         \"frontend_envelope_seconds\": {t_env:.6}, \
         \"decimation\": {}, \"velocity_decimation\": {vel}, \"sample_rate_hz\": {}}}",
        x.len() as f64 / best / 1e6,
        p.decimation(),
        point.sample_rate_hz,
        n = x.len(),
    );
}
