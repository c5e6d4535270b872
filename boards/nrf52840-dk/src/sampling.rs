//! SAADC sampling paced by TIMER1 with an EasyDMA double buffer, tach edges
//! captured into TIMER2 (which counts samples), and the VDD monitor.
//!
//! Register values follow the nRF52840 Product Specification v1.x (SAADC,
//! TIMER, PPI, GPIOTE chapters); written from memory of that document and
//! not yet checked on a kit (see README.md bring-up checklist).

use core::sync::atomic::{compiler_fence, Ordering};
use embassy_nrf::interrupt::InterruptExt;
use embassy_nrf::pac;
use embassy_nrf::saadc::Saadc;
use firmware::hal::{Battery, Block, BlockSource, PulseCapture};

/// Samples per DMA half, the same as the QEMU board.
pub const BLOCK_LEN: usize = 256;
/// Fixed sample rate of this board: 16 MHz / 625 = 25.6 kHz exactly. The
/// stored configuration's `sample_rate_hz` must match.
pub const SAMPLE_RATE_HZ: u32 = 25_600;
const TIMER_CC: u32 = 16_000_000 / SAMPLE_RATE_HZ;
/// Mid-scale of the 12-bit single-ended result: the sensor output is biased
/// at half supply, so samples are re-centred to signed counts.
const MID_SCALE: i16 = 2048;
const TACH_PIN: u32 = 3;
const BUTTON_PIN: u32 = 11;

fn addr<T>(p: *mut T) -> u32 {
    p as u32
}

/// GPIOTE channels: 0 = tach (rising edge), 1 = button 1 (falling edge);
/// PPI channels 0-2 as drawn in main.rs. Called once at boot.
pub fn init_pins() {
    // P0.03 input, buffer connected, no pull (tach conditioner drives it)
    pac::P0.pin_cnf(TACH_PIN as usize).write(|w| w.0 = 0);
    // P0.11 input with pull-up (button to ground on the DK)
    pac::P0
        .pin_cnf(BUTTON_PIN as usize)
        .write(|w| w.0 = 0b11 << 2);
    // CONFIG: MODE = Event (1), PSEL, POLARITY LoToHi (1) / HiToLo (2)
    pac::GPIOTE
        .config(0)
        .write(|w| w.0 = 1 | (TACH_PIN << 8) | (1 << 16));
    pac::GPIOTE
        .config(1)
        .write(|w| w.0 = 1 | (BUTTON_PIN << 8) | (2 << 16));

    // TIMER1: 16 MHz timer, 32-bit, CC0 = 625, clear on compare
    let t1 = pac::TIMER1;
    t1.mode().write(|w| w.0 = 0);
    t1.bitmode().write(|w| w.0 = 3);
    t1.prescaler().write(|w| w.0 = 0);
    t1.cc(0).write_value(TIMER_CC);
    t1.shorts().write(|w| w.0 = 1);
    // TIMER2 counts samples, TIMER3 counts finished blocks (counter mode, 32-bit)
    for t in [pac::TIMER2, pac::TIMER3] {
        t.mode().write(|w| w.0 = 1);
        t.bitmode().write(|w| w.0 = 3);
    }

    let s = pac::SAADC;
    let ppi = pac::PPI;
    ppi.ch(0)
        .eep()
        .write_value(addr(t1.events_compare(0).as_ptr()));
    ppi.ch(0).tep().write_value(addr(s.tasks_sample().as_ptr()));
    ppi.fork(0)
        .tep()
        .write_value(addr(pac::TIMER2.tasks_count().as_ptr()));
    ppi.ch(1).eep().write_value(addr(s.events_end().as_ptr()));
    ppi.ch(1).tep().write_value(addr(s.tasks_start().as_ptr()));
    ppi.fork(1)
        .tep()
        .write_value(addr(pac::TIMER3.tasks_count().as_ptr()));
    ppi.ch(2)
        .eep()
        .write_value(addr(pac::GPIOTE.events_in(0).as_ptr()));
    ppi.ch(2)
        .tep()
        .write_value(addr(pac::TIMER2.tasks_capture(1).as_ptr()));
    ppi.chenset().write(|w| w.0 = 0b111);
}

