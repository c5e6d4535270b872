//! WAV round trips and format coverage. Layouts follow the RIFF/WAVE spec
//! (Microsoft Multimedia Programming Interface and Data Specifications 1.0);
//! integer scaling is the usual full-scale convention (count / 2^(bits-1),
//! common practice; e.g. numpy users divide int16 by 32768).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing
)]

mod wav_util;
use host_sim::wav::{
    encode_wav_f32, encode_wav_i16, f32_to_i16_count, parse_wav, read_wav, write_wav_f32,
    write_wav_i16, ReadOptions, SampleFormat,
};
use wav_util::*;

#[test]
fn float32_three_channels_round_trip_exactly() {
    let a: Vec<f32> = (0..257).map(|i| (i as f32 * 0.37).sin() * 3.5).collect();
    let b: Vec<f32> = (0..257).map(|i| -(i as f32) * 1e-3).collect();
    let c: Vec<f32> = (0..257).map(|i| f32::from_bits(0x0000_0001 + i)).collect(); // subnormals
    let p = std::env::temp_dir().join(format!("envord-rt-f32-{}.wav", std::process::id()));
    write_wav_f32(&p, 25_600, &[&a, &b, &c]).unwrap();
    let w = read_wav(&p, ReadOptions::strict()).unwrap();
    std::fs::remove_file(&p).unwrap();
    assert_eq!(w.info.format, SampleFormat::Float32);
    assert_eq!(w.info.sample_rate, 25_600);
    assert_eq!(w.info.channels, 3);
    assert_eq!(w.channels, vec![a, b, c]);
    assert_eq!(w.non_finite, 0);
}

#[test]
fn float32_header_is_the_canonical_44_byte_layout() {
    let bytes = encode_wav_f32(48_000, &[&[1.0f32, 2.0], &[3.0, 4.0]]).unwrap();
    assert_eq!(bytes.len(), 44 + 16);
    assert_eq!(&bytes[0..4], b"RIFF");
    assert_eq!(u32::from_le_bytes(bytes[4..8].try_into().unwrap()), 36 + 16);
    assert_eq!(&bytes[8..16], b"WAVEfmt ");
    assert_eq!(u16::from_le_bytes([bytes[20], bytes[21]]), 3); // WAVE_FORMAT_IEEE_FLOAT
    assert_eq!(u16::from_le_bytes([bytes[22], bytes[23]]), 2);
    assert_eq!(
        u32::from_le_bytes(bytes[28..32].try_into().unwrap()),
        48_000 * 8
    ); // byte rate
    assert_eq!(u16::from_le_bytes([bytes[32], bytes[33]]), 8); // block align
    assert_eq!(u16::from_le_bytes([bytes[34], bytes[35]]), 32);
    assert_eq!(&bytes[36..40], b"data");
    // Interleaved frames: ch0 ch1 ch0 ch1.
    assert_eq!(f32::from_le_bytes(bytes[48..52].try_into().unwrap()), 3.0);
}

#[test]
fn int16_round_trip_keeps_raw_counts() {
    let a: Vec<i16> = vec![i16::MIN, -1, 0, 1, i16::MAX, 12345];
    let b: Vec<i16> = vec![7, -7, 100, -100, 0, -32000];
    let p = std::env::temp_dir().join(format!("envord-rt-i16-{}.wav", std::process::id()));
    write_wav_i16(&p, 8_000, &[&a, &b]).unwrap();
    let w = read_wav(&p, ReadOptions::strict()).unwrap();
    std::fs::remove_file(&p).unwrap();
    assert_eq!(w.info.format, SampleFormat::Int16);
    let raw = w.raw_i16.unwrap();
    assert_eq!(raw, vec![a.clone(), b]);
    assert_eq!(w.channels[0][0], -1.0);
    assert_eq!(w.channels[0][4], 32767.0 / 32768.0);
    assert_eq!(w.channels[0][5], 12345.0 / 32768.0);
    // Quantiser inverts the scaling (and saturates).
    for &c in &a {
        assert_eq!(f32_to_i16_count(f32::from(c) / 32768.0), c);
    }
    assert_eq!(f32_to_i16_count(1.5), i16::MAX);
    assert_eq!(f32_to_i16_count(f32::NAN), 0);
}

