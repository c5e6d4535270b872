//! Bad WAV input gives a typed error (or, when asked, a flagged result),
//! never a panic. File layouts per the RIFF/WAVE spec (Microsoft Multimedia
//! Programming Interface and Data Specifications 1.0).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic
)]

mod wav_util;
use host_sim::wav::{
    encode_wav_f32, parse_wav, read_wav, ReadOptions, WavError, WavWriteError, MAX_CHANNELS,
};
use proptest::prelude::*;
use wav_util::*;

fn strict(b: &[u8]) -> Result<host_sim::wav::WavData, WavError> {
    parse_wav(b, ReadOptions::strict())
}

fn i16_data(v: &[i16]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

#[test]
fn missing_file_is_io_error() {
    let e = read_wav("/nonexistent/envord/none.wav", ReadOptions::strict()).unwrap_err();
    assert!(
        matches!(e, WavError::Io(ref io) if io.kind() == std::io::ErrorKind::NotFound),
        "{e}"
    );
}

#[test]
fn empty_file_is_named() {
    let p = temp_file("empty.wav", &[]);
    let e = read_wav(&p, ReadOptions::strict()).unwrap_err();
    assert!(matches!(e, WavError::Empty), "{e}");
    assert!(e.to_string().contains("empty"));
}

#[test]
fn wrong_container_or_form_type() {
    assert!(matches!(
        strict(b"RIF"),
        Err(WavError::TooShort { bytes: 3 })
    ));
    let mut b = wav(&fmt_plain(1, 1, 8000, 16), &i16_data(&[1, 2]));
    b[0..4].copy_from_slice(b"RIFX"); // big-endian RIFF: not supported
    assert!(matches!(strict(&b), Err(WavError::NotRiff { found }) if &found == b"RIFX"));
    let mut b = wav(&fmt_plain(1, 1, 8000, 16), &i16_data(&[1, 2]));
    b[8..12].copy_from_slice(b"AVI ");
    let e = strict(&b).unwrap_err();
    assert!(matches!(e, WavError::NotWave { .. }));
    assert!(e.to_string().contains("AVI"), "{e}");
    assert!(matches!(
        strict(b"ID3\x04 not a wav at all"),
        Err(WavError::NotRiff { .. })
    ));
}

#[test]
fn missing_fmt_or_data_chunk() {
    let d = i16_data(&[1, 2]);
    let no_fmt = riff(&[chunk(b"data", d.len() as u32, &d)]);
    assert!(matches!(strict(&no_fmt), Err(WavError::NoFmtChunk)));
    let f = fmt_plain(1, 1, 8000, 16);
    let no_data = riff(&[chunk(b"fmt ", f.len() as u32, &f)]);
    assert!(matches!(strict(&no_data), Err(WavError::NoDataChunk)));
    let header_only = riff(&[]);
    assert!(matches!(strict(&header_only), Err(WavError::NoFmtChunk)));
}

#[test]
fn unsupported_formats_and_depths() {
    let d = [0u8; 8];
    // Tag 2 = Microsoft ADPCM.
    assert!(matches!(
        strict(&wav(&fmt_plain(2, 1, 8000, 4), &d)),
        Err(WavError::UnsupportedFormat { tag: 2 })
    ));
    // 8-bit PCM and 64-bit float are valid WAV but not decoded here.
    assert!(matches!(
        strict(&wav(&fmt_plain(1, 1, 8000, 8), &d)),
        Err(WavError::UnsupportedBitDepth { tag: 1, bits: 8 })
    ));
    assert!(matches!(
        strict(&wav(&fmt_plain(3, 1, 8000, 64), &d)),
        Err(WavError::UnsupportedBitDepth { tag: 3, bits: 64 })
    ));
    // Extensible with a sub-format GUID that is not PCM/float.
    let mut f = fmt_extensible(1, 1, 8000, 16);
    f[30] = 0x99; // corrupt the GUID tail
    assert!(matches!(
        strict(&wav(&f, &d)),
        Err(WavError::UnsupportedFormat { .. })
    ));
    // Extensible header cut short (cbSize data missing).
    let f = fmt_extensible(1, 1, 8000, 16);
    assert!(matches!(
        strict(&wav(&f[..20], &d)),
        Err(WavError::FmtTooShort { bytes: 20 })
    ));
    assert!(matches!(
        strict(&wav(&fmt_plain(1, 1, 8000, 16)[..10], &d)),
        Err(WavError::FmtTooShort { .. })
    ));
}

#[test]
fn zero_or_absurd_channel_counts_and_rates() {
    let d = [0u8; 8];
    let mut f = fmt_plain(1, 1, 8000, 16);
    f[2..4].copy_from_slice(&0u16.to_le_bytes());
    assert!(matches!(strict(&wav(&f, &d)), Err(WavError::ZeroChannels)));
    f[2..4].copy_from_slice(&65_535u16.to_le_bytes());
    let e = strict(&wav(&f, &d)).unwrap_err();
    assert!(
        matches!(e, WavError::TooManyChannels { channels: 65_535 }),
        "{e}"
    );
    f[2..4].copy_from_slice(&(MAX_CHANNELS + 1).to_le_bytes());
    assert!(matches!(
        strict(&wav(&f, &d)),
        Err(WavError::TooManyChannels { .. })
    ));
    let f = fmt_plain(1, 1, 0, 16);
    assert!(matches!(
        strict(&wav(&f, &d)),
        Err(WavError::ZeroSampleRate)
    ));
    // Header says 2 channels but block_align of one.
    let mut f = fmt_plain(1, 2, 8000, 16);
    f[12..14].copy_from_slice(&2u16.to_le_bytes());
    assert!(matches!(
        strict(&wav(&f, &d)),
        Err(WavError::BadBlockAlign {
            block_align: 2,
            expected: 4
        })
    ));
}

#[test]
fn huge_data_size_is_truncation_not_allocation() {
    let f = fmt_plain(1, 2, 8000, 16);
    let d = i16_data(&[1, 2, 3, 4, 5, 6]);
    let b = riff(&[
        chunk(b"fmt ", f.len() as u32, &f),
        chunk(b"data", u32::MAX, &d),
    ]);
    let e = strict(&b).unwrap_err();
    assert!(
        matches!(
            e,
            WavError::Truncated {
                declared_bytes: 4_294_967_295,
                present_bytes: 12
            }
        ),
        "{e}"
    );
    // Lenient: the three whole frames come back, flagged.
    let w = parse_wav(&b, ReadOptions::accept_truncated()).unwrap();
    assert_eq!(w.raw_i16.as_ref().unwrap()[1], vec![2, 4, 6]);
    let t = w.truncation.unwrap();
    assert_eq!(
        (t.declared_bytes, t.present_bytes, t.partial_frame_bytes),
        (u64::from(u32::MAX), 12, 0)
    );
}

#[test]
fn chunk_overrunning_the_file_before_data_is_named() {
    let f = fmt_plain(1, 1, 8000, 16);
    let b = riff(&[
        chunk(b"fmt ", f.len() as u32, &f),
        chunk(b"LIST", 0x7FFF_FFF0, b"xx"),
    ]);
    let e = strict(&b).unwrap_err();
    assert!(
        matches!(e, WavError::ChunkOverrun { id, .. } if &id == b"LIST"),
        "{e}"
    );
    assert!(e.to_string().contains("LIST"));
}

#[test]
fn truncated_file_and_partial_final_frame() {
    let f = fmt_plain(1, 2, 8000, 16);
    let full = wav(&f, &i16_data(&[1, 2, 3, 4, 5, 6]));
    // Cut 3 bytes off the end: data declares 12, 9 present, 1 byte of a frame left.
    let cut = &full[..full.len() - 3];
    assert!(matches!(
        strict(cut),
        Err(WavError::Truncated {
            declared_bytes: 12,
            present_bytes: 9
        })
    ));
    let w = parse_wav(cut, ReadOptions::accept_truncated()).unwrap();
    assert_eq!(w.frames(), 2);
    assert_eq!(w.truncation.unwrap().partial_frame_bytes, 1);
    // Data size itself not a whole number of frames.
    let odd = wav(&f, &[1, 0, 2, 0, 3, 0]);
    let e = strict(&odd).unwrap_err();
    assert!(
        matches!(
            e,
            WavError::PartialFrame {
                extra_bytes: 2,
                frame_bytes: 4
            }
        ),
        "{e}"
    );
    // Every prefix of a valid file is handled without panicking.
    for n in 0..full.len() {
        let _ = strict(&full[..n]);
        let _ = parse_wav(&full[..n], ReadOptions::accept_truncated());
    }
}

#[test]
fn nan_and_inf_samples_are_counted_and_kept() {
    let v = [
        1.0f32,
        f32::NAN,
        -2.0,
        f32::INFINITY,
        f32::NEG_INFINITY,
        0.5,
    ];
    let d: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
    let w = strict(&wav(&fmt_plain(3, 2, 1000, 32), &d)).unwrap();
    assert_eq!(w.non_finite, 3);
    assert!(w.channels[1][0].is_nan());
    assert_eq!(w.channels[0], vec![1.0, -2.0, f32::NEG_INFINITY]);
}

#[test]
fn writer_refuses_bad_channel_sets() {
    assert!(matches!(
        encode_wav_f32(8000, &[]),
        Err(WavWriteError::NoChannels)
    ));
    assert!(matches!(
        encode_wav_f32(8000, &[&[1.0, 2.0], &[1.0]]),
        Err(WavWriteError::RaggedChannels {
            channel: 1,
            len: 1,
            expected: 2
        })
    ));
    assert!(matches!(
        encode_wav_f32(0, &[&[1.0]]),
        Err(WavWriteError::ZeroSampleRate)
    ));
    assert!(matches!(
        encode_wav_f32(8000, &[&[1.0, f32::NAN]]),
        Err(WavWriteError::NonFinite {
            channel: 0,
            frame: 1
        })
    ));
    let one = [0.0f32];
    let many: Vec<&[f32]> = (0..=usize::from(MAX_CHANNELS)).map(|_| &one[..]).collect();
    assert!(matches!(
        encode_wav_f32(8000, &many),
        Err(WavWriteError::TooManyChannels { .. })
    ));
}

proptest! {
    // Arbitrary bytes after a valid RIFF/WAVE tag never panic.
    #[test]
    fn arbitrary_bytes_never_panic(tail in proptest::collection::vec(any::<u8>(), 0..200)) {
        let mut b = b"RIFF\0\0\0\0WAVE".to_vec();
        b.extend_from_slice(&tail);
        let _ = parse_wav(&b, ReadOptions::strict());
        let _ = parse_wav(&b, ReadOptions::accept_truncated());
    }

    // Corrupting any one byte of a valid file never panics, and a successful
    // parse always has equal-length channels within the file's size.
    #[test]
    fn one_corrupt_byte_never_panics(pos in 0usize..60, val in any::<u8>()) {
        let mut b = wav(&fmt_plain(1, 2, 8000, 16), &i16_data(&[1, 2, 3, 4, 5, 6, 7, 8]));
        let n = b.len();
        b[pos % n] = val;
        if let Ok(w) = parse_wav(&b, ReadOptions::accept_truncated()) {
            let n = w.frames();
            prop_assert!(w.channels.iter().all(|c| c.len() == n));
            prop_assert!(n * w.channels.len() * 2 <= b.len());
        }
    }
}
