//! The commissioning cycle on the host with a fake block source: the node
//! runs the band survey (`dsp_core::survey`, Antoni's kurtogram idea as a
//! filter bank) over a streamed capture, stores the band with its kurtosis,
//! reports it in a status frame and measures with it afterwards. The band
//! must equal, bit for bit, the one the host path (`dsp_core::survey::band_choice`,
//! used by `envord analyze`) chooses from the same samples.
#![allow(
    clippy::panic,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]
mod common;
use common::*;
use firmware::commission::Commissioning;
use firmware::config::{BandSource, PointRecord};
use firmware::cycle::{CycleKind, DownlinkOutcome, SurveyOutcome};
use firmware::hal::WakeReason;
use firmware::pipeline_core::NodeCore;
use wire::frame::status::{decode_status, SurveyStatus};

const FS: f32 = 25_600.0;
const RPM: f32 = 1480.0;

/// The default point without a band: the node must survey it.
fn unset_point() -> PointRecord {
    let mut r = PointRecord::default();
    r.band_source = BandSource::Unset;
    r.band_lo_hz = 0.0;
    r.band_hi_hz = 0.0;
    r
}

/// Invented test signal: noise (+-120 counts) and a decaying 4 kHz ring
/// struck at 3.585 orders of 1480 rpm (an outer-race defect of the default
/// point's bearing, BPFO = z/2 (1 - d/D), common practice), in counts.
fn signal(n: usize) -> Vec<i16> {
    let mut seed = 0x2545_F491u32;
    let bpfo_hz = 4.5 * (1.0 - 7.94 / 39.04) * RPM / 60.0;
    let period = FS / bpfo_hz;
    (0..n)
        .map(|i| {
            seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
            let noise = ((seed >> 8) as f32 / 16_777_216.0 - 0.5) * 240.0;
            let t_in = (i as f32 % period) / FS;
            let ring =
                400.0 * (-800.0 * t_in).exp() * (2.0 * std::f32::consts::PI * 4000.0 * t_in).sin();
            (noise + ring).round() as i16
        })
        .collect()
}

/// Tach edges (one per revolution) falling in each block of a record that
/// starts at sample 0, in sample-clock ticks.
fn edges_per_block(blocks: usize) -> Vec<Vec<u32>> {
    let per_rev = FS * 60.0 / RPM;
    (0..blocks)
        .map(|b| {
            (0..)
                .map(|k| (13.0 + k as f32 * per_rev).round() as u32)
                .skip_while(|&e| (e as usize) < b * 256)
                .take_while(|&e| (e as usize) < (b + 1) * 256)
                .collect()
        })
        .collect()
}

fn bench(samples: &[i16], measure_blocks: usize) -> Bench {
    let mut b = Bench::new(0, 256);
    b.blocks = samples.chunks(256).map(|c| (c.to_vec(), false)).collect();
    // the survey cycle starts no capture; the measurement's edges follow
    b.edges = edges_per_block(measure_blocks);
    b.push_check = false;
    b
}

