//! Board support for QEMU's mps2-an386 (Cortex-M4F): the firmware's hardware
//! traits over semihosting files, stack painting, and fault handlers.
//!
//! Files, relative to the guest's semihosting working directory
//! (`QEMU_RUN_DIR` of `qemu-run.sh`):
//!
//! | file            | direction | content                                        |
//! |-----------------|-----------|------------------------------------------------|
//! | `recording.i16` | in        | ADC samples, little-endian i16, at the config's sample rate |
//! | `tach.u32`      | in        | tach edge timestamps, little-endian u32, in sample-clock ticks |
//! | `flash.bin`     | in/out    | the emulated NOR flash (5 pages of 4 KiB: configuration A/B, baseline A/B, identity), through the firmware's power-safe `FlashStore`; written by `make_input.py flash` |
//! | `downlinks.bin` | in        | downlinks, one per receive window in order: u16 LE length + bytes, length 0 = none (optional) |
//! | `frames.bin`    | out       | every uplink frame, concatenated               |
//!
//! Frames are also printed as hex on stderr (`frame N: ...`).
#![no_std]

use core::sync::atomic::{AtomicU32, Ordering};
use defmt_semihosting as _; // global defmt logger over semihosting stdout
use embedded_storage::nor_flash::{ErrorType, NorFlash, NorFlashErrorKind, ReadNorFlash};
use firmware::hal::{
    Alarm, Battery, Block, BlockSource, PulseCapture, RadioLink, WakeReason, Watchdog,
};
use firmware::store::Layout;
use semihosting::fs::File;
use semihosting::io::{Read, Seek, SeekFrom, Write};

/// The mps2-an386 under QEMU as the firmware's [`firmware::hal::Board`]:
/// semihosting files for the ADC, tach, radio and flash.
pub struct Mps2;

impl firmware::hal::Board for Mps2 {
    type Source = FileSource;
    type Capture = FileCapture;
    type Radio = FileRadio;
    type Alarm = InstantAlarm;
    type Storage = firmware::store::FlashStore<FileFlash>;
    type Battery = FixedBattery;
    type Watchdog = CountingWatchdog;
    type Power = PowerFlag;
    type Delay = SpinDelay;
}

/// Samples per ADC block, the same as the nRF52840 board's DMA halves.
pub const BLOCK_LEN: usize = 256;

/// Samples delivered so far: the shared time base of source and capture
/// (the capture timer counts at the sample clock).
static SAMPLE_CLOCK: AtomicU32 = AtomicU32::new(0);

/// Board error: a semihosting file call failed or the input ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq, defmt::Format)]
pub enum BoardError {
    /// A file could not be opened, read or written.
    Io,
    /// The recording has no further complete block.
    EndOfInput,
}

/// ADC stand-in: reads the recording block by block into a double buffer.
pub struct FileSource {
    file: Option<File>,
    bufs: [[i16; BLOCK_LEN]; 2],
    next: usize,
    exhausted: bool,
    bytes: [u8; BLOCK_LEN * 2],
}

impl FileSource {
    /// Opens `recording.i16`.
    pub fn open() -> Result<Self, BoardError> {
        let file = File::open(c"recording.i16").map_err(|_| BoardError::Io)?;
        Ok(Self {
            file: Some(file),
            bufs: [[0; BLOCK_LEN]; 2],
            next: 0,
            exhausted: false,
            bytes: [0; BLOCK_LEN * 2],
        })
    }

    /// True once a read found no further complete block.
    pub fn exhausted(&self) -> bool {
        self.exhausted
    }

    /// Samples left in the file (by its size and the clock).
    pub fn remaining_blocks(&self) -> u32 {
        let len = self
            .file
            .as_ref()
            .and_then(|f| f.metadata().ok())
            .map_or(0, |m| m.len());
        let total = u32::try_from(len / 2 / BLOCK_LEN as u64).unwrap_or(u32::MAX);
        total.saturating_sub(SAMPLE_CLOCK.load(Ordering::Relaxed) / BLOCK_LEN as u32)
    }
}

fn read_full(file: &mut File, buf: &mut [u8]) -> Result<usize, BoardError> {
    let mut got = 0;
    while got < buf.len() {
        match file.read(&mut buf[got..]) {
            Ok(0) => break,
            Ok(n) => got += n,
            Err(_) => return Err(BoardError::Io),
        }
    }
    Ok(got)
}

