//! Arbitrary edge sequences (any tick values, order, gaps, bursts) into the
//! tach tracker and into a pipeline's `push_edge`: no panic, marks come out
//! in order with finite times, and a record without edges says so.
#![no_main]

use dsp_core::config::{PointConfig, SpeedInput};
use dsp_core::pipeline::Pipeline;
use dsp_core::report::QualityFlags;
use dsp_core::speed::tach::{SpeedSource, TachConfig, TachTracker};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Some((head, rest)) = data.split_at_checked(4) else {
        return;
    };
    let &[ppr, rate_sel, range_sel, block_sel] = head else {
        return;
    };
    let tick_hz = [1_000_000u32, 32_768, 16_000_000, 1][usize::from(rate_sel & 3)];
    let (min_rpm, max_rpm) = [
        (300.0, 3000.0),
        (60.0, 6000.0),
        (1.0, 1.5),
        (1000.0, 1001.0),
    ][usize::from(range_sel & 3)];

    // Each 5-byte record: a tick (u32 LE) and how many samples to advance.
    let ops: Vec<(u32, u64)> = rest
        .chunks_exact(5)
        .map(|c| {
            let tick = u32::from_le_bytes([c[0], c[1], c[2], c[3]]);
            (tick, u64::from(c[4]) * 64)
        })
        .collect();

    let mut c = TachConfig::default();
    c.tick_hz = tick_hz;
    c.pulses_per_rev = ppr;
    c.min_rpm = min_rpm;
    c.max_rpm = max_rpm;
    if let Ok(mut t) = TachTracker::new(&SpeedSource::Tach(c)) {
        let mut last: Option<(f64, u32)> = None;
        let mut check = |m: dsp_core::speed::tach::RevMark| {
            assert!(m.time_samples.is_finite());
            if let Some((t0, i0)) = last {
                assert!(m.time_samples >= t0, "marks out of time order");
                assert!(m.index > i0 || m.segment_start, "mark index not increasing");
            }
            last = Some((m.time_samples, m.index));
        };
        let mut now = 0u64;
        for &(tick, adv) in &ops {
            t.push_edge(tick, &mut check);
            now = now.saturating_add(adv);
            t.advance_to(now, &mut check);
        }
        let s = t.finish(&mut check);
        assert!(s.good_revs <= s.revs);
    } else {
        assert_eq!(ppr, 0, "only pulses_per_rev = 0 is invalid here");
    }

    // The same edges through a whole (small) pipeline.
    let mut point = PointConfig::default();
    point.speed = SpeedInput::Tach {
        pulses_per_rev: ppr.max(1),
        tick_hz: 1_000_000,
        tick_at_sample0: 0,
    };
    point.revolutions = 16;
    let Ok(mut p) = Pipeline::<1024, 512, 2048>::new(&point) else {
        return;
    };
    let block = [0.01f32; 64];
    for &(tick, adv) in &ops {
        p.push_edge(tick);
        for _ in 0..(adv / 64).min(u64::from(block_sel)) {
            p.push_f32(&block);
        }
    }
    let r = p.finish();
    if ops.is_empty() {
        assert!(r.flags.contains(QualityFlags::TACH_MISSING));
    }
});
