//! CRC-32 (ISO-HDLC, the Ethernet/zlib CRC) for stored records.
//!
//! Reflected polynomial 0xEDB8_8320, initial value and final XOR 0xFFFF_FFFF.
//! Bitwise rather than table-driven: records are a few dozen bytes, checked
//! once per boot or downlink, and the 1 KiB table would cost flash.

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
/// assert_eq!(firmware::crc::crc32(b"123456789"), 0xCBF4_3926);
/// ```
pub fn crc32(data: &[u8]) -> u32 {
    let mut c = Crc32::new();
    c.update(data);
    c.finish()
}
