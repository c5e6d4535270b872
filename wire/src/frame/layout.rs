//! Byte offsets, field widths and the MSB-first bit packer of the frames.
//! The authoritative description is docs/frame-format.md.

/// Frame format version 1, carried in the high nibble of byte 0: every
/// status frame, and report frames of nodes in the field before v2.
pub const FORMAT_VERSION: u8 = 1;
/// Report frame format version 2 (full and reduced frames; status frames
/// stay version 1): line states, finding size and certainty, meshes, 8
/// bearings ([`super::v2`]). The node writes it.
pub const FORMAT_VERSION_2: u8 = 2;
/// Frame type (low nibble of byte 0): full report.
pub const TYPE_FULL: u8 = 0;
/// Frame type (low nibble of byte 0): reduced report (worst defect only).
pub const TYPE_REDUCED: u8 = 1;
/// Frame type (low nibble of byte 0): node status (configuration, downlinks, band).
pub const TYPE_STATUS: u8 = 2;

/// Bytes before the packed defect fields in a full frame.
pub const FULL_HEADER_LEN: usize = 18;
/// Trailing CRC bytes.
pub const CRC_LEN: usize = 2;
/// Bits per defect entry: score 6, amplitude 8, harmonics 4, detected 1.
pub const DEFECT_BITS: usize = 19;
/// Defects per bearing (BPFO, BPFI, FTF, BSF in that order).
pub const DEFECTS_PER_BEARING: usize = 4;
/// Most bearings one v2 full frame can carry (4-bit count field, limited to 8).
pub const MAX_BEARINGS: usize = 8;
// The frame format's limit is its own constant (a format does not change
// when a capacity elsewhere does), but it must equal a measuring point's
// capacity, so that every report fits one frame: checked at compile time.
const _: () = assert!(MAX_BEARINGS == dsp_core::config::MAX_BEARINGS);
/// Most bearings one v1 full frame can carry (3-bit count field, limited to 4).
pub const V1_MAX_BEARINGS: usize = 4;
/// Most gear meshes one v2 full frame can carry (3-bit count field, limited to 4).
pub const MAX_MESHES: usize = 4;
/// Length of a reduced frame.
pub const REDUCED_LEN: usize = 11;
/// Length of a status frame.
pub const STATUS_LEN: usize = 27;
/// Application payload limit of LoRaWAN EU868 DR0-DR2 (RP002 Regional Parameters).
pub const EU868_DR0_MAX_PAYLOAD: usize = 51;
/// Application payload limit of LoRaWAN EU868 DR3 (RP002-1.0.x, from memory).
pub const EU868_DR3_MAX_PAYLOAD: usize = 115;
/// Application payload limit of LoRaWAN EU868 DR4-DR7, repeater-compatible
/// value (RP002-1.0.x, from memory).
pub const EU868_DR4_MAX_PAYLOAD: usize = 222;

/// The slowest EU868 data rate whose payload limit carries `len` bytes
/// (`"DR0"` for DR0-DR2, `"DR3"`, `"DR4"` for DR4-DR7), `None` above 222.
///
/// ```
/// use wire::frame::layout::eu868_slowest_rate;
/// assert_eq!(eu868_slowest_rate(51), Some("DR0"));
/// assert_eq!(eu868_slowest_rate(93), Some("DR3"));
/// assert_eq!(eu868_slowest_rate(223), None);
/// ```
pub const fn eu868_slowest_rate(len: usize) -> Option<&'static str> {
    if len <= EU868_DR0_MAX_PAYLOAD {
        Some("DR0")
    } else if len <= EU868_DR3_MAX_PAYLOAD {
        Some("DR3")
    } else if len <= EU868_DR4_MAX_PAYLOAD {
        Some("DR4")
    } else {
        None
    }
}
/// Application payload limit of LoRaWAN US915 DR0 (RP002 Regional Parameters).
pub const US915_DR0_MAX_PAYLOAD: usize = 11;

/// Byte offset of the flags field (u16, big-endian).
pub const OFF_FLAGS: usize = 5;
/// Byte offset of the bearing-count / ISO-zone byte.
pub const OFF_COUNT_ZONE: usize = 7;

/// Length of a full frame carrying `bearings` bearings.
///
/// ```
/// use wire::frame::layout::full_frame_len;
/// assert_eq!(full_frame_len(3), 49);
/// ```
pub const fn full_frame_len(bearings: usize) -> usize {
    FULL_HEADER_LEN + (bearings * DEFECTS_PER_BEARING * DEFECT_BITS).div_ceil(8) + CRC_LEN
}

/// Writes fields MSB-first into a zeroed slice; bits past the end are dropped
/// (callers size the slice with [`full_frame_len`] first).
pub struct BitWriter<'a> {
    buf: &'a mut [u8],
    bit: usize,
}

impl<'a> BitWriter<'a> {
    /// Starts at bit 0 of `buf`, which must be zeroed.
    pub fn new(buf: &'a mut [u8]) -> Self {
        Self { buf, bit: 0 }
    }

    /// Appends the low `nbits` bits of `value`, most significant first.
    pub fn put(&mut self, value: u32, nbits: u32) {
        for i in (0..nbits).rev() {
            if (value >> i) & 1 == 1 {
                if let Some(byte) = self.buf.get_mut(self.bit / 8) {
                    *byte |= 0x80u8 >> (self.bit % 8);
                }
            }
            self.bit += 1;
        }
    }
}

/// Reads fields MSB-first; bits past the end read as zero (the decoder checks
/// the length before reading).
pub struct BitReader<'a> {
    buf: &'a [u8],
    bit: usize,
}

impl<'a> BitReader<'a> {
    /// Starts at bit 0 of `buf`.
    pub fn new(buf: &'a [u8]) -> Self {
        Self { buf, bit: 0 }
    }

    /// Takes the next `nbits` bits as an unsigned value.
    pub fn take(&mut self, nbits: u32) -> u32 {
        let mut v = 0u32;
        for _ in 0..nbits {
            let b = self
                .buf
                .get(self.bit / 8)
                .map_or(0, |byte| (byte >> (7 - self.bit % 8)) & 1);
            v = (v << 1) | u32::from(b);
            self.bit += 1;
        }
        v
    }

    /// Bits consumed so far.
    pub fn position(&self) -> usize {
        self.bit
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bits_round_trip() {
        let mut buf = [0u8; 4];
        let mut w = BitWriter::new(&mut buf);
        w.put(0b101, 3);
        w.put(0x3F, 6);
        w.put(1, 1);
        assert_eq!(buf[0], 0b1011_1111);
        assert_eq!(buf[1], 0b1100_0000);
        let mut r = BitReader::new(&buf);
        assert_eq!(r.take(3), 0b101);
        assert_eq!(r.take(6), 0x3F);
        assert_eq!(r.take(1), 1);
        assert_eq!(r.position(), 10);
    }

    #[test]
    fn sizes() {
        assert_eq!(full_frame_len(0), 20);
        assert_eq!(full_frame_len(1), 30);
        assert_eq!(full_frame_len(2), 39);
        assert_eq!(full_frame_len(3), 49);
        assert_eq!(full_frame_len(4), 58);
    }
}
