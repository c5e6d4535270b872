//! RIFF/WAVE reading and writing (own parser, std only).
//!
//! Reads PCM int16, int24, int32 and IEEE float32 samples, plain or in a
//! `WAVE_FORMAT_EXTENSIBLE` header with one of those sub-formats, any channel
//! count from 1 to [`MAX_CHANNELS`]. Samples come back per channel as `f32`
//! (floats as stored, integers scaled so full scale is [-1, 1)); int16 files
//! also give the raw counts so the node's i16 ADC path can be fed exactly.
//!
//! Robustness contract: bad input gives a [`WavError`] naming the problem,
//! never a panic, and nothing is allocated from a header size without
//! checking it against the bytes really present.
//!
//! **Truncation policy.** A `data` chunk that claims more bytes than the file
//! holds, or that ends in a partial frame, is an error
//! ([`WavError::Truncated`], [`WavError::PartialFrame`]) by default, so data
//! loss is never silent. With [`ReadOptions::accept_truncated`] the whole
//! frames that exist are returned and [`WavData::truncation`] records what
//! was missing; the caller decides. Non-finite float samples are returned as
//! they are and counted in [`WavData::non_finite`].
//!
//! In parts: [`read`] (the parser and [`WavError`]) and [`write`] (the
//! encoders and [`WavWriteError`]); the types both share live here.
//!
//! The reader stays hand-written rather than on the `hound` crate: the
//! errors name the chunk and the byte counts at fault, sizes are checked
//! against the bytes present before anything is allocated, and a short
//! `data` chunk may be accepted with what was lost recorded
//! ([`ReadOptions::accept_truncated`]). Those checks are the header walk
//! itself, so with hound they would all stay and only the sample loop
//! would move.

use std::fmt;

pub mod read;
pub mod write;

pub use read::{parse_wav, read_wav, WavError};
pub use write::{
    encode_wav_f32, encode_wav_i16, f32_to_i16_count, write_wav_f32, write_wav_i16, WavWriteError,
};

/// Largest channel count accepted; more is treated as a corrupt header.
pub const MAX_CHANNELS: u16 = 64;
/// Largest file read, in bytes (records are tens of MB; this stops a
/// mistaken multi-GB read).
pub const MAX_FILE_BYTES: u64 = 1 << 30;

const FORMAT_PCM: u16 = 0x0001;
const FORMAT_IEEE_FLOAT: u16 = 0x0003;
const FORMAT_EXTENSIBLE: u16 = 0xFFFE;
/// Tail shared by the KSDATAFORMAT_SUBTYPE_PCM / _IEEE_FLOAT GUIDs (bytes 2..16
/// as stored in the file; Microsoft mmreg.h / ksmedia.h).
const KS_GUID_TAIL: [u8; 14] = [
    0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71,
];

/// Sample encoding of a WAV file's `data` chunk.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SampleFormat {
    /// Signed 16-bit little-endian integers.
    Int16,
    /// Signed 24-bit little-endian integers (3 bytes per sample).
    Int24,
    /// Signed 32-bit little-endian integers.
    Int32,
    /// IEEE-754 32-bit floats.
    Float32,
}

impl SampleFormat {
    /// Bytes one sample occupies in the file.
    pub fn bytes(self) -> usize {
        match self {
            SampleFormat::Int16 => 2,
            SampleFormat::Int24 => 3,
            SampleFormat::Int32 | SampleFormat::Float32 => 4,
        }
    }
}

impl fmt::Display for SampleFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            SampleFormat::Int16 => "int16",
            SampleFormat::Int24 => "int24",
            SampleFormat::Int32 => "int32",
            SampleFormat::Float32 => "float32",
        })
    }
}

/// What the `fmt ` chunk says.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct WavInfo {
    /// Frames per second.
    pub sample_rate: u32,
    /// Channel count (1..=[`MAX_CHANNELS`]).
    pub channels: u16,
    /// Sample encoding.
    pub format: SampleFormat,
    /// True if the header was `WAVE_FORMAT_EXTENSIBLE`.
    pub extensible: bool,
}

/// What was missing from a truncated `data` chunk (only with
/// [`ReadOptions::accept_truncated`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Truncation {
    /// Bytes the `data` chunk header declared.
    pub declared_bytes: u64,
    /// Bytes of it actually present in the file.
    pub present_bytes: u64,
    /// Trailing bytes dropped because they did not make a whole frame.
    pub partial_frame_bytes: usize,
}

/// A decoded WAV file.
#[derive(Debug, Clone, PartialEq)]
pub struct WavData {
    /// Header facts.
    pub info: WavInfo,
    /// One vector per channel, all the same length (frames).
    pub channels: Vec<Vec<f32>>,
    /// Raw counts per channel, for int16 files only.
    pub raw_i16: Option<Vec<Vec<i16>>>,
    /// Number of NaN or infinite samples (float files only); returned as is.
    pub non_finite: usize,
    /// Set when the data chunk was short and truncation was accepted.
    pub truncation: Option<Truncation>,
}

impl WavData {
    /// Frames (samples per channel).
    pub fn frames(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }

    /// Duration in seconds.
    pub fn duration_s(&self) -> f64 {
        if self.info.sample_rate == 0 {
            return 0.0;
        }
        self.frames() as f64 / f64::from(self.info.sample_rate)
    }
}

/// Reader options. The default is strict.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
#[non_exhaustive]
pub struct ReadOptions {
    /// Return the whole frames present when the `data` chunk is short or
    /// ends mid-frame, flagged in [`WavData::truncation`], instead of failing.
    pub accept_truncated: bool,
}

impl ReadOptions {
    /// Strict reading (the default): truncation is an error.
    pub fn strict() -> Self {
        Self::default()
    }

    /// Lenient reading: truncation is flagged, not an error.
    pub fn accept_truncated() -> Self {
        Self {
            accept_truncated: true,
        }
    }
}