impl BlockSource for FileSource {
    type Error = BoardError;
    fn block_len(&self) -> usize {
        BLOCK_LEN
    }
    fn start(&mut self) -> Result<(), BoardError> {
        Ok(()) // the file position continues: one long recording, several records
    }
    fn next_block(&mut self) -> Result<Block<'_>, BoardError> {
        let file = self.file.as_mut().ok_or(BoardError::Io)?;
        let got = read_full(file, &mut self.bytes)?;
        if got < self.bytes.len() {
            self.exhausted = true;
            return Err(BoardError::EndOfInput);
        }
        let half = self.next;
        self.next ^= 1;
        let buf = &mut self.bufs[half];
        for (s, b) in buf.iter_mut().zip(self.bytes.chunks_exact(2)) {
            *s = i16::from_le_bytes([b[0], b[1]]);
        }
        SAMPLE_CLOCK.fetch_add(BLOCK_LEN as u32, Ordering::Relaxed);
        // a file never overruns: the "DMA" waits for the consumer
        Ok(Block {
            samples: &self.bufs[half],
            overrun: false,
        })
    }
    fn stop(&mut self) {}
}

/// Timer-capture stand-in: releases edges from `tach.u32` once the sample
/// clock has passed them.
pub struct FileCapture {
    file: Option<File>,
    pending: Option<u32>,
    origin: u32,
}

impl FileCapture {
    /// Opens `tach.u32` (a missing file means no tach: TACH_MISSING).
    pub fn open() -> Self {
        Self {
            file: File::open(c"tach.u32").ok(),
            pending: None,
            origin: 0,
        }
    }
}

impl PulseCapture for FileCapture {
    type Error = BoardError;
    fn start(&mut self) -> Result<(), BoardError> {
        // ticks count from the first sample of this record, as on the nRF52840
        // where the capture timer restarts with the sample clock
        self.origin = SAMPLE_CLOCK.load(Ordering::Relaxed);
        Ok(())
    }
    fn next_edge(&mut self) -> Option<u32> {
        loop {
            if self.pending.is_none() {
                let file = self.file.as_mut()?;
                let mut b = [0u8; 4];
                if read_full(file, &mut b).ok()? < 4 {
                    self.file = None;
                    return None;
                }
                self.pending = Some(u32::from_le_bytes(b));
            }
            let edge = self.pending?;
            if edge < self.origin {
                self.pending = None; // before this record: not ours
                continue;
            }
            if edge < SAMPLE_CLOCK.load(Ordering::Relaxed) {
                self.pending = None;
                return Some(edge - self.origin);
            }
            return None;
        }
    }
    fn stop(&mut self) {}
}

/// Radio stand-in: frames appended to `frames.bin` and hex on stderr;
/// `downlinks.bin`, if present, gives one downlink (or none) per receive
/// window, in order.
pub struct FileRadio {
    out: Option<File>,
    sent: u32,
    downlinks: Option<File>,
}

impl FileRadio {
    /// Creates (truncates) `frames.bin`; opens `downlinks.bin` if present.
    pub fn create() -> Result<Self, BoardError> {
        Ok(Self {
            out: Some(File::create(c"frames.bin").map_err(|_| BoardError::Io)?),
            sent: 0,
            downlinks: File::open(c"downlinks.bin").ok(),
        })
    }

    /// Frames sent so far.
    pub fn sent(&self) -> u32 {
        self.sent
    }
}

impl RadioLink for FileRadio {
    type Error = BoardError;
    fn send(&mut self, frame: &[u8]) -> Result<(), BoardError> {
        let out = self.out.as_mut().ok_or(BoardError::Io)?;
        out.write_all(frame).map_err(|_| BoardError::Io)?;
        semihosting::eprint!("frame {}:", self.sent);
        for b in frame {
            semihosting::eprint!(" {:02x}", b);
        }
        semihosting::eprintln!();
        self.sent += 1;
        Ok(())
    }
    fn receive(&mut self, buf: &mut [u8]) -> Result<Option<usize>, BoardError> {
        let Some(f) = self.downlinks.as_mut() else {
            return Ok(None);
        };
        let mut len = [0u8; 2];
        if read_full(f, &mut len)? < 2 {
            self.downlinks = None; // no more windows with a downlink
            return Ok(None);
        }
        let n = usize::from(u16::from_le_bytes(len));
        if n == 0 {
            return Ok(None);
        }
        // a downlink longer than the buffer is cut, as a radio would; the
        // node then refuses it (its tag no longer verifies)
        let take = n.min(buf.len());
        let got = read_full(f, &mut buf[..take])?;
        let mut skip = [0u8; 1];
        for _ in take..n {
            read_full(f, &mut skip)?;
        }
        Ok(Some(got))
    }
}

