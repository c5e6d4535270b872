//! Arbitrary bytes into the decoders: no panic, and whatever decodes is
//! canonical (re-encoding gives the same bytes).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use proptest::prelude::*;
use wire::crc::crc16;
use wire::frame::{decode_any, encode, encode_reduced_report, Frame};

fn check(bytes: &[u8]) -> Result<(), TestCaseError> {
    if let Ok(f) = decode_any(bytes) {
        let mut buf = [0u8; 64];
        let n = match &f {
            Frame::Full(r) => encode(r, &mut buf).unwrap(),
            Frame::Reduced(r) => encode_reduced_report(r, &mut buf).unwrap(),
            Frame::Status(r) => wire::frame::status::encode_status(r, &mut buf).unwrap(),
        };
        prop_assert_eq!(&buf[..n], bytes);
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(100_000))]

    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..80)) {
        check(&bytes)?;
    }

    /// Random bytes rarely pass the CRC; sealing them with a valid CRC and a
    /// valid version/type/length reaches the field checks.
    #[test]
    fn sealed_random_bytes_never_panic(mut bytes in proptest::collection::vec(any::<u8>(), 20..60), reduced in any::<bool>()) {
        if reduced {
            bytes.truncate(11);
            bytes[0] = 0x11;
        } else {
            bytes[0] = 0x10;
            let nb = usize::from(bytes[7] & 7).min(4);
            bytes[7] = (bytes[7] & 0xF8) | nb as u8;
            bytes.resize(wire::frame::layout::full_frame_len(nb), 0);
        }
        let n = bytes.len();
        let c = crc16(&bytes[..n - 2]);
        bytes[n - 2..].copy_from_slice(&c.to_be_bytes());
        check(&bytes)?;
    }

    /// Valid frames with a few bits flipped and the CRC rewritten: reaches the
    /// reserved-bit, padding and field checks on nearly every case.
    #[test]
    fn resealed_bit_flips_are_rejected_or_canonical(seed in any::<u64>(), flips in proptest::collection::vec(any::<u16>(), 1..4), reduced in any::<bool>()) {
        let r = common::random_report(&mut common::Rng(seed | 1));
        let mut buf = [0u8; 64];
        let n = if reduced {
            wire::frame::encode_reduced(&r, &mut buf).unwrap()
        } else {
            encode(&r, &mut buf).unwrap()
        };
        let mut bytes = buf[..n].to_vec();
        for f in flips {
            // Flip anywhere after the version/type byte, before the CRC.
            let bit = 8 + usize::from(f) % (8 * (n - 3));
            bytes[bit / 8] ^= 0x80 >> (bit % 8);
        }
        let c = crc16(&bytes[..n - 2]);
        bytes[n - 2..].copy_from_slice(&c.to_be_bytes());
        check(&bytes)?;
    }
}
