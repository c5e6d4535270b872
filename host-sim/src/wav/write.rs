//! Writing: PCM int16 and IEEE float32 WAV files.

use std::fmt;
use std::path::Path;

use super::{FORMAT_IEEE_FLOAT, FORMAT_PCM, MAX_CHANNELS};

/// Why a WAV file could not be written.
#[derive(Debug)]
pub enum WavWriteError {
    /// No channels given.
    NoChannels,
    /// More than [`MAX_CHANNELS`] channels.
    TooManyChannels {
        /// Channel count given.
        channels: usize,
    },
    /// Channels of different lengths.
    RaggedChannels {
        /// Index of the first channel whose length differs from channel 0.
        channel: usize,
        /// Its length.
        len: usize,
        /// Channel 0's length.
        expected: usize,
    },
    /// Sample rate of zero.
    ZeroSampleRate,
    /// The data would not fit a 32-bit RIFF size.
    TooLong {
        /// Data bytes needed.
        bytes: u64,
    },
    /// A NaN or infinite sample (refused so our tools never emit bad files).
    NonFinite {
        /// Channel index.
        channel: usize,
        /// Frame index.
        frame: usize,
    },
    /// Writing the file failed.
    Io(std::io::Error),
}

impl fmt::Display for WavWriteError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WavWriteError::NoChannels => write!(f, "no channels to write"),
            WavWriteError::TooManyChannels { channels } => {
                write!(f, "{channels} channels, more than {MAX_CHANNELS}")
            }
            WavWriteError::RaggedChannels {
                channel,
                len,
                expected,
            } => write!(
                f,
                "channel {channel} has {len} samples but channel 0 has {expected}"
            ),
            WavWriteError::ZeroSampleRate => write!(f, "sample rate of 0 Hz"),
            WavWriteError::TooLong { bytes } => {
                write!(f, "{bytes} data bytes do not fit a WAV file (4 GiB limit)")
            }
            WavWriteError::NonFinite { channel, frame } => {
                write!(f, "non-finite sample at channel {channel}, frame {frame}")
            }
            WavWriteError::Io(e) => write!(f, "cannot write WAV file: {e}"),
        }
    }
}

impl std::error::Error for WavWriteError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            WavWriteError::Io(e) => Some(e),
            _ => None,
        }
    }
}

impl From<std::io::Error> for WavWriteError {
    fn from(e: std::io::Error) -> Self {
        WavWriteError::Io(e)
    }
}

fn check_channels<T>(sample_rate: u32, chans: &[&[T]]) -> Result<usize, WavWriteError> {
    if sample_rate == 0 {
        return Err(WavWriteError::ZeroSampleRate);
    }
    let first = chans.first().ok_or(WavWriteError::NoChannels)?;
    if chans.len() > usize::from(MAX_CHANNELS) {
        return Err(WavWriteError::TooManyChannels {
            channels: chans.len(),
        });
    }
    let n = first.len();
    if let Some((channel, c)) = chans.iter().enumerate().find(|(_, c)| c.len() != n) {
        return Err(WavWriteError::RaggedChannels {
            channel,
            len: c.len(),
            expected: n,
        });
    }
    Ok(n)
}

/// Builds a canonical 44-byte header (PCM or IEEE float, `fmt ` size 16),
/// the layout of the original RIFF spec. Returns the buffer with room
/// reserved for the data.
fn header(
    tag: u16,
    sample_rate: u32,
    nch: usize,
    sample_bytes: usize,
    frames: usize,
) -> Result<Vec<u8>, WavWriteError> {
    let data_bytes = (frames as u64) * (nch as u64) * (sample_bytes as u64);
    let too_long = WavWriteError::TooLong { bytes: data_bytes };
    let data_u32 = u32::try_from(data_bytes)
        .ok()
        .filter(|d| *d <= u32::MAX - 36)
        .ok_or(too_long)?;
    let nch16 = u16::try_from(nch).map_err(|_| WavWriteError::TooManyChannels { channels: nch })?;
    let block = u16::try_from(nch * sample_bytes)
        .map_err(|_| WavWriteError::TooManyChannels { channels: nch })?;
    let bits = u16::try_from(sample_bytes * 8).unwrap_or(0);
    let mut v = Vec::with_capacity(44 + usize::try_from(data_u32).unwrap_or(0));
    v.extend_from_slice(b"RIFF");
    v.extend_from_slice(&(36 + data_u32).to_le_bytes());
    v.extend_from_slice(b"WAVEfmt ");
    v.extend_from_slice(&16u32.to_le_bytes());
    v.extend_from_slice(&tag.to_le_bytes());
    v.extend_from_slice(&nch16.to_le_bytes());
    v.extend_from_slice(&sample_rate.to_le_bytes());
    v.extend_from_slice(&(sample_rate.saturating_mul(u32::from(block))).to_le_bytes());
    v.extend_from_slice(&block.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v.extend_from_slice(b"data");
    v.extend_from_slice(&data_u32.to_le_bytes());
    Ok(v)
}

/// Encodes channels (equal lengths) as an IEEE float32 WAV in memory.
/// Non-finite samples are refused.
pub fn encode_wav_f32(sample_rate: u32, chans: &[&[f32]]) -> Result<Vec<u8>, WavWriteError> {
    let frames = check_channels(sample_rate, chans)?;
    for (channel, c) in chans.iter().enumerate() {
        if let Some(frame) = c.iter().position(|x| !x.is_finite()) {
            return Err(WavWriteError::NonFinite { channel, frame });
        }
    }
    let mut v = header(FORMAT_IEEE_FLOAT, sample_rate, chans.len(), 4, frames)?;
    for i in 0..frames {
        for c in chans {
            if let Some(x) = c.get(i) {
                v.extend_from_slice(&x.to_le_bytes());
            }
        }
    }
    Ok(v)
}

/// Encodes channels (equal lengths) of raw counts as a PCM int16 WAV in memory.
pub fn encode_wav_i16(sample_rate: u32, chans: &[&[i16]]) -> Result<Vec<u8>, WavWriteError> {
    let frames = check_channels(sample_rate, chans)?;
    let mut v = header(FORMAT_PCM, sample_rate, chans.len(), 2, frames)?;
    for i in 0..frames {
        for c in chans {
            if let Some(x) = c.get(i) {
                v.extend_from_slice(&x.to_le_bytes());
            }
        }
    }
    Ok(v)
}

/// Writes an IEEE float32 WAV file (one slice per channel, equal lengths).
pub fn write_wav_f32(
    path: impl AsRef<Path>,
    sample_rate: u32,
    chans: &[&[f32]],
) -> Result<(), WavWriteError> {
    let v = encode_wav_f32(sample_rate, chans)?;
    std::fs::write(path, v)?;
    Ok(())
}

/// Writes a PCM int16 WAV file (one slice of counts per channel, equal lengths).
pub fn write_wav_i16(
    path: impl AsRef<Path>,
    sample_rate: u32,
    chans: &[&[i16]],
) -> Result<(), WavWriteError> {
    let v = encode_wav_i16(sample_rate, chans)?;
    std::fs::write(path, v)?;
    Ok(())
}

/// Quantises a full-scale float sample (1.0 = full scale) to an int16 count,
/// rounding to nearest and saturating; NaN gives 0.
pub fn f32_to_i16_count(x: f32) -> i16 {
    let v = (x * 32_768.0).round().clamp(-32_768.0, 32_767.0);
    // In range after the clamp; NaN maps to 0 (Rust `as` semantics).
    #[allow(clippy::cast_possible_truncation)]
    let c = v as i16;
    c
}
