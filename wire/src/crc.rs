//! The two CRCs on the air and in flash, in one place.
//!
//! * [`crc16`]: CRC-16/CCITT-FALSE (catalogue name CRC-16/IBM-3740): width
//!   16, poly 0x1021, init 0xFFFF, no input/output reflection, xorout 0x0000,
//!   check 0x29B1. It seals the radio frames ([`crate::frame`]).
//! * [`Crc32`] / [`crc32`]: CRC-32/ISO-HDLC (the Ethernet/zlib CRC),
//!   reflected poly 0xEDB8_8320, init and xorout 0xFFFF_FFFF, check
//!   0xCBF4_3926. It seals the stored records ([`crate::config`],
//!   [`crate::identity`]).
//!
//! Hand-written, bitwise (no table), rather than the `crc` crate: frames are
//! at most 58 bytes and records a few dozen, checked once per report, boot or
//! downlink, so flash matters more than the few hundred cycles a table saves;
//! the crate is not in this build's registry cache, and these 40 lines are
//! already checked against the catalogue values below and by the no-panic link.

/// The generator polynomial (x^16 + x^12 + x^5 + 1), normal form.
pub const POLY: u16 = 0x1021;
/// The initial register value.
pub const INIT: u16 = 0xFFFF;

/// CRC-16/CCITT-FALSE of `data`.
///
/// ```
/// // Check value of the CRC catalogue for the ASCII string "123456789".
/// assert_eq!(wire::crc::crc16(b"123456789"), 0x29B1);
/// ```
pub fn crc16(data: &[u8]) -> u16 {
    let mut crc = INIT;
    for &byte in data {
        crc ^= u16::from(byte) << 8;
        for _ in 0..8 {
            crc = if crc & 0x8000 != 0 {
                (crc << 1) ^ POLY
            } else {
                crc << 1
            };
        }
    }
    crc
}

/// Incremental CRC-32 state.
#[derive(Clone, Copy, Debug)]
pub struct Crc32 {
    state: u32,
}

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc32 {
    /// A fresh computation.
    pub const fn new() -> Self {
        Self { state: 0xFFFF_FFFF }
    }

    /// Feeds bytes.
    pub fn update(&mut self, data: &[u8]) {
        let mut crc = self.state;
        for &byte in data {
            crc ^= u32::from(byte);
            for _ in 0..8 {
                let mask = (crc & 1).wrapping_neg();
                crc = (crc >> 1) ^ (0xEDB8_8320 & mask);
            }
        }
        self.state = crc;
    }

    /// The CRC of everything fed so far.
    pub const fn finish(&self) -> u32 {
        self.state ^ 0xFFFF_FFFF
    }
}

/// CRC-32 of one slice.
///
/// ```
/// // Check value of CRC-32/ISO-HDLC from the CRC catalogue.
/// assert_eq!(wire::crc::crc32(b"123456789"), 0xCBF4_3926);
/// ```
pub fn crc32(data: &[u8]) -> u32 {
    let mut c = Crc32::new();
    c.update(data);
    c.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn catalogue_check_value() {
        // Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/IBM-3740
        // (alias CRC-16/CCITT-FALSE): check = 0x29B1 for "123456789".
        assert_eq!(crc16(b"123456789"), 0x29B1);
    }

    #[test]
    fn empty_input_is_init() {
        // With no data the register is never shifted (definition of the algorithm).
        assert_eq!(crc16(&[]), INIT);
    }

    #[test]
    fn crc32_catalogue_check_value() {
        // Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-32/ISO-HDLC:
        // check = 0xCBF43926 for "123456789".
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        let mut c = Crc32::new();
        c.update(b"1234");
        c.update(b"56789");
        assert_eq!(c.finish(), 0xCBF4_3926);
    }
}
