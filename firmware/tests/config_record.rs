//! The stored configuration record: round trip, CRC, version and ranges.
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]
mod common;
use common::encode;
use firmware::config::{
    BandSource, BearingModel, BearingSpec, ConfigError, PointRecord, StoredConfig, MAX_RECORD_LEN,
};

fn sample() -> PointRecord {
    let mut c = PointRecord::default();
    // a second bearing given by defect orders (values of a fictional bearing)
    c.shafts.push(0.25).unwrap();
    c.bearings
        .push(BearingSpec {
            shaft: 1,
            model: BearingModel::Orders {
                bpfo: 3.58,
                bpfi: 5.42,
                ftf: 0.398,
                bsf: 2.36,
            },
        })
        .unwrap();
    c
}

#[test]
fn round_trip_preserves_every_field() {
    let c = sample();
    let bytes = encode(&c);
    assert_eq!(bytes.len(), c.encoded_len());
    // v3: fixed part, two shaft ratios, a geometry and an orders bearing, CRC
    assert_eq!(bytes.len(), 76 + 2 * 4 + 14 + 17 + 4);
    assert!(bytes.len() <= MAX_RECORD_LEN);
    assert_eq!(PointRecord::decode(&bytes).unwrap(), c);
}

#[test]
fn trailing_bytes_are_ignored() {
    let mut bytes = encode(&sample());
    bytes.extend_from_slice(&[0xFF; 16]); // erased flash after the record
    assert_eq!(PointRecord::decode(&bytes).unwrap(), sample());
}

#[test]
fn crc_trailer_is_zlib_crc32_of_the_body() {
    // independent recomputation with the catalogue's CRC-32 (same as zlib.crc32)
    let bytes = encode(&sample());
    let (body, crc) = bytes.split_at(bytes.len() - 4);
    assert_eq!(
        u32::from_le_bytes(crc.try_into().unwrap()),
        firmware::crc::crc32(body)
    );
    assert_eq!(&bytes[..3], b"EP\x03");
}

#[test]
fn every_single_bit_flip_is_refused() {
    // CRC-32 detects all single-bit errors (property of any CRC with >1 term).
    let bytes = encode(&sample());
    for i in 0..bytes.len() {
        for bit in 0..8 {
            let mut b = bytes.clone();
            b[i] ^= 1 << bit;
            assert!(
                PointRecord::decode(&b).is_err(),
                "flip at byte {i} bit {bit} accepted"
            );
        }
    }
}

#[test]
fn corrupted_payload_gives_bad_crc() {
    let mut bytes = encode(&sample());
    bytes[10] ^= 0x40;
    assert_eq!(PointRecord::decode(&bytes), Err(ConfigError::BadCrc));
}

#[test]
fn truncated_record_is_refused() {
    let bytes = encode(&sample());
    for n in [0, 1, 3, 4, 40, bytes.len() - 1] {
        assert_eq!(
            PointRecord::decode(&bytes[..n]),
            Err(ConfigError::Truncated),
            "len {n}"
        );
    }
}

#[test]
fn wrong_magic_and_version_are_refused() {
    let mut bytes = encode(&sample());
    bytes[0] = b'X';
    assert_eq!(PointRecord::decode(&bytes), Err(ConfigError::BadMagic));
    let mut bytes = encode(&sample());
    bytes[2] = 4;
    assert_eq!(
        PointRecord::decode(&bytes),
        Err(ConfigError::UnsupportedVersion(4))
    );
}

/// Re-seals a modified body so that only the range check can refuse it.
fn reseal(mut bytes: Vec<u8>) -> Vec<u8> {
    let n = bytes.len() - 4;
    let crc = firmware::crc::crc32(&bytes[..n]);
    bytes[n..].copy_from_slice(&crc.to_le_bytes());
    bytes
}

#[test]
fn out_of_range_fields_are_refused_even_with_a_good_crc() {
    let good = encode(&sample());
    // band upper edge above Nyquist (fs/2 = 12.8 kHz, sampling theorem)
    let mut b = good.clone();
    b[13..17].copy_from_slice(&13_000.0f32.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("band_hi_hz"))
    );
    // NaN band edge
    let mut b = good.clone();
    b[9..13].copy_from_slice(&f32::NAN.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("band_lo_hz"))
    );
    // odd filter order
    let mut b = good.clone();
    b[17] = 3;
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("poles"))
    );
    // minimum speed above maximum
    let mut b = good.clone();
    b[21..25].copy_from_slice(&5_000.0f32.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("speed_max_rpm"))
    );
    // element diameter larger than pitch diameter (impossible geometry)
    let mut b = good.clone();
    b[84 + 2..84 + 6].copy_from_slice(&50.0f32.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("element_mm"))
    );
    // zero sensitivity
    let mut b = good.clone();
    b[57..61].copy_from_slice(&0.0f32.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("counts_to_g"))
    );
    // unknown bearing kind
    let mut b = good.clone();
    b[84] = 7;
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("bearing_kind"))
    );
    // bearing count that does not match the length
    let mut b = good;
    b[74] = 1;
    assert_eq!(PointRecord::decode(&reseal(b)), Err(ConfigError::BadLength));
}

