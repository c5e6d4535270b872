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

/// The version 2 size table of docs/frame-format.md: 21 + 18 n + 4 m bytes,
/// and the slowest EU868 rate (51 / 115 / 222 bytes, RP002-1.0.x, from memory).
#[test]
fn v2_sizes_and_rates_of_the_table() {
    use wire::frame::layout::eu868_slowest_rate;
    use wire::frame::v2::full_frame_len_v2;
    let table: [(usize, [usize; 4]); 9] = [
        (0, [21, 25, 29, 37]),
        (1, [39, 43, 47, 55]),
        (2, [57, 61, 65, 73]),
        (3, [75, 79, 83, 91]),
        (4, [93, 97, 101, 109]),
        (5, [111, 115, 119, 127]),
        (6, [129, 133, 137, 145]),
        (7, [147, 151, 155, 163]),
        (8, [165, 169, 173, 181]),
    ];
    for (nb, row) in table {
        for (m, want) in [0usize, 1, 2, 4].into_iter().zip(row) {
            assert_eq!(full_frame_len_v2(nb, m), want, "{nb} bearings {m} meshes");
            println!(
                "v2 {nb} bearings {m} meshes: {want} bytes, {}",
                eu868_slowest_rate(want).unwrap()
            );
        }
    }
    assert_eq!(eu868_slowest_rate(55), Some("DR3"));
    assert_eq!(eu868_slowest_rate(115), Some("DR3"));
    assert_eq!(eu868_slowest_rate(119), Some("DR4"));
    assert_eq!(eu868_slowest_rate(181), Some("DR4"));
    // Each size is what the encoder writes.
    let mut rng = common::Rng(7);
    let mut buf = [0u8; 256];
    for _ in 0..200 {
        let r = common::random_report_v2(&mut rng);
        let n = encode(&r, &mut buf).unwrap();
        assert_eq!(n, full_frame_len_v2(r.bearings.len(), r.meshes.len()));
    }
}
