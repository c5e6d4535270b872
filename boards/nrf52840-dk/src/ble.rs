//! The frame as BLE non-connectable advertisements (ADV_NONCONN_IND) sent
//! with the RADIO registers directly: no BLE stack, no connection, no
//! downlink. Values from the Bluetooth Core Specification, Vol 6 Part B
//! (advertising access address 0x8E89BED6, CRC polynomial 0x00065B, CRC
//! init 0x555555, whitening seeded by the channel index; channels 37/38/39
//! at 2402/2426/2480 MHz), written from memory and to be checked with a
//! scanner during bring-up.
//!
//! A legacy advertisement carries 31 bytes of AD data, so the frame is split
//! into segments: AD type 0xFF (manufacturer data), company ID 0xFFFF (the
//! value reserved for tests), then frame counter, segment index/count and up
//! to [`SEGMENT`] frame bytes.

use core::sync::atomic::{compiler_fence, Ordering};
use embassy_nrf::pac;
use firmware::hal::RadioLink;

/// Frame bytes per advertisement: 31 - flags(3) - AD header(2) - company(2) - counter/segment(2).
pub const SEGMENT: usize = 22;
const ADV_CHANNELS: [(u32, u32); 3] = [(37, 2), (38, 26), (39, 80)];

/// Radio error.
#[derive(Clone, Copy, Debug, defmt::Format)]
pub enum RadioError {
    /// Frame longer than 15 segments.
    TooLong,
}

/// Advertiser with a random static device address from FICR.
pub struct Advertiser {
    addr: [u8; 6],
    counter: u8,
    pdu: [u8; 39],
}

impl Advertiser {
    /// Configures RADIO for BLE 1 Mbit advertising.
    pub fn new() -> Self {
        let lo = pac::FICR.deviceaddr(0).read();
        let hi = pac::FICR.deviceaddr(1).read();
        let mut addr = [0u8; 6];
        addr[..4].copy_from_slice(&lo.to_le_bytes());
        addr[4..].copy_from_slice(&hi.to_le_bytes()[..2]);
        addr[5] |= 0xC0; // random static address: two top bits set
        let r = pac::RADIO;
        r.mode().write(|w| w.0 = 3); // Ble_1Mbit
        r.pcnf0().write(|w| w.0 = 8 | (1 << 8)); // LFLEN 8 bits, S0 1 byte
        r.pcnf1().write(|w| w.0 = 37 | (3 << 16) | (1 << 25)); // MAXLEN 37, BALEN 3, whitening
        r.base0().write_value(0x89BE_D600);
        r.prefix0().write(|w| w.0 = 0x8E);
        r.txaddress().write(|w| w.0 = 0);
        r.crccnf().write(|w| w.0 = 3 | (1 << 8)); // 3 bytes, skip address
        r.crcpoly().write(|w| w.0 = 0x0000_065B);
        r.crcinit().write(|w| w.0 = 0x55_5555);
        r.txpower().write(|w| w.0 = 0); // 0 dBm
        r.shorts().write(|w| w.0 = 0b11); // READY->START, END->DISABLE
        Self {
            addr,
            counter: 0,
            pdu: [0; 39],
        }
    }

    fn transmit(&mut self, channel: u32, freq: u32) {
        let r = pac::RADIO;
        r.frequency().write(|w| w.0 = freq);
        r.datawhiteiv().write(|w| w.0 = channel);
        r.packetptr().write_value(self.pdu.as_ptr() as u32);
        r.events_disabled().write_value(0);
        compiler_fence(Ordering::SeqCst);
        r.tasks_txen().write_value(1);
        while r.events_disabled().read() == 0 {}
        compiler_fence(Ordering::SeqCst);
    }
}

impl RadioLink for Advertiser {
    type Error = RadioError;

    fn send(&mut self, frame: &[u8]) -> Result<(), RadioError> {
        let count = frame.len().div_ceil(SEGMENT).max(1);
        if count > 15 {
            return Err(RadioError::TooLong);
        }
        self.counter = self.counter.wrapping_add(1);
        for (i, chunk) in frame.chunks(SEGMENT).enumerate() {
            let ad_len = 3 + 2 + chunk.len(); // type + company + counter/segment + data
            let payload = 6 + 3 + 1 + ad_len;
            self.pdu[0] = 0x42; // ADV_NONCONN_IND, TxAdd = random
            self.pdu[1] = payload as u8;
            self.pdu[2..8].copy_from_slice(&self.addr);
            self.pdu[8..11].copy_from_slice(&[0x02, 0x01, 0x06]); // flags: LE general, no BR/EDR
            self.pdu[11] = ad_len as u8;
            self.pdu[12] = 0xFF;
            self.pdu[13..15].copy_from_slice(&[0xFF, 0xFF]);
            self.pdu[15] = self.counter;
            self.pdu[16] = ((i as u8) << 4) | count as u8;
            self.pdu[17..17 + chunk.len()].copy_from_slice(chunk);
            // each segment three times on each advertising channel
            for _ in 0..3 {
                for (ch, f) in ADV_CHANNELS {
                    self.transmit(ch, f);
                }
            }
        }
        Ok(())
    }

    /// Advertising has no receive window: downlinks need a LoRaWAN class A
    /// radio or a BLE connection (not on this board yet).
    fn receive(&mut self, _buf: &mut [u8]) -> Result<Option<usize>, RadioError> {
        Ok(None)
    }
}
