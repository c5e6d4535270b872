//! The node's stored configuration as it boots: the power-safe two-page
//! store (`firmware::store::FlashStore`) reads whatever the flash holds, then
//! `StoredConfig::decode` parses the record, and the identity page is
//! decoded, as `Node::new` does. Then a store, possibly cut by a power loss
//! at any step, must leave the old record or the new one.
//!
//! The first byte picks how the two configuration pages are filled:
//! * 0: raw bytes (any magic, sequence number, length, CRC), identity too;
//! * 1: valid page copies (commit mark, length, CRC made right) around the
//!   fuzzer's payloads and sequence numbers, each copy possibly spoiled, so
//!   the choice of the newest copy is checked against an independent rule;
//! * 2: as 1, with the payload a stored configuration whose record gets a
//!   valid magic, version, length and CRC, so the record parser's field
//!   checks are reached.
//!
//! Checks: no panic; the loaded copy is the valid one with the higher
//! sequence number (modes 1, 2); a record that decodes re-encodes to the same
//! value; after a completed store the new bytes load back; after a power
//! loss the old or the new bytes load, never anything else.
#![no_main]

use wire::config::{StoredConfig, MAX_RECORD_LEN, MAX_STORED_LEN};
use wire::crc::crc32;
use firmware::hal::{Slot, Storage};
use wire::identity::{Identity, IDENTITY_LEN};
use firmware::store::{FlashStore, Layout, MAX_PAYLOAD, PAGE_HEADER_LEN, PAGE_MAGIC};
use libfuzzer_sys::fuzz_target;

use flash::PAGE;
const IMAGE: usize = PAGE_HEADER_LEN + MAX_PAYLOAD + 4;
const LAYOUT: Layout = Layout {
    config: [0, PAGE as u32],
    baseline: [2 * PAGE as u32, 3 * PAGE as u32],
    identity: 4 * PAGE as u32,
};

/// The power-loss NOR flash model of the firmware's host tests (4-byte
/// words, 4 KiB pages, as the nRF52840 NVMC), shared rather than copied.
#[path = "../../firmware/tests/common/flash.rs"]
#[allow(dead_code)]
mod flash;
use flash::FakeFlash as Flash;

/// Reads bytes off the front of the input (zeros once it runs out).
struct Input<'a>(&'a [u8]);
impl Input<'_> {
    fn take(&mut self, n: usize) -> &[u8] {
        let (a, b) = self.0.split_at(n.min(self.0.len()));
        self.0 = b;
        a
    }
    fn u8(&mut self) -> u8 {
        self.take(1).first().copied().unwrap_or(0)
    }
    fn u32(&mut self) -> u32 {
        let mut w = [0u8; 4];
        for (d, s) in w.iter_mut().zip(self.take(4)) {
            *d = *s;
        }
        u32::from_le_bytes(w)
    }
}

/// A committed page copy of `payload` with sequence number `seq`.
fn page_image(seq: u32, payload: &[u8]) -> Vec<u8> {
    let mut img = Vec::with_capacity(IMAGE);
    img.extend_from_slice(&PAGE_MAGIC.to_le_bytes());
    img.extend_from_slice(&seq.to_le_bytes());
    img.extend_from_slice(&(payload.len() as u16).to_le_bytes());
    img.extend_from_slice(&[0xFF, 0xFF]);
    img.extend_from_slice(payload);
    let crc = crc32(&img[4..]);
    img.extend_from_slice(&crc.to_le_bytes());
    img
}

/// A stored configuration (counter + record) whose record has a valid
/// magic, version (1, 2 or 3), length and CRC around arbitrary field bytes.
fn sealed_config(inp: &mut Input) -> Vec<u8> {
    let counter = inp.u32();
    let version = 1 + inp.u8() % 3;
    let n = usize::from(inp.u8()) % (MAX_RECORD_LEN - 8);
    let fields = inp.take(n).to_vec();
    let mut rec = vec![b'E', b'P', version];
    if version == 3 {
        rec.extend_from_slice(&((5 + fields.len() + 4) as u16).to_le_bytes());
    } else {
        rec.push((4 + fields.len() + 4).min(255) as u8);
    }
    rec.extend_from_slice(&fields);
    let crc = crc32(&rec);
    rec.extend_from_slice(&crc.to_le_bytes());
    let mut out = counter.to_le_bytes().to_vec();
    out.extend_from_slice(&rec);
    out
}

