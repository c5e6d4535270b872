//! Reading: the RIFF/WAVE parser behind [`read_wav`] and [`parse_wav`]
//! (see the module doc of [`crate::wav`] for the truncation policy).

use std::fmt;
use std::path::Path;

use super::{
    ReadOptions, SampleFormat, Truncation, WavData, WavInfo, FORMAT_EXTENSIBLE, FORMAT_IEEE_FLOAT,
    FORMAT_PCM, KS_GUID_TAIL, MAX_CHANNELS, MAX_FILE_BYTES,
};

/// Why a WAV file could not be read.
#[derive(Debug)]
pub enum WavError {
    /// The file could not be opened or read.
    Io(std::io::Error),
    /// The file has zero bytes.
    Empty,
    /// The file is larger than [`MAX_FILE_BYTES`].
    TooLarge {
        /// File length in bytes.
        bytes: u64,
    },
    /// Shorter than the 12-byte RIFF/WAVE header.
    TooShort {
        /// File length in bytes.
        bytes: usize,
    },
    /// The first four bytes are not `RIFF` (e.g. `RIFX`/`RF64` or not a WAV).
    NotRiff {
        /// The four bytes found.
        found: [u8; 4],
    },
    /// The RIFF form type is not `WAVE`.
    NotWave {
        /// The four bytes found.
        found: [u8; 4],
    },
    /// No `fmt ` chunk before the end of the file (or before `data`).
    NoFmtChunk,
    /// No `data` chunk.
    NoDataChunk,
    /// The `fmt ` chunk is shorter than its format requires.
    FmtTooShort {
        /// Bytes present.
        bytes: usize,
    },
    /// A format tag other than PCM, IEEE float or extensible.
    UnsupportedFormat {
        /// The format tag (for extensible files, the sub-format's tag).
        tag: u16,
    },
    /// A bit depth this reader does not decode for the format.
    UnsupportedBitDepth {
        /// Format tag.
        tag: u16,
        /// Bits per sample.
        bits: u16,
    },
    /// The header says zero channels.
    ZeroChannels,
    /// More channels than [`MAX_CHANNELS`].
    TooManyChannels {
        /// The header's channel count.
        channels: u16,
    },
    /// The header says a sample rate of zero.
    ZeroSampleRate,
    /// `block_align` disagrees with channels x bytes per sample.
    BadBlockAlign {
        /// The header's block_align.
        block_align: u16,
        /// What channels x bytes per sample give.
        expected: usize,
    },
    /// The `data` chunk declares more bytes than the file holds.
    Truncated {
        /// Bytes declared.
        declared_bytes: u64,
        /// Bytes present.
        present_bytes: u64,
    },
    /// The `data` chunk ends in a partial frame.
    PartialFrame {
        /// Bytes left over after the last whole frame.
        extra_bytes: usize,
        /// Bytes per frame.
        frame_bytes: usize,
    },
    /// A chunk other than `data` runs past the end of the file before the
    /// `fmt ` and `data` chunks were both found.
    ChunkOverrun {
        /// Chunk id.
        id: [u8; 4],
        /// Declared size.
        declared_bytes: u64,
        /// Bytes present.
        present_bytes: u64,
    },
}

fn show_id(id: &[u8; 4]) -> String {
    id.iter()
        .map(|&b| {
            if b.is_ascii_graphic() || b == b' ' {
                char::from(b).to_string()
            } else {
                format!("\\x{b:02x}")
            }
        })
        .collect()
}