fn blocks_done() -> u32 {
    pac::TIMER3.tasks_capture(0).write_value(1);
    pac::TIMER3.cc(0).read()
}

/// Board error of the sampling chain.
#[derive(Clone, Copy, Debug, defmt::Format)]
pub enum SampleError {
    /// The DMA buffers were not available.
    NoBuffers,
}

/// The SAADC with two DMA halves of [`BLOCK_LEN`] samples.
pub struct SaadcSource {
    _adc: Saadc<'static, 1>,
    bufs: Option<&'static mut [[i16; BLOCK_LEN]; 2]>,
    held: Option<usize>,
    consumed: u32,
    overrun_pending: bool,
}

impl SaadcSource {
    /// Takes the configured SAADC (channel 0) and calibrates its offset.
    pub fn new(adc: Saadc<'static, 1>) -> Self {
        // the embassy interrupt handler stays masked: completion is polled
        // with WFE (SEVONPEND), so the handler never clears our INTEN bits
        embassy_nrf::interrupt::SAADC.disable();
        let s = pac::SAADC;
        s.events_calibratedone().write_value(0);
        s.tasks_calibrateoffset().write_value(1);
        while s.events_calibratedone().read() == 0 {}
        s.events_calibratedone().write_value(0);
        Self {
            _adc: adc,
            bufs: cortex_m::singleton!(: [[i16; BLOCK_LEN]; 2] = [[0; BLOCK_LEN]; 2]),
            held: None,
            consumed: 0,
            overrun_pending: false,
        }
    }

    fn ptr(&mut self, half: usize) -> u32 {
        self.bufs
            .as_mut()
            .and_then(|b| b.get_mut(half))
            .map_or(0, |b| addr(b.as_mut_ptr()))
    }

    /// (Re)starts the DMA sequence: half 0 first, half 1 latched next.
    fn restart(&mut self) {
        let s = pac::SAADC;
        stop_saadc();
        pac::TIMER3.tasks_clear().write_value(1);
        pac::TIMER3.tasks_start().write_value(1);
        self.consumed = 0;
        self.held = None;
        s.samplerate().write(|w| w.0 = 0); // sampling triggered by the SAMPLE task
        s.result().maxcnt().write(|w| w.0 = BLOCK_LEN as u32);
        let p0 = self.ptr(0);
        s.result().ptr().write_value(p0);
        s.events_started().write_value(0);
        s.events_end().write_value(0);
        s.intenset().write(|w| w.0 = 1 << 1); // END raises the (masked) IRQ: WFE wake-up
        compiler_fence(Ordering::SeqCst);
        s.tasks_start().write_value(1);
        while s.events_started().read() == 0 {}
        s.events_started().write_value(0);
        let p1 = self.ptr(1);
        s.result().ptr().write_value(p1);
    }
}

fn stop_saadc() {
    let s = pac::SAADC;
    s.events_stopped().write_value(0);
    s.tasks_stop().write_value(1);
    while s.events_stopped().read() == 0 {}
    s.events_stopped().write_value(0);
}

impl BlockSource for SaadcSource {
    type Error = SampleError;

    fn block_len(&self) -> usize {
        BLOCK_LEN
    }

    fn start(&mut self) -> Result<(), SampleError> {
        if self.bufs.is_none() {
            return Err(SampleError::NoBuffers);
        }
        pac::TIMER2.tasks_clear().write_value(1);
        pac::TIMER2.tasks_start().write_value(1);
        self.restart();
        self.overrun_pending = false;
        pac::TIMER1.tasks_clear().write_value(1);
        pac::TIMER1.tasks_start().write_value(1);
        Ok(())
    }

