//! SAADC sampling paced by TIMER1 with an EasyDMA double buffer emptied by
//! the SAADC interrupt into the firmware's block ring, tach edges captured
//! into TIMER2 (which counts samples), and the VDD monitor.
//!
//! Register values follow the nRF52840 Product Specification v1.x (SAADC,
//! TIMER, PPI, GPIOTE chapters); written from memory of that document and
//! not yet checked on a kit (see README.md bring-up checklist).

use core::cell::RefCell;
use core::sync::atomic::{compiler_fence, Ordering};
use critical_section::Mutex;
use embassy_nrf::interrupt::InterruptExt;
use embassy_nrf::pac;
use embassy_nrf::saadc::Saadc;
use firmware::hal::{Battery, Block, BlockSource, PulseCapture};
use firmware::ring::{BlockRing, Consumer, Producer, NODE_DEPTH};

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
    /// The DMA buffers or the block ring were not available.
    NoBuffers,
}

/// Blocks between the SAADC interrupt and the cycle: deep enough for the
/// block that completes a spectrum segment (`firmware::ring` explains the
/// depth). In `.bss`, 3 KiB.
static RING: BlockRing<NODE_DEPTH, BLOCK_LEN> = BlockRing::new();

/// What the SAADC interrupt owns while sampling: the two DMA halves and the
/// ring's producer. Thread mode touches it only while the interrupt is
/// masked in the NVIC (`SaadcSource::new` and `start`), and always in a
/// critical section.
static DMA: Mutex<RefCell<Option<DmaHalves>>> = Mutex::new(RefCell::new(None));

/// EasyDMA double buffer, serviced by the SAADC interrupt.
///
/// nRF52840 PS (SAADC, EasyDMA), from memory, not yet checked on a kit:
/// RESULT.PTR is latched by the START task and may be written again as soon
/// as STARTED has been generated; END comes when MAXCNT samples are in
/// RAM. PPI channel 1 triggers START on END, so the DMA continues at once
/// into the buffer RESULT.PTR names, and forks END to TIMER3's COUNT task,
/// which therefore counts finished blocks in hardware.
struct DmaHalves {
    bufs: &'static mut [[i16; BLOCK_LEN]; 2],
    producer: Producer<'static, NODE_DEPTH, BLOCK_LEN>,
    /// Half the DMA is filling (latched by the last START).
    filling: usize,
    /// Half RESULT.PTR names for the next START.
    next: usize,
    /// END events handled since the last restart.
    done: u32,
}

impl DmaHalves {
    fn ptr(&mut self, half: usize) -> u32 {
        self.bufs.get_mut(half).map_or(0, |b| addr(b.as_mut_ptr()))
    }

    /// (Re)starts the DMA sequence: half 0 first, half 1 latched next
    /// (thread mode with the interrupt masked, or the interrupt itself).
    fn restart(&mut self) {
        let s = pac::SAADC;
        stop_saadc();
        pac::TIMER3.tasks_clear().write_value(1);
        pac::TIMER3.tasks_start().write_value(1);
        s.samplerate().write(|w| w.0 = 0); // sampling triggered by the SAMPLE task
        s.result().maxcnt().write(|w| w.0 = BLOCK_LEN as u32);
        let p0 = self.ptr(0);
        s.result().ptr().write_value(p0);
        s.events_started().write_value(0);
        s.events_end().write_value(0);
        compiler_fence(Ordering::SeqCst);
        s.tasks_start().write_value(1);
        while s.events_started().read() == 0 {}
        s.events_started().write_value(0);
        let p1 = self.ptr(1);
        s.result().ptr().write_value(p1);
        self.filling = 0;
        self.next = 1;
        self.done = 0;
    }

    /// The interrupt's work: on END, copy the finished half into the ring
    /// (a full ring counts it lost and flags the next block); on STARTED,
    /// point RESULT.PTR at the half just copied, for the START after next.
    /// The cycle may take several block times over one block; the DMA only
    /// needs this handler, which takes microseconds.
    fn service(&mut self) {
        let s = pac::SAADC;
        if s.events_end().read() != 0 {
            s.events_end().write_value(0);
            let hw = blocks_done();
            // hardware count of ENDs since the restart, against ours: more
            // than one new END means this handler ran over a block late and
            // the halves no longer follow the pointer sequence
            let new = hw.wrapping_sub(self.done);
            if new > 1 {
                self.producer.mark_lost(new);
                self.restart();
            } else {
                self.done = hw;
                compiler_fence(Ordering::SeqCst);
                if let Some(b) = self.bufs.get(self.filling) {
                    // Err(Full): counted and flagged by the ring
                    let _ = self.producer.push(b);
                }
            }
        }
        if s.events_started().read() != 0 {
            s.events_started().write_value(0);
            self.filling = self.next;
            self.next = 1 - self.filling.min(1);
            let p = self.ptr(self.next);
            s.result().ptr().write_value(p);
        }
        // read back so that the cleared events cannot re-trigger the
        // interrupt after return (Nordic's advice for the nRF52 series, from
        // memory)
        let _ = s.events_end().read();
    }
}