fn load(store: &mut FlashStore<Flash>, cap: usize) -> Result<Vec<u8>, ()> {
    let mut buf = vec![0u8; cap];
    let n = store.load(Slot::Config, &mut buf).map_err(|_| ())?;
    buf.truncate(n);
    Ok(buf)
}

fuzz_target!(|data: &[u8]| {
    let mut inp = Input(data);
    let mode = inp.u8() % 3;
    let mut mem = vec![0xFFu8; 5 * PAGE];
    // the copy `load` must return in modes 1 and 2: (payload, seq) of the
    // valid copy with the higher sequence number, page A on a tie
    let mut expect: Option<Vec<u8>> = None;
    if mode == 0 {
        for base in [0, PAGE, 4 * PAGE] {
            let len = if base == 4 * PAGE {
                IDENTITY_LEN
            } else {
                IMAGE
            };
            let b = inp.take(len).to_vec();
            mem[base..base + b.len()].copy_from_slice(&b);
        }
    } else {
        let flags = inp.u8();
        let mut best: Option<(u32, Vec<u8>)> = None;
        for (i, base) in [0, PAGE].into_iter().enumerate() {
            let seq = inp.u32();
            let payload = if mode == 2 {
                sealed_config(&mut inp)
            } else {
                let n = usize::from(inp.u8()) % (MAX_PAYLOAD + 1);
                inp.take(n).to_vec()
            };
            let mut img = page_image(seq, &payload);
            // spoil the copy: its commit mark, or a payload or CRC bit
            let valid = match (flags >> (2 * i)) & 3 {
                0 | 1 => true,
                2 => {
                    img[0] ^= 1;
                    false
                }
                _ => {
                    let at = PAGE_HEADER_LEN + usize::from(flags >> 4) % (payload.len() + 4);
                    img[at] ^= 0x80;
                    false
                }
            };
            mem[base..base + img.len()].copy_from_slice(&img);
            if valid && best.as_ref().is_none_or(|(s, _)| seq > *s) {
                best = Some((seq, payload));
            }
        }
        expect = Some(best.map(|(_, p)| p).unwrap_or_default());
    }
    let mut flash = Flash::new(0);
    flash.mem = mem;
    let mut store = FlashStore::new(flash, LAYOUT).expect("page layout supported");

    // As Node::new: the identity, then the configuration into its buffer.
    let mut idb = [0u8; IDENTITY_LEN];
    if let Ok(n) = store.load(Slot::Identity, &mut idb) {
        let _ = Identity::decode(&idb[..n]);
    }
    let old = load(&mut store, MAX_PAYLOAD).expect("a read that cannot fail");
    if let Some(want) = &expect {
        assert_eq!(&old, want, "not the newest valid copy");
    }
    match load(&mut store, MAX_STORED_LEN) {
        Ok(bytes) => {
            assert_eq!(bytes, old);
            if let Ok(cfg) = StoredConfig::decode(&bytes) {
                let mut buf = [0u8; MAX_STORED_LEN];
                let n = cfg.encode(&mut buf).expect("a decoded record encodes");
                assert_eq!(StoredConfig::decode(&buf[..n]).as_ref(), Ok(&cfg));
            }
        }
        // longer than the node's buffer: refused, the node falls back
        Err(()) => assert!(old.len() > MAX_STORED_LEN),
    }

    // A store of new bytes, possibly cut at any step by a power loss.
    let cut = inp.u8();
    let n = usize::from(inp.u8()) % (MAX_PAYLOAD + 1);
    let new = inp.take(n).to_vec();
    let mut flash = store.into_flash();
    if cut < 128 {
        flash.cut_at(usize::from(cut));
    }
    let mut store = FlashStore::new(flash, LAYOUT).expect("page layout supported");
    let stored = store.store(Slot::Config, &new);
    let mut flash = store.into_flash();
    let cut_happened = flash.off;
    flash.power_on();
    let mut store = FlashStore::new(flash, LAYOUT).expect("page layout supported");
    let after = load(&mut store, MAX_PAYLOAD).expect("a read that cannot fail");
    match stored {
        Ok(()) => assert_eq!(after, new),
        Err(_) if cut_happened => assert!(after == old || after == new, "mixed record"),
        // refused without a power loss (sequence exhausted): nothing changed
        Err(_) => assert_eq!(after, old),
    }
});
