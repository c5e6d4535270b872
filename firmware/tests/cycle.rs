//! The measurement cycle, transition by transition, with mock hardware.
//! The expected behaviour is the node's specification (sleep, wake, power and
//! settle, streamed acquisition, finish, encode, transmit, listen).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]
mod common;
use common::*;
use dsp_core::QualityFlags;
use firmware::cycle::{ConfigSource, CycleError, DownlinkOutcome, Fault, State};
use firmware::hal::{Slot, WakeReason};

#[test]
fn each_transition_of_a_healthy_cycle() {
    let (mut node, log) = Bench::new(8, 256).with_config_blocks(4).build();
    assert_eq!(node.config_source(), ConfigSource::Stored);
    assert_eq!(node.blocks_wanted(), 4);
    assert_eq!(node.state(), State::Sleep);

    assert_eq!(node.step(), Ok(State::Wake(WakeReason::Schedule)));
    assert_eq!(log.borrow().as_slice(), &[Ev::Sleep(600)]); // interval from the stored config
    assert_eq!(node.step(), Ok(State::PowerSensor));
    assert_eq!(node.step(), Ok(State::Settle));
    assert_eq!(log.borrow().last(), Some(&Ev::PowerHigh));
    assert_eq!(node.step(), Ok(State::Acquire));
    // settle delay from the config, then core, capture and source started
    assert_eq!(
        &log.borrow()[2..],
        &[
            Ev::DelayMs(150),
            Ev::CoreStart,
            Ev::CaptureStart,
            Ev::SourceStart
        ]
    );
    for b in 0..3 {
        assert_eq!(node.step(), Ok(State::Acquire), "block {b}");
    }
    assert_eq!(node.step(), Ok(State::Finish));
    // sensor switched off as soon as the record is complete
    assert_eq!(log.borrow().last(), Some(&Ev::PowerLow));
    assert_eq!(node.step(), Ok(State::Encode));
    assert_eq!(node.step(), Ok(State::Transmit));
    assert_eq!(node.step(), Ok(State::Listen));
    assert_eq!(node.step(), Ok(State::Sleep));

    let s = *node.summary();
    assert_eq!(s.blocks, 4);
    assert_eq!(s.edges, 4);
    assert_eq!(s.flags, QualityFlags::empty());
    assert!(s.fed_watchdog);
    assert_eq!(count(&log, |e| *e == Ev::Feed), 1);
    // the core saw every sample and every edge, in order
    let expect: Vec<i16> = (0..4).flat_map(|b| healthy_block(256, b)).collect();
    assert_eq!(node.core().samples, expect);
    assert_eq!(node.core().edges, vec![7, 1007, 2007, 3007]);
    // the frame the core encoded is what went to the radio
    assert_eq!(node.frame(), &[0, 0x00, 0x04, 4]);
    assert!(log.borrow().contains(&Ev::Send(vec![0, 0x00, 0x04, 4])));
    // first cycle after boot: a status frame follows the report
    let sends: Vec<Vec<u8>> = log
        .borrow()
        .iter()
        .filter_map(|e| match e {
            Ev::Send(f) => Some(f.clone()),
            _ => None,
        })
        .collect();
    assert_eq!(sends.len(), 2);
    let st = wire::frame::status::decode_status(&sends[1]).unwrap();
    assert_eq!(st.node_id, NODE_ID);
    assert_eq!(st.boot_config, wire::frame::status::BootConfig::Stored);
    assert!(st.provisioned && s.status_sent);
    // later cycles without a downlink send the report only
    let mark = log.borrow().len();
    assert!(!node.run_cycle().unwrap().status_sent);
    assert_eq!(count(&log, |e| matches!(e, Ev::Send(_))), 3);
    assert!(log.borrow().len() > mark);
}

#[test]
fn blocks_are_processed_as_they_arrive() {
    // MockSource asserts that each block reached the core before the next
    // one is fetched; the log shows block/push strictly alternating.
    let (mut node, log) = Bench::new(6, 256).with_config_blocks(6).build();
    node.run_cycle().unwrap();
    let seq: Vec<Ev> = log
        .borrow()
        .iter()
        .filter(|e| matches!(e, Ev::Block(_) | Ev::CorePush(_)))
        .cloned()
        .collect();
    assert_eq!(seq.len(), 12);
    for pair in seq.chunks(2) {
        assert_eq!(pair, [Ev::Block(256), Ev::CorePush(256)]);
    }
}

