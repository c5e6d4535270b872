//! Streamed signal-health checks on their own.
#![allow(clippy::cast_possible_truncation, clippy::unwrap_used, missing_docs)]
use firmware::quality::{HealthLimits, QualityFlags, SignalHealth};

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
fn flag_bits_are_distinct_and_truncate_unknown_bits() {
    let all = [
        QualityFlags::TACH_MISSING,
        QualityFlags::CLIPPING,
        QualityFlags::SENSOR_FAULT,
        QualityFlags::PROCESSING_OVERRUN,
        QualityFlags::LOW_BATTERY,
    ];
    let mut acc = QualityFlags::empty();
    for f in all {
        assert_eq!(f.bits().count_ones(), 1);
        assert!(!acc.contains(f));
        acc.insert(f);
    }
    assert_eq!(QualityFlags::from_bits_truncate(0xFF), acc);
}
