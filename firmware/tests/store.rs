//! The power-safe flash store: records survive a power loss at every step
//! of a store (each page erase and each programmed word), and so does the
//! node's configuration with its replay counter. The flash model is
//! tests/common/flash.rs (after the nRF52840 NVMC: 4-byte words, 4 KiB pages,
//! contents undefined after an interrupted step; programming a word only
//! once per erase is stricter than the part; sources there).
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]
mod common;
use common::flash::{FakeFlash, PAGE};
use common::*;
use firmware::cycle::{ConfigSource, DownlinkOutcome};
use firmware::downlink::DownlinkError;
use firmware::downlink_auth::AuthError;
use firmware::hal::{Slot, Storage};
use firmware::store::{FlashStore, Layout, StoreError, MAX_PAYLOAD, PAGE_MAGIC};

const LAYOUT: Layout = Layout {
    config: [0, PAGE as u32],
    baseline: [2 * PAGE as u32, 3 * PAGE as u32],
    identity: 4 * PAGE as u32,
};

fn store(flash: FakeFlash) -> FlashStore<FakeFlash> {
    FlashStore::new(flash, LAYOUT).unwrap()
}

fn load(s: &mut FlashStore<FakeFlash>, slot: Slot) -> Vec<u8> {
    let mut buf = [0u8; 512];
    let n = s.load(slot, &mut buf).unwrap();
    buf[..n].to_vec()
}

fn record(tag: u8, len: usize) -> Vec<u8> {
    (0..len).map(|i| tag.wrapping_add(i as u8)).collect()
}

#[test]
fn empty_then_alternating_pages_with_growing_sequence() {
    let mut s = store(FakeFlash::new(5));
    assert_eq!(load(&mut s, Slot::Config), Vec::<u8>::new());
    for k in 0..5u8 {
        let r = record(k, 30 + usize::from(k));
        s.store(Slot::Config, &r).unwrap();
        assert_eq!(load(&mut s, Slot::Config), r);
        // copy k lands in page k % 2, with sequence number k + 1
        let page = &s.flash().mem[(usize::from(k) % 2) * PAGE..];
        assert_eq!(&page[..4], &PAGE_MAGIC.to_le_bytes());
        assert_eq!(&page[4..8], &(u32::from(k) + 1).to_le_bytes());
    }
    // slots are independent
    assert_eq!(load(&mut s, Slot::Baseline), Vec::<u8>::new());
    s.store(Slot::Baseline, &[1, 2, 3]).unwrap();
    assert_eq!(load(&mut s, Slot::Baseline), [1, 2, 3]);
    assert_eq!(load(&mut s, Slot::Config), record(4, 34));
}

#[test]
fn limits_and_read_only_identity() {
    let mut s = store(FakeFlash::new(5));
    assert_eq!(
        s.store(Slot::Config, &[0; MAX_PAYLOAD + 1]),
        Err(StoreError::TooLong)
    );
    s.store(Slot::Config, &[7; MAX_PAYLOAD]).unwrap();
    let mut small = [0u8; 10];
    assert_eq!(s.load(Slot::Config, &mut small), Err(StoreError::TooLong));
    assert_eq!(s.store(Slot::Identity, &[1]), Err(StoreError::ReadOnly));
    // an erased identity page reads as empty; a written one as its record
    assert_eq!(load(&mut s, Slot::Identity), Vec::<u8>::new());
    let mut flash = s.into_flash();
    let id = identity_record(3, &KEY);
    flash.mem[4 * PAGE..4 * PAGE + id.len()].copy_from_slice(&id);
    let mut s = store(flash);
    assert_eq!(load(&mut s, Slot::Identity), id);
}

/// Number of steps (erase + programmed words) one store takes.
fn steps_of(before: &FakeFlash, data: &[u8]) -> usize {
    let mut f = FakeFlash::new(5);
    f.mem.clone_from(&before.mem);
    let mut s = store(f);
    s.store(Slot::Config, data).unwrap();
    s.flash().steps
}

