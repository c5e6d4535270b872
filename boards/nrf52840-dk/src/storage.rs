//! Storage in the last five 4 KiB flash pages, through the firmware's
//! power-safe [`FlashStore`] (two pages per record, sequence number and
//! CRC, newest valid copy wins; firmware/src/store.rs).
//!
//! | page    | content |
//! |---------|---------|
//! | 0xFB000 | identity: node id and downlink key, written at provisioning (`probe-rs download`, docs/downlink-security.md) |
//! | 0xFC000, 0xFD000 | configuration with its downlink counter (copies A, B) |
//! | 0xFE000, 0xFF000 | baseline (copies A, B) |
//!
//! `memory.x` ends the code before 0xFB000.

use embassy_nrf::nvmc::Nvmc;
use firmware::store::{FlashStore, Layout, StoreError};

/// Page addresses (offsets of the NVMC, which maps flash from 0).
pub const LAYOUT: Layout = Layout {
    identity: 0x000F_B000,
    config: [0x000F_C000, 0x000F_D000],
    baseline: [0x000F_E000, 0x000F_F000],
};

/// The node's storage.
pub type FlashStorage = FlashStore<Nvmc<'static>>;

/// Wraps the flash controller.
pub fn new(nvmc: Nvmc<'static>) -> Result<FlashStorage, StoreError> {
    FlashStore::new(nvmc, LAYOUT)
}
