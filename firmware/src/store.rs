//! Power-safe [`Storage`] on NOR flash.
//!
//! Each record slot (configuration, baseline) owns two erase pages written
//! alternately. A page holds one copy with a sequence number and a CRC:
//!
//! ```text
//!  0  magic  u32 LE  PAGE_MAGIC, programmed last: the commit mark
//!  4  seq    u32 LE  1 for the first copy, +1 for each store
//!  8  len    u16 LE  payload bytes (at most MAX_PAYLOAD)
//! 10  0xFFFF         reserved
//! 12  payload
//! 12+len  CRC-32 (ISO-HDLC) LE of bytes 4 .. 12+len
//!         erased (0xFF) padding to a whole word
//! ```
//!
//! Loading reads both pages and returns the valid copy (magic, length and
//! CRC right) with the higher sequence number. Storing erases the *other*
//! page (the one not holding the newest valid copy), programs everything but
//! the magic word, then the magic word, then reads the page back. A power
//! loss at any step (during the erase, or in any programmed word) leaves the
//! newest valid copy untouched, so the next load returns either the old
//! record or, once the magic word is in, the new one; never a mix, and never
//! the built-in default when a record had been stored
//! (`firmware/tests/store.rs` cuts the power at every step).
//!
//! The identity page (node id and downlink key, [`crate::identity`]) is
//! written once at provisioning over the debug port and only read here.
//!
//! Needs `F::WRITE_SIZE` and `F::READ_SIZE` to divide 4 (nRF52840: 4 and 1)
//! and pages of at least
//! [`PAGE_IMAGE_LEN`] bytes.

use embedded_storage::nor_flash::NorFlash;

use crate::crc::crc32;
use crate::hal::{Slot, Storage};
use crate::identity::IDENTITY_LEN;

/// Commit mark of a written page (`"ENVS"` in little-endian bytes).
pub const PAGE_MAGIC: u32 = u32::from_le_bytes(*b"ENVS");
/// Bytes before the payload.
pub const PAGE_HEADER_LEN: usize = 12;
/// Largest payload one page copy holds.
pub const MAX_PAYLOAD: usize = 240;
/// Largest page image (header, payload, CRC), a whole number of words.
pub const PAGE_IMAGE_LEN: usize = PAGE_HEADER_LEN + MAX_PAYLOAD + 4;

/// Where the pages are, as offsets of the flash device (page aligned).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Layout {
    /// The configuration's two pages.
    pub config: [u32; 2],
    /// The baseline's two pages.
    pub baseline: [u32; 2],
    /// The provisioned identity (read only).
    pub identity: u32,
}

/// Why a flash store operation failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum StoreError {
    /// The flash driver refused an erase, write or read.
    Flash,
    /// The record does not fit a page, or the caller's buffer is too small.
    TooLong,
    /// The identity is written at provisioning, not by the node.
    ReadOnly,
    /// The flash's write unit does not divide 4 bytes, or its pages are
    /// smaller than [`PAGE_IMAGE_LEN`].
    Unsupported,
    /// The page read back differs from what was written.
    Verify,
    /// Sequence number exhausted (after 2^32 - 1 stores; flash endurance
    /// ends long before).
    Exhausted,
}

impl core::fmt::Display for StoreError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            Self::Flash => "flash driver error",
            Self::TooLong => "record too long for its page or buffer",
            Self::ReadOnly => "the identity page is written at provisioning only",
            Self::Unsupported => "flash write unit or page size not supported",
            Self::Verify => "page read back differs from what was written",
            Self::Exhausted => "page sequence number exhausted",
        })
    }
}

impl core::error::Error for StoreError {}

/// A valid copy found in a page.
#[derive(Clone, Copy)]
struct PageCopy {
    seq: u32,
    len: usize,
}

/// Power-safe record storage over a NOR flash.
pub struct FlashStore<F> {
    flash: F,
    layout: Layout,
}

impl<F: NorFlash> FlashStore<F> {
    /// Wraps a flash device with its page layout.
    pub fn new(flash: F, layout: Layout) -> Result<Self, StoreError> {
        let unit_ok = F::WRITE_SIZE > 0
            && 4 % F::WRITE_SIZE == 0
            && F::READ_SIZE > 0
            && 4 % F::READ_SIZE == 0;
        if !unit_ok || F::ERASE_SIZE < PAGE_IMAGE_LEN {
            return Err(StoreError::Unsupported);
        }
        Ok(Self { flash, layout })
    }

    /// The flash device (tests, board diagnostics).
    pub fn flash(&self) -> &F {
        &self.flash
    }

    /// Gives the flash device back.
    pub fn into_flash(self) -> F {
        self.flash
    }

    fn pages(&self, slot: Slot) -> Option<[u32; 2]> {
        match slot {
            Slot::Config => Some(self.layout.config),
            Slot::Baseline => Some(self.layout.baseline),
            Slot::Identity => None,
        }
    }

