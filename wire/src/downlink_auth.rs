//! Authentication of configuration downlinks.
//!
//! A configuration downlink replaces a node's measuring point, so it must
//! come from the operator's gateway, be meant for this node and be new. The
//! radio layer below (e.g. LoRaWAN) may or may not protect it end to end;
//! this check does not rely on it.
//!
//! Frame layout (big-endian), [`HEADER_LEN`] + payload + [`TAG_LEN`] bytes:
//!
//! ```text
//! 0      version  u8   DOWNLINK_VERSION
//! 1..3   node_id  u16  the addressed node
//! 3..7   counter  u32  replay counter, strictly increasing per node
//! 7..n-8 payload       the configuration bytes (opaque here)
//! n-8..n tag      [u8; 8]  HMAC-SHA256(node key, bytes 0..n-8), leftmost 8 bytes
//! ```
//!
//! The tag covers the header, so the node id and counter cannot be changed
//! without the key. [`verify`] compares tags in constant time. The caller
//! applies the payload, then stores [`AuthenticatedPayload::counter`] with
//! the configuration (same write), so a replay of this or any older frame is
//! refused after a power cycle too. Key handling: docs/downlink-security.md.

use core::fmt;

use hmac::{Hmac, Mac};
use sha2::Sha256;

type HmacSha256 = Hmac<Sha256>;

/// Frame format version this module reads and writes.
pub const DOWNLINK_VERSION: u8 = 1;
/// Bytes before the payload: version, node id, counter.
pub const HEADER_LEN: usize = 7;
/// Bytes of the truncated tag (64 bits).
pub const TAG_LEN: usize = 8;
/// Bytes of a node key (the HMAC-SHA256 output size, as RFC 2104 suggests).
pub const KEY_LEN: usize = 32;

/// A node's downlink key. Not `Debug` and not `Display`, so it cannot end up
/// in a log by accident.
#[derive(Clone)]
pub struct DownlinkKey([u8; KEY_LEN]);

impl DownlinkKey {
    /// Wraps the provisioned key bytes.
    pub const fn new(bytes: [u8; KEY_LEN]) -> Self {
        Self(bytes)
    }

    fn mac(&self) -> HmacSha256 {
        // RFC 2104 section 2: a key shorter than the hash block is padded
        // with zeros to the block, so the padded block keys the same MAC
        // through the infallible constructor.
        let mut block = hmac::digest::Key::<HmacSha256>::default();
        for (b, k) in block.iter_mut().zip(self.0.iter()) {
            *b = *k;
        }
        <HmacSha256 as hmac::digest::KeyInit>::new(&block)
    }
}

/// A downlink that passed [`verify`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AuthenticatedPayload<'a> {
    /// The frame's counter: store it with the applied configuration.
    pub counter: u32,
    /// The configuration bytes.
    pub payload: &'a [u8],
}

/// Why [`verify`] refused a downlink.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AuthError {
    /// Shorter than header plus tag.
    TooShort {
        /// Bytes received.
        len: usize,
    },
    /// Unknown frame version.
    UnknownVersion(u8),
    /// Addressed to another node.
    WrongNode {
        /// Node id in the frame.
        addressed: u16,
    },
    /// The tag does not match: forged, corrupted or signed with another key.
    BadTag,
    /// Authentic but not newer than the stored counter (a replay).
    Replayed {
        /// Counter in the frame.
        counter: u32,
        /// Counter stored with the current configuration.
        stored: u32,
    },
}

impl fmt::Display for AuthError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::TooShort { len } => write!(
                f,
                "downlink of {len} bytes is shorter than {} bytes",
                HEADER_LEN + TAG_LEN
            ),
            Self::UnknownVersion(v) => write!(f, "unknown downlink version {v}"),
            Self::WrongNode { addressed } => write!(f, "downlink is for node {addressed}"),
            Self::BadTag => f.write_str("downlink tag does not match"),
            Self::Replayed { counter, stored } => write!(
                f,
                "downlink counter {counter} is not newer than the stored {stored}"
            ),
        }
    }
}

impl core::error::Error for AuthError {}

/// Why [`sign`] could not build a frame.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BufferTooSmall {
    /// Bytes the frame needs.
    pub needed: usize,
}

impl fmt::Display for BufferTooSmall {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "downlink needs a {}-byte buffer", self.needed)
    }
}

impl core::error::Error for BufferTooSmall {}