#[test]
fn encode_refuses_an_invalid_record() {
    let mut c = sample();
    c.danger_db = 3.0; // below alert_db = 6
    let mut buf = [0u8; MAX_RECORD_LEN];
    assert_eq!(
        c.encode(&mut buf),
        Err(ConfigError::OutOfRange("danger_db"))
    );
    // no bearings: overall levels only (record version 3 carries that)
    let mut c = sample();
    c.bearings.clear();
    assert!(c.encode(&mut buf).is_ok());
    c.bearings
        .push(BearingSpec {
            shaft: 2,
            model: sample().bearings[0].model,
        })
        .unwrap();
    assert_eq!(
        c.encode(&mut buf),
        Err(ConfigError::OutOfRange("bearing_shaft"))
    );
    let c = sample();
    assert_eq!(c.encode(&mut buf[..20]), Err(ConfigError::BufferTooSmall));
}

#[test]
fn record_length_follows_revolutions_and_lowest_speed() {
    // 64 revolutions at 1000 rpm = 3.84 s; at 25.6 kHz that is 98 304 samples = 384 blocks of 256
    let c = PointRecord::default();
    assert_eq!(c.record_blocks(256, 10_000), 384);
    assert_eq!(c.record_blocks(256, 100), 100); // capped
                                                // 4 revolutions at 7000 rpm: 0.0342857 s * 25600 = 877.7 samples -> 4 blocks (rounded up)
    let mut c = PointRecord::default();
    c.record_revs = 4;
    c.speed_min_rpm = 7_000.0;
    assert_eq!(c.record_blocks(256, 10_000), 4);
}

#[test]
fn version_1_records_still_decode_as_configured_bands() {
    // The committed QEMU input is a version-1 record written by an
    // independent Python encoder (boards/qemu-mps2/input/make_input.py).
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../boards/qemu-mps2/input/config.bin"
    );
    let v1 = std::fs::read(path).unwrap();
    assert_eq!(&v1[..3], b"EP\x01");
    assert_eq!(v1.len(), 62 + 22 + 4);
    let r = PointRecord::decode(&v1).unwrap();
    assert_eq!(r.band_source, BandSource::Configured);
    assert_eq!(r.band_hz(), Some([2000.0, 8000.0]));
    // re-encoded as version 3 (98 bytes: one shaft, one geometry bearing)
    let v3 = encode(&r);
    assert_eq!(&v3[..5], &[b'E', b'P', 3, 98, 0]);
    assert_eq!(PointRecord::decode(&v3).unwrap(), r);
    // a v1 record with a non-zero reserved byte 61 is refused
    let mut b = v1.clone();
    b[61] = 1;
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("band_source"))
    );
}

#[test]
fn band_sources_round_trip_and_are_checked() {
    let mut c = sample();
    c.band_source = BandSource::Unset;
    // an unset band must carry zero edges (canonical form)
    let mut buf = [0u8; MAX_RECORD_LEN];
    assert_eq!(
        c.encode(&mut buf),
        Err(ConfigError::OutOfRange("band_lo_hz"))
    );
    c.band_lo_hz = 0.0;
    c.band_hi_hz = 0.0;
    let b = encode(&c);
    assert_eq!((b[61], &b[62..66]), (2, &[0u8; 4][..]));
    assert_eq!(PointRecord::decode(&b).unwrap(), c);
    assert_eq!(c.band_hz(), None);
    let s = c.with_survey_band([2519.842, 5039.684], 7.25).unwrap();
    let b = encode(&s);
    assert_eq!(b[61], 1);
    assert_eq!(&b[62..66], &7.25f32.to_le_bytes());
    assert_eq!(PointRecord::decode(&b).unwrap(), s);
    assert_eq!(s.band_hz(), Some([2519.842, 5039.684]));
    assert_eq!(
        c.with_survey_band([2000.0, 20_000.0], 1.0),
        Err(ConfigError::OutOfRange("band_hi_hz"))
    );
    assert_eq!(
        c.with_survey_band([2000.0, 4000.0], f32::NAN),
        Err(ConfigError::OutOfRange("band_kurtosis"))
    );
    // a configured band with a non-zero kurtosis field is refused
    let mut b = encode(&sample());
    b[62..66].copy_from_slice(&1.0f32.to_le_bytes());
    assert_eq!(
        PointRecord::decode(&reseal(b)),
        Err(ConfigError::OutOfRange("band_source"))
    );
}

#[test]
fn stored_config_carries_the_counter_with_the_record() {
    let s = StoredConfig {
        counter: 0xDEAD_BEEF,
        record: sample(),
    };
    let mut buf = [0u8; firmware::config::MAX_STORED_LEN];
    let n = s.encode(&mut buf).unwrap();
    assert_eq!(&buf[..4], &0xDEAD_BEEFu32.to_le_bytes());
    assert_eq!(&buf[4..n], &encode(&sample())[..]);
    assert_eq!(StoredConfig::decode(&buf[..n]).unwrap(), s);
    assert_eq!(StoredConfig::decode(&buf[..3]), Err(ConfigError::Truncated));
}