/// Emulated flash page size (the nRF52840's).
pub const PAGE: usize = 4096;
/// Emulated flash pages.
pub const PAGES: usize = 5;
/// Page layout of `flash.bin` (as written by `make_input.py flash`).
pub const LAYOUT: Layout = Layout {
    config: [0, PAGE as u32],
    baseline: [2 * PAGE as u32, 3 * PAGE as u32],
    identity: 4 * PAGE as u32,
};

/// NOR flash over the semihosting file `flash.bin`, with the NOR rules:
/// erase sets a page to 0xFF, programming can only clear bits.
pub struct FileFlash {
    file: File,
}

impl FileFlash {
    /// Opens `flash.bin` for reading and writing.
    pub fn open() -> Result<Self, BoardError> {
        let file = File::options()
            .read(true)
            .write(true)
            .open(c"flash.bin")
            .map_err(|_| BoardError::Io)?;
        Ok(Self { file })
    }

    fn seek(&mut self, offset: u32) -> Result<(), NorFlashErrorKind> {
        self.file
            .seek(SeekFrom::Start(u64::from(offset)))
            .map(|_| ())
            .map_err(|_| NorFlashErrorKind::Other)
    }

    fn check(offset: u32, len: usize) -> Result<(), NorFlashErrorKind> {
        if offset as usize + len > PAGE * PAGES {
            return Err(NorFlashErrorKind::OutOfBounds);
        }
        Ok(())
    }
}

impl ErrorType for FileFlash {
    type Error = NorFlashErrorKind;
}

impl ReadNorFlash for FileFlash {
    const READ_SIZE: usize = 1;
    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        Self::check(offset, bytes.len())?;
        self.seek(offset)?;
        match read_full(&mut self.file, bytes) {
            Ok(n) if n == bytes.len() => Ok(()),
            _ => Err(NorFlashErrorKind::Other),
        }
    }
    fn capacity(&self) -> usize {
        PAGE * PAGES
    }
}

impl NorFlash for FileFlash {
    const WRITE_SIZE: usize = 4;
    const ERASE_SIZE: usize = PAGE;
    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        if from as usize % PAGE != 0 || to as usize % PAGE != 0 || to < from {
            return Err(NorFlashErrorKind::NotAligned);
        }
        Self::check(from, (to - from) as usize)?;
        self.seek(from)?;
        let ones = [0xFFu8; 256];
        for _ in 0..(to - from) as usize / ones.len() {
            self.file
                .write_all(&ones)
                .map_err(|_| NorFlashErrorKind::Other)?;
        }
        Ok(())
    }
    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        if offset % 4 != 0 || bytes.len() % 4 != 0 {
            return Err(NorFlashErrorKind::NotAligned);
        }
        Self::check(offset, bytes.len())?;
        let mut at = offset;
        for chunk in bytes.chunks(64) {
            let mut old = [0u8; 64];
            let old = &mut old[..chunk.len()];
            self.read(at, old)?;
            for (o, b) in old.iter_mut().zip(chunk) {
                *o &= *b; // programming clears bits only
            }
            self.seek(at)?;
            self.file
                .write_all(old)
                .map_err(|_| NorFlashErrorKind::Other)?;
            at += chunk.len() as u32;
        }
        Ok(())
    }
}

/// QEMU has no sleep worth simulating: every alarm fires at once.
pub struct InstantAlarm;
impl Alarm for InstantAlarm {
    fn sleep(&mut self, seconds: u32) -> WakeReason {
        defmt::info!("sleep {} s (skipped under QEMU)", seconds);
        WakeReason::Schedule
    }
}

/// A fixed supply voltage.
pub struct FixedBattery(pub u16);
impl Battery for FixedBattery {
    fn millivolts(&mut self) -> u16 {
        self.0
    }
}

