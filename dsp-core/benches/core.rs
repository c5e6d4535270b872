//! Host throughput of the core (criterion): front end in samples per second
//! and whole `NodePipeline` measurements (10 s records) per second.
//! Run: `cargo bench -p dsp-core --bench core`. Figures only; no assertions.
#![allow(
    missing_docs,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::cast_possible_truncation
)]

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use dsp_core::config::{Bearing, BearingKinematics, PointConfig, SpeedInput};
use dsp_core::frontend::decimate::Decimator;
use dsp_core::frontend::{FrontEnd, FrontEndConfig};
use dsp_core::pipeline::{NodePipeline, ADC_BLOCK};
use dsp_core::spectrum::real_fft;

const FS: f32 = 51_200.0;

/// Deterministic i16 test record: 7 kHz carrier modulated at 87 Hz plus noise.
fn record(seconds: f32) -> Vec<i16> {
    let n = (FS * seconds) as usize;
    let mut rng = 0x1234_5678u32;
    (0..n)
        .map(|i| {
            rng ^= rng << 13;
            rng ^= rng >> 17;
            rng ^= rng << 5;
            let noise = (rng >> 8) as f32 / 16_777_216.0 - 0.5;
            let t = i as f32 / FS;
            let am = 1.0 + 0.5 * (2.0 * std::f32::consts::PI * 87.0 * t).sin();
            let g = 0.3 * noise + 0.2 * am * (2.0 * std::f32::consts::PI * 7_000.0 * t).sin();
            (g * 655.36).round() as i16
        })
        .collect()
}

fn point() -> PointConfig {
    let mut p = PointConfig::default();
    p.speed = SpeedInput::Constant { rpm: 1500.0 };
    for (name, rollers, d, pd) in [
        ("drive-end", 9u16, 7.9f32, 39.0f32),
        ("fan-end", 8, 6.7, 31.0),
        ("idler", 12, 9.5, 52.0),
    ] {
        p.bearings
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
    p
}

fn bench_front_end(c: &mut Criterion) {
    let x = record(1.0);
    let xf: Vec<f32> = x.iter().map(|&c| f32::from(c) / 655.36).collect();
    let mut g = c.benchmark_group("front_end");
    g.throughput(Throughput::Elements(x.len() as u64));
    for (name, vel) in [("envelope_i16", false), ("firmware_i16", true)] {
        let mut cfg = FrontEndConfig::default();
        cfg.velocity.enabled = vel;
        let mut fe = FrontEnd::new(&cfg).unwrap();
        g.bench_function(name, |b| {
            b.iter(|| {
                let mut s = 0f32;
                for blk in x.chunks(ADC_BLOCK) {
                    fe.push_i16(black_box(blk), |y| s += y);
                }
                s
            })
        });
    }
    let mut dec = Decimator::new(8).unwrap();
    g.bench_function("decimate8_f32", |b| {
        b.iter(|| {
            let mut s = 0f32;
            for blk in xf.chunks(ADC_BLOCK) {
                dec.process(black_box(blk), |y| s += y);
            }
            s
        })
    });
    g.finish();
}

fn bench_fft(c: &mut Criterion) {
    let mut g = c.benchmark_group("rfft");
    for n in [1024usize, 4096] {
        let src: Vec<f32> = (0..n).map(|i| ((i * 7919) % 1000) as f32 * 1e-3).collect();
        g.throughput(Throughput::Elements(1));
        g.bench_function(format!("rfft_{n}_plus_magnitudes"), |b| {
            let mut buf = src.clone();
            let mut mags = vec![0f32; n / 2];
            b.iter(|| {
                buf.copy_from_slice(&src);
                let bins = real_fft(black_box(&mut buf)).unwrap();
                for (m, c) in mags.iter_mut().zip(bins.iter()) {
                    *m = libm::sqrtf(c.re * c.re + c.im * c.im);
                }
                mags.get(1).copied()
            })
        });
    }
    g.finish();
}

fn bench_pipeline(c: &mut Criterion) {
    let point = point();
    // 256 revolutions at 1500 rpm = 10.24 s: one report.
    let x = record(10.5);
    let mut g = c.benchmark_group("node_pipeline");
    g.sample_size(10);
    g.throughput(Throughput::Elements(1));
    g.bench_function("report_10s_record", |b| {
        b.iter(|| {
            let mut p = Box::new(NodePipeline::new(&point).unwrap());
            for blk in x.chunks(ADC_BLOCK) {
                if p.complete() {
                    break;
                }
                p.push_i16(black_box(blk));
            }
            p.finish()
        })
    });
    g.finish();
}

criterion_group!(benches, bench_front_end, bench_fft, bench_pipeline);
criterion_main!(benches);
