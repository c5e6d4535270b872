//! Link-time proof that no panic path is reachable from dsp-core's public
//! API, from every decoder of the `wire` crate (frames, records, downlinks)
//! and from the firmware node (its whole cycle with the pipeline core:
//! downlink authentication and parsing, configuration and identity records,
//! the power-safe flash store, the commissioning survey, status frames) and
//! the block ring between the sampling interrupt and the cycle, when built
//! for thumbv7em-none-eabihf in release mode.
//!
//! The panic handler calls `envord_panic_is_reachable`, a function that is
//! declared but defined nowhere. If, after optimisation, any call to a panic
//! (index out of bounds, unwrap, overflow in a checked op, slice range,
//! division by zero, `panic!`) survives in code reachable from `main`, the
//! handler is kept and the link fails with "undefined symbol:
//! envord_panic_is_reachable". Every input comes through
//! `core::hint::black_box`, so the optimiser cannot prove a panic dead just
//! because it knows the values; it must be dead for all inputs.
//!
//! Run `./check.sh` (it explains how to find the culprit when it fails).
#![no_std]
#![no_main]

use core::hint::black_box;
use core::panic::PanicInfo;

use cortex_m_rt::entry;
use dsp_core::config::PointConfig;
use wire::frame::{
    decode, decode_any, decode_reduced, encode, encode_reduced, encode_reduced_report, encoded_len,
    Frame, FrameReport, ReducedReport,
};
use dsp_core::pipeline::{NodePipeline, Pipeline, ADC_BLOCK};
use dsp_core::report::QualityFlags;
use dsp_core::speed::tach::{EdgeDetector, SpeedSource, TachConfig, TachTracker};

// Declared, never defined: referencing it is what makes the link fail.
unsafe extern "C" {
    safe fn envord_panic_is_reachable() -> !;
}

#[panic_handler]
fn panic(_info: &PanicInfo) -> ! {
    envord_panic_is_reachable()
}

/// A point whose every field (shafts, bearings, band, speed source, record
/// length) is unknown to the optimiser.
fn opaque_point() -> PointConfig {
    black_box(PointConfig::default())
}

/// One whole measurement through a pipeline of the given sizes.
fn measure<const N: usize, const H: usize, const R: usize>(point: &PointConfig) {
    let Ok(mut p) = Pipeline::<N, H, R>::new(point) else {
        return;
    };
    let counts = [0i16; ADC_BLOCK];
    let gs = [0f32; ADC_BLOCK];
    loop {
        // Opaque edges (any tick, any count) and blocks of any length.
        for _ in 0..black_box(0u32) {
            p.push_edge(black_box(0u32));
        }
        p.push_i16(black_box(&counts[..]));
        p.push_f32(black_box(&gs[..]));
        p.raise(black_box(QualityFlags::OVERRUN));
        black_box(p.spectrum());
        black_box(p.speed_series());
        black_box(p.orders_per_bin());
        black_box(p.segments_missing());
        black_box(p.samples());
        if black_box(p.complete()) {
            break;
        }
    }
    black_box(p.finish());
    // In place for the next measurement (as the firmware does), then finish
    // whatever state that leaves, configured or not.
    black_box(p.reconfigure(&opaque_point()).is_ok());
    black_box(p.point().is_some());
    black_box(p.finish());
}

/// Frame codec. `to_json` is left out on purpose: serde-json-core 0.7
/// writes through bounds-checked indexing after its own capacity check, which
/// the optimiser cannot prove, so a panic path stays (a host/gateway
/// convenience, not used by the node).
fn frames() {
    let bytes = [0u8; 64];
    let input: &[u8] = black_box(&bytes[..]);
    let mut out = [0u8; 64];

    if let Ok(r) = decode(input) {
        black_box(encoded_len(&r));
        let _ = black_box(encode(&r, &mut out));
        let _ = black_box(encode_reduced(&r, &mut out));
        black_box(ReducedReport::from_report(&r));
    }
    if let Ok(r) = decode_reduced(input) {
        let _ = black_box(encode_reduced_report(&r, &mut out));
    }
    match decode_any(input) {
        Ok(Frame::Full(r)) => black_box(encode(&r, black_box(&mut out[..]))).ok(),
        Ok(Frame::Reduced(r)) => black_box(encode_reduced_report(&r, black_box(&mut out[..]))).ok(),
        Ok(Frame::Status(r)) => black_box(wire::frame::status::encode_status(
            &r,
            black_box(&mut out[..]),
        ))
        .ok(),
        Err(e) => {
            black_box(e);
            None
        }
    };
    // The 0x4F overall frame (wire::overall): parse, then emit what came out.
    if let Ok(o) = wire::overall::OverallFrame::parse(black_box(&bytes[..12])) {
        let _ = black_box(o.emit(black_box(&mut out[..])));
    }
    // An arbitrary report (values the decoder would never produce).
    let r: FrameReport = black_box(FrameReport::default());
    let _ = black_box(encode(&r, black_box(&mut out[..])));
    let _ = black_box(encode_reduced(&r, black_box(&mut out[..])));
}

