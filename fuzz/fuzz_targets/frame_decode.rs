//! Arbitrary bytes into the frame decoder: it must never panic, and whatever
//! it accepts must re-encode to exactly the same bytes (the encoding is
//! canonical), and its JSON form must fit the documented buffer size.
//!
//! Each input is tried as it is and again with its last two bytes replaced by
//! the CRC-16 of the rest (big-endian, as the frames carry it), so that
//! mutations get past the CRC to the full, reduced and status field decoders.
#![no_main]

use wire::crc::crc16;
use wire::frame::{decode_any, encode, encode_reduced_report, to_json, Frame};
use libfuzzer_sys::fuzz_target;

fn check(data: &[u8]) {
    if let Ok(frame) = decode_any(data) {
        let mut buf = [0u8; 64];
        let n = match &frame {
            Frame::Full(r) => {
                let mut json = [0u8; 2048];
                assert!(to_json(r, &mut json).is_ok());
                encode(r, &mut buf).expect("decoded report must encode")
            }
            Frame::Reduced(r) => {
                encode_reduced_report(r, &mut buf).expect("decoded report must encode")
            }
            Frame::Status(r) => wire::frame::status::encode_status(r, &mut buf)
                .expect("decoded status must encode"),
        };
        assert_eq!(&buf[..n], data);
    }
}

fuzz_target!(|data: &[u8]| {
    check(data);
    if let Some(body_len) = data.len().checked_sub(2) {
        let mut sealed = data.to_vec();
        let crc = crc16(&sealed[..body_len]);
        sealed[body_len..].copy_from_slice(&crc.to_be_bytes());
        check(&sealed);
    }
});