/// Checks a downlink for this node: version, node id, tag (constant time),
/// then that its counter is newer than `stored_counter`.
///
/// ```
/// use wire::downlink_auth::{sign, verify, AuthError, DownlinkKey};
/// let key = DownlinkKey::new([7; 32]);
/// let mut buf = [0u8; 64];
/// let n = sign(&key, 12, 5, b"cfg", &mut buf).unwrap();
/// let ok = verify(&key, 12, 4, &buf[..n]).unwrap();
/// assert_eq!((ok.counter, ok.payload), (5, &b"cfg"[..]));
/// // Once 5 is stored, the same frame is a replay.
/// assert!(matches!(verify(&key, 12, 5, &buf[..n]), Err(AuthError::Replayed { .. })));
/// ```
pub fn verify<'a>(
    key: &DownlinkKey,
    node_id: u16,
    stored_counter: u32,
    frame: &'a [u8],
) -> Result<AuthenticatedPayload<'a>, AuthError> {
    let too_short = AuthError::TooShort { len: frame.len() };
    let body_len = frame.len().checked_sub(TAG_LEN).ok_or(too_short)?;
    let (body, tag) = frame.split_at_checked(body_len).ok_or(too_short)?;
    let (header, payload) = body.split_at_checked(HEADER_LEN).ok_or(too_short)?;
    let &[version, n0, n1, c0, c1, c2, c3] = header else {
        return Err(too_short);
    };
    if version != DOWNLINK_VERSION {
        return Err(AuthError::UnknownVersion(version));
    }
    let addressed = u16::from_be_bytes([n0, n1]);
    if addressed != node_id {
        return Err(AuthError::WrongNode { addressed });
    }
    let mut mac = key.mac();
    mac.update(body);
    // Constant-time comparison of the leftmost TAG_LEN bytes (subtle).
    mac.verify_truncated_left(tag)
        .map_err(|_| AuthError::BadTag)?;
    // Checked only once authentic, so a forger learns nothing about it.
    let counter = u32::from_be_bytes([c0, c1, c2, c3]);
    if counter <= stored_counter {
        return Err(AuthError::Replayed {
            counter,
            stored: stored_counter,
        });
    }
    Ok(AuthenticatedPayload { counter, payload })
}

/// Builds a downlink frame into `out` and returns its length (for the
/// gateway side and for tests; the node only verifies).
pub fn sign(
    key: &DownlinkKey,
    node_id: u16,
    counter: u32,
    payload: &[u8],
    out: &mut [u8],
) -> Result<usize, BufferTooSmall> {
    let needed = HEADER_LEN
        .saturating_add(payload.len())
        .saturating_add(TAG_LEN);
    let buf = out.get_mut(..needed).ok_or(BufferTooSmall { needed })?;
    let (body, tag) = buf
        .split_at_mut_checked(needed.saturating_sub(TAG_LEN))
        .ok_or(BufferTooSmall { needed })?;
    let (header, body_payload) = body
        .split_at_mut_checked(HEADER_LEN)
        .ok_or(BufferTooSmall { needed })?;
    let [n0, n1] = node_id.to_be_bytes();
    let [c0, c1, c2, c3] = counter.to_be_bytes();
    header.copy_from_slice(&[DOWNLINK_VERSION, n0, n1, c0, c1, c2, c3]);
    body_payload.copy_from_slice(payload);
    let mut mac = key.mac();
    mac.update(body);
    let full = mac.finalize().into_bytes();
    for (t, f) in tag.iter_mut().zip(full.iter()) {
        *t = *f;
    }
    Ok(needed)
}

#[cfg(test)]
#[allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]
mod tests {
    use super::*;

    fn hex(s: &str) -> [u8; 32] {
        let mut out = [0u8; 32];
        for (i, o) in out.iter_mut().enumerate() {
            *o = u8::from_str_radix(&s[2 * i..2 * i + 2], 16).unwrap();
        }
        out
    }

    fn hmac_full(key: &[u8], data: &[u8]) -> [u8; 32] {
        let mut m = HmacSha256::new_from_slice(key).unwrap();
        m.update(data);
        m.finalize().into_bytes().into()
    }

    /// RFC 4231, section 4 (HMAC-SHA-256 test cases 1-4, 6, 7 in full, 5
    /// truncated to 128 bits). The digests were also reproduced with
    /// Python's `hmac`/`hashlib` (OpenSSL) before being written here.
    #[test]
    fn rfc4231_hmac_sha256_vectors() {
        let tc1 = hmac_full(&[0x0b; 20], b"Hi There");
        assert_eq!(
            tc1,
            hex("b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7")
        );
        let tc2 = hmac_full(b"Jefe", b"what do ya want for nothing?");
        assert_eq!(
            tc2,
            hex("5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843")
        );
        let tc3 = hmac_full(&[0xaa; 20], &[0xdd; 50]);
        assert_eq!(
            tc3,
            hex("773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe")
        );
        let key4: [u8; 25] = core::array::from_fn(|i| (i + 1) as u8);
        let tc4 = hmac_full(&key4, &[0xcd; 50]);
        assert_eq!(
            tc4,
            hex("82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b")
        );
        // Test case 5: the RFC gives only the leftmost 128 bits.
        let tc5 = hmac_full(&[0x0c; 20], b"Test With Truncation");
        assert_eq!(
            tc5[..16],
            hex("a3b6167473100ee06e0c796c2955552b00000000000000000000000000000000")[..16]
        );
        let tc6 = hmac_full(
            &[0xaa; 131],
            b"Test Using Larger Than Block-Size Key - Hash Key First",
        );
        assert_eq!(
            tc6,
            hex("60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54")
        );
        let tc7 = hmac_full(
            &[0xaa; 131],
            b"This is a test using a larger than block-size key and a larger than \
block-size data. The key needs to be hashed before being used by the HMAC algorithm.",
        );
        assert_eq!(
            tc7,
            hex("9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2")
        );
    }

