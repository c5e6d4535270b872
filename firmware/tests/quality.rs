//! Streamed signal-health checks on their own.
#![allow(clippy::cast_possible_truncation, clippy::unwrap_used, missing_docs)]
use dsp_core::QualityFlags;
use firmware::quality::{HealthLimits, SignalHealth};

#[test]
fn span_and_clip_counts_accumulate_over_blocks() {
    let mut h = SignalHealth::new();
    h.observe(&[0, 5, -3], 2047);
    h.observe(&[2047, -2048, 10], 2047);
    assert_eq!(h.samples(), 6);
    assert_eq!(h.clipped(), 2);
    assert_eq!(h.span(), 4095);
}

#[test]
fn empty_record_is_a_sensor_fault() {
    assert_eq!(
        SignalHealth::new().flags(&HealthLimits::default()),
        QualityFlags::SENSOR_FAULT
    );
}

#[test]
fn flat_limit_is_inclusive() {
    let limits = HealthLimits::default(); // flat_counts = 4
    let mut h = SignalHealth::new();
    h.observe(&[100, 104, 102], limits.clip_level);
    assert_eq!(h.flags(&limits), QualityFlags::SENSOR_FAULT);
    let mut h = SignalHealth::new();
    h.observe(&[100, 105, 102], limits.clip_level);
    assert_eq!(h.flags(&limits), QualityFlags::empty());
}

#[test]
fn saturation_limit_in_per_mille() {
    let limits = HealthLimits::default(); // clipping from 1, saturated from 100 per mille
    let mut block = [0i16; 1000];
    for (i, s) in block.iter_mut().enumerate() {
        *s = (i % 200) as i16 - 100;
    }
    block[..99].fill(2047);
    let mut h = SignalHealth::new();
    h.observe(&block, limits.clip_level);
    assert_eq!(h.flags(&limits), QualityFlags::CLIPPING);
    block[99] = -2047;
    let mut h = SignalHealth::new();
    h.observe(&block, limits.clip_level);
    assert_eq!(
        h.flags(&limits),
        QualityFlags::CLIPPING | QualityFlags::SENSOR_FAULT
    );
}

#[test]
fn node_flags_take_bits_0_to_4_of_the_overall_frame_byte() {
    // the byte layout of docs/frame-format.md (0x4F frame, byte 1)
    let all = [
        QualityFlags::TACH_MISSING,
        QualityFlags::CLIPPING,
        QualityFlags::SENSOR_FAULT,
        QualityFlags::OVERRUN,
        QualityFlags::LOW_BATTERY,
    ];
    let mut acc = QualityFlags::empty();
    for (i, f) in all.into_iter().enumerate() {
        assert_eq!(wire::overall::flag_byte(f), 1 << i);
        assert!(!acc.contains(f));
        acc.insert(f);
    }
    assert_eq!(wire::overall::flag_byte(acc), 0x1F);
    // the core's own conditions have no bit in the node's byte
    assert_eq!(wire::overall::flag_byte(QualityFlags::RESAMPLER), 0);
}
