//! A NOR flash in RAM that can lose power at any step: each page erase and
//! each programmed 4-byte word is one step. When the budget of steps runs
//! out, the step in progress is left half done (an erase leaves part of the
//! page erased and the rest scrambled; a word keeps half its new bits) and
//! the device refuses everything until `power_on`.
//!
//! Modelled on the nRF52840's flash controller (NVMC), as described in
//! Nordic Semiconductor's "nRF52840 Product Specification" (v1.x), chapter
//! "NVMC - Non-volatile memory controller"; all from memory, section and
//! table numbers not re-checked:
//! * 4-byte words, 4 KiB pages: as the part.
//! * A word is programmed once per erase (a second write panics): a
//!   STRICTER model than the part, which allows a word a small number of
//!   writes between erases (n_WRITE in its electrical table).
//! * A power loss during a word write or a page erase leaves that word or
//!   page undefined (the part's documented rule). The patterns used here
//!   (first third of the page erased, the rest scrambled; half the bytes of a
//!   word with their new bits) are our choice of "undefined", not the part's
//!   behaviour.
use embedded_storage::nor_flash::{ErrorType, NorFlash, NorFlashErrorKind, ReadNorFlash};

pub const PAGE: usize = 4096;

pub struct FakeFlash {
    pub mem: Vec<u8>,
    /// Steps that may still complete; `None` = unlimited.
    pub budget: Option<usize>,
    /// Steps completed since the last `power_on`.
    pub steps: usize,
    /// Power is off (lost during a step).
    pub off: bool,
}

impl FakeFlash {
    pub fn new(pages: usize) -> Self {
        Self {
            mem: vec![0xFF; pages * PAGE],
            budget: None,
            steps: 0,
            off: false,
        }
    }

    /// Power back on with unlimited steps (a reboot).
    pub fn power_on(&mut self) {
        self.budget = None;
        self.steps = 0;
        self.off = false;
    }

    /// Loses power at step `k` (0-based) from now on.
    pub fn cut_at(&mut self, k: usize) {
        self.power_on();
        self.budget = Some(k);
    }

    /// True when this step may complete; false when power is lost in it.
    fn step(&mut self) -> bool {
        if self.off {
            return false;
        }
        match self.budget {
            Some(0) => {
                self.off = true;
                false
            }
            Some(b) => {
                self.budget = Some(b - 1);
                self.steps += 1;
                true
            }
            None => {
                self.steps += 1;
                true
            }
        }
    }
}

impl ErrorType for FakeFlash {
    type Error = NorFlashErrorKind;
}

impl ReadNorFlash for FakeFlash {
    const READ_SIZE: usize = 1;
    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        if self.off {
            return Err(NorFlashErrorKind::Other);
        }
        let o = offset as usize;
        let src = self
            .mem
            .get(o..o + bytes.len())
            .ok_or(NorFlashErrorKind::OutOfBounds)?;
        bytes.copy_from_slice(src);
        Ok(())
    }
    fn capacity(&self) -> usize {
        self.mem.len()
    }
}

impl NorFlash for FakeFlash {
    const WRITE_SIZE: usize = 4;
    const ERASE_SIZE: usize = PAGE;
    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        let (from, to) = (from as usize, to as usize);
        if from % PAGE != 0 || to % PAGE != 0 || to < from || to > self.mem.len() {
            return Err(NorFlashErrorKind::NotAligned);
        }
        for page in (from..to).step_by(PAGE) {
            if !self.step() {
                // interrupted erase: the first part erased, the rest scrambled
                for (i, b) in self.mem[page..page + PAGE].iter_mut().enumerate() {
                    if i < PAGE / 3 {
                        *b = 0xFF;
                    } else {
                        *b ^= 0x5A;
                    }
                }
                return Err(NorFlashErrorKind::Other);
            }
            self.mem[page..page + PAGE].fill(0xFF);
        }
        Ok(())
    }
    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        let o = offset as usize;
        if o % 4 != 0 || bytes.len() % 4 != 0 || o + bytes.len() > self.mem.len() {
            return Err(NorFlashErrorKind::NotAligned);
        }
        for (w, chunk) in bytes.chunks_exact(4).enumerate() {
            let at = o + 4 * w;
            // NOR rule: a word is programmed once after its erase
            assert_eq!(
                &self.mem[at..at + 4],
                &[0xFF; 4],
                "word at {at:#x} programmed twice"
            );
            if !self.step() {
                // interrupted: half of the new bits made it
                self.mem[at] &= chunk[0];
                self.mem[at + 1] &= chunk[1];
                return Err(NorFlashErrorKind::Other);
            }
            for (m, b) in self.mem[at..at + 4].iter_mut().zip(chunk) {
                *m &= *b;
            }
        }
        Ok(())
    }
}
