//! CRC-32 checked against published and reference-library values.
#![allow(missing_docs)]
use firmware::crc::{crc32, Crc32};

#[test]
fn crc32_check_value_from_catalogue() {
    // "Catalogue of parametrised CRC algorithms" (reveng), CRC-32/ISO-HDLC: check = 0xCBF43926
    assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
}

#[test]
fn crc32_matches_zlib() {
    // Values from Python's zlib.crc32 (reference implementation of the same CRC).
    assert_eq!(crc32(b""), 0x0000_0000);
    assert_eq!(crc32(b"a"), 0xE8B7_BE43);
    assert_eq!(
        crc32(b"The quick brown fox jumps over the lazy dog"),
        0x414F_A339
    );
    let all: Vec<u8> = (0..=255u8).collect();
    assert_eq!(crc32(&all), 0x2905_8C73);
}

#[test]
fn crc32_incremental_equals_one_shot() {
    let data = b"The quick brown fox jumps over the lazy dog";
    let mut c = Crc32::new();
    for chunk in data.chunks(5) {
        c.update(chunk);
    }
    assert_eq!(c.finish(), crc32(data));
}