/// Handler of the SAADC interrupt, bound in main.rs before embassy's own
/// handler (which then finds no event set and leaves INTEN alone).
pub struct SampleIrq;

impl embassy_nrf::interrupt::typelevel::Handler<embassy_nrf::interrupt::typelevel::SAADC>
    for SampleIrq
{
    unsafe fn on_interrupt() {
        critical_section::with(|cs| {
            if let Ok(mut dma) = DMA.borrow(cs).try_borrow_mut() {
                if let Some(d) = dma.as_mut() {
                    d.service();
                }
            }
        });
        // wakes the cycle's WFE in `next_block` even if the interrupt came
        // between its check of the ring and the WFE
        cortex_m::asm::sev();
    }
}

/// The SAADC sampling through the block ring: `next_block` hands out the
/// oldest queued block (a copy owned by the cycle), `overrun` when blocks
/// were lost before it.
pub struct SaadcSource {
    _adc: Saadc<'static, 1>,
    consumer: Option<Consumer<'static, NODE_DEPTH, BLOCK_LEN>>,
    block: [i16; BLOCK_LEN],
}

impl SaadcSource {
    /// Takes the configured SAADC (channel 0) and calibrates its offset.
    pub fn new(adc: Saadc<'static, 1>) -> Self {
        // masked until `start`; calibration and the VDD reading poll their
        // events with the interrupt masked
        embassy_nrf::interrupt::SAADC.disable();
        let s = pac::SAADC;
        s.events_calibratedone().write_value(0);
        s.tasks_calibrateoffset().write_value(1);
        while s.events_calibratedone().read() == 0 {}
        s.events_calibratedone().write_value(0);
        let bufs = cortex_m::singleton!(: [[i16; BLOCK_LEN]; 2] = [[0; BLOCK_LEN]; 2]);
        let consumer = match (bufs, RING.split()) {
            (Some(bufs), Some((producer, consumer))) => critical_section::with(|cs| {
                let mut dma = DMA.borrow(cs).try_borrow_mut().ok()?;
                *dma = Some(DmaHalves {
                    bufs,
                    producer,
                    filling: 0,
                    next: 1,
                    done: 0,
                });
                Some(consumer)
            }),
            _ => None,
        };
        Self {
            _adc: adc,
            consumer,
            block: [0; BLOCK_LEN],
        }
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
        let Some(consumer) = self.consumer.as_mut() else {
            return Err(SampleError::NoBuffers);
        };
        let irq = embassy_nrf::interrupt::SAADC;
        irq.disable();
        pac::TIMER2.tasks_clear().write_value(1);
        pac::TIMER2.tasks_start().write_value(1);
        // blocks and a gap left from the last record are not this record's
        consumer.drain();
        let ok = critical_section::with(|cs| {
            let mut dma = DMA.borrow(cs).try_borrow_mut().ok()?;
            let d = dma.as_mut()?;
            d.producer.restart();
            d.restart();
            Some(())
        });
        if ok.is_none() {
            return Err(SampleError::NoBuffers);
        }
        let s = pac::SAADC;
        s.intenset().write(|w| {
            w.set_started(true);
            w.set_end(true);
        });
        irq.unpend();
        // SAFETY: the handler touches its state only inside a critical
        // section, so unmasking it cannot break one in progress.
        unsafe { irq.enable() };
        pac::TIMER1.tasks_clear().write_value(1);
        pac::TIMER1.tasks_start().write_value(1);
        Ok(())
    }

    fn next_block(&mut self) -> Result<Block<'_>, SampleError> {
        let consumer = self.consumer.as_mut().ok_or(SampleError::NoBuffers)?;
        let popped = loop {
            if let Some(p) = consumer.pop_into(&mut self.block) {
                break p;
            }
            // the interrupt (or its SEV) ends the wait
            cortex_m::asm::wfe();
        };
        for s in self.block.iter_mut() {
            *s = s.saturating_sub(MID_SCALE);
        }
        Ok(Block {
            samples: &self.block[..],
            overrun: popped.overrun,
        })
    }

    fn stop(&mut self) {
        pac::TIMER1.tasks_stop().write_value(1);
        embassy_nrf::interrupt::SAADC.disable();
        stop_saadc();
        pac::SAADC.intenclr().write(|w| w.0 = u32::MAX);
        pac::TIMER2.tasks_stop().write_value(1);
        pac::TIMER3.tasks_stop().write_value(1);
        if let Some(c) = self.consumer.as_ref() {
            // bring-up figure: how close the record came to an overrun
            defmt::debug!(
                "block ring: high-water {} of {}, {} blocks lost since boot",
                c.high_water(),
                NODE_DEPTH,
                c.lost()
            );
        }
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