impl fmt::Display for WavError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WavError::Io(e) => write!(f, "cannot read WAV file: {e}"),
            WavError::Empty => write!(f, "WAV file is empty (0 bytes)"),
            WavError::TooLarge { bytes } => {
                write!(f, "WAV file is {bytes} bytes, over the {MAX_FILE_BYTES}-byte limit")
            }
            WavError::TooShort { bytes } => {
                write!(f, "WAV file is only {bytes} bytes, shorter than a RIFF/WAVE header")
            }
            WavError::NotRiff { found } => {
                write!(f, "not a RIFF file (starts with \"{}\")", show_id(found))
            }
            WavError::NotWave { found } => {
                write!(f, "RIFF form type is \"{}\", not WAVE", show_id(found))
            }
            WavError::NoFmtChunk => write!(f, "no 'fmt ' chunk before the sample data"),
            WavError::NoDataChunk => write!(f, "no 'data' chunk"),
            WavError::FmtTooShort { bytes } => write!(f, "'fmt ' chunk too short ({bytes} bytes)"),
            WavError::UnsupportedFormat { tag } => write!(
                f,
                "unsupported WAV format tag 0x{tag:04x} (supported: PCM, IEEE float, extensible)"
            ),
            WavError::UnsupportedBitDepth { tag, bits } => write!(
                f,
                "unsupported bit depth {bits} for format tag 0x{tag:04x} (supported: PCM 16/24/32, float 32)"
            ),
            WavError::ZeroChannels => write!(f, "header says 0 channels"),
            WavError::TooManyChannels { channels } => write!(
                f,
                "header says {channels} channels (more than {MAX_CHANNELS}; corrupt header?)"
            ),
            WavError::ZeroSampleRate => write!(f, "header says a sample rate of 0 Hz"),
            WavError::BadBlockAlign {
                block_align,
                expected,
            } => write!(
                f,
                "block_align is {block_align}, expected {expected} (channels x bytes per sample)"
            ),
            WavError::Truncated {
                declared_bytes,
                present_bytes,
            } => write!(
                f,
                "truncated: data chunk declares {declared_bytes} bytes but only {present_bytes} are present"
            ),
            WavError::PartialFrame {
                extra_bytes,
                frame_bytes,
            } => write!(
                f,
                "truncated final frame: {extra_bytes} bytes left over ({frame_bytes} bytes per frame)"
            ),
            WavError::ChunkOverrun {
                id,
                declared_bytes,
                present_bytes,
            } => write!(
                f,
                "chunk \"{}\" declares {declared_bytes} bytes but only {present_bytes} remain in the file",
                show_id(id)
            ),
        }
    }
}

impl std::error::Error for WavError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            WavError::Io(e) => Some(e),
            _ => None,
        }
    }
}

impl From<std::io::Error> for WavError {
    fn from(e: std::io::Error) -> Self {
        WavError::Io(e)
    }
}

/// Reads a WAV file from disk.
///
/// The file length is checked against [`MAX_FILE_BYTES`] before reading.
pub fn read_wav(path: impl AsRef<Path>, opts: ReadOptions) -> Result<WavData, WavError> {
    let path = path.as_ref();
    let len = std::fs::metadata(path)?.len();
    if len > MAX_FILE_BYTES {
        return Err(WavError::TooLarge { bytes: len });
    }
    let bytes = std::fs::read(path)?;
    parse_wav(&bytes, opts)
}

fn u16_at(b: &[u8], at: usize) -> Option<u16> {
    let s = b.get(at..at.checked_add(2)?)?;
    let mut a = [0u8; 2];
    a.copy_from_slice(s);
    Some(u16::from_le_bytes(a))
}

fn u32_at(b: &[u8], at: usize) -> Option<u32> {
    let s = b.get(at..at.checked_add(4)?)?;
    let mut a = [0u8; 4];
    a.copy_from_slice(s);
    Some(u32::from_le_bytes(a))
}

fn id_at(b: &[u8], at: usize) -> Option<[u8; 4]> {
    let s = b.get(at..at.checked_add(4)?)?;
    let mut a = [0u8; 4];
    a.copy_from_slice(s);
    Some(a)
}