#[test]
fn command_wake_skips_the_alarm() {
    let mut bench = Bench::new(8, 256).with_config_blocks(4);
    bench.reasons = vec![WakeReason::Command];
    bench.downlinks = vec![signed(1, &[0x02])]; // measure now, after the first cycle
    let (mut node, log) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.reason, WakeReason::Command);
    assert_eq!(node.downlink(), DownlinkOutcome::MeasureNow);
    let mark = log.borrow().len();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.reason, WakeReason::Command);
    let slept = log.borrow()[mark..]
        .iter()
        .filter(|e| matches!(e, Ev::Sleep(_)))
        .count();
    assert_eq!(slept, 0, "alarm slept despite measure-now");
    // the request is used once: the third cycle waits for the alarm again
    let mark = log.borrow().len();
    let _ = node.step();
    assert_eq!(log.borrow()[mark..], [Ev::Sleep(600)]);
}

#[test]
fn overrun_is_flagged_and_does_not_feed_the_watchdog() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.blocks[2].1 = true; // a block was lost before block 2
    let (mut node, log) = bench.build();
    let s = node.run_cycle().unwrap();
    assert!(s.flags.contains(QualityFlags::OVERRUN));
    assert_eq!(s.overruns, 1);
    assert!(!s.fed_watchdog);
    assert_eq!(count(&log, |e| *e == Ev::Feed), 0);
    // the frame still goes out, carrying the flag
    assert_eq!(
        node.frame()[0],
        wire::overall::flag_byte(QualityFlags::OVERRUN)
    );
}

#[test]
fn flat_signal_is_a_sensor_fault() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    for (b, _) in &mut bench.blocks {
        for (i, s) in b.iter_mut().enumerate() {
            *s = 12 + (i % 3) as i16; // span 2 counts: dead sensor on ADC noise
        }
    }
    let (mut node, _) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.flags, QualityFlags::SENSOR_FAULT);
}

#[test]
fn saturated_signal_is_a_sensor_fault_with_clipping() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    for (b, _) in &mut bench.blocks {
        for (i, s) in b.iter_mut().enumerate() {
            *s = if i % 2 == 0 { 2047 } else { -2048 }; // rail to rail, 12-bit
        }
    }
    let (mut node, _) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.flags, QualityFlags::SENSOR_FAULT | QualityFlags::CLIPPING);
}

#[test]
fn a_few_clipped_peaks_flag_clipping_only() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.blocks[1].0[10] = 2047;
    bench.blocks[3].0[99] = -2047;
    let (mut node, _) = bench.build();
    let s = node.run_cycle().unwrap();
    // 2 of 1024 samples = 1.95 per mille >= 1 per mille, below the 100 per mille fault limit
    assert_eq!(s.flags, QualityFlags::CLIPPING);
}

#[test]
fn no_edges_flag_tach_missing() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.edges = vec![vec![]; 4];
    let (mut node, _) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.flags, QualityFlags::TACH_MISSING);
    assert_eq!(s.edges, 0);
    // a single edge gives no period either
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.edges = vec![vec![], vec![500], vec![], vec![]];
    let (mut node, _) = bench.build();
    assert_eq!(node.run_cycle().unwrap().flags, QualityFlags::TACH_MISSING);
}

#[test]
fn low_battery_is_flagged() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.battery_mv = 2_900; // below the 3000 mV default threshold
    let (mut node, _) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.flags, QualityFlags::LOW_BATTERY);
    assert_eq!(s.battery_mv, 2_900);
}

#[test]
fn radio_failure_aborts_without_feeding() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.radio_fails = true;
    let (mut node, log) = bench.build();
    let err = node.run_cycle().unwrap_err();
    assert_eq!(
        err,
        CycleError {
            state: State::Transmit,
            fault: Fault::Radio
        }
    );
    assert_eq!(node.state(), State::Sleep);
    assert!(!node.summary().fed_watchdog);
    assert_eq!(count(&log, |e| *e == Ev::Feed), 0);
    assert_eq!(log.borrow().last(), Some(&Ev::PowerLow));
}

