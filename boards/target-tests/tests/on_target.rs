//! Tests that run on the Cortex-M4F itself: under QEMU in CI
//! (`cargo test -p target-tests`), and unchanged on an nRF52840 kit through
//! probe-rs (`cargo --config .cargo/hw.toml test -p target-tests
//! --no-default-features --features rtt`).
#![no_std]
#![no_main]

use wire::config::PointRecord;
use firmware::cycle::{Devices, Node, State};
use firmware::hal::*;
use firmware::overall_core::OverallCore;
use dsp_core::QualityFlags;

/// The committed QEMU input configuration, written by an independent Python
/// encoder (boards/qemu-mps2/input/make_input.py, CRC from zlib.crc32).
static CONFIG: &[u8] = include_bytes!("../../qemu-mps2/input/config.bin");

const BLOCK: usize = 64;

/// Samples delivered by the RAM sources: the tach generator's time base.
static CLOCK: core::sync::atomic::AtomicU32 = core::sync::atomic::AtomicU32::new(0);

/// Tach edges every 1038 samples (25.6 kHz * 60 / 1038 = 1479.8 rpm),
/// released once the sample clock has passed them.
struct TachGen(u32);
impl PulseCapture for TachGen {
    type Error = ();
    fn start(&mut self) -> Result<(), ()> {
        CLOCK.store(0, core::sync::atomic::Ordering::Relaxed);
        self.0 = 500;
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        let now = CLOCK.load(core::sync::atomic::Ordering::Relaxed);
        (self.0 < now).then(|| {
            let e = self.0;
            self.0 += 1038;
            e
        })
    }
    fn stop(&mut self) {}
}

/// A source of `blocks` synthetic blocks (square wave +-500 counts).
struct RamSource {
    buf: [i16; BLOCK],
    left: u32,
    overrun_at: Option<u32>,
}
impl BlockSource for RamSource {
    type Error = ();
    fn block_len(&self) -> usize {
        BLOCK
    }
    fn start(&mut self) -> Result<(), ()> {
        Ok(())
    }
    fn next_block(&mut self) -> Result<Block<'_>, ()> {
        if self.left == 0 {
            return Err(());
        }
        self.left -= 1;
        CLOCK.fetch_add(BLOCK as u32, core::sync::atomic::Ordering::Relaxed);
        for (i, s) in self.buf.iter_mut().enumerate() {
            *s = if i % 8 < 4 { 500 } else { -500 };
        }
        Ok(Block {
            samples: &self.buf,
            overrun: self.overrun_at == Some(self.left),
        })
    }
    fn stop(&mut self) {}
}
struct Edges(u32);
impl PulseCapture for Edges {
    type Error = ();
    fn start(&mut self) -> Result<(), ()> {
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        self.0 += 1;
        self.0.is_multiple_of(2).then_some(self.0 * 1000)
    }
    fn stop(&mut self) {}
}
struct Radio {
    frame: [u8; 64],
    len: usize,
}
impl RadioLink for Radio {
    type Error = ();
    fn send(&mut self, f: &[u8]) -> Result<(), ()> {
        self.frame[..f.len()].copy_from_slice(f);
        self.len = f.len();
        Ok(())
    }
    fn receive(&mut self, _b: &mut [u8]) -> Result<Option<usize>, ()> {
        Ok(None)
    }
}
struct NoAlarm;
impl Alarm for NoAlarm {
    fn sleep(&mut self, _s: u32) -> WakeReason {
        WakeReason::Schedule
    }
}
struct RamStorage;
impl Storage for RamStorage {
    type Error = ();
    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, ()> {
        match slot {
            // stored as the node stores it: downlink counter 0, then the record
            Slot::Config => {
                buf[..4].copy_from_slice(&0u32.to_le_bytes());
                buf[4..4 + CONFIG.len()].copy_from_slice(CONFIG);
                Ok(4 + CONFIG.len())
            }
            Slot::Baseline | Slot::Identity => Ok(0),
        }
    }
    fn store(&mut self, _s: Slot, _d: &[u8]) -> Result<(), ()> {
        Ok(())
    }
}
struct Batt;
impl Battery for Batt {
    fn millivolts(&mut self) -> u16 {
        3300
    }
}
struct Dog(u32);
impl Watchdog for Dog {
    fn feed(&mut self) {
        self.0 += 1;
    }
}
struct Pin;
impl embedded_hal::digital::ErrorType for Pin {
    type Error = core::convert::Infallible;
}
impl embedded_hal::digital::OutputPin for Pin {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
}
struct NoDelay;
impl embedded_hal::delay::DelayNs for NoDelay {
    fn delay_ns(&mut self, _ns: u32) {}
}