    /// The frame tag is the leftmost 8 bytes of HMAC-SHA256 over the header
    /// and payload (RFC 2104 section 5 truncation: leftmost bits).
    #[test]
    fn tag_is_leftmost_bytes_of_hmac_over_header_and_payload() {
        let key = [0x42u8; 32];
        let mut buf = [0u8; 64];
        let n = sign(
            &DownlinkKey::new(key),
            0x0102,
            0x0a0b_0c0d,
            b"xyz",
            &mut buf,
        )
        .unwrap();
        assert_eq!(n, 7 + 3 + 8);
        assert_eq!(&buf[..10], b"\x01\x01\x02\x0a\x0b\x0c\x0dxyz");
        let full = hmac_full(&key, &buf[..10]);
        assert_eq!(buf[10..18], full[..8]);
    }

    fn frame(key: &DownlinkKey, node: u16, counter: u32, payload: &[u8]) -> ([u8; 96], usize) {
        let mut buf = [0u8; 96];
        let n = sign(key, node, counter, payload, &mut buf).unwrap();
        (buf, n)
    }

    #[test]
    fn good_frame_is_accepted() {
        let key = DownlinkKey::new([1; 32]);
        let (buf, n) = frame(&key, 7, 100, b"point=demo");
        let ok = verify(&key, 7, 99, &buf[..n]).unwrap();
        assert_eq!(ok.counter, 100);
        assert_eq!(ok.payload, b"point=demo");
        // An empty payload is allowed (the layer above decides its meaning).
        let (buf, n) = frame(&key, 7, 1, b"");
        assert_eq!(verify(&key, 7, 0, &buf[..n]).unwrap().payload, b"");
    }

    #[test]
    fn every_flipped_bit_is_refused() {
        let key = DownlinkKey::new([9; 32]);
        let (buf, n) = frame(&key, 3, 10, b"abcdef");
        for byte in 0..n {
            for bit in 0..8 {
                let mut f = buf;
                f[byte] ^= 1 << bit;
                let r = verify(&key, 3, 0, &f[..n]);
                assert!(r.is_err(), "flip of byte {byte} bit {bit} accepted");
            }
        }
    }

    #[test]
    fn bad_tag_wrong_key_and_truncation_are_refused() {
        let key = DownlinkKey::new([5; 32]);
        let (mut buf, n) = frame(&key, 3, 10, b"cfg");
        assert_eq!(
            verify(&DownlinkKey::new([6; 32]), 3, 0, &buf[..n]),
            Err(AuthError::BadTag)
        );
        // Cutting bytes off shifts the tag: refused, never out of bounds.
        for len in 0..n {
            assert!(verify(&key, 3, 0, &buf[..len]).is_err(), "len {len}");
        }
        assert_eq!(
            verify(&key, 3, 0, &buf[..HEADER_LEN + TAG_LEN - 1]),
            Err(AuthError::TooShort { len: 14 })
        );
        buf[n - 1] ^= 0x80;
        assert_eq!(verify(&key, 3, 0, &buf[..n]), Err(AuthError::BadTag));
    }

    #[test]
    fn wrong_node_and_version_are_refused() {
        let key = DownlinkKey::new([5; 32]);
        let (mut buf, n) = frame(&key, 3, 10, b"cfg");
        assert_eq!(
            verify(&key, 4, 0, &buf[..n]),
            Err(AuthError::WrongNode { addressed: 3 })
        );
        buf[0] = 2;
        assert_eq!(
            verify(&key, 3, 0, &buf[..n]),
            Err(AuthError::UnknownVersion(2))
        );
    }

    #[test]
    fn old_and_equal_counters_are_replays() {
        let key = DownlinkKey::new([5; 32]);
        let (buf, n) = frame(&key, 3, 10, b"cfg");
        assert_eq!(
            verify(&key, 3, 10, &buf[..n]),
            Err(AuthError::Replayed {
                counter: 10,
                stored: 10
            })
        );
        assert_eq!(
            verify(&key, 3, 11, &buf[..n]),
            Err(AuthError::Replayed {
                counter: 10,
                stored: 11
            })
        );
        assert!(verify(&key, 3, 9, &buf[..n]).is_ok());
        // The counter never wraps: after u32::MAX nothing is newer.
        let (buf, n) = frame(&key, 3, u32::MAX, b"cfg");
        assert!(verify(&key, 3, u32::MAX - 1, &buf[..n]).is_ok());
        let (buf0, n0) = frame(&key, 3, 0, b"cfg");
        assert!(verify(&key, 3, u32::MAX, &buf0[..n0]).is_err());
    }

    #[test]
    fn sign_refuses_a_small_buffer() {
        let key = DownlinkKey::new([5; 32]);
        let mut small = [0u8; 17];
        assert_eq!(
            sign(&key, 1, 1, b"abc", &mut small),
            Err(BufferTooSmall { needed: 18 })
        );
    }
}
