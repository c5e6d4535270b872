//! Arbitrary bytes into the frame decoder: it must never panic, and whatever
//! it accepts must re-encode to exactly the same bytes (the encoding is
//! canonical), and its JSON form must fit the documented buffer size.
#![no_main]

use dsp_core::frame::{decode_any, encode, encode_reduced_report, to_json, Frame};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(frame) = decode_any(data) {
        let mut buf = [0u8; 64];
        let n = match &frame {
            Frame::Full(r) => {
                let mut json = [0u8; 2048];
                assert!(to_json(r, &mut json).is_ok());
                encode(r, &mut buf).expect("decoded report must encode")
            }
            Frame::Reduced(r) => encode_reduced_report(r, &mut buf).expect("decoded report must encode"),
            Frame::Status(r) => dsp_core::frame::status::encode_status(r, &mut buf)
                .expect("decoded status must encode"),
        };
        assert_eq!(&buf[..n], data);
    }
});