/// The RAM devices as a board, with either tach source.
struct RamBoard<P>(core::marker::PhantomData<P>);
impl<P: PulseCapture> Board for RamBoard<P> {
    type Source = RamSource;
    type Capture = P;
    type Radio = Radio;
    type Alarm = NoAlarm;
    type Storage = RamStorage;
    type Battery = Batt;
    type Watchdog = Dog;
    type Power = Pin;
    type Delay = NoDelay;
}

fn devices(blocks: u32, overrun_at: Option<u32>) -> Devices<RamBoard<Edges>> {
    Devices {
        source: RamSource {
            buf: [0; BLOCK],
            left: blocks,
            overrun_at,
        },
        capture: Edges(0),
        radio: Radio {
            frame: [0; 64],
            len: 0,
        },
        alarm: NoAlarm,
        storage: RamStorage,
        battery: Batt,
        watchdog: Dog(0),
        power: Pin,
        delay: NoDelay,
    }
}

/// The block ring with a real exception as its producer: SysTick pushes
/// numbered blocks while the test (thread mode) pops them, so a push can
/// preempt a pop halfway through its copy (the interrupt-and-thread use of
/// the nRF52840 board; a ring that overwrote a slot still being read, or
/// lost count of a gap, fails here).
mod ring_irq {
    use core::cell::RefCell;
    use core::sync::atomic::{AtomicBool, AtomicU32, Ordering};
    use cortex_m::interrupt::Mutex;
    use firmware::ring::{BlockRing, Producer};

    pub const DEPTH: usize = 4;
    pub const LEN: usize = 32;
    /// Blocks SysTick offers in all.
    pub const BLOCKS: u32 = 3_000;
    pub static RING: BlockRing<DEPTH, LEN> = BlockRing::new();
    pub static PRODUCER: Mutex<RefCell<Option<Producer<'static, DEPTH, LEN>>>> =
        Mutex::new(RefCell::new(None));
    /// Blocks offered so far (pushed or lost).
    pub static OFFERED: AtomicU32 = AtomicU32::new(0);
    pub static DONE: AtomicBool = AtomicBool::new(false);

    /// Block `seq`: every sample derived from it, so a torn block shows.
    pub fn block(seq: u32) -> [i16; LEN] {
        let mut b = [0i16; LEN];
        for (j, s) in b.iter_mut().enumerate() {
            let v = seq
                .wrapping_mul(2_654_435_761)
                .wrapping_add(j as u32 * 40_503);
            *s = (v >> 16) as u16 as i16;
        }
        b[0] = (seq & 0x7FFF) as i16;
        b
    }

    #[cortex_m_rt::exception]
    fn SysTick() {
        let seq = OFFERED.load(Ordering::Relaxed);
        if seq >= BLOCKS {
            DONE.store(true, Ordering::Release);
            return;
        }
        cortex_m::interrupt::free(|cs| {
            if let Some(p) = PRODUCER.borrow(cs).borrow_mut().as_mut() {
                let _ = p.push(&block(seq));
            }
        });
        OFFERED.store(seq + 1, Ordering::Release);
    }
}

#[defmt_test::tests]
mod tests {
    use super::*;

    #[init]
    fn init() {
        target_tests::init();
    }