#[test]
fn core_failure_and_power_pin_failure_abort_without_feeding() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.core_fails_finish = true;
    let (mut node, log) = bench.build();
    assert_eq!(
        node.run_cycle().unwrap_err(),
        CycleError {
            state: State::Finish,
            fault: Fault::Core
        }
    );
    assert_eq!(count(&log, |e| *e == Ev::Feed), 0);
    assert_eq!(count(&log, |e| matches!(e, Ev::Send(_))), 0);

    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.pin_fails = true;
    let (mut node, log) = bench.build();
    assert_eq!(
        node.run_cycle().unwrap_err(),
        CycleError {
            state: State::PowerSensor,
            fault: Fault::PowerPin
        }
    );
    assert_eq!(count(&log, |e| *e == Ev::Feed), 0);
    assert_eq!(count(&log, |e| *e == Ev::SourceStart), 0);
}

#[test]
fn source_failure_powers_down_and_stops_drivers() {
    let mut bench = Bench::new(2, 256).with_config_blocks(4); // only 2 of 4 blocks arrive
    bench.downlinks.clear();
    let (mut node, log) = bench.build();
    let err = node.run_cycle().unwrap_err();
    assert_eq!(
        err,
        CycleError {
            state: State::Acquire,
            fault: Fault::Source
        }
    );
    let l = log.borrow();
    let tail: Vec<&Ev> = l.iter().rev().take(3).collect();
    assert_eq!(tail, [&Ev::PowerLow, &Ev::CaptureStop, &Ev::SourceStop]);
    assert_eq!(l.iter().filter(|e| **e == Ev::Feed).count(), 0);
    assert_eq!(node.summary().fault, Some(err));
}

#[test]
fn missing_config_uses_default_and_invalid_is_reported() {
    let (node, _) = Bench::new(1, 256).build();
    assert_eq!(node.config_source(), ConfigSource::DefaultEmpty);
    let mut bench = Bench::new(1, 256).with_config_blocks(4);
    bench.storage.slots.get_mut("config").unwrap()[20] ^= 1; // corrupted in flash
    let (node, _) = bench.build();
    assert_eq!(node.config_source(), ConfigSource::DefaultInvalid);
    assert_eq!(node.config(), &firmware::config::PointRecord::default());
}

#[test]
fn good_config_downlink_is_stored_and_used() {
    let new = config_for_blocks(2);
    let mut bench = Bench::new(6, 256).with_config_blocks(4);
    bench.downlinks = vec![config_downlink(5, &new)];
    let (mut node, log) = bench.build();
    node.run_cycle().unwrap();
    assert_eq!(node.downlink(), DownlinkOutcome::ConfigApplied);
    assert_eq!(node.config(), &new);
    assert_eq!(node.counter(), 5);
    // the counter is stored in the same record as the configuration
    assert_eq!(node.devices().storage.slots["config"], stored(5, &new));
    assert_eq!(count(&log, |e| *e == Ev::Store(Slot::Config)), 1);
    // next cycle records 2 blocks
    assert_eq!(node.run_cycle().unwrap().blocks, 2);
}

#[test]
fn bad_config_downlink_is_refused_and_old_kept() {
    let old = config_for_blocks(4);
    let mut bad = config_for_blocks(2);
    bad.band_hi_hz = 20_000.0; // above Nyquist for 25.6 kHz
                               // encode() refuses invalid records, so build the bytes by hand: valid, then patch + reseal
    let mut bytes = encode(&config_for_blocks(2));
    bytes[12..16].copy_from_slice(&bad.band_hi_hz.to_le_bytes());
    let n = bytes.len() - 4;
    let crc = firmware::crc::crc32(&bytes[..n]);
    bytes[n..].copy_from_slice(&crc.to_le_bytes());
    let mut corrupt = encode(&config_for_blocks(2));
    corrupt[30] ^= 0x10; // CRC will not match

    for payload in [bytes, corrupt, vec![]] {
        let mut msg = vec![0x01];
        msg.extend(payload);
        let mut bench = Bench::new(4, 256).with_config_blocks(4);
        bench.downlinks = vec![signed(1, &msg)];
        let (mut node, log) = bench.build();
        node.run_cycle().unwrap();
        assert!(
            matches!(node.downlink(), DownlinkOutcome::Refused(_)),
            "{:?}",
            node.downlink()
        );
        assert_eq!(node.config(), &old);
        assert_eq!(node.devices().storage.slots["config"], stored(0, &old));
        assert_eq!(count(&log, |e| matches!(e, Ev::Store(_))), 0);
        // a refused downlink is the gateway's problem, not an unhealthy node
        assert!(node.summary().fed_watchdog);
    }
}

