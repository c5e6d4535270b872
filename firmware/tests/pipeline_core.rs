//! The pipeline adapter end to end on the host: the committed fictional
//! recording (outer-race defect, boards/qemu-mps2/input/make_input.py)
//! through the node with the real dsp-core pipeline and frame codec.
//! With ENVORD_HOST_PIPELINE_FRAMES_OUT set, the frames are written there so
//! boards/ci.sh can compare them byte for byte with the QEMU image's.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)]

mod replay_common;
use firmware::hal::MeasurementCore;
use firmware::pipeline_core::{NodeCore, PipelineCoreError};

#[test]
fn baseline_is_refused_not_ignored() {
    let mut c = NodeCore::new(1);
    assert_eq!(
        c.load_baseline(&[1, 2, 3]),
        Err(PipelineCoreError::BaselineUnsupported)
    );
}

#[test]
fn outer_race_defect_recording_gives_a_bpfo_detection_in_the_frame() {
    let node = replay_common::replay(NodeCore::new(1)); // NODE_ID of the qemu-mps2 image
    let bytes = node.devices().radio.0.clone();
    // the pipeline completes its 64 revolutions at 1480 rpm before the
    // configured length (64 revolutions at the 1400 rpm minimum): early stop
    assert!(
        node.summary().blocks < node.blocks_wanted(),
        "{} blocks",
        node.summary().blocks
    );
    // for boards/ci.sh: the QEMU image must send these bytes exactly
    if let Some(out) = std::env::var_os("ENVORD_HOST_PIPELINE_FRAMES_OUT") {
        std::fs::write(out, &bytes).unwrap();
    }
    // full frame v2 for one bearing: 39 bytes (wire::frame::v2::full_frame_len_v2(1, 0));
    // the first report is followed by the boot status frame (27 bytes); the
    // second report changed by less than the default margin (3 dB): it goes
    // out as the 11-byte reduced frame, "as before" with its worst defect
    // (firmware::exception)
    let frames = replay_common::split_frames(&bytes);
    assert_eq!(
        frames.iter().map(Vec::len).collect::<Vec<_>>(),
        [39, 27, 11]
    );
    let full = wire::frame::decode(&frames[0]).unwrap();
    check_report(&full, 0);
    let reduced = wire::frame::decode_reduced(&frames[2]).unwrap();
    assert_eq!((reduced.node_id, reduced.seq), (1, 1));
    assert_eq!(reduced.flags, wire::frame::FrameFlags::default());
    let w = reduced.worst.unwrap();
    assert_eq!(
        (w.bearing, w.kind, w.detected),
        (0, wire::frame::DefectKind::Bpfo, true)
    );
    assert!(
        (w.score_db - full.bearings[0].defects[0].score_db).abs() < 3.0,
        "{w:?}"
    );
}

/// With full frames every cycle both reports are full frames of the same findings.
#[test]
fn every_cycle_policy_sends_two_full_frames() {
    let node = replay_common::replay_with(NodeCore::new(1), |n| {
        n.set_report_policy(firmware::exception::ReportPolicy::EVERY_CYCLE)
            .unwrap()
    });
    let frames = replay_common::split_frames(&node.devices().radio.0);
    assert_eq!(
        frames.iter().map(Vec::len).collect::<Vec<_>>(),
        [39, 27, 39]
    );
    for (seq, f) in [&frames[0], &frames[2]].into_iter().enumerate() {
        check_report(&wire::frame::decode(f).unwrap(), seq);
    }
}

fn check_report(r: &wire::frame::FrameReport, seq: usize) {
    assert_eq!(r.node_id, 1);
    assert_eq!(usize::from(r.seq), seq);
    assert_eq!(r.flags, wire::frame::FrameFlags::default(), "{:?}", r.flags);
    // the fictional stand runs at 1480 rpm (make_input.py); frame step 0.25 rpm
    assert!((r.speed_rpm - 1480.0).abs() < 1.0, "speed {}", r.speed_rpm);
    // overall RMS: numpy std of the same samples is 225.7 counts (expected_frames.txt),
    // times 0.008789 g/count = 1.984 g
    assert!(
        (r.overall.accel_rms_g - 1.984).abs() < 0.02,
        "rms {}",
        r.overall.accel_rms_g
    );
    // impacts at BPFO = z/2 (1 - d/D cos a) = 3.585 orders (bearing kinematics,
    // common practice) exciting a 4 kHz resonance: only BPFO may be detected
    let d = &r.bearings[0].defects;
    assert!(d[0].detected, "BPFO not detected: {:?}", d[0]);
    assert!(!d[1].detected && !d[2].detected && !d[3].detected, "{d:?}");
    // version 2: the BPFO line is "detected" with its summed amplitude and
    // harmonics counted of searched; the other lines searched or not
    // searched with a reason, never confused
    assert_eq!(r.version, wire::frame::layout::FORMAT_VERSION_2);
    let l = d[0].line.unwrap();
    assert_eq!(l.state, wire::frame::LineState::Detected);
    assert!(l.amplitude_g > 0.0 && l.harmonics_searched >= d[0].harmonics);
    assert!(l.margin_db >= 10.0, "{l:?}");
    for x in &d[1..] {
        let l = x.line.unwrap();
        assert!(
            matches!(
                l.state,
                wire::frame::LineState::Searched | wire::frame::LineState::NotSearched
            ),
            "{l:?}"
        );
        assert_eq!(
            l.state == wire::frame::LineState::NotSearched,
            l.reason.is_some()
        );
    }
}

#[test]
fn firmware_flags_reach_the_frame() {
    use dsp_core::QualityFlags;
    let bytes = std::fs::read(replay_common::input("config.bin")).unwrap();
    let rec = firmware::config::PointRecord::decode(&bytes).unwrap();
    let mut c = Box::new(NodeCore::new(1));
    c.start(&rec).unwrap();
    c.push_block(&[0i16; 256]);
    c.finish(QualityFlags::OVERRUN | QualityFlags::LOW_BATTERY)
        .unwrap();
    let mut buf = [0u8; 64];
    let n = c.encode(&mut buf).unwrap();
    let r = wire::frame::decode(&buf[..n]).unwrap();
    assert!(r.flags.processing_overrun && r.flags.low_battery);
    // no tach edges at all: the pipeline adds tach_missing; an all-zero input is flat
    assert!(
        r.flags.tach_missing && r.flags.sensor_fault,
        "{:?}",
        r.flags
    );
    // not analysed: defect scores are sent as invalid, not as zeros
    assert!(
        r.bearings[0]
            .defects
            .iter()
            .all(|d| d.score_db.is_nan() && !d.detected),
        "{:?}",
        r.bearings[0].defects
    );
    assert!(r.speed_rpm.is_nan());
}

#[test]
fn encode_before_finish_is_refused() {
    let mut c = Box::new(NodeCore::new(1));
    let mut buf = [0u8; 64];
    assert_eq!(c.encode(&mut buf), Err(PipelineCoreError::OutOfOrder));
    assert_eq!(
        c.finish(dsp_core::QualityFlags::empty()),
        Err(PipelineCoreError::OutOfOrder)
    );
}
