//! Each kind of damaged frame gives its own decode error.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use wire::crc::crc16;
use wire::frame::{
    decode, decode_any, decode_reduced, encode, encode_reduced, DecodeError, DefectKind,
    EncodeError, Frame, FrameReport,
};

fn valid(nb: usize) -> Vec<u8> {
    let mut rng = common::Rng(0x5EED_0001 + nb as u64);
    let mut r = common::random_report(&mut rng);
    r.bearings.clear();
    let src = loop {
        let c = common::random_report(&mut rng);
        if c.bearings.len() == 4 {
            break c;
        }
    };
    for b in src.bearings.iter().take(nb) {
        r.bearings.push(*b).unwrap();
    }
    let mut buf = [0u8; 64];
    let n = encode(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

/// Rewrites the CRC so only the deliberate damage remains.
fn reseal(f: &mut [u8]) {
    let n = f.len();
    let c = crc16(&f[..n - 2]);
    f[n - 2..].copy_from_slice(&c.to_be_bytes());
}

#[test]
fn truncated_frames() {
    let f = valid(3);
    assert_eq!(
        decode(&[]),
        Err(DecodeError::Truncated { needed: 11, got: 0 })
    );
    assert_eq!(
        decode(&f[..5]),
        Err(DecodeError::Truncated { needed: 20, got: 5 })
    );
    assert_eq!(
        decode(&f[..48]),
        Err(DecodeError::Truncated {
            needed: 49,
            got: 48
        })
    );
    let mut red = [0u8; 11];
    encode_reduced(&FrameReport::default(), &mut red).unwrap();
    assert_eq!(
        decode_reduced(&red[..10]),
        Err(DecodeError::Truncated {
            needed: 11,
            got: 10
        })
    );
}

#[test]
fn trailing_bytes_are_bad_length() {
    let mut f = valid(2);
    f.push(0);
    assert_eq!(
        decode(&f),
        Err(DecodeError::BadLength {
            expected: 39,
            got: 40
        })
    );
}

#[test]
fn wrong_version_and_type() {
    let mut f = valid(1);
    f[0] = 0x20 | (f[0] & 0x0F);
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::UnknownVersion(2)));
    let mut g = valid(1);
    g[0] = 0x15;
    reseal(&mut g);
    assert_eq!(decode(&g), Err(DecodeError::UnknownFrameType(5)));
    // A full frame is not a reduced frame and vice versa.
    assert_eq!(
        decode_reduced(&valid(1)),
        Err(DecodeError::UnknownFrameType(0))
    );
    let mut red = [0u8; 11];
    encode_reduced(&FrameReport::default(), &mut red).unwrap();
    assert_eq!(decode(&red), Err(DecodeError::UnknownFrameType(1)));
    assert!(matches!(decode_any(&red), Ok(Frame::Reduced(_))));
}

#[test]
fn every_single_bit_flip_is_caught() {
    // CRC-16/CCITT-FALSE detects every single-bit error (Hamming distance >= 2
    // for any CRC with more than one term, Koopman & Chakravarty 2004).
    let f = valid(3);
    for bit in 0..f.len() * 8 {
        let mut g = f.clone();
        g[bit / 8] ^= 0x80 >> (bit % 8);
        let e = decode(&g).unwrap_err();
        // Flips in the header may change version, type or length first.
        match bit / 8 {
            0 => assert!(
                matches!(
                    e,
                    DecodeError::UnknownVersion(_)
                        | DecodeError::UnknownFrameType(_)
                        | DecodeError::BadLength { .. }
                ),
                "{e:?}"
            ),
            7 => assert!(
                matches!(
                    e,
                    DecodeError::BadCrc { .. }
                        | DecodeError::Truncated { .. }
                        | DecodeError::BadLength { .. }
                        | DecodeError::TooManyBearings(_)
                ),
                "{e:?}"
            ),
            _ => assert!(matches!(e, DecodeError::BadCrc { .. }), "bit {bit}: {e:?}"),
        }
    }
}

#[test]
fn bad_crc_reports_both_values() {
    let mut f = valid(2);
    let n = f.len();
    f[n - 1] ^= 0xFF;
    let e = decode(&f).unwrap_err();
    let DecodeError::BadCrc { computed, received } = e else {
        panic!("{e:?}")
    };
    assert_eq!(computed, crc16(&f[..n - 2]));
    assert_eq!(received, u16::from_be_bytes([f[n - 2], f[n - 1]]));
}

#[test]
fn reserved_bits_and_undefined_codes() {
    // Spare flag bits (7..=15).
    let mut f = valid(1);
    f[5] |= 0x80;
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::ReservedBits { offset: 5 }));
    // Reserved top bits of the count/zone byte.
    let mut f = valid(1);
    f[7] |= 0x40;
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::ReservedBits { offset: 7 }));
    // ISO zone code 5 is undefined.
    let mut f = valid(1);
    f[7] = (f[7] & 0x07) | 5 << 3;
    reseal(&mut f);
    assert_eq!(
        decode(&f),
        Err(DecodeError::InvalidField {
            field: "iso_zone",
            code: 5
        })
    );
    // Bearing count 5.
    let mut f = valid(1);
    f[7] = (f[7] & 0xF8) | 5;
    assert_eq!(decode(&f), Err(DecodeError::TooManyBearings(5)));
    // Harmonics 15 in the first defect: bits 14..=17 of the packed area.
    let mut f = valid(1);
    f[18 + 1] |= 0x03;
    f[18 + 2] |= 0xC0;
    reseal(&mut f);
    assert_eq!(
        decode(&f),
        Err(DecodeError::InvalidField {
            field: "harmonics",
            code: 15
        })
    );
    // Padding: 1 bearing uses 76 bits of 80, the last 4 must be zero.
    let mut f = valid(1);
    f[27] |= 0x01;
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::ReservedBits { offset: 27 }));
}

#[test]
fn encoder_rejects_bad_reports() {
    let mut r = FrameReport::default();
    r.bearings.push(Default::default()).unwrap();
    r.bearings[0].defects[2].harmonics = 11;
    let mut buf = [0u8; 64];
    assert_eq!(
        encode(&r, &mut buf),
        Err(EncodeError::HarmonicsOutOfRange {
            bearing: 0,
            kind: DefectKind::Ftf,
            value: 11
        })
    );
    let r = FrameReport {
        version: 2,
        ..FrameReport::default()
    };
    assert_eq!(
        encode(&r, &mut buf),
        Err(EncodeError::UnsupportedVersion(2))
    );
}
