//! Authenticated downlinks through the node: verified before they are
//! parsed, refused with a typed reason that the next uplink's status frame
//! shows, the configuration kept. The HMAC itself is checked against
//! RFC 4231 in src/downlink_auth.rs; frame layout in docs/downlink-security.md.
#![allow(
    clippy::cast_possible_truncation,
    clippy::unwrap_used,
    clippy::indexing_slicing,
    missing_docs
)]
mod common;
use common::*;
use firmware::cycle::DownlinkOutcome;
use firmware::downlink::DownlinkError;
use firmware::downlink_auth::AuthError;
use wire::frame::status::{decode_status, DownlinkResult, StatusReport};

fn sent(log: &Log) -> Vec<Vec<u8>> {
    log.borrow()
        .iter()
        .filter_map(|e| match e {
            Ev::Send(f) => Some(f.clone()),
            _ => None,
        })
        .collect()
}

fn last_status(log: &Log) -> StatusReport {
    let s = sent(log);
    let f = s.iter().rev().find(|f| f[0] == 0x12).unwrap(); // a status frame was sent
    decode_status(f).unwrap()
}

fn refused(e: AuthError) -> DownlinkOutcome {
    DownlinkOutcome::Refused(DownlinkError::Auth(e))
}

#[test]
fn every_kind_of_bad_downlink_is_refused_with_its_reason_and_changes_nothing() {
    let new = config_for_blocks(2);
    let good = config_downlink(7, &new);
    let mut bad_tag = good.clone();
    *bad_tag.last_mut().unwrap() ^= 0x01;
    let mut payload = vec![0x01];
    payload.extend(encode(&new));
    let cases: Vec<(&str, Vec<u8>, DownlinkOutcome, DownlinkResult)> = vec![
        (
            "bad tag",
            bad_tag,
            refused(AuthError::BadTag),
            DownlinkResult::BadTag,
        ),
        (
            "other key",
            signed_for(NODE_ID, &[0x43; 32], 7, &payload),
            refused(AuthError::BadTag),
            DownlinkResult::BadTag,
        ),
        (
            "other node",
            signed_for(NODE_ID + 1, &KEY, 7, &payload),
            refused(AuthError::WrongNode {
                addressed: NODE_ID + 1,
            }),
            DownlinkResult::WrongNode,
        ),
        (
            "equal counter",
            config_downlink(3, &new),
            refused(AuthError::Replayed {
                counter: 3,
                stored: 3,
            }),
            DownlinkResult::Replayed,
        ),
        (
            "old counter",
            config_downlink(2, &new),
            refused(AuthError::Replayed {
                counter: 2,
                stored: 3,
            }),
            DownlinkResult::Replayed,
        ),
        (
            "truncated",
            good[..14].to_vec(),
            refused(AuthError::TooShort { len: 14 }),
            DownlinkResult::Truncated,
        ),
        (
            "truncated by one byte (tag shifted)",
            good[..good.len() - 1].to_vec(),
            refused(AuthError::BadTag),
            DownlinkResult::BadTag,
        ),
        (
            // byte 0, the command 0x01, reads as authentication version 1,
            // and the record's magic "EP" as the node id
            "unauthenticated record (the old format)",
            payload.clone(),
            refused(AuthError::WrongNode {
                addressed: u16::from_be_bytes(*b"EP"),
            }),
            DownlinkResult::WrongNode,
        ),
        (
            "unauthenticated measure-now",
            vec![0x02],
            refused(AuthError::TooShort { len: 1 }),
            DownlinkResult::Truncated,
        ),
    ];
    for (what, msg, want, code) in cases {
        let mut bench = Bench::new(8, 256);
        bench
            .storage
            .slots
            .insert("config", stored(3, &config_for_blocks(4)));
        bench.downlinks = vec![msg];
        let (mut node, log) = bench.build();
        node.run_cycle().unwrap();
        assert_eq!(node.downlink(), want, "{what}");
        assert_eq!(node.config(), &config_for_blocks(4), "{what}");
        assert_eq!(node.counter(), 3, "{what}");
        assert_eq!(
            node.devices().storage.slots["config"],
            stored(3, &config_for_blocks(4)),
            "{what}"
        );
        assert_eq!(count(&log, |e| matches!(e, Ev::Store(_))), 0, "{what}");
        assert_eq!(node.refused_downlinks(), 1, "{what}");
        // the refusal goes out with the next uplink
        let s = node.run_cycle().unwrap();
        assert!(s.status_sent, "{what}");
        let st = last_status(&log);
        assert_eq!(st.last_downlink, code, "{what}");
        assert!(st.last_downlink.is_refusal(), "{what}");
        assert_eq!(
            (st.refused_downlinks, st.downlink_counter),
            (1, 3),
            "{what}"
        );
        assert_eq!(s.blocks, 4, "{what}: old configuration kept");
    }
}