#[test]
fn survey_chooses_the_ringing_band_stores_it_and_the_next_cycles_measure_with_it() {
    let rec = unset_point();
    let blocks = rec.record_blocks(256, 4096) as usize;
    assert_eq!(blocks, 384); // 64 revolutions at 1000 rpm, 25.6 kHz
    let x = signal(256 * (2 * blocks + 4));
    let mut core = Box::new(NodeCore::new(0));
    let mut b = bench(&x, blocks);
    b.storage.slots.insert("config", stored(4, &rec));
    let storage = std::mem::take(&mut b.storage);
    let (mut node, log) = b.build_full(storage, &mut *core);
    assert_eq!(node.node_id(), Some(NODE_ID));

    let s = node.run_cycle().unwrap();
    assert_eq!(s.kind, CycleKind::Survey);
    assert_eq!(s.blocks as usize, blocks);
    assert_eq!(s.edges, 0);
    assert!(s.status_sent && s.fed_watchdog);
    let SurveyOutcome::Stored(choice) = node.survey() else {
        panic!("survey: {:?}", node.survey())
    };
    // the band holds the 4 kHz resonance the impacts ring
    assert!(
        choice.band_hz[0] < 4000.0 && choice.band_hz[1] > 4000.0,
        "{choice:?}"
    );
    assert!(choice.kurtosis > 1.0, "{choice:?}");

    // Bit for bit the host path: same rule, same 256-sample blocks, f32 input.
    let point = firmware::point::point_config(&rec).unwrap();
    let mut host = dsp_core::survey::band_choice::new_survey(&point).unwrap();
    for blk in x[..blocks * 256].chunks(256) {
        let f: Vec<f32> = blk.iter().map(|&c| f32::from(c)).collect();
        host.push_f32(&f);
    }
    let h = host.finish().unwrap();
    assert_eq!(h.band_hz[0].to_bits(), choice.band_hz[0].to_bits());
    assert_eq!(h.band_hz[1].to_bits(), choice.band_hz[1].to_bits());
    assert_eq!(h.kurtosis.to_bits(), choice.kurtosis.to_bits());

    // stored with the counter, marked as chosen by the survey
    let want = rec
        .with_survey_band(choice.band_hz, choice.kurtosis)
        .unwrap();
    assert_eq!(node.config(), &want);
    assert_eq!(node.devices().storage.slots["config"], stored(4, &want));
    // and reported: the survey cycle's only frame is the status frame
    let frames: Vec<Vec<u8>> = log
        .borrow()
        .iter()
        .filter_map(|e| match e {
            Ev::Send(f) => Some(f.clone()),
            _ => None,
        })
        .collect();
    assert_eq!(frames.len(), 1);
    let st = decode_status(&frames[0]).unwrap();
    assert_eq!(st.band_source, BandSource::Survey);
    assert_eq!(st.survey, SurveyStatus::Stored);
    assert_eq!(st.band_hz[0].to_bits(), choice.band_hz[0].to_bits());
    assert_eq!(st.band_hz[1].to_bits(), choice.band_hz[1].to_bits());
    assert!((st.band_kurtosis - choice.kurtosis).abs() <= 0.005);
    assert_eq!(st.downlink_counter, 4);

    // the next cycle measures, with the stored band
    let s = node.run_cycle().unwrap();
    assert_eq!(s.kind, CycleKind::Measure);
    assert!(s.edges > 2);
    let report = node.core().report().unwrap();
    assert_eq!(report.band_hz, choice.band_hz);
    assert!(!s.status_sent);
}

#[test]
fn a_survey_command_replaces_a_configured_band_and_a_reboot_keeps_it() {
    let rec = PointRecord::default();
    let blocks = rec.record_blocks(256, 4096) as usize;
    let x = signal(256 * (2 * blocks + 2));
    let mut b = bench(&x, blocks);
    b.storage.slots.insert("config", stored(0, &rec));
    b.downlinks = vec![signed(1, &[0x04])];
    let storage = std::mem::take(&mut b.storage);
    let mut core = Box::new(NodeCore::new(0));
    let (mut node, _) = b.build_full(storage, &mut *core);
    // a configured band: the first cycle measures, then the command arrives
    assert_eq!(node.run_cycle().unwrap().kind, CycleKind::Measure);
    assert_eq!(node.downlink(), DownlinkOutcome::SurveyRequested);
    assert_eq!(node.counter(), 1);
    // ... and the survey runs right away (no sleep)
    let s = node.run_cycle().unwrap();
    assert_eq!((s.kind, s.reason), (CycleKind::Survey, WakeReason::Command));
    assert!(matches!(node.survey(), SurveyOutcome::Stored(_)));
    assert_eq!(node.config().band_source, BandSource::Survey);
    let saved = node.config().clone();
    let stored_bytes = node.devices().storage.slots["config"].clone();
    assert_eq!(stored_bytes, stored(1, &saved));

    // reboot over the same storage: configuration and counter as stored, no new survey
    let mut b = bench(&x, blocks);
    b.storage.slots.insert("config", stored_bytes);
    let storage = std::mem::take(&mut b.storage);
    let (mut node, _) = b.build_full(storage, &mut *core);
    assert_eq!(node.config(), &saved);
    assert_eq!(node.counter(), 1);
    assert_eq!(node.run_cycle().unwrap().kind, CycleKind::Measure);
    assert_eq!(node.status().band_source, BandSource::Survey);
}

