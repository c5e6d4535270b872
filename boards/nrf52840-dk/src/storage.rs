//! Configuration and baseline in the last two 4 KiB flash pages.
//!
//! Page layout: length (u32 LE, 0xFFFF_FFFF = empty), then the record padded
//! to whole words. The records carry their own CRC (checked by the firmware).

use embassy_nrf::nvmc::{Nvmc, PAGE_SIZE};
use embedded_storage::nor_flash::{NorFlash, ReadNorFlash};
use firmware::hal::{Slot, Storage};

const CONFIG_PAGE: u32 = 0x000F_E000;
const BASELINE_PAGE: u32 = 0x000F_F000;

/// Flash error.
#[derive(Clone, Copy, Debug, defmt::Format)]
pub enum FlashError {
    /// The controller refused an operation (bounds, alignment).
    Nvmc,
    /// The record does not fit a page.
    TooLong,
}

/// NVMC-backed storage.
pub struct FlashStorage {
    nvmc: Nvmc<'static>,
}

impl FlashStorage {
    /// Wraps the flash controller.
    pub fn new(nvmc: Nvmc<'static>) -> Self {
        Self { nvmc }
    }
}

fn page(slot: Slot) -> u32 {
    match slot {
        Slot::Config => CONFIG_PAGE,
        Slot::Baseline => BASELINE_PAGE,
    }
}

impl Storage for FlashStorage {
    type Error = FlashError;

    fn load(&mut self, slot: Slot, buf: &mut [u8]) -> Result<usize, FlashError> {
        let base = page(slot);
        let mut len = [0u8; 4];
        self.nvmc
            .read(base, &mut len)
            .map_err(|_| FlashError::Nvmc)?;
        let len = u32::from_le_bytes(len);
        if len == u32::MAX {
            return Ok(0);
        }
        let n = usize::try_from(len).map_err(|_| FlashError::TooLong)?;
        let dst = buf.get_mut(..n).ok_or(FlashError::TooLong)?;
        self.nvmc
            .read(base + 4, dst)
            .map_err(|_| FlashError::Nvmc)?;
        Ok(n)
    }

    fn store(&mut self, slot: Slot, data: &[u8]) -> Result<(), FlashError> {
        let base = page(slot);
        let mut img = [0xFFu8; 260];
        let n = data.len();
        if n + 4 > img.len() || n + 4 > PAGE_SIZE {
            return Err(FlashError::TooLong);
        }
        img[..4].copy_from_slice(
            &u32::try_from(n)
                .map_err(|_| FlashError::TooLong)?
                .to_le_bytes(),
        );
        img[4..4 + n].copy_from_slice(data);
        let words = (n + 4).div_ceil(4) * 4;
        self.nvmc
            .erase(base, base + PAGE_SIZE as u32)
            .map_err(|_| FlashError::Nvmc)?;
        self.nvmc
            .write(base, &img[..words])
            .map_err(|_| FlashError::Nvmc)
    }
}
