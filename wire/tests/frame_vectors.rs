//! Test vectors for the network-server codec (host-sim/js/envord-codec.js):
//! random reports, their frames and the Rust decoder's output, plus damaged
//! frames with the Rust error. The committed file must equal what the Rust
//! codec produces now; regenerate with `ENVORD_WRITE_VECTORS=1 cargo test
//! -p envord-tests --test frame_vectors`. `node host-sim/js/test.js` checks the
//! JavaScript decoder against the same file.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "frame_common/mod.rs"]
mod common;

use serde_json::{json, Value};
use wire::crc::crc16;
use wire::frame::status::encode_status;
use wire::frame::{decode_any, encode, encode_reduced};

/// Valid report vectors generated (a fifth of them reduced frames).
const COUNT: usize = 400;
/// Valid status-frame vectors generated after the reports.
const STATUS_COUNT: usize = 60;
/// Valid version 2 report vectors generated after the status frames (a
/// fifth of them reduced frames).
const V2_COUNT: usize = 200;

const PATH: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/../host-sim/js/vectors.json");

fn error_name(bytes: &[u8]) -> String {
    let e = decode_any(bytes).unwrap_err();
    let dbg = format!("{e:?}");
    dbg.split([' ', '(', '{']).next().unwrap().to_string()
}

fn generate() -> String {
    let mut rng = common::Rng(0x00E7_70D0_2026);
    let mut valid = Vec::new();
    let mut invalid = Vec::new();
    for i in 0..COUNT {
        let r = common::random_report(&mut rng);
        let mut buf = [0u8; 64];
        let n = if i % 5 == 4 {
            encode_reduced(&r, &mut buf).unwrap()
        } else {
            encode(&r, &mut buf).unwrap()
        };
        let bytes = &buf[..n];
        let decoded = serde_json::to_value(decode_any(bytes).unwrap()).unwrap();
        valid.push(json!({ "hex": common::to_hex(bytes), "expected": decoded }));
        // Every third frame also yields a damaged copy.
        if i % 3 == 0 {
            let mut bad = bytes.to_vec();
            match (i / 3) % 6 {
                0 => bad.truncate(rng.below(n as u64) as usize),
                1 => bad.push(0),
                2 => {
                    let bit = rng.below(8 * (n as u64 - 3)) as usize + 8;
                    bad[bit / 8] ^= 0x80 >> (bit % 8);
                }
                3 => bad[0] = 0x30 | (bad[0] & 0x0F),
                4 => {
                    bad[5] |= 0x80;
                    let c = crc16(&bad[..n - 2]);
                    bad[n - 2..].copy_from_slice(&c.to_be_bytes());
                }
                _ => bad[0] = 0x1E,
            }
            if decode_any(&bad).is_err() {
                invalid.push(json!({ "hex": common::to_hex(&bad), "error": error_name(&bad) }));
            }
        }
    }
    // Status frames, from their own generator so the report vectors above
    // stay as they were.
    let mut rng = common::Rng(0x5747_0002);
    for i in 0..STATUS_COUNT {
        let r = common::random_status(&mut rng);
        let mut buf = [0u8; 64];
        let n = encode_status(&r, &mut buf).unwrap();
        let bytes = &buf[..n];
        let decoded = serde_json::to_value(decode_any(bytes).unwrap()).unwrap();
        valid.push(json!({ "hex": common::to_hex(bytes), "expected": decoded }));
        let mut bad = bytes.to_vec();
        let reseal = |b: &mut Vec<u8>| {
            let c = crc16(&b[..n - 2]);
            b[n - 2..].copy_from_slice(&c.to_be_bytes());
        };
        match i % 6 {
            0 => bad.truncate(rng.below(n as u64) as usize),
            1 => bad.push(0),
            2 => bad[rng.below(n as u64 - 2) as usize + 1] ^= 0x10,
            3 => {
                bad[7] |= 0x80; // reserved bit
                reseal(&mut bad);
            }
            4 => {
                bad[12] = 6; // undefined downlink result
                reseal(&mut bad);
            }
            _ => {
                bad[15..19].copy_from_slice(&f32::NAN.to_be_bytes()); // band
                reseal(&mut bad);
            }
        }
        if decode_any(&bad).is_err() {
            invalid.push(json!({ "hex": common::to_hex(&bad), "error": error_name(&bad) }));
        }
    }
    // Version 2 reports, from their own generator so the vectors above stay
    // as they were. Damage: as above, plus a line field made inconsistent
    // (state "not searched" with a harmonics count) with a valid CRC.
    let mut rng = common::Rng(0x0000_F2A3_2026);
    for i in 0..V2_COUNT {
        let r = common::random_report_v2(&mut rng);
        let mut buf = [0u8; 256];
        let n = if i % 5 == 4 {
            encode_reduced(&r, &mut buf).unwrap()
        } else {
            encode(&r, &mut buf).unwrap()
        };
        let bytes = &buf[..n];
        let decoded = serde_json::to_value(decode_any(bytes).unwrap()).unwrap();
        valid.push(json!({ "hex": common::to_hex(bytes), "expected": decoded }));
        if i % 2 == 0 {
            let mut bad = bytes.to_vec();
            let reseal = |b: &mut Vec<u8>| {
                let c = crc16(&b[..n - 2]);
                b[n - 2..].copy_from_slice(&c.to_be_bytes());
            };
            match (i / 2) % 6 {
                0 => bad.truncate(rng.below(n as u64) as usize),
                1 => bad.push(0),
                2 => {
                    let bit = rng.below(8 * (n as u64 - 3)) as usize + 8;
                    bad[bit / 8] ^= 0x80 >> (bit % 8);
                }
                3 if n > 21 && bad[0] == 0x20 => {
                    // First line of bearing 0: state 0, searched count 3.
                    bad[19] &= 0x3F;
                    bad[21] = (bad[21] & 0xF0) | 3;
                    reseal(&mut bad);
                }
                3 | 4 => {
                    bad[7] |= 0x80; // reserved bit in both types
                    reseal(&mut bad);
                }
                _ => bad[0] = 0x22, // a version 2 status frame does not exist
            }
            if decode_any(&bad).is_err() {
                invalid.push(json!({ "hex": common::to_hex(&bad), "error": error_name(&bad) }));
            }
        }
    }
    // One vector per line keeps the file small and its diffs readable.
    let lines = |v: &[Value]| {
        v.iter()
            .map(|x| x.to_string())
            .collect::<Vec<_>>()
            .join(",\n")
    };
    format!(
        "{{\"about\": \"envord frame test vectors, generated by tests/tests/frame_vectors.rs from the Rust codec\",\n\"valid\": [\n{}\n],\n\"invalid\": [\n{}\n]}}\n",
        lines(&valid),
        lines(&invalid)
    )
}