fn tach() {
    let src = black_box(SpeedSource::Tach(TachConfig::default()));
    if let Ok(mut t) = TachTracker::new(&src) {
        for _ in 0..black_box(0u32) {
            t.push_edge(black_box(0u32), |m| {
                black_box(m);
            });
            black_box(t.tick_to_samples(black_box(0u32)));
            t.push_edge_time(black_box(0f64), |m| {
                black_box(m);
            });
            t.advance_to(black_box(0u64), |m| {
                black_box(m);
            });
        }
        black_box(t.flags());
        black_box(t.speed_series());
        black_box(t.finish(|m| {
            black_box(m);
        }));
    }
    if let Ok(mut d) = EdgeDetector::new(black_box(0.5), black_box(0.2)) {
        let block = [0f32; 64];
        d.process(black_box(&block[..]), |t| {
            black_box(t);
        });
        black_box(d.samples_seen());
    }
}

/// The band survey (automatic envelope band) on arbitrary samples.
fn survey() {
    use dsp_core::survey::BandSurvey;
    if let Ok(mut s) = BandSurvey::new(black_box(51_200.0)) {
        let counts = [0i16; 64];
        let gs = [0f32; 64];
        s.push_i16(black_box(&counts[..]));
        s.push_f32(black_box(&gs[..]));
        black_box(s.band_count());
        black_box(s.samples());
        let _ = black_box(s.finish());
        // in place, with any settings
        let c = black_box(dsp_core::survey::SurveyConfig::default());
        let _ = black_box(s.reconfigure(black_box(12_000.0), c));
        s.push_i16(black_box(&counts[..]));
        let _ = black_box(s.finish());
    }
}

/// Downlink authentication on arbitrary radio bytes.
fn downlink() {
    use wire::downlink_auth::{sign, verify, DownlinkKey};
    let key = DownlinkKey::new(black_box([0u8; 32]));
    let bytes = [0u8; 64];
    if let Ok(a) = verify(&key, black_box(1), black_box(0), black_box(&bytes[..])) {
        black_box(a.counter);
        black_box(a.payload);
    }
    let mut out = [0u8; 64];
    let _ = black_box(sign(
        &key,
        black_box(1),
        black_box(2),
        black_box(&bytes[..]),
        black_box(&mut out[..]),
    ));
}

/// Devices whose every answer is opaque to the optimiser.
mod opaque {
    use super::black_box;
    use embedded_storage::nor_flash::{ErrorType, NorFlash, NorFlashErrorKind, ReadNorFlash};
    use firmware::hal::{
        Alarm, Battery, Block, BlockSource, PulseCapture, RadioLink, WakeReason, Watchdog,
    };

    pub struct Source(pub [i16; 256]);
    impl BlockSource for Source {
        type Error = ();
        fn start(&mut self) -> Result<(), ()> {
            black_box(Ok(()))
        }
        fn block_len(&self) -> usize {
            black_box(256)
        }
        fn next_block(&mut self) -> Result<Block<'_>, ()> {
            if black_box(true) {
                Ok(Block {
                    samples: black_box(&self.0[..]),
                    overrun: black_box(false),
                })
            } else {
                Err(())
            }
        }
        fn stop(&mut self) {}
    }

    pub struct Capture;
    impl PulseCapture for Capture {
        type Error = ();
        fn start(&mut self) -> Result<(), ()> {
            black_box(Ok(()))
        }
        fn next_edge(&mut self) -> Option<u32> {
            black_box(None)
        }
        fn stop(&mut self) {}
    }

    /// Sends go nowhere; each receive window gets any bytes of any length.
    pub struct Radio(pub [u8; 300]);
    impl RadioLink for Radio {
        type Error = ();
        fn send(&mut self, frame: &[u8]) -> Result<(), ()> {
            black_box(frame);
            black_box(Ok(()))
        }
        fn receive(&mut self, buf: &mut [u8]) -> Result<Option<usize>, ()> {
            for (b, s) in buf.iter_mut().zip(self.0.iter()) {
                *b = black_box(*s);
            }
            black_box(Ok(Some(usize::MAX)))
        }
    }

    pub struct Sleep;
    impl Alarm for Sleep {
        fn sleep(&mut self, s: u32) -> WakeReason {
            black_box(s);
            black_box(WakeReason::Schedule)
        }
    }

    pub struct Batt;
    impl Battery for Batt {
        fn millivolts(&mut self) -> u16 {
            black_box(3300)
        }
    }

    pub struct Dog;
    impl Watchdog for Dog {
        fn feed(&mut self) {}
    }

    pub struct Pin;
    impl embedded_hal::digital::ErrorType for Pin {
        type Error = embedded_hal::digital::ErrorKind;
    }
    impl embedded_hal::digital::OutputPin for Pin {
        fn set_low(&mut self) -> Result<(), Self::Error> {
            black_box(Ok(()))
        }
        fn set_high(&mut self) -> Result<(), Self::Error> {
            black_box(Ok(()))
        }
    }

    pub struct Delay;
    impl embedded_hal::delay::DelayNs for Delay {
        fn delay_ns(&mut self, ns: u32) {
            black_box(ns);
        }
    }

    /// A flash whose contents and results are opaque (any page contents,
    /// any failure).
    /// The opaque devices as a board.
    pub struct Board;
    impl firmware::hal::Board for Board {
        type Source = Source;
        type Capture = Capture;
        type Radio = Radio;
        type Alarm = Sleep;
        type Storage = firmware::store::FlashStore<Flash>;
        type Battery = Batt;
        type Watchdog = Dog;
        type Power = Pin;
        type Delay = Delay;
    }

    pub struct Flash;
    impl ErrorType for Flash {
        type Error = NorFlashErrorKind;
    }
    impl ReadNorFlash for Flash {
        const READ_SIZE: usize = 1;
        fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
            black_box(offset);
            for b in bytes.iter_mut() {
                *b = black_box(0xFF);
            }
            black_box(Ok(()))
        }
        fn capacity(&self) -> usize {
            black_box(5 * 4096)
        }
    }
    impl NorFlash for Flash {
        const WRITE_SIZE: usize = 4;
        const ERASE_SIZE: usize = 4096;
        fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
            black_box((from, to));
            black_box(Ok(()))
        }
        fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
            black_box((offset, bytes));
            black_box(Ok(()))
        }
    }
}