#[test]
fn int24_pcm_is_sign_extended_and_scaled() {
    let vals: Vec<i32> = vec![-8_388_608, -1, 0, 1, 4_194_304, 8_388_607];
    let enc = |v: i32| v.to_le_bytes()[0..3].to_vec();
    for (fmt, ext) in [
        (fmt_plain(1, 1, 44_100, 24), false),
        (fmt_extensible(1, 1, 44_100, 24), true),
    ] {
        let bytes = wav(&fmt, &interleave(std::slice::from_ref(&vals), enc));
        let w = parse_wav(&bytes, ReadOptions::strict()).unwrap();
        assert_eq!(w.info.format, SampleFormat::Int24);
        assert_eq!(w.info.extensible, ext);
        let want: Vec<f32> = vals.iter().map(|&v| v as f32 / 8_388_608.0).collect();
        assert_eq!(w.channels[0], want);
        assert_eq!(w.channels[0][0], -1.0);
        assert_eq!(w.channels[0][4], 0.5);
        assert!(w.raw_i16.is_none());
    }
}

#[test]
fn int32_pcm_and_extensible_float_decode() {
    let vals: Vec<i32> = vec![i32::MIN, -1 << 30, 0, 1 << 30];
    let bytes = wav(
        &fmt_extensible(1, 2, 1000, 32),
        &interleave(&[vals.clone(), vals.clone()], |v: i32| {
            v.to_le_bytes().to_vec()
        }),
    );
    let w = parse_wav(&bytes, ReadOptions::strict()).unwrap();
    assert_eq!(w.info.format, SampleFormat::Int32);
    assert_eq!(w.channels[1], vec![-1.0, -0.5, 0.0, 0.5]);

    let f: Vec<f32> = vec![0.25, -7.0, 1e-20];
    let bytes = wav(
        &fmt_extensible(3, 1, 1000, 32),
        &interleave(std::slice::from_ref(&f), |v: f32| v.to_le_bytes().to_vec()),
    );
    let w = parse_wav(&bytes, ReadOptions::strict()).unwrap();
    assert_eq!(w.info.format, SampleFormat::Float32);
    assert!(w.info.extensible);
    assert_eq!(w.channels[0], f);
}

#[test]
fn unknown_and_odd_sized_chunks_are_skipped() {
    let data = interleave(&[vec![100i16, -200, 300]], |v: i16| {
        v.to_le_bytes().to_vec()
    });
    let fmt = fmt_plain(1, 1, 8000, 16);
    // A 3-byte (odd) LIST chunk with its pad byte, and a 'fact' chunk, before
    // and after fmt; the RIFF spec pads chunks to even length.
    let bytes = riff(&[
        chunk(b"LIST", 3, b"abc"),
        chunk(b"fmt ", fmt.len() as u32, &fmt),
        chunk(b"fact", 4, &3u32.to_le_bytes()),
        chunk(b"junk", 1, b"z"),
        chunk(b"data", data.len() as u32, &data),
        chunk(b"id3 ", 5, b"tags!"),
    ]);
    let w = parse_wav(&bytes, ReadOptions::strict()).unwrap();
    assert_eq!(w.raw_i16.unwrap()[0], vec![100, -200, 300]);
}

#[test]
fn int16_encoder_output_parses_like_hand_built_file() {
    let a = [1i16, -2, 3];
    let ours = encode_wav_i16(22_050, &[&a]).unwrap();
    let hand = wav(
        &fmt_plain(1, 1, 22_050, 16),
        &interleave(&[a.to_vec()], |v: i16| v.to_le_bytes().to_vec()),
    );
    assert_eq!(ours, hand);
}
