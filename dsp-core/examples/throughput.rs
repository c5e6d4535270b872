//! The core alone on a recording: runs one `NodePipeline` measurement per
//! pass over a raw little-endian f32 file (acceleration in g) at constant
//! speed and prints the wall time as JSON. Used by
//! `tests/reference/bench_vs_scipy.py`.
//!
//! Usage: `cargo run --release -p dsp-core --example throughput -- FILE.f32 RPM [REPEATS]`
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
        eprintln!("usage: throughput FILE.f32 RPM [REPEATS]");
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
    point.band_hz = Some([5000.0, 10000.0]);
    point.rectifier = dsp_core::rectify::Rectifier::Square;
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
    let mut best = f64::INFINITY;
    let mut used = 0usize;
    let mut segments = 0u32;
    for _ in 0..repeats {
        let t0 = Instant::now();
        let mut p = Box::new(NodePipeline::new(&point).expect("point"));
        used = 0;
        for blk in x.chunks(ADC_BLOCK) {
            p.push_f32(blk);
            used += blk.len();
        }
        let r = p.finish();
        segments = r.segments;
        best = best.min(t0.elapsed().as_secs_f64());
    }
    println!(
        "{{\"seconds\": {best:.6}, \"samples\": {used}, \"segments\": {segments}, \"msps\": {:.3}}}",
        used as f64 / best / 1e6
    );
}