    #[test]
    fn crc32_check_value() {
        // CRC catalogue, CRC-32/ISO-HDLC check value
        defmt::assert_eq!(wire::crc::crc32(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn python_written_config_decodes() {
        let c = PointRecord::decode(CONFIG).unwrap();
        defmt::assert_eq!(c.sample_rate_hz, 25_600);
        defmt::assert_eq!(c.record_revs, 64);
        // 64 revolutions at 1400 rpm = 2.742857 s = 70217.1 samples -> 1098 blocks of 64
        defmt::assert_eq!(c.record_blocks(BLOCK, 10_000), 1098);
        let mut bad = [0u8; 88];
        defmt::assert_eq!(CONFIG.len(), 88);
        bad.copy_from_slice(CONFIG);
        bad[9] ^= 0x01;
        defmt::assert!(PointRecord::decode(&bad).is_err());
    }

    #[test]
    fn cycle_with_fake_source() {
        let mut node = Node::new(devices(1098, None), OverallCore::new());
        let s = node.run_cycle().unwrap();
        defmt::assert_eq!(node.state(), State::Sleep);
        defmt::assert_eq!(s.blocks, 1098);
        defmt::assert!(s.fed_watchdog);
        defmt::assert_eq!(node.devices().watchdog.0, 1);
        let f = node.frame();
        defmt::assert_eq!(f.len(), 12);
        // square wave +-500: RMS 500 counts = 5000 in 0.1 counts; crest 1.000
        defmt::assert_eq!(u16::from_le_bytes([f[2], f[3]]), 5000);
        defmt::assert_eq!(u16::from_le_bytes([f[6], f[7]]), 1000);
        defmt::assert_eq!(f[1], 0);
    }

    #[test]
    fn overrun_cycle_does_not_feed() {
        let mut node = Node::new(devices(1098, Some(100)), OverallCore::new());
        let s = node.run_cycle().unwrap();
        defmt::assert!(s.flags.contains(QualityFlags::OVERRUN));
        defmt::assert_eq!(node.devices().watchdog.0, 0);
    }

    #[test]
    fn dsp_core_num_smoke() {
        // sqrt(0.5) = 1/sqrt(2) (core::f32::consts, correctly rounded); libm within 1e-6
        let r = dsp_core::num::sqrtf(0.5);
        defmt::assert!((r - core::f32::consts::FRAC_1_SQRT_2).abs() < 1e-6);
        // 20 log10(10) = 20 dB, and non-positive ratios stay finite
        defmt::assert!((dsp_core::num::amplitude_db(10.0) - 20.0).abs() < 1e-5);
        defmt::assert_eq!(dsp_core::num::amplitude_db(0.0), -200.0);
        defmt::assert_eq!(dsp_core::num::f32_to_usize_sat(f32::NAN), 0);
    }

    #[test]
    fn fpu_root_equals_libm_bit_for_bit() {
        // dsp_core::num::sqrtf is the FPU's vsqrt.f32 here and libm on the
        // host: both IEEE 754 correctly rounded, so the bits must agree with
        // libm's software root on the node itself. Every 4099th bit pattern
        // of the positive floats (subnormals, normals, infinity), all
        // mantissas of [1, 4) in steps of 7 (both exponent parities), and
        // the edges.
        let mut worst = 0u32;
        let mut b = 0u32;
        while b <= 0x7f80_0000 {
            let x = f32::from_bits(b);
            worst = worst.max(dsp_core::num::sqrtf(x).to_bits() ^ libm::sqrtf(x).to_bits());
            b += 4099;
        }
        let mut b = 0x3f80_0000u32;
        while b < 0x4080_0000 {
            let x = f32::from_bits(b);
            worst = worst.max(dsp_core::num::sqrtf(x).to_bits() ^ libm::sqrtf(x).to_bits());
            b += 7;
        }
        for x in [0.0f32, -0.0, f32::MIN_POSITIVE, f32::MAX, 1e-45, f32::INFINITY] {
            worst = worst.max(dsp_core::num::sqrtf(x).to_bits() ^ libm::sqrtf(x).to_bits());
        }
        defmt::assert_eq!(worst, 0);
        defmt::assert!(dsp_core::num::sqrtf(-1.0).is_nan());
    }

    #[test]
    fn dsp_pipeline_overall_of_a_sine() {
        // The real dsp-core pipeline on target: an 800 Hz sine of 8000 counts
        // at 51.2 kHz (64 samples per period). Handbook values for a sine:
        // RMS = A/sqrt(2), crest factor sqrt(2), kurtosis 1.5.
        use dsp_core::config::{PointConfig, SpeedInput};
        use dsp_core::pipeline::Pipeline;
        let mut point = PointConfig::default();
        point.speed = SpeedInput::Constant { rpm: 1500.0 };
        point.revolutions = 64;
        point.counts_to_g = 1.0 / 1000.0;
        let mut p = Pipeline::<1024, 512, 2048>::new(&point).unwrap();
        let mut period = [0i16; 64];
        for (i, s) in period.iter_mut().enumerate() {
            let ph = 2.0 * core::f32::consts::PI * (i as f32) / 64.0;
            *s = libm::roundf(8000.0 * libm::sinf(ph)) as i16;
        }
        let mut block = [0i16; 256];
        for (i, s) in block.iter_mut().enumerate() {
            *s = period[i % 64];
        }
        let mut blocks = 0u32;
        while !p.complete() && blocks < 10_000 {
            p.push_i16(&block);
            blocks += 1;
        }
        defmt::assert!(p.complete());
        let r = p.finish();
        let o = r.overall;
        defmt::info!("overall {}", o);
        let rms = 8.0 * core::f32::consts::FRAC_1_SQRT_2; // g
        defmt::assert!((o.rms_ac - rms).abs() < 1e-3 * rms);
        defmt::assert!((o.crest_factor - core::f32::consts::SQRT_2).abs() < 2e-3);
        defmt::assert!((o.kurtosis - 1.5).abs() < 2e-3);
        defmt::assert_eq!(o.clipped, 0);
    }

    #[test]
    fn block_ring_fed_by_an_exception_keeps_order_and_reports_every_gap() {
        use super::ring_irq::*;
        use core::sync::atomic::Ordering;
        let (tx, mut rx) = RING.split().unwrap();
        cortex_m::interrupt::free(|cs| PRODUCER.borrow(cs).replace(Some(tx)));
        // SAFETY: only this test uses SysTick; it is stopped before returning.
        let mut syst = unsafe { cortex_m::Peripherals::steal() }.SYST;
        syst.set_clock_source(cortex_m::peripheral::syst::SystClkSource::Core);
        syst.set_reload(20_000);
        syst.clear_current();
        syst.enable_interrupt();
        syst.enable_counter();
        let mut out = [0i16; LEN];
        let (mut received, mut flagged, mut plain) = (0u32, 0u32, 0u32);
        let mut last: Option<u32> = None;
        loop {
            let finished = DONE.load(Ordering::Acquire);
            match rx.pop_into(&mut out) {
                Some(p) => {
                    // the sequence number modulo 2^15 and the pattern it makes
                    let expected = last.map_or(0, |l| l + 1);
                    let mut seq = expected;
                    while (seq & 0x7FFF) as i16 != out[0] {
                        seq += 1;
                        defmt::assert!(seq < expected + 0x8000, "sequence lost");
                    }
                    defmt::assert!(out == block(seq), "torn block {}", seq);
                    defmt::assert_eq!(p.overrun, seq != expected, "gap flag at {}", seq);
                    if p.overrun {
                        flagged += 1;
                    } else {
                        plain += 1;
                    }
                    received += 1;
                    last = Some(seq);
                    if received % 100 == 0 {
                        // a slow consumer: wait out more blocks than the ring holds
                        let until = OFFERED.load(Ordering::Acquire) + DEPTH as u32 + 2;
                        while OFFERED.load(Ordering::Acquire) < until.min(BLOCKS)
                            && !DONE.load(Ordering::Acquire)
                        {}
                    }
                }
                None if finished => break,
                None => {}
            }
        }
        syst.disable_interrupt();
        syst.disable_counter();
        defmt::assert_eq!(rx.lost(), BLOCKS - received);
        defmt::assert!(flagged > 0 && rx.lost() > 0);
        defmt::assert!(plain > 1_000);
        defmt::info!(
            "ring under SysTick: {} blocks taken, {} lost, {} gaps flagged",
            received,
            rx.lost(),
            flagged
        );
    }

    #[test]
    fn pipeline_cycle_sends_a_decodable_frame() {
        // the real node core (dsp-core pipeline + frame codec) through the
        // whole cycle on target; core in .bss as on the boards
        use firmware::pipeline_core::NodeCore;
        let core = cortex_m::singleton!(: NodeCore = NodeCore::new(9)).unwrap();
        let d = devices(1098, None);
        let dev = Devices::<RamBoard<TachGen>> {
            source: d.source,
            capture: TachGen(0),
            radio: d.radio,
            alarm: d.alarm,
            storage: d.storage,
            battery: d.battery,
            watchdog: d.watchdog,
            power: d.power,
            delay: d.delay,
        };
        let mut node = Node::new(dev, core);
        let s = node.run_cycle().unwrap();
        defmt::assert!(s.fed_watchdog);
        // early stop: 64 revolutions at 1479.8 rpm come before the 1400 rpm limit
        defmt::assert!(s.blocks < 1098);
        let r = wire::frame::decode(node.frame()).unwrap();
        defmt::assert_eq!(r.node_id, 9);
        defmt::assert!(!r.flags.tach_missing && !r.flags.processing_overrun);
        defmt::assert!((r.speed_rpm - 1479.8).abs() < 0.5);
    }
}
