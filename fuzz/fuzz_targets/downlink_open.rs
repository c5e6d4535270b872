//! The node's downlink opener (`wire::downlink::open`: authentication
//! under the node's key, then the command and configuration parsers), as the
//! cycle calls it on every received downlink, with a fixed test key.
//!
//! The first byte picks a mode:
//! * 0: the rest is the radio frame as received. Nothing may panic, and a
//!   frame is accepted only if it is exactly the frame the key signs for its
//!   node, counter and payload (no forgery, no malleability).
//! * 1: the rest is `counter u32 BE, stored counter u32 BE, payload`; the
//!   payload is signed with the key, so the fuzzer reaches the command
//!   parser behind the tag. The result must equal the parser's on the bare
//!   payload (or a replay refusal when the counter is not newer), the same
//!   frame for another node must be refused as such, and an accepted
//!   configuration must survive encode -> decode unchanged.
//! * 2: as 1, but the payload is a configuration command whose record gets
//!   a valid magic, version, length and CRC around the fuzzer's field bytes,
//!   so every field check of the record parser is reached.
#![no_main]

use wire::config::{PointRecord, MAX_RECORD_LEN};
use wire::crc::crc32;
use wire::downlink::{open, parse, Command, DownlinkError};
use wire::downlink_auth::{sign, AuthError, DownlinkKey, HEADER_LEN, TAG_LEN};
use wire::identity::{encode, Identity, IDENTITY_LEN};
use libfuzzer_sys::fuzz_target;

/// Test key and node id (committed, not secret; never used on a node).
const KEY: [u8; 32] = *b"envord fuzz key, not a real key.";
const NODE: u16 = 0x0107;

fn identity(node: u16) -> Identity {
    let mut rec = [0u8; IDENTITY_LEN];
    encode(node, &KEY, &mut rec).expect("identity encodes");
    Identity::decode(&rec).expect("identity decodes")
}

fn be32(b: &[u8]) -> u32 {
    let mut w = [0u8; 4];
    for (d, s) in w.iter_mut().zip(b) {
        *d = *s;
    }
    u32::from_be_bytes(w)
}

/// Signs `payload` for `node` and checks what `open` makes of it.
fn signed(counter: u32, stored: u32, payload: &[u8]) {
    let key = DownlinkKey::new(KEY);
    let mut frame = vec![0u8; HEADER_LEN + payload.len() + TAG_LEN];
    let n = sign(&key, NODE, counter, payload, &mut frame).expect("buffer sized");
    let frame = &frame[..n];
    let id = identity(NODE);
    let got = open(Some(&id), stored, frame);
    if counter <= stored {
        assert_eq!(
            got,
            Err(DownlinkError::Auth(AuthError::Replayed { counter, stored }))
        );
    } else {
        assert_eq!(got, parse(payload).map(|c| (counter, c)));
    }
    // the same frame never passes for another node
    let other = identity(NODE ^ 0x8000);
    assert_eq!(
        open(Some(&other), stored, frame),
        Err(DownlinkError::Auth(AuthError::WrongNode {
            addressed: NODE
        }))
    );
    assert_eq!(
        open(None, stored, frame),
        Err(DownlinkError::NotProvisioned)
    );
    if let Ok((_, Command::SetConfig(rec))) = got {
        let mut buf = [0u8; MAX_RECORD_LEN];
        let len = rec.encode(&mut buf).expect("an accepted record encodes");
        assert_eq!(PointRecord::decode(&buf[..len]).as_ref(), Ok(&rec));
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&mode, rest)) = data.split_first() else {
        return;
    };
    match mode % 3 {
        0 => {
            let id = identity(NODE);
            let stored = 100;
            if let Ok((counter, _)) = open(Some(&id), stored, rest) {
                assert!(counter > stored);
                let payload = &rest[HEADER_LEN..rest.len() - TAG_LEN];
                let mut again = vec![0u8; rest.len()];
                let n = sign(&DownlinkKey::new(KEY), NODE, counter, payload, &mut again)
                    .expect("buffer sized");
                assert_eq!(&again[..n], rest, "accepted a frame the key did not sign");
            }
        }
        1 => {
            if rest.len() >= 8 {
                signed(be32(&rest[..4]), be32(&rest[4..8]), &rest[8..]);
            }
        }
        _ => {
            if rest.len() >= 9 {
                // version 1, 2 or 3; magic, length (u8, from v3 u16) and
                // CRC made right
                let version = 1 + rest[8] % 3;
                let fields = &rest[9..rest.len().min(9 + MAX_RECORD_LEN - 9)];
                let mut payload = vec![0x01, b'E', b'P', version];
                if version == 3 {
                    let len = 5 + fields.len() + 4;
                    payload.extend_from_slice(&(len as u16).to_le_bytes());
                } else {
                    payload.push((4 + fields.len() + 4).min(255) as u8);
                }
                payload.extend_from_slice(fields);
                let crc = crc32(&payload[1..]);
                payload.extend_from_slice(&crc.to_le_bytes());
                signed(be32(&rest[..4]), be32(&rest[4..8]), &payload);
            }
        }
    }
});
