//! Arbitrary bytes into the decoders: no panic, and whatever decodes is
//! canonical (re-encoding gives the same bytes).
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

#[path = "frame_common/mod.rs"]
mod common;

use dsp_core::frame::crc::crc16;
use dsp_core::frame::{decode_any, encode, encode_reduced_report, Frame};
use proptest::prelude::*;

fn check(bytes: &[u8]) -> Result<(), TestCaseError> {
    if let Ok(f) = decode_any(bytes) {
        let mut buf = [0u8; 64];
        let n = match &f {
            Frame::Full(r) => encode(r, &mut buf).unwrap(),
            Frame::Reduced(r) => encode_reduced_report(r, &mut buf).unwrap(),
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
            bytes.resize(dsp_core::frame::layout::full_frame_len(nb), 0);
        }
        let n = bytes.len();
        let c = crc16(&bytes[..n - 2]);
        bytes[n - 2..].copy_from_slice(&c.to_be_bytes());
        check(&bytes)?;
    }
}