#[test]
fn config_not_stored_when_storage_fails() {
    let msg = config_downlink(1, &config_for_blocks(2));
    let mut bench = Bench::new(4, 256).with_config_blocks(4);
    bench.storage.fail_store = true;
    let (mut node, _) = bench.build();
    assert_eq!(node.apply_downlink(&msg), DownlinkOutcome::NotStored);
    assert_eq!(node.config(), &config_for_blocks(4));
    assert_eq!(node.counter(), 0);
}

#[test]
fn baseline_downlink_goes_to_core_and_storage_with_crc() {
    let (mut node, _) = Bench::new(1, 256).with_config_blocks(4).build();
    assert_eq!(
        node.apply_downlink(&signed(1, &[0x03, 1, 2, 3])),
        DownlinkOutcome::BaselineApplied
    );
    assert_eq!(node.counter(), 1);
    assert_eq!(node.core().baseline.as_deref(), Some(&[1u8, 2, 3][..]));
    let stored = node.devices().storage.slots["baseline"].clone();
    // payload then CRC-32 (zlib.crc32(bytes([1,2,3])) = 0x55BC801D)
    assert_eq!(stored, [1, 2, 3, 0x1D, 0x80, 0xBC, 0x55]);
    // refused by the core: nothing stored
    assert_eq!(
        node.apply_downlink(&signed(2, &[0x03, 0xFF])),
        DownlinkOutcome::Refused(firmware::downlink::DownlinkError::BadBaseline)
    );
    assert_eq!(node.devices().storage.slots["baseline"], stored);
}

#[test]
fn stored_baseline_is_loaded_at_boot_only_if_its_crc_matches() {
    let mut bench = Bench::new(1, 256).with_config_blocks(4);
    bench
        .storage
        .slots
        .insert("baseline", vec![1, 2, 3, 0x1D, 0x80, 0xBC, 0x55]);
    let (node, _) = bench.build();
    assert_eq!(node.core().baseline.as_deref(), Some(&[1u8, 2, 3][..]));
    let mut bench = Bench::new(1, 256).with_config_blocks(4);
    bench
        .storage
        .slots
        .insert("baseline", vec![1, 2, 4, 0x1D, 0x80, 0xBC, 0x55]);
    let (node, _) = bench.build();
    assert_eq!(node.core().baseline, None);
}

#[test]
fn acquisition_stops_when_the_core_is_complete() {
    let mut bench = Bench::new(8, 256).with_config_blocks(8);
    bench.core_complete_after = Some(3 * 256);
    let (mut node, log) = bench.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.blocks, 3);
    assert_eq!(count(&log, |e| matches!(e, Ev::Block(_))), 3);
    assert_eq!(count(&log, |e| *e == Ev::SourceStop), 1);
}

#[test]
fn edges_reach_the_core_before_their_block() {
    let (mut node, log) = Bench::new(2, 256).with_config_blocks(2).build();
    node.run_cycle().unwrap();
    let l = log.borrow();
    let edge = l.iter().position(|e| *e == Ev::CoreEdge(1007)).unwrap();
    let pushes: Vec<usize> = l
        .iter()
        .enumerate()
        .filter(|(_, e)| matches!(e, Ev::CorePush(_)))
        .map(|(i, _)| i)
        .collect();
    // the edge seen with block 1 is pushed after block 0 and before block 1
    assert!(pushes[0] < edge && edge < pushes[1]);
}
