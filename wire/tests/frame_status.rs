//! The status frame (type 2, docs/frame-format.md): random status reports
//! round trip exactly (the band as IEEE 754 binary32 bits, the kurtosis
//! within its 0.01 step), every single-bit error and every truncation is
//! refused (CRC-16/CCITT-FALSE detects all single-bit errors: its generator
//! has more than one term, Koopman & Chakravarty 2004), and every accepted
//! frame re-encodes to the same bytes.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use wire::frame::status::{decode_status, encode_status, StatusReport};
use wire::frame::{decode_any, DecodeError, Frame};

fn encoded(r: &StatusReport) -> Vec<u8> {
    let mut buf = [0u8; 64];
    let n = encode_status(r, &mut buf).unwrap();
    buf[..n].to_vec()
}

#[test]
fn random_status_reports_round_trip() {
    let mut rng = common::Rng(0x5747_2026);
    let mut checked = 0;
    for _ in 0..5000 {
        let r = common::random_status(&mut rng);
        let b = encoded(&r);
        assert_eq!(b.len(), 27);
        let d = decode_status(&b).unwrap();
        assert_eq!(d.band_hz[0].to_bits(), r.band_hz[0].to_bits());
        assert_eq!(d.band_hz[1].to_bits(), r.band_hz[1].to_bits());
        if r.band_kurtosis.is_nan() {
            assert!(d.band_kurtosis.is_nan());
        } else if r.band_kurtosis > 327.67 {
            assert_eq!(d.band_kurtosis, 327.67); // saturates at the largest code
        } else {
            assert!((d.band_kurtosis - r.band_kurtosis).abs() <= 0.005 + 1e-4);
        }
        let same = StatusReport {
            band_kurtosis: d.band_kurtosis,
            ..r
        };
        if !r.band_kurtosis.is_nan() {
            assert_eq!(d, same);
        }
        checked += usize::from(r.band_kurtosis > 327.67);
        // canonical: the decoded report encodes to the same bytes
        assert_eq!(encoded(&d), b);
        assert!(matches!(decode_any(&b), Ok(Frame::Status(_))));
    }
    assert!(checked > 100, "saturation seen {checked} times");
}

#[test]
fn single_bit_errors_and_truncations_are_refused() {
    let mut rng = common::Rng(77);
    for _ in 0..50 {
        let b = encoded(&common::random_status(&mut rng));
        for i in 0..b.len() {
            for bit in 0..8 {
                let mut c = b.clone();
                c[i] ^= 1 << bit;
                assert!(decode_any(&c).is_err(), "byte {i} bit {bit}");
            }
        }
        for n in 0..b.len() {
            assert!(decode_any(&b[..n]).is_err());
        }
        let mut long = b.clone();
        long.push(0);
        assert!(matches!(
            decode_any(&long),
            Err(DecodeError::BadLength {
                expected: 27,
                got: 28
            })
        ));
    }
}

#[test]
fn undefined_codes_and_reserved_bits_are_refused_even_with_a_good_crc() {
    let b = encoded(&StatusReport {
        band_hz: [2000.0, 4000.0],
        ..StatusReport::default()
    });
    let reseal = |mut c: Vec<u8>| {
        let crc = wire::crc::crc16(&c[..25]);
        c[25..].copy_from_slice(&crc.to_be_bytes());
        c
    };
    let cases: [(usize, u8, DecodeError); 6] = [
        (
            7,
            0x03,
            DecodeError::InvalidField {
                field: "band_source",
                code: 3,
            },
        ),
        (
            7,
            0x0C,
            DecodeError::InvalidField {
                field: "boot_config",
                code: 3,
            },
        ),
        (7, 0x20, DecodeError::ReservedBits { offset: 7 }),
        (
            12,
            6,
            DecodeError::InvalidField {
                field: "last_downlink",
                code: 6,
            },
        ),
        (
            14,
            9,
            DecodeError::InvalidField {
                field: "survey",
                code: 9,
            },
        ),
        (6, 0x80, DecodeError::ReservedBits { offset: 5 }),
    ];
    for (off, v, want) in cases {
        let mut c = b.clone();
        c[off] = v;
        assert_eq!(decode_status(&reseal(c)), Err(want), "byte {off} = {v:#x}");
    }
    // a band that is not finite with 0 < lo < hi
    for band in [[4000.0f32, 2000.0], [0.0, 10.0], [f32::NAN, 10.0]] {
        let mut c = b.clone();
        c[15..19].copy_from_slice(&band[0].to_be_bytes());
        c[19..23].copy_from_slice(&band[1].to_be_bytes());
        assert!(matches!(
            decode_status(&reseal(c)),
            Err(DecodeError::InvalidField {
                field: "band_hz",
                ..
            })
        ));
    }
}