#[test]
fn power_loss_at_every_step_leaves_old_or_new_never_a_mix() {
    // From an empty slot, then over one copy, then over two copies (the
    // store then erases the page holding the older one).
    let mut flash = FakeFlash::new(5);
    let mut history: Vec<Vec<u8>> = Vec::new();
    for round in 0..4u8 {
        let new = record(0x10 * round, 20 + 17 * usize::from(round));
        let total = steps_of(&flash, &new);
        // erase + header/payload/CRC words + the magic word
        assert_eq!(total, 1 + (12 + new.len() + 4).div_ceil(4));
        for k in 0..total {
            let mut f = FakeFlash::new(5);
            f.mem.clone_from(&flash.mem);
            f.cut_at(k);
            let mut s = store(f);
            assert!(
                s.store(Slot::Config, &new).is_err(),
                "round {round} step {k}"
            );
            // reboot
            let mut f = s.into_flash();
            f.power_on();
            let mut s = store(f);
            let got = load(&mut s, Slot::Config);
            let old = history.last().cloned().unwrap_or_default();
            assert_eq!(got, old, "round {round}: power lost at step {k} of {total}");
            // and the store works again after the reboot
            s.store(Slot::Config, &new).unwrap();
            assert_eq!(load(&mut s, Slot::Config), new);
        }
        let mut s = store(flash);
        s.store(Slot::Config, &new).unwrap();
        flash = s.into_flash();
        history.push(new);
    }
}

#[test]
fn a_corrupted_newest_copy_falls_back_to_the_previous_one() {
    let mut s = store(FakeFlash::new(5));
    s.store(Slot::Config, &record(1, 40)).unwrap();
    s.store(Slot::Config, &record(2, 40)).unwrap();
    let mut f = s.into_flash();
    f.mem[PAGE + 30] ^= 0x04; // bit rot in the newest copy (page 1)
    let mut s = store(f);
    assert_eq!(load(&mut s, Slot::Config), record(1, 40));
    // the next store replaces the damaged page, not the good one
    s.store(Slot::Config, &record(3, 40)).unwrap();
    assert_eq!(load(&mut s, Slot::Config), record(3, 40));
    assert_eq!(&s.flash().mem[..4], &PAGE_MAGIC.to_le_bytes());
}

/// A node over the flash store, provisioned with the bench identity.
fn provisioned_flash(counter: u32, blocks: u32) -> FakeFlash {
    let mut s = store(FakeFlash::new(5));
    s.store(Slot::Config, &stored(counter, &config_for_blocks(blocks)))
        .unwrap();
    let mut f = s.into_flash();
    let id = identity_record(NODE_ID, &KEY);
    f.mem[4 * PAGE..4 * PAGE + id.len()].copy_from_slice(&id);
    f.power_on();
    f
}

#[test]
fn config_downlink_survives_power_loss_at_every_step_and_replay_stays_refused() {
    let new = config_for_blocks(2);
    let msg = config_downlink(9, &new);
    // steps of the store the downlink triggers
    let (mut node, _) = Bench::new(1, 256).build_with(store(provisioned_flash(3, 4)));
    assert_eq!(node.config_source(), ConfigSource::Stored);
    assert_eq!(node.counter(), 3);
    assert_eq!(node.apply_downlink(&msg), DownlinkOutcome::ConfigApplied);
    let total = node.devices().storage.flash().steps;
    assert!(total > 10, "{total}");

    for k in 0..=total {
        let mut f = provisioned_flash(3, 4);
        f.cut_at(k);
        let (mut node, _) = Bench::new(1, 256).build_with(store(f));
        let out = node.apply_downlink(&msg);
        // power back on: a fresh boot from the same flash
        let mut f = FlashStore::into_flash(node_storage(node));
        f.power_on();
        let (mut node, _) = Bench::new(1, 256).build_with(store(f));
        assert_eq!(node.config_source(), ConfigSource::Stored, "step {k}");
        if k < total {
            assert_eq!(out, DownlinkOutcome::NotStored, "step {k}");
            assert_eq!(node.config(), &config_for_blocks(4), "step {k}");
            assert_eq!(node.counter(), 3);
            // the gateway resends: now it applies
            assert_eq!(node.apply_downlink(&msg), DownlinkOutcome::ConfigApplied);
        } else {
            assert_eq!(out, DownlinkOutcome::ConfigApplied);
            assert_eq!(node.config(), &new);
            assert_eq!(node.counter(), 9);
            // after the power cycle the same frame is a replay
            assert_eq!(
                node.apply_downlink(&msg),
                DownlinkOutcome::Refused(DownlinkError::Auth(AuthError::Replayed {
                    counter: 9,
                    stored: 9
                }))
            );
        }
    }
}

fn node_storage<St: Storage>(node: MockNode<St>) -> St {
    node.into_devices().storage
}