/// The node's whole cycle with the pipeline core over opaque devices and a
/// power-safe store on an opaque flash: every state, every downlink.
fn node() {
    use firmware::cycle::{Devices, Node};
    use firmware::pipeline_core::NodeCore;
    use firmware::store::{FlashStore, Layout};
    let layout = black_box(Layout {
        config: [0, 4096],
        baseline: [8192, 12288],
        identity: 16384,
    });
    let Ok(storage) = FlashStore::new(opaque::Flash, layout) else {
        return;
    };
    let Some(core) = cortex_m::singleton!(: NodeCore = NodeCore::new(0)) else {
        return;
    };
    let dev = Devices::<opaque::Board> {
        source: opaque::Source(black_box([0; 256])),
        capture: opaque::Capture,
        radio: opaque::Radio(black_box([0; 300])),
        alarm: opaque::Sleep,
        storage,
        battery: opaque::Batt,
        watchdog: opaque::Dog,
        power: opaque::Pin,
        delay: opaque::Delay,
    };
    let mut node = Node::new(dev, core);
    let bytes = [0u8; 300];
    loop {
        let _ = black_box(node.step());
        black_box(node.apply_downlink(black_box(&bytes[..])));
        black_box(node.status());
        black_box(node.frame());
        black_box(node.blocks_wanted());
        if black_box(false) {
            break;
        }
    }
}

/// The block ring between the sampling interrupt and the cycle, as the
/// nRF52840 board uses it: any order of pushes, losses, restarts, pops and
/// drains.
fn ring() {
    use firmware::ring::{BlockRing, NODE_DEPTH};
    static RING: BlockRing<NODE_DEPTH, ADC_BLOCK> = BlockRing::new();
    let Some((mut tx, mut rx)) = RING.split() else {
        return;
    };
    let block = [0i16; ADC_BLOCK];
    let mut out = [0i16; ADC_BLOCK];
    for _ in 0..black_box(0u32) {
        let _ = black_box(tx.push(black_box(&block)));
        tx.mark_lost(black_box(0));
        if black_box(false) {
            tx.restart();
        }
        black_box(rx.pop_into(black_box(&mut out)));
        black_box(&out);
        if black_box(false) {
            black_box(rx.drain());
        }
        black_box((rx.len(), rx.is_empty(), rx.lost(), rx.high_water()));
    }
}

/// Records read from storage or radio, on arbitrary bytes.
fn records() {
    use wire::config::{PointRecord, StoredConfig};
    use wire::identity::Identity;
    let bytes = [0u8; 300];
    let input: &[u8] = black_box(&bytes[..]);
    if let Ok(s) = StoredConfig::decode(input) {
        let mut out = [0u8; 300];
        let _ = black_box(s.encode(&mut out));
        let _ = black_box(
            firmware::commission::Commissioning::new(&s.record).map(|c| {
                black_box(c.band_count());
                black_box(c.finish())
            }),
        );
        black_box(firmware::cycle::band_in_use(&s.record));
    }
    if let Ok(r) = PointRecord::decode(input) {
        black_box(r.band_hz());
        let _ = black_box(r.with_survey_band(black_box([1.0, 2.0]), black_box(0.0)));
    }
    if let Ok(id) = Identity::decode(input) {
        black_box(id.node_id());
        let _ = black_box(wire::downlink::open(Some(&id), black_box(0), input));
    }
}

#[entry]
fn main() -> ! {
    loop {
        let point = opaque_point();
        let _ = black_box(point.validate());
        black_box(point.band());
        black_box(point.default_band_hz());
        // The node's sizes and a smaller host-like set.
        measure::<4096, { dsp_core::pipeline::NODE_BINS }, { dsp_core::pipeline::NODE_RING }>(
            &point,
        );
        measure::<1024, 512, 2048>(&point);
        black_box(NodePipeline::new(&opaque_point()).is_ok());
        frames();
        tach();
        survey();
        downlink();
        records();
        node();
        ring();
    }
}