/// Parses the `fmt ` chunk body.
fn parse_fmt(body: &[u8]) -> Result<WavInfo, WavError> {
    let short = || WavError::FmtTooShort { bytes: body.len() };
    let tag = u16_at(body, 0).ok_or_else(short)?;
    let channels = u16_at(body, 2).ok_or_else(short)?;
    let sample_rate = u32_at(body, 4).ok_or_else(short)?;
    let block_align = u16_at(body, 12).ok_or_else(short)?;
    let bits = u16_at(body, 14).ok_or_else(short)?;

    let (eff_tag, extensible) = if tag == FORMAT_EXTENSIBLE {
        // cbSize(2) validBits(2) channelMask(4) subFormat GUID(16) after 16 bytes.
        let guid = body.get(24..40).ok_or_else(short)?;
        let sub = u16_at(guid, 0).ok_or_else(short)?;
        if guid.get(2..) != Some(&KS_GUID_TAIL[..]) {
            return Err(WavError::UnsupportedFormat { tag: sub });
        }
        (sub, true)
    } else {
        (tag, false)
    };

    let format = match (eff_tag, bits) {
        (FORMAT_PCM, 16) => SampleFormat::Int16,
        (FORMAT_PCM, 24) => SampleFormat::Int24,
        (FORMAT_PCM, 32) => SampleFormat::Int32,
        (FORMAT_IEEE_FLOAT, 32) => SampleFormat::Float32,
        (FORMAT_PCM | FORMAT_IEEE_FLOAT, _) => {
            return Err(WavError::UnsupportedBitDepth { tag: eff_tag, bits })
        }
        _ => return Err(WavError::UnsupportedFormat { tag: eff_tag }),
    };
    if channels == 0 {
        return Err(WavError::ZeroChannels);
    }
    if channels > MAX_CHANNELS {
        return Err(WavError::TooManyChannels { channels });
    }
    if sample_rate == 0 {
        return Err(WavError::ZeroSampleRate);
    }
    let expected = usize::from(channels) * format.bytes();
    if usize::from(block_align) != expected {
        return Err(WavError::BadBlockAlign {
            block_align,
            expected,
        });
    }
    Ok(WavInfo {
        sample_rate,
        channels,
        format,
        extensible,
    })
}

/// Parses a WAV file held in memory.
///
/// ```
/// use host_sim::wav::{encode_wav_f32, parse_wav, ReadOptions};
/// let bytes = encode_wav_f32(8000, &[&[0.5f32, -0.25][..]]).unwrap();
/// let wav = parse_wav(&bytes, ReadOptions::strict()).unwrap();
/// assert_eq!(wav.channels, vec![vec![0.5, -0.25]]);
/// ```
pub fn parse_wav(bytes: &[u8], opts: ReadOptions) -> Result<WavData, WavError> {
    if bytes.is_empty() {
        return Err(WavError::Empty);
    }
    let riff = id_at(bytes, 0).ok_or(WavError::TooShort { bytes: bytes.len() })?;
    if &riff != b"RIFF" {
        return Err(WavError::NotRiff { found: riff });
    }
    let wave = id_at(bytes, 8).ok_or(WavError::TooShort { bytes: bytes.len() })?;
    if &wave != b"WAVE" {
        return Err(WavError::NotWave { found: wave });
    }
    // The RIFF size field is ignored: many writers get it wrong, and the real
    // length of the buffer is what bounds every read below.

    let mut info: Option<WavInfo> = None;
    let mut pos: usize = 12;
    while let (Some(id), Some(size)) = (id_at(bytes, pos), u32_at(bytes, pos.saturating_add(4))) {
        let body_start = pos.saturating_add(8);
        let present = bytes.len().saturating_sub(body_start);
        let declared = usize::try_from(size).unwrap_or(usize::MAX);
        if &id == b"data" {
            let info = info.ok_or(WavError::NoFmtChunk)?;
            let body = bytes
                .get(body_start..body_start + declared.min(present))
                .unwrap_or(&[]);
            let short = declared > present;
            if short && !opts.accept_truncated {
                return Err(WavError::Truncated {
                    declared_bytes: u64::from(size),
                    present_bytes: present as u64,
                });
            }
            return decode_data(info, body, short.then_some(u64::from(size)), opts);
        }
        if declared > present {
            // A non-data chunk overruns the file: nothing after it can be found.
            return Err(WavError::ChunkOverrun {
                id,
                declared_bytes: u64::from(size),
                present_bytes: present as u64,
            });
        }
        if &id == b"fmt " {
            let body = bytes.get(body_start..body_start + declared).unwrap_or(&[]);
            info = Some(parse_fmt(body)?);
        }
        // Chunks are padded to even length (RIFF spec).
        pos = body_start
            .saturating_add(declared)
            .saturating_add(declared & 1);
    }
    if info.is_none() {
        Err(WavError::NoFmtChunk)
    } else {
        Err(WavError::NoDataChunk)
    }
}