#[test]
fn clipped_or_flat_captures_leave_the_band_unset_and_are_not_retried_each_cycle() {
    let rec = unset_point();
    let blocks = rec.record_blocks(256, 4096) as usize;
    // clipped: the ring driven into the 12-bit rails
    let clipped: Vec<i16> = signal(256 * (3 * blocks))
        .iter()
        .map(|&v| (v * 20).clamp(-2047, 2047))
        .collect();
    let flat = vec![0i16; 256 * 3 * blocks];
    for (x, want) in [
        (clipped, SurveyStatus::SignalFault),
        (flat, SurveyStatus::Flat),
    ] {
        let mut b = bench(&x, 2 * blocks);
        b.storage.slots.insert("config", stored(0, &rec));
        let storage = std::mem::take(&mut b.storage);
        let mut core = Box::new(NodeCore::new(0));
        let (mut node, _) = b.build_full(storage, &mut *core);
        assert_eq!(node.run_cycle().unwrap().kind, CycleKind::Survey);
        assert_eq!(node.survey().status(), want);
        assert_eq!(node.config(), &rec, "{want:?}");
        assert_eq!(node.devices().storage.slots["config"], stored(0, &rec));
        // measured with dsp-core's default band until a survey succeeds
        let s = node.run_cycle().unwrap();
        assert_eq!(s.kind, CycleKind::Measure, "{want:?}");
        assert_eq!(node.status().band_source, BandSource::Unset);
        // an octave ending at 0.75 x Nyquist = 9.6 kHz (cap 12 kHz not reached)
        assert_eq!(node.status().band_hz, [4800.0, 9600.0]);
    }
}

#[test]
fn a_core_without_survey_reports_unsupported_with_the_sensor_off() {
    let mut b = Bench::new(8, 256);
    b.storage.slots.insert("config", stored(0, &unset_point()));
    let (mut node, log) = b.build();
    let s = node.run_cycle().unwrap();
    assert_eq!(s.kind, CycleKind::Survey);
    assert_eq!(node.survey().status(), SurveyStatus::Unsupported);
    assert_eq!(s.blocks, 0);
    assert_eq!(log.borrow().last(), Some(&Ev::Feed));
    assert!(log.borrow().contains(&Ev::PowerLow));
    assert!(s.status_sent);
}

#[test]
fn the_core_reuses_its_survey_in_place_with_the_same_choice_every_time() {
    use dsp_core::QualityFlags;
    use firmware::hal::MeasurementCore;
    let rec = unset_point();
    let blocks = rec.record_blocks(256, 4096) as usize;
    let x = signal(256 * blocks);
    let mut alone = Commissioning::new(&rec).unwrap();
    for b in x.chunks(256) {
        alone.push_block(b);
    }
    let want = alone.finish().unwrap();

    let mut core = Box::new(NodeCore::new(0));
    assert_eq!(
        core.finish_survey().err(),
        Some(firmware::commission::CommissionError::NotStarted)
    );
    for round in 0..2 {
        core.start_survey(&rec).unwrap();
        for b in x.chunks(256) {
            core.push_block(b);
        }
        assert_eq!(core.finish_survey().unwrap(), want, "round {round}");
        // finished: the next blocks are not the survey's
        assert!(core.finish_survey().is_err());
        // a measurement in between, with the same core
        core.start(&PointRecord::default()).unwrap();
        for b in x.chunks(256).take(8) {
            core.push_block(b);
        }
        core.finish(QualityFlags::empty()).unwrap();
    }
    // a point the survey refuses starts no survey
    let mut bad = unset_point();
    bad.sample_rate_hz = 0;
    assert!(core.start_survey(&bad).is_err());
    assert!(core.finish_survey().is_err());
}

#[test]
fn survey_memory_is_printed() {
    // figure quoted in firmware/src/commission.rs and docs/commissioning.md
    let c = Commissioning::new(&unset_point()).unwrap();
    println!(
        "Commissioning: {} bytes on this host, {} bands at 25.6 kS/s for the default point",
        std::mem::size_of::<Commissioning>(),
        c.band_count()
    );
    assert!(std::mem::size_of::<Commissioning>() <= 48 * 160 + 64);
}
