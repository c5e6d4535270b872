//! The stored record converted to dsp-core's measuring point, and accepted
//! by the node-sized pipeline.
#![allow(clippy::unwrap_used, clippy::indexing_slicing, missing_docs)]
use dsp_core::config::{BearingKinematics, SpeedInput};
use dsp_core::pipeline::NodePipeline;
use firmware::config::{BearingModel, BearingSpec, PointRecord};
use firmware::point::{point_config, PointError};

#[test]
fn default_record_becomes_a_valid_point() {
    let rec = PointRecord::default();
    let p = point_config(&rec).unwrap();
    assert_eq!(p.sample_rate_hz, 25_600.0);
    assert_eq!(p.band_hz, Some([2_000.0, 8_000.0]));
    assert_eq!(p.poles, 4);
    assert_eq!(p.revolutions, 64);
    assert_eq!(
        p.speed,
        SpeedInput::Tach {
            pulses_per_rev: 1,
            tick_hz: 25_600,
            tick_at_sample0: 0
        }
    );
    assert_eq!(p.shafts.len(), 1);
    assert_eq!(p.bearings[0].shaft, 0);
    assert!(matches!(
        p.bearings[0].kinematics,
        BearingKinematics::Geometry { rollers: 9, .. }
    ));
}

#[test]
fn committed_qemu_config_builds_the_node_pipeline() {
    let bytes = std::fs::read(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../boards/qemu-mps2/input/config.bin"
    ))
    .unwrap();
    let rec = PointRecord::decode(&bytes).unwrap();
    let p = point_config(&rec).unwrap();
    // boxed: the node pipeline is tens of KiB
    let pipe = Box::new(NodePipeline::new(&p));
    assert!(pipe.is_ok(), "{:?}", pipe.as_ref().as_ref().err());
}

#[test]
fn record_shafts_keep_their_indices() {
    let mut rec = PointRecord::default();
    rec.shafts.push(0.25).unwrap();
    rec.shafts.push(3.0).unwrap();
    for shaft in [1, 1, 2] {
        rec.bearings
            .push(BearingSpec {
                shaft,
                model: BearingModel::Orders {
                    bpfo: 3.1,
                    bpfi: 4.9,
                    ftf: 0.39,
                    bsf: 2.0,
                },
            })
            .unwrap();
    }
    let p = point_config(&rec).unwrap();
    let ratios: Vec<f32> = p.shafts.iter().map(|s| s.ratio).collect();
    assert_eq!(ratios, [1.0, 0.25, 3.0]);
    let on: Vec<u8> = p.bearings.iter().map(|b| b.shaft).collect();
    assert_eq!(on, [0, 1, 1, 2]);
}

#[test]
fn too_short_a_record_is_refused_by_the_node_pipeline() {
    // The node pipeline averages 4096-point segments of 64 samples per
    // revolution: 64 revolutions at least. The record allows fewer (for the
    // overall-only core), so the refusal surfaces when the core starts.
    let mut rec = PointRecord::default();
    rec.record_revs = 16;
    let p = point_config(&rec).unwrap();
    let r = Box::new(NodePipeline::new(&p));
    assert!(matches!(
        *r,
        Err(dsp_core::pipeline::PipelineError::Config(
            dsp_core::config::ConfigError::Revolutions
        ))
    ));
    rec.record_revs = 64; // the default
    let ok = Box::new(NodePipeline::new(&point_config(&rec).unwrap()));
    assert!(ok.is_ok(), "{:?}", ok.as_ref().as_ref().err());
}

#[test]
fn a_bearing_on_a_shaft_the_record_lacks_is_refused() {
    let mut rec = PointRecord::default();
    rec.bearings[0].shaft = 1;
    assert_eq!(
        rec.validate(),
        Err(firmware::config::ConfigError::OutOfRange("bearing_shaft"))
    );
    // through point_config too (it validates the point it builds)
    assert!(matches!(point_config(&rec), Err(PointError::Refused(_))));
}
