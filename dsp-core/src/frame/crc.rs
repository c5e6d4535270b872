//! CRC-16/CCITT-FALSE (catalogue name CRC-16/IBM-3740): width 16, poly 0x1021,
//! init 0xFFFF, no input/output reflection, xorout 0x0000, check 0x29B1.
//!
//! Bitwise (no table) because frames are at most 58 bytes and flash matters
//! more than the few hundred cycles it costs.

/// The generator polynomial (x^16 + x^12 + x^5 + 1), normal form.
pub const POLY: u16 = 0x1021;
/// The initial register value.
pub const INIT: u16 = 0xFFFF;

/// CRC-16/CCITT-FALSE of `data`.
///
/// ```
/// // Check value of the CRC catalogue for the ASCII string "123456789".
/// assert_eq!(dsp_core::frame::crc::crc16(b"123456789"), 0x29B1);
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
}
