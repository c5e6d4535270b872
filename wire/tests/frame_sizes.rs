//! Frame sizes against the LoRaWAN payload limits.
//! Limits: the maximum application payload (N, no FOpts) of the LoRaWAN
//! Regional Parameters, EU868 DR0-DR2 51 bytes, US915 DR0 11 bytes. From
//! memory of RP002-1.0.x (the "EU863-870 maximum payload size" and "US902-928
//! maximum payload size" tables; table numbers not re-checked), as
//! docs/frame-format.md says. The EU868 DR0 figure of 51 bytes is also what
//! the older LoRaWAN 1.0.2 Regional Parameters give and what network servers
//! quote (e.g. TheThingsNetwork/lorawan-stack issue #866).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use wire::frame::layout::{EU868_DR0_MAX_PAYLOAD, US915_DR0_MAX_PAYLOAD};
use wire::frame::{encode, encode_reduced, BearingResult, EncodeError, FrameReport};

fn report_with(nb: usize) -> FrameReport {
    let mut r = FrameReport::default();
    for _ in 0..nb {
        r.bearings.push(BearingResult::default()).unwrap();
    }
    r
}

#[test]
fn full_frame_sizes_for_1_to_4_bearings() {
    let mut buf = [0u8; 128];
    let sizes: Vec<usize> = (1..=4)
        .map(|nb| encode(&report_with(nb), &mut buf).unwrap())
        .collect();
    // 18 header bytes + ceil(nb * 4 defects * 19 bits / 8) + 2 CRC bytes.
    assert_eq!(sizes, vec![30, 39, 49, 58]);
    // Three bearings fit EU868 DR0-DR2 (RP002: 51 bytes) ...
    assert!(sizes[2] <= EU868_DR0_MAX_PAYLOAD);
    assert_eq!(EU868_DR0_MAX_PAYLOAD, 51);
    // ... four do not: they need DR3+ (115 bytes) or two frames.
    assert!(sizes[3] > EU868_DR0_MAX_PAYLOAD);
    assert_eq!(encode(&report_with(0), &mut buf), Ok(20));
}

#[test]
fn reduced_frame_fits_us915_dr0() {
    let mut buf = [0u8; 64];
    for nb in 0..=4 {
        let n = encode_reduced(&report_with(nb), &mut buf).unwrap();
        assert_eq!(n, 11);
        assert!(n <= US915_DR0_MAX_PAYLOAD);
    }
    assert_eq!(US915_DR0_MAX_PAYLOAD, 11);
}

#[test]
fn buffer_too_small_is_an_error() {
    let mut buf = [0u8; 48];
    assert_eq!(
        encode(&report_with(3), &mut buf),
        Err(EncodeError::BufferTooSmall {
            needed: 49,
            got: 48
        })
    );
    let mut small = [0u8; 10];
    assert_eq!(
        encode_reduced(&report_with(1), &mut small),
        Err(EncodeError::BufferTooSmall {
            needed: 11,
            got: 10
        })
    );
}