#[test]
fn valid_downlink_applies_then_its_replay_and_older_ones_are_refused() {
    let mut bench = Bench::new(16, 256).with_config_blocks(4);
    bench.downlinks = vec![
        config_downlink(5, &config_for_blocks(2)),
        config_downlink(5, &config_for_blocks(3)), // same counter, other content
        config_downlink(4, &config_for_blocks(3)),
        config_downlink(6, &config_for_blocks(3)),
    ];
    let (mut node, log) = bench.build();
    node.run_cycle().unwrap();
    assert_eq!(node.downlink(), DownlinkOutcome::ConfigApplied);
    assert_eq!(node.counter(), 5);
    assert_eq!(node.run_cycle().unwrap().blocks, 2);
    assert_eq!(
        node.downlink(),
        refused(AuthError::Replayed {
            counter: 5,
            stored: 5
        })
    );
    assert_eq!(node.run_cycle().unwrap().blocks, 2);
    assert!(matches!(
        node.downlink(),
        DownlinkOutcome::Refused(DownlinkError::Auth(AuthError::Replayed { .. }))
    ));
    assert_eq!(node.run_cycle().unwrap().blocks, 2);
    assert_eq!(node.downlink(), DownlinkOutcome::ConfigApplied);
    assert_eq!(node.refused_downlinks(), 2);
    let st = last_status(&log);
    assert_eq!(st.downlink_counter, 5); // status of the cycle before the last downlink
    assert_eq!(node.status().downlink_counter, 6);
    assert_eq!(node.status().last_downlink, DownlinkResult::ConfigApplied);
}

#[test]
fn unprovisioned_node_refuses_everything() {
    let mut bench = Bench::new(4, 256).with_config_blocks(4).unprovisioned();
    bench.downlinks = vec![config_downlink(1, &config_for_blocks(2))];
    let (mut node, log) = bench.build();
    node.run_cycle().unwrap();
    assert_eq!(
        node.downlink(),
        DownlinkOutcome::Refused(DownlinkError::NotProvisioned)
    );
    assert_eq!(node.config(), &config_for_blocks(4));
    let st = last_status(&log);
    assert!(!st.provisioned);
    assert_eq!(node.status().last_downlink, DownlinkResult::NotProvisioned);
}

#[test]
fn commands_advance_the_stored_counter_before_they_act() {
    let mut bench = Bench::new(16, 256).with_config_blocks(4);
    bench.downlinks = vec![signed(10, &[0x02])];
    let (mut node, _) = bench.build();
    node.run_cycle().unwrap();
    assert_eq!(node.downlink(), DownlinkOutcome::MeasureNow);
    assert_eq!(node.counter(), 10);
    assert_eq!(
        node.devices().storage.slots["config"],
        stored(10, &config_for_blocks(4))
    );
    // the same measure-now again (e.g. recorded and replayed) is refused
    assert_eq!(
        node.apply_downlink(&signed(10, &[0x02])),
        refused(AuthError::Replayed {
            counter: 10,
            stored: 10
        })
    );
    // authentic but unknown command: refused after verification, counter kept
    assert_eq!(
        node.apply_downlink(&signed(11, &[0x7E])),
        DownlinkOutcome::Refused(DownlinkError::UnknownCommand(0x7E))
    );
    assert_eq!(node.counter(), 10);
    assert_eq!(node.status().last_downlink, DownlinkResult::UnknownCommand);
}

#[test]
fn a_measurement_with_no_downlink_and_no_boot_sends_no_status() {
    let (mut node, log) = Bench::new(12, 256).with_config_blocks(4).build();
    assert!(node.run_cycle().unwrap().status_sent); // boot
    assert!(!node.run_cycle().unwrap().status_sent);
    assert!(!node.run_cycle().unwrap().status_sent);
    assert_eq!(sent(&log).iter().filter(|f| f[0] == 0x12).count(), 1);
    let st = last_status(&log);
    assert_eq!(st.seq, 0);
    assert_eq!(st.last_downlink, DownlinkResult::None);
    assert_eq!(node.status().seq, 1);
}