#[test]
fn committed_vectors_equal_rust_codec_output() {
    let fresh = generate();
    if std::env::var_os("ENVORD_WRITE_VECTORS").is_some() {
        std::fs::write(PATH, &fresh).unwrap();
    }
    let committed = std::fs::read_to_string(PATH)
        .expect("host-sim/js/vectors.json missing: run with ENVORD_WRITE_VECTORS=1");
    assert!(
        committed == fresh,
        "host-sim/js/vectors.json differs from the Rust codec's output"
    );
    let v: Value = serde_json::from_str(&committed).unwrap();
    assert_eq!(
        v["valid"].as_array().unwrap().len(),
        COUNT + STATUS_COUNT + V2_COUNT
    );
    let v2 = v["valid"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|x| x["hex"].as_str().unwrap().starts_with("20"))
        .count();
    assert!(v2 > 100, "{v2} v2 full frames");
    // All error kinds the damage produces are represented.
    let kinds: std::collections::BTreeSet<&str> = v["invalid"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["error"].as_str().unwrap())
        .collect();
    for k in [
        "Truncated",
        "BadLength",
        "BadCrc",
        "UnknownVersion",
        "ReservedBits",
        "UnknownFrameType",
        "InvalidField",
    ] {
        assert!(kinds.contains(k), "no {k} vector");
    }
}
