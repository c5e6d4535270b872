//! The overall-level frame (kind byte `0x4F`) of the firmware's minimal
//! core (`firmware::overall_core`), which lets a board image run the whole
//! cycle before the envelope pipeline is adapted and stays as a fallback.
//!
//! Layout (12 bytes, little-endian, docs/frame-format.md):
//!
//! ```text
//!  0  u8   0x4F (frame kind; no version nibble, see below)
//!  1  u8   the node's quality flags ([`flag_byte`] of `dsp_core::QualityFlags`:
//!          0 tach missing, 1 clipping, 2 sensor fault, 3 processing overrun,
//!          4 low battery; bits 7..5 zero)
//!  2  u16  RMS about the mean, 0.1 ADC counts
//!  4  u16  peak about the mean, ADC counts
//!  6  u16  crest factor x 1000
//!  8  u32  tach shaft speed, 0.1 rpm (0 without two tach edges)
//! ```
//!
//! No CRC and no version: the frame predates the versioned report frames and
//! is only sent by board images running the overall core. Its first byte
//! (`0x4F`: high nibble 4) never collides with a report frame's version
//! nibble 1. Every field saturates at its maximum.

use dsp_core::QualityFlags;

/// Byte 1 of the frame: the node's conditions among `q`, in this frame's own
/// fixed bit order (0 tach missing, 1 clipping, 2 sensor fault, 3 processing
/// overrun, 4 low battery). Other flags have no bit here.
pub fn flag_byte(q: QualityFlags) -> u8 {
    let mut b = 0u8;
    for (bit, f) in [
        (0x01, QualityFlags::TACH_MISSING),
        (0x02, QualityFlags::CLIPPING),
        (0x04, QualityFlags::SENSOR_FAULT),
        (0x08, QualityFlags::OVERRUN),
        (0x10, QualityFlags::LOW_BATTERY),
    ] {
        if q.contains(f) {
            b |= bit;
        }
    }
    b
}

/// Frame kind byte of an overall-only frame.
pub const FRAME_KIND: u8 = 0x4F;
/// Encoded frame length.
pub const FRAME_LEN: usize = 12;

/// The fields of an overall frame, in their coded units.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct OverallFrame {
    /// The node's quality flag bits (byte 1, see [`flag_byte`]).
    pub flags: u8,
    /// RMS about the mean, 0.1 counts.
    pub rms_decicounts: u16,
    /// Peak about the mean, counts.
    pub peak_counts: u16,
    /// Crest factor x 1000.
    pub crest_milli: u16,
    /// Tach shaft speed, 0.1 rpm.
    pub speed_decirpm: u32,
}

/// Why an overall frame could not be written or read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum OverallFrameError {
    /// Buffer (to write) or frame (read) shorter than [`FRAME_LEN`].
    Truncated {
        /// Bytes available.
        got: usize,
    },
    /// Read: more bytes than [`FRAME_LEN`].
    BadLength {
        /// Bytes received.
        got: usize,
    },
    /// Read: first byte is not [`FRAME_KIND`].
    NotOverall(u8),
}

impl core::fmt::Display for OverallFrameError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Truncated { got } => {
                write!(f, "overall frame: {got} bytes, it needs {FRAME_LEN}")
            }
            Self::BadLength { got } => {
                write!(f, "overall frame: {got} bytes, it has {FRAME_LEN}")
            }
            Self::NotOverall(b) => write!(f, "kind byte 0x{b:02X}, not an overall frame (0x4F)"),
        }
    }
}

impl core::error::Error for OverallFrameError {}

impl OverallFrame {
    /// Writes the 12-byte frame into `out`, returning its length; bytes past
    /// the frame are left untouched.
    pub fn emit(&self, out: &mut [u8]) -> Result<usize, OverallFrameError> {
        let got = out.len();
        let out = out
            .get_mut(..FRAME_LEN)
            .ok_or(OverallFrameError::Truncated { got })?;
        let rms = self.rms_decicounts.to_le_bytes();
        let peak = self.peak_counts.to_le_bytes();
        let crest = self.crest_milli.to_le_bytes();
        let speed = self.speed_decirpm.to_le_bytes();
        let bytes = [
            FRAME_KIND, self.flags, rms[0], rms[1], peak[0], peak[1], crest[0], crest[1], speed[0],
            speed[1], speed[2], speed[3],
        ];
        out.copy_from_slice(&bytes);
        Ok(FRAME_LEN)
    }

    /// Reads a frame [`OverallFrame::emit`] wrote: exactly [`FRAME_LEN`]
    /// bytes starting with [`FRAME_KIND`].
    pub fn parse(bytes: &[u8]) -> Result<Self, OverallFrameError> {
        let got = bytes.len();
        let b: &[u8; FRAME_LEN] = match bytes.try_into() {
            Ok(b) => b,
            Err(_) if got < FRAME_LEN => return Err(OverallFrameError::Truncated { got }),
            Err(_) => return Err(OverallFrameError::BadLength { got }),
        };
        let [kind, flags, r0, r1, p0, p1, c0, c1, s0, s1, s2, s3] = *b;
        if kind != FRAME_KIND {
            return Err(OverallFrameError::NotOverall(kind));
        }
        Ok(Self {
            flags,
            rms_decicounts: u16::from_le_bytes([r0, r1]),
            peak_counts: u16::from_le_bytes([p0, p1]),
            crest_milli: u16::from_le_bytes([c0, c1]),
            speed_decirpm: u32::from_le_bytes([s0, s1, s2, s3]),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn emit_parse_round_trip_and_layout() {
        let f = OverallFrame {
            flags: 0x05,
            rms_decicounts: 0x0102,
            peak_counts: 0x0304,
            crest_milli: 0x0506,
            speed_decirpm: 0x0708_090A,
        };
        let mut buf = [0xAAu8; 13];
        assert_eq!(f.emit(&mut buf), Ok(FRAME_LEN));
        assert_eq!(
            buf,
            [0x4F, 0x05, 0x02, 0x01, 0x04, 0x03, 0x06, 0x05, 0x0A, 0x09, 0x08, 0x07, 0xAA]
        );
        assert_eq!(OverallFrame::parse(&buf[..FRAME_LEN]), Ok(f));
    }

    #[test]
    fn parse_refuses_damage() {
        let mut buf = [0u8; FRAME_LEN];
        OverallFrame::default().emit(&mut buf).unwrap();
        assert_eq!(
            OverallFrame::parse(&buf[..11]),
            Err(OverallFrameError::Truncated { got: 11 })
        );
        assert_eq!(
            OverallFrame::parse(&[0x4F; 13]),
            Err(OverallFrameError::BadLength { got: 13 })
        );
        buf[0] = 0x10;
        assert_eq!(
            OverallFrame::parse(&buf),
            Err(OverallFrameError::NotOverall(0x10))
        );
        assert_eq!(
            OverallFrame::default().emit(&mut [0u8; 4]),
            Err(OverallFrameError::Truncated { got: 4 })
        );
    }
}
