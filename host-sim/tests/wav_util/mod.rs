//! Hand-built WAV files for the reader tests, laid out per the RIFF/WAVE
//! spec (Microsoft "Multimedia Programming Interface and Data
//! Specifications 1.0", 1991; WAVE_FORMAT_EXTENSIBLE per mmreg.h/ksmedia.h).
#![allow(
    dead_code,
    clippy::cast_possible_truncation,
    clippy::indexing_slicing,
    clippy::unwrap_used
)]

/// `fmt ` body for a plain PCM (tag 1) or float (tag 3) header.
pub fn fmt_plain(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let block = channels * (bits / 8);
    let mut v = Vec::new();
    v.extend_from_slice(&tag.to_le_bytes());
    v.extend_from_slice(&channels.to_le_bytes());
    v.extend_from_slice(&rate.to_le_bytes());
    v.extend_from_slice(&(rate * u32::from(block)).to_le_bytes());
    v.extend_from_slice(&block.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v
}

/// `fmt ` body for WAVE_FORMAT_EXTENSIBLE with sub-format tag `sub`.
pub fn fmt_extensible(sub: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let mut v = fmt_plain(0xFFFE, channels, rate, bits);
    v.extend_from_slice(&22u16.to_le_bytes()); // cbSize
    v.extend_from_slice(&bits.to_le_bytes()); // valid bits
    v.extend_from_slice(&0u32.to_le_bytes()); // channel mask
    v.extend_from_slice(&sub.to_le_bytes());
    // KSDATAFORMAT_SUBTYPE_* GUID tail: 0000-0010-8000-00AA00389B71.
    v.extend_from_slice(&[
        0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71,
    ]);
    v
}

/// A chunk: id, size (as given), body, pad byte if the body is odd.
pub fn chunk(id: &[u8; 4], declared: u32, body: &[u8]) -> Vec<u8> {
    let mut v = Vec::new();
    v.extend_from_slice(id);
    v.extend_from_slice(&declared.to_le_bytes());
    v.extend_from_slice(body);
    if body.len() % 2 == 1 {
        v.push(0);
    }
    v
}

/// RIFF/WAVE wrapper around the given chunks.
pub fn riff(chunks: &[Vec<u8>]) -> Vec<u8> {
    let body: Vec<u8> = chunks.concat();
    let mut v = Vec::new();
    v.extend_from_slice(b"RIFF");
    v.extend_from_slice(&(4 + body.len() as u32).to_le_bytes());
    v.extend_from_slice(b"WAVE");
    v.extend_from_slice(&body);
    v
}

/// A complete file with a `fmt ` body and data bytes (correct sizes).
pub fn wav(fmt: &[u8], data: &[u8]) -> Vec<u8> {
    riff(&[
        chunk(b"fmt ", fmt.len() as u32, fmt),
        chunk(b"data", data.len() as u32, data),
    ])
}

/// Interleaves per-channel sample encoders into data bytes.
pub fn interleave<T: Copy>(chans: &[Vec<T>], enc: impl Fn(T) -> Vec<u8>) -> Vec<u8> {
    let n = chans[0].len();
    let mut v = Vec::new();
    for i in 0..n {
        for c in chans {
            v.extend_from_slice(&enc(c[i]));
        }
    }
    v
}

/// Writes bytes to a fresh file in the target's temp area and returns the path.
pub fn temp_file(name: &str, bytes: &[u8]) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("envord-wav-tests-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}