/// Counts feeds (QEMU's mps2 watchdog is not used).
#[derive(Default)]
pub struct CountingWatchdog {
    /// Feeds so far.
    pub feeds: u32,
}
impl Watchdog for CountingWatchdog {
    fn feed(&mut self) {
        self.feeds += 1;
    }
}

/// Sensor power switch stand-in that remembers its level.
#[derive(Default)]
pub struct PowerFlag {
    /// Present level.
    pub on: bool,
}
impl embedded_hal::digital::ErrorType for PowerFlag {
    type Error = core::convert::Infallible;
}
impl embedded_hal::digital::OutputPin for PowerFlag {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        self.on = false;
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        self.on = true;
        Ok(())
    }
}

/// Busy-wait delay at the 25 MHz core clock of the mps2 board.
pub struct SpinDelay;
impl embedded_hal::delay::DelayNs for SpinDelay {
    fn delay_ns(&mut self, ns: u32) {
        cortex_m::asm::delay(ns / 40);
    }
}

/// Stack painting: fill the free stack with a pattern early in `main`, and
/// after the run find the deepest word that was overwritten.
pub mod stack {
    const PATTERN: u32 = 0xACE5_ACE5;

    extern "C" {
        static mut _stack_end: u32; // lowest stack address (end of .bss/.uninit)
        static mut _stack_start: u32; // initial stack pointer (top)
    }

    fn bounds() -> (usize, usize) {
        let lo = core::ptr::addr_of!(_stack_end) as usize;
        let hi = core::ptr::addr_of!(_stack_start) as usize;
        (lo, hi)
    }

    /// Size of the stack region in bytes.
    pub fn size() -> usize {
        let (lo, hi) = bounds();
        hi - lo
    }

    /// Paints from the bottom of the stack up to 64 bytes below the present
    /// stack pointer. Call first thing in `main`.
    #[inline(never)]
    pub fn paint() {
        let (lo, _) = bounds();
        let sp = cortex_m::register::msp::read() as usize - 64;
        let mut p = lo;
        while p < sp {
            // SAFETY: [lo, sp) is free stack below the live frames, word aligned.
            unsafe { core::ptr::write_volatile(p as *mut u32, PATTERN) };
            p += 4;
        }
    }

    /// Bytes of stack used at the deepest point since `paint`.
    pub fn high_water() -> usize {
        let (lo, hi) = bounds();
        let mut p = lo;
        // SAFETY: reads of the painted, word-aligned stack region.
        while p < hi && unsafe { core::ptr::read_volatile(p as *const u32) } == PATTERN {
            p += 4;
        }
        hi - p
    }
}

/// The CMSDK APB timer0 of the mps2 board (25 MHz down-counter). Under
/// `qemu-system-arm -icount shift=10` every instruction advances virtual time
/// by 1024 ns, so instructions = ticks / 25.6 exactly.
pub mod ticks {
    const BASE: usize = 0x4000_0000;

    /// Starts the counter from its top.
    pub fn start() {
        // SAFETY: CMSDK timer0 registers of the mps2-an386 memory map.
        unsafe {
            core::ptr::write_volatile((BASE + 8) as *mut u32, u32::MAX); // RELOAD
            core::ptr::write_volatile((BASE + 4) as *mut u32, u32::MAX); // VALUE
            core::ptr::write_volatile(BASE as *mut u32, 1); // CTRL: enable
        }
    }

    /// Present counter value (counts down).
    pub fn now() -> u32 {
        // SAFETY: read of the VALUE register.
        unsafe { core::ptr::read_volatile((BASE + 4) as *const u32) }
    }

    /// Instructions between two readings (valid with `-icount shift=10`).
    pub fn instructions(earlier: u32, later: u32) -> u64 {
        u64::from(earlier.wrapping_sub(later)) * 10 / 256
    }
}

/// Installs a HardFault handler that reports and exits with status 4, so a
/// fault under QEMU fails the run instead of hanging it.
#[macro_export]
macro_rules! hardfault_exits {
    () => {
        #[cortex_m_rt::exception]
        unsafe fn HardFault(ef: &cortex_m_rt::ExceptionFrame) -> ! {
            semihosting::eprintln!("HardFault at pc={:#010x}", ef.pc());
            semihosting::process::exit(4)
        }
    };
}
