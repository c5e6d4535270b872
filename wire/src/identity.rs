//! The node's identity, written once at provisioning: its node id and its
//! downlink key ([`crate::downlink_auth`]).
//!
//! It lives in its own flash page (`firmware::hal::Slot::Identity`), apart
//! from the configuration record, so a configuration downlink can never
//! touch it and a firmware update does not overwrite it. The provisioning
//! tool (`envord gateway provision`) writes the record; procedures are in
//! docs/downlink-security.md. Layout (little-endian, [`IDENTITY_LEN`] bytes):
//!
//! ```text
//!  0 magic "EI"   2 version u8 = 1   3 reserved u8 = 0
//!  4 node_id u16  6 reserved u16 = 0
//!  8 key [u8; 32]
//! 40 CRC-32 (ISO-HDLC) of bytes 0..40
//! ```
//!
//! The key is never logged: [`Identity`] has neither `Debug` nor `Display`
//! showing it, and its `defmt::Format` prints the node id only.

use crate::crc::crc32;
use crate::downlink_auth::{DownlinkKey, KEY_LEN};

/// Record magic.
pub const IDENTITY_MAGIC: [u8; 2] = *b"EI";
/// Record version.
pub const IDENTITY_VERSION: u8 = 1;
/// Record length in bytes (a whole number of flash words).
pub const IDENTITY_LEN: usize = 8 + KEY_LEN + 4;

/// A provisioned identity: node id and downlink key.
#[derive(Clone)]
pub struct Identity {
    node_id: u16,
    key: DownlinkKey,
}

impl core::fmt::Debug for Identity {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.debug_struct("Identity")
            .field("node_id", &self.node_id)
            .finish_non_exhaustive()
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for Identity {
    fn format(&self, f: defmt::Formatter<'_>) {
        defmt::write!(f, "Identity {{ node_id: {} }}", self.node_id);
    }
}

/// Why an identity record was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum IdentityError {
    /// Shorter than [`IDENTITY_LEN`].
    Truncated,
    /// Not an identity record.
    BadMagic,
    /// Written by a version this firmware does not read.
    UnsupportedVersion(u8),
    /// Reserved bytes not zero.
    Reserved,
    /// CRC mismatch: corrupted.
    BadCrc,
    /// The key is all zeros or all ones (blank or erased): not a real key.
    BlankKey,
}

impl core::fmt::Display for IdentityError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Truncated => f.write_str("identity record truncated"),
            Self::BadMagic => f.write_str("not an identity record"),
            Self::UnsupportedVersion(v) => write!(f, "unsupported identity version {v}"),
            Self::Reserved => f.write_str("identity reserved bytes not zero"),
            Self::BadCrc => f.write_str("identity CRC mismatch"),
            Self::BlankKey => f.write_str("identity key is blank"),
        }
    }
}

impl core::error::Error for IdentityError {}

impl Identity {
    /// Decodes and checks a stored record (trailing bytes are ignored).
    ///
    /// ```
    /// use wire::identity::{encode, Identity, IDENTITY_LEN};
    /// let mut buf = [0u8; IDENTITY_LEN];
    /// encode(12, &[7; 32], &mut buf).unwrap();
    /// assert_eq!(Identity::decode(&buf).unwrap().node_id(), 12);
    /// ```
    pub fn decode(bytes: &[u8]) -> Result<Self, IdentityError> {
        let rec = bytes.get(..IDENTITY_LEN).ok_or(IdentityError::Truncated)?;
        let (body, crc) = rec
            .split_at_checked(IDENTITY_LEN - 4)
            .ok_or(IdentityError::Truncated)?;
        let &[m0, m1, version, r0, n0, n1, r1, r2] =
            body.get(..8).ok_or(IdentityError::Truncated)?
        else {
            return Err(IdentityError::Truncated);
        };
        if [m0, m1] != IDENTITY_MAGIC {
            return Err(IdentityError::BadMagic);
        }
        let mut c = [0u8; 4];
        c.copy_from_slice(crc);
        if crc32(body) != u32::from_le_bytes(c) {
            return Err(IdentityError::BadCrc);
        }
        if version != IDENTITY_VERSION {
            return Err(IdentityError::UnsupportedVersion(version));
        }
        if r0 != 0 || r1 != 0 || r2 != 0 {
            return Err(IdentityError::Reserved);
        }
        let mut key = [0u8; KEY_LEN];
        key.copy_from_slice(body.get(8..).ok_or(IdentityError::Truncated)?);
        if key.iter().all(|&b| b == 0) || key.iter().all(|&b| b == 0xFF) {
            return Err(IdentityError::BlankKey);
        }
        Ok(Self {
            node_id: u16::from_le_bytes([n0, n1]),
            key: DownlinkKey::new(key),
        })
    }

    /// The node id downlinks must address and frames carry.
    pub fn node_id(&self) -> u16 {
        self.node_id
    }

    /// The downlink key.
    pub fn key(&self) -> &DownlinkKey {
        &self.key
    }
}

/// Writes an identity record (for the provisioning tool and tests).
pub fn encode(node_id: u16, key: &[u8; KEY_LEN], out: &mut [u8]) -> Result<usize, IdentityError> {
    let rec = out
        .get_mut(..IDENTITY_LEN)
        .ok_or(IdentityError::Truncated)?;
    let [n0, n1] = node_id.to_le_bytes();
    let [m0, m1] = IDENTITY_MAGIC;
    let (body, crc) = rec
        .split_at_mut_checked(IDENTITY_LEN - 4)
        .ok_or(IdentityError::Truncated)?;
    let (head, k) = body
        .split_at_mut_checked(8)
        .ok_or(IdentityError::Truncated)?;
    head.copy_from_slice(&[m0, m1, IDENTITY_VERSION, 0, n0, n1, 0, 0]);
    k.copy_from_slice(key);
    crc.copy_from_slice(&crc32(body).to_le_bytes());
    Ok(IDENTITY_LEN)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_every_bit_flip_refused() {
        let mut buf = [0u8; IDENTITY_LEN];
        assert_eq!(encode(0x0A17, &[0x5A; 32], &mut buf), Ok(44));
        assert_eq!(&buf[..8], b"EI\x01\x00\x17\x0a\x00\x00");
        assert_eq!(Identity::decode(&buf).unwrap().node_id(), 0x0A17);
        for i in 0..IDENTITY_LEN {
            for bit in 0..8 {
                let mut b = buf;
                b[i] ^= 1 << bit;
                assert!(Identity::decode(&b).is_err(), "byte {i} bit {bit}");
            }
        }
        assert_eq!(
            Identity::decode(&buf[..43]).err(),
            Some(IdentityError::Truncated)
        );
    }

    #[test]
    fn blank_keys_and_debug_without_key() {
        let mut buf = [0u8; IDENTITY_LEN];
        encode(1, &[0; 32], &mut buf).unwrap();
        assert_eq!(Identity::decode(&buf).err(), Some(IdentityError::BlankKey));
        encode(1, &[0xFF; 32], &mut buf).unwrap();
        assert_eq!(Identity::decode(&buf).err(), Some(IdentityError::BlankKey));
        encode(1, &[0xAB; 32], &mut buf).unwrap();
        let id = Identity::decode(&buf).unwrap();
        extern crate std;
        let shown = std::format!("{id:?}");
        assert!(
            !shown.contains("171") && !shown.contains("ab"),
            "key shown: {shown}"
        );
    }
}
