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
use wire::frame::v2::LineField;
use wire::frame::{
    decode, decode_any, decode_reduced, encode, encode_reduced, DecodeError, DefectKind,
    DefectResult, EncodeError, Frame, FrameReport, LineDetail, LineLink, LineState,
    NotSearchedCode,
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
    f[0] = 0x30 | (f[0] & 0x0F);
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::UnknownVersion(3)));
    // A v1 frame relabelled v2 is refused (its count byte and length do
    // not match a v2 frame).
    let mut f = valid(1);
    f[0] = 0x20;
    reseal(&mut f);
    assert!(decode(&f).is_err());
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
        version: 3,
        ..FrameReport::default()
    };
    assert_eq!(
        encode(&r, &mut buf),
        Err(EncodeError::UnsupportedVersion(3))
    );
    // Version 2 needs every line's detail, consistent.
    let mut r = FrameReport {
        version: 2,
        ..FrameReport::default()
    };
    r.bearings.push(Default::default()).unwrap();
    assert_eq!(
        encode(&r, &mut buf),
        Err(EncodeError::InconsistentLine {
            bearing: 0,
            kind: DefectKind::Bpfo,
            field: LineField::Missing
        })
    );
    for d in r.bearings[0].defects.iter_mut() {
        d.line = Some(LineDetail {
            state: LineState::Searched,
            harmonics_searched: 5,
            margin_db: f32::NAN,
            ..LineDetail::default()
        });
    }
    assert_eq!(encode(&r, &mut buf), Ok(39));
    // Shared with itself, detected without a detection state, more found
    // than searched, a margin with nothing counted.
    type Spoil = fn(&mut DefectResult);
    let cases: [(Spoil, LineField); 4] = [
        (
            |d| {
                d.detected = true;
                let l = d.line.as_mut().unwrap();
                l.state = LineState::Shared;
                l.shared_with = Some(LineLink {
                    bearing: 0,
                    kind: DefectKind::Bpfi,
                });
            },
            LineField::Link,
        ),
        (|d| d.detected = true, LineField::Detected),
        (|d| d.harmonics = 6, LineField::Harmonics),
        (
            |d| d.line.as_mut().unwrap().margin_db = 12.0,
            LineField::Margin,
        ),
    ];
    for (spoil, field) in cases {
        let mut bad = r.clone();
        spoil(&mut bad.bearings[0].defects[1]);
        assert_eq!(
            encode(&bad, &mut buf),
            Err(EncodeError::InconsistentLine {
                bearing: 0,
                kind: DefectKind::Bpfi,
                field
            })
        );
    }
    // Meshes need version 2; 5 bearings do not fit version 1.
    let mut v1 = FrameReport::default();
    v1.meshes.push(Default::default()).unwrap();
    assert_eq!(encode(&v1, &mut buf), Err(EncodeError::MeshesInV1(1)));
    let mut v1 = FrameReport::default();
    for _ in 0..5 {
        v1.bearings.push(Default::default()).unwrap();
    }
    assert_eq!(encode(&v1, &mut buf), Err(EncodeError::TooManyBearings(5)));
}

#[test]
fn v2_decoder_rejects_inconsistent_lines() {
    let mut r = FrameReport {
        version: 2,
        ..FrameReport::default()
    };
    r.bearings.push(Default::default()).unwrap();
    for d in r.bearings[0].defects.iter_mut() {
        d.line = Some(LineDetail {
            state: LineState::NotSearched,
            reason: Some(NotSearchedCode::TooSlow),
            amplitude_g: f32::NAN,
            margin_db: f32::NAN,
            ..LineDetail::default()
        });
        d.score_db = f32::NAN;
    }
    let mut buf = [0u8; 64];
    let n = encode(&r, &mut buf).unwrap();
    assert_eq!(n, 39);
    let ok = buf[..n].to_vec();
    let back = decode(&ok).unwrap();
    assert_eq!(
        back.bearings[0].defects[0].line.unwrap().reason,
        Some(NotSearchedCode::TooSlow)
    );
    // Reason code 6 is undefined (the score field of state 0).
    let mut f = ok.clone();
    f[19] = 0x06;
    reseal(&mut f);
    assert_eq!(
        decode(&f),
        Err(DecodeError::InvalidField {
            field: "reason",
            code: 0
        })
    );
    // A needed samples_per_rev for a reason without one.
    let mut f = ok.clone();
    f[20] = 9;
    reseal(&mut f);
    assert!(matches!(
        decode(&f),
        Err(DecodeError::InvalidField {
            field: "needed_samples_per_rev",
            ..
        })
    ));
    // Reserved bits of the count byte and the mesh-count byte.
    for (off, bit) in [(7usize, 0x80u8), (18, 0x08)] {
        let mut f = ok.clone();
        f[off] |= bit;
        reseal(&mut f);
        assert_eq!(decode(&f), Err(DecodeError::ReservedBits { offset: off }));
    }
    // 9 bearings.
    let mut f = ok.clone();
    f[7] = (f[7] & 0xF0) | 9;
    reseal(&mut f);
    assert_eq!(decode(&f), Err(DecodeError::TooManyBearings(9)));
}