    fn next_block(&mut self) -> Result<Block<'_>, SampleError> {
        if let Some(h) = self.held.take() {
            // Hand the held half back before the other half completes;
            // otherwise the DMA has already restarted on the wrong half.
            if blocks_done() > self.consumed {
                self.overrun_pending = true;
                self.restart();
            } else {
                let p = self.ptr(h);
                pac::SAADC.result().ptr().write_value(p);
                if blocks_done() > self.consumed {
                    self.overrun_pending = true;
                    self.restart();
                }
            }
        }
        loop {
            if blocks_done() > self.consumed {
                break;
            }
            pac::SAADC.events_end().write_value(0);
            embassy_nrf::interrupt::SAADC.unpend();
            if blocks_done() > self.consumed {
                break;
            }
            cortex_m::asm::wfe();
        }
        compiler_fence(Ordering::SeqCst);
        self.consumed += 1;
        let half = usize::from(self.consumed.is_multiple_of(2)); // 1st END: half 0, 2nd: half 1, ...
        self.held = Some(half);
        let overrun = core::mem::take(&mut self.overrun_pending);
        let buf = self
            .bufs
            .as_mut()
            .and_then(|b| b.get_mut(half))
            .ok_or(SampleError::NoBuffers)?;
        for s in buf.iter_mut() {
            *s = s.saturating_sub(MID_SCALE);
        }
        Ok(Block {
            samples: &buf[..],
            overrun,
        })
    }

    fn stop(&mut self) {
        pac::TIMER1.tasks_stop().write_value(1);
        stop_saadc();
        pac::SAADC.intenclr().write(|w| w.0 = u32::MAX);
        pac::TIMER2.tasks_stop().write_value(1);
        pac::TIMER3.tasks_stop().write_value(1);
        self.held = None;
    }
}

/// Tach edges captured in TIMER2 CC1, in samples since `start`.
///
/// One capture register: edges closer together than one block (10 ms, i.e.
/// above 6000 pulses per minute) overwrite each other; the core then sees
/// a long period and reports a tach fault.
pub struct TachCapture;

impl TachCapture {
    /// Uses GPIOTE channel 0 and PPI channel 2 set up by [`init_pins`].
    pub fn new() -> Self {
        Self
    }
}

impl PulseCapture for TachCapture {
    type Error = SampleError;
    fn start(&mut self) -> Result<(), SampleError> {
        pac::GPIOTE.events_in(0).write_value(0);
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        let ev = pac::GPIOTE.events_in(0);
        if ev.read() == 0 {
            return None;
        }
        ev.write_value(0);
        Some(pac::TIMER2.cc(1).read())
    }
    fn stop(&mut self) {}
}

/// Supply voltage by a one-shot SAADC conversion of VDD on channel 1.
pub struct VddMonitor;

impl Battery for VddMonitor {
    fn millivolts(&mut self) -> u16 {
        let s = pac::SAADC;
        let cfg = s.ch(0).config().read(); // gain 1/6, 0.6 V reference: 3.6 V full scale
        s.ch(1).config().write_value(cfg);
        s.ch(1).pselp().write(|w| w.0 = 9); // VDD
        let mut res = [0i16; 2];
        s.result().ptr().write_value(addr(res.as_mut_ptr()));
        s.result().maxcnt().write(|w| w.0 = 2);
        s.events_end().write_value(0);
        s.events_started().write_value(0);
        compiler_fence(Ordering::SeqCst);
        s.tasks_start().write_value(1);
        while s.events_started().read() == 0 {}
        s.tasks_sample().write_value(1);
        while s.events_end().read() == 0 {}
        compiler_fence(Ordering::SeqCst);
        stop_saadc();
        s.ch(1).pselp().write(|w| w.0 = 0); // not connected: back to one channel
        s.events_end().write_value(0);
        let raw = u32::from(res[1].max(0).unsigned_abs());
        u16::try_from(raw * 3600 / 4096).unwrap_or(u16::MAX)
    }
}