    /// Reads the page at `base` into `img`; the valid copy's sequence and length.
    fn read_copy(&mut self, base: u32, img: &mut [u8; PAGE_IMAGE_LEN]) -> Option<PageCopy> {
        self.flash.read(base, img).ok()?;
        let word = |i: usize| -> Option<u32> {
            let b = img.get(i..i + 4)?;
            Some(u32::from_le_bytes([
                *b.first()?,
                *b.get(1)?,
                *b.get(2)?,
                *b.get(3)?,
            ]))
        };
        if word(0)? != PAGE_MAGIC {
            return None;
        }
        let seq = word(4)?;
        let len = usize::from(u16::from_le_bytes([*img.get(8)?, *img.get(9)?]));
        if len > MAX_PAYLOAD {
            return None;
        }
        let end = PAGE_HEADER_LEN + len;
        let crc = word(end)?;
        (crc32(img.get(4..end)?) == crc).then_some(PageCopy { seq, len })
    }

    /// The newest valid copy of a slot: (page index, copy).
    fn newest(
        &mut self,
        pages: [u32; 2],
        img: &mut [u8; PAGE_IMAGE_LEN],
    ) -> Option<(usize, PageCopy)> {
        let mut best: Option<(usize, PageCopy)> = None;
        for (i, base) in pages.into_iter().enumerate() {
            if let Some(c) = self.read_copy(base, img) {
                if best.is_none_or(|(_, b)| c.seq > b.seq) {
                    best = Some((i, c));
                }
            }
        }
        best
    }

    fn load_identity(&mut self, buf: &mut [u8]) -> Result<usize, StoreError> {
        let mut raw = [0u8; IDENTITY_LEN];
        self.flash
            .read(self.layout.identity, &mut raw)
            .map_err(|_| StoreError::Flash)?;
        if raw.iter().all(|&b| b == 0xFF) {
            return Ok(0); // erased: not provisioned
        }
        buf.get_mut(..IDENTITY_LEN)
            .ok_or(StoreError::TooLong)?
            .copy_from_slice(&raw);
        Ok(IDENTITY_LEN)
    }
}

impl<F: NorFlash> Storage for FlashStore<F> {
    type Error = StoreError;

    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, StoreError> {
        let Some(pages) = self.pages(slot) else {
            return self.load_identity(buf);
        };
        let mut img = [0u8; PAGE_IMAGE_LEN];
        let Some((i, c)) = self.newest(pages, &mut img) else {
            return Ok(0);
        };
        // `img` holds the last page read: reread the winner if needed.
        let base = pages.get(i).copied().ok_or(StoreError::Flash)?;
        if self.read_copy(base, &mut img).is_none() {
            return Err(StoreError::Flash);
        }
        let payload = img
            .get(PAGE_HEADER_LEN..PAGE_HEADER_LEN + c.len)
            .ok_or(StoreError::Flash)?;
        buf.get_mut(..c.len)
            .ok_or(StoreError::TooLong)?
            .copy_from_slice(payload);
        Ok(c.len)
    }

    fn store(&mut self, slot: Slot, data: &[u8]) -> Result<(), StoreError> {
        let pages = self.pages(slot).ok_or(StoreError::ReadOnly)?;
        let len = data.len();
        let len16 = u16::try_from(len).map_err(|_| StoreError::TooLong)?;
        if len > MAX_PAYLOAD {
            return Err(StoreError::TooLong);
        }
        let mut img = [0xFFu8; PAGE_IMAGE_LEN];
        let (target, seq) = match self.newest(pages, &mut img) {
            None => (0, 1),
            Some((i, c)) => (
                1 - i.min(1),
                c.seq.checked_add(1).ok_or(StoreError::Exhausted)?,
            ),
        };
        let base = pages.get(target).copied().ok_or(StoreError::Flash)?;
        // Build the image: header, payload, CRC, erased padding.
        img.fill(0xFF);
        let end = PAGE_HEADER_LEN + len;
        let words = (end + 4).div_ceil(4) * 4;
        {
            let mut put = |at: usize, bytes: &[u8]| -> Result<(), StoreError> {
                img.get_mut(at..at + bytes.len())
                    .ok_or(StoreError::TooLong)?
                    .copy_from_slice(bytes);
                Ok(())
            };
            put(0, &PAGE_MAGIC.to_le_bytes())?;
            put(4, &seq.to_le_bytes())?;
            put(8, &len16.to_le_bytes())?;
            put(PAGE_HEADER_LEN, data)?;
        }
        let crc = crc32(img.get(4..end).ok_or(StoreError::TooLong)?);
        img.get_mut(end..end + 4)
            .ok_or(StoreError::TooLong)?
            .copy_from_slice(&crc.to_le_bytes());
        let page_end = u32::try_from(F::ERASE_SIZE)
            .ok()
            .and_then(|s| base.checked_add(s))
            .ok_or(StoreError::Flash)?;
        self.flash
            .erase(base, page_end)
            .map_err(|_| StoreError::Flash)?;
        // Everything but the magic word, then the magic word: the copy
        // counts only once it is complete.
        let body = img.get(4..words).ok_or(StoreError::TooLong)?;
        let body_at = base.checked_add(4).ok_or(StoreError::Flash)?;
        self.flash
            .write(body_at, body)
            .map_err(|_| StoreError::Flash)?;
        let magic = img.get(..4).ok_or(StoreError::TooLong)?;
        self.flash
            .write(base, magic)
            .map_err(|_| StoreError::Flash)?;
        let mut back = [0u8; PAGE_IMAGE_LEN];
        match self.read_copy(base, &mut back) {
            Some(c) if c.seq == seq && back.get(..words) == img.get(..words) => Ok(()),
            _ => Err(StoreError::Verify),
        }
    }
}