/// One channel of interleaved frames, converted by `conv` (a loop per
/// format, so the compiler sees straight-line conversion code).
fn decode_channel(
    body: &[u8],
    frame_bytes: usize,
    at: usize,
    sb: usize,
    conv: impl Fn(&[u8]) -> f32,
) -> Vec<f32> {
    body.chunks_exact(frame_bytes)
        .map(|f| f.get(at..at + sb).map_or(0.0, &conv))
        .collect()
}
/// Little-endian 24-bit integer sample to full scale 1.
fn int24(s: &[u8]) -> f32 {
    match *s {
        // Sign-extend by placing the 3 bytes in the top of an i32.
        [a, b, c] => (i32::from_le_bytes([0, a, b, c]) >> 8) as f32 / 8_388_608.0,
        _ => 0.0,
    }
}
/// Little-endian 32-bit integer sample to full scale 1.
fn int32(s: &[u8]) -> f32 {
    match *s {
        [a, b, c, d] => i32::from_le_bytes([a, b, c, d]) as f32 / 2_147_483_648.0,
        _ => 0.0,
    }
}
/// Little-endian 32-bit float sample.
fn float32(s: &[u8]) -> f32 {
    match *s {
        [a, b, c, d] => f32::from_le_bytes([a, b, c, d]),
        _ => 0.0,
    }
}

fn decode_data(
    info: WavInfo,
    body: &[u8],
    declared_if_short: Option<u64>,
    opts: ReadOptions,
) -> Result<WavData, WavError> {
    let nch = usize::from(info.channels);
    let sb = info.format.bytes();
    let frame_bytes = nch * sb;
    let extra = body.len() % frame_bytes;
    if extra != 0 && !opts.accept_truncated {
        return Err(WavError::PartialFrame {
            extra_bytes: extra,
            frame_bytes,
        });
    }
    let frames = body.len() / frame_bytes;
    let truncation = (declared_if_short.is_some() || extra != 0).then(|| Truncation {
        declared_bytes: declared_if_short.unwrap_or(body.len() as u64),
        present_bytes: body.len() as u64,
        partial_frame_bytes: extra,
    });

    // Channel by channel, the format chosen once per channel (a tight loop
    // per format rather than a match per sample); capacities come from the
    // bytes present, never from a header field.
    let frames_of = || body.chunks_exact(frame_bytes);
    let (channels, raw): (Vec<Vec<f32>>, Option<Vec<Vec<i16>>>) = match info.format {
        SampleFormat::Int16 => {
            let raw: Vec<Vec<i16>> = (0..nch)
                .map(|ci| {
                    let at = ci * sb;
                    let mut out = Vec::with_capacity(frames);
                    out.extend(frames_of().map(|f| match f.get(at..at + 2) {
                        Some(&[a, b]) => i16::from_le_bytes([a, b]),
                        _ => 0,
                    }));
                    out
                })
                .collect();
            let chans = raw
                .iter()
                .map(|c| c.iter().map(|&x| f32::from(x) / 32_768.0).collect())
                .collect();
            (chans, Some(raw))
        }
        SampleFormat::Int24 => {
            let chans = (0..nch)
                .map(|ci| decode_channel(body, frame_bytes, ci * sb, sb, int24))
                .collect();
            (chans, None)
        }
        SampleFormat::Int32 => {
            let chans = (0..nch)
                .map(|ci| decode_channel(body, frame_bytes, ci * sb, sb, int32))
                .collect();
            (chans, None)
        }
        SampleFormat::Float32 => {
            let chans = (0..nch)
                .map(|ci| decode_channel(body, frame_bytes, ci * sb, sb, float32))
                .collect();
            (chans, None)
        }
    };
    let non_finite = channels
        .iter()
        .map(|c| c.iter().filter(|x| !x.is_finite()).count())
        .sum();
    Ok(WavData {
        info,
        channels,
        raw_i16: raw,
        non_finite,
        truncation,
    })
}
