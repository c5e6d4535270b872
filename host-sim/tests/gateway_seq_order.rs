//! Which report is a node's latest: a frame with an old sequence number and
//! a new payload is not a counter reset unless the node's status frames show
//! that it restarted, and a late or replayed frame never replaces a newer
//! latest report (docs/gateway.md, "Sequence numbers").
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;
use host_sim::gateway::seq::{SeqEvent, SeqTracker};

fn import(dir: &std::path::Path, frames: &[Vec<u8>]) {
    let text: Vec<String> = frames.iter().map(|f| hex(f)).collect();
    std::fs::write(dir.join("in.txt"), text.join("\n") + "\n").unwrap();
    let o = run(&["gateway", "import", "--db", "gw.sqlite", "in.txt"], dir);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

/// (latest BPFO score of bearing 0, resets, backward) of `node` from
/// `gateway status --json`.
fn latest(dir: &std::path::Path, node: u16) -> (f64, u64, u64) {
    let o = run(&["gateway", "status", "--db", "gw.sqlite", "--json"], dir);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_str(stdout(&o).trim()).unwrap();
    let d = v["defects"]
        .as_array()
        .unwrap()
        .iter()
        .find(|d| d["node"] == node && d["bearing"] == 0 && d["kind"] == "BPFO")
        .unwrap();
    let l = v["links"]
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["node"] == node)
        .unwrap();
    (
        d["latest_db"].as_f64().unwrap(),
        l["resets"].as_u64().unwrap(),
        l["backward"].as_u64().unwrap(),
    )
}

/// 41 quiet reports (seq 0..=40) and the status frame of the node's boot.
fn history(node: u16) -> Vec<Vec<u8>> {
    let mut f = vec![frame(node, 0, 5.0, false), status(node, 0, 0, 0)];
    f.extend((1..=40u16).map(|s| frame(node, s, 5.0, false)));
    f
}

#[test]
fn an_old_number_with_a_new_payload_is_not_a_reset_nor_the_latest() {
    let dir = tempfile::tempdir().unwrap();
    let mut f = history(1);
    // seq 3 again, with other content (a replayed or forged frame): it would
    // pass the old "small number after a long way back" reset rule.
    f.push(frame(1, 3, 35.0, true));
    import(dir.path(), &f);
    assert_eq!(latest(dir.path(), 1), (5.0, 0, 1));
}

#[test]
fn a_late_frame_does_not_replace_the_latest_report() {
    let dir = tempfile::tempdir().unwrap();
    let mut f = history(2);
    f.remove(30); // seq 29 lost on the way ...
    import(dir.path(), &f);
    // ... and arrives late, with a high score.
    import(dir.path(), &[frame(2, 29, 28.0, true)]);
    assert_eq!(latest(dir.path(), 2), (5.0, 0, 1));
}

#[test]
fn a_restart_shown_by_the_status_frames_is_a_reset_and_its_report_the_latest() {
    let dir = tempfile::tempdir().unwrap();
    let mut f = history(3);
    // The node restarts: its report counter and its status counter begin
    // again at 0, and a status frame follows the first report after boot
    // (one downlink refused since: not the same bytes as the first boot's).
    f.push(frame(3, 0, 35.0, true));
    f.push(status(3, 0, 0, 1));
    import(dir.path(), &f);
    assert_eq!(latest(dir.path(), 3), (35.0, 1, 0));
}

#[test]
fn a_restart_without_a_new_status_frame_is_a_reset_after_a_run_of_reports() {
    let dir = tempfile::tempdir().unwrap();
    let mut f = history(4);
    // The boot status frame equals the first boot's byte for byte (stored
    // once): no evidence. Three reports from 0 are not yet a reset ...
    f.push(frame(4, 0, 25.0, true));
    f.push(status(4, 0, 0, 0));
    f.push(frame(4, 1, 25.0, true));
    f.push(frame(4, 2, 25.0, true));
    import(dir.path(), &f);
    assert_eq!(latest(dir.path(), 4), (5.0, 0, 3));
    // ... the fourth in a row is (seq::RESET_CONFIRM).
    import(dir.path(), &[frame(4, 3, 26.0, true)]);
    assert_eq!(latest(dir.path(), 4), (26.0, 1, 3));
}

#[test]
fn the_tracker_needs_status_evidence_for_a_reset() {
    let p = |s: u16, db: f32| frame(9, s, db, false);
    let mut t = SeqTracker::new();
    t.observe_status(9, 0, &status(9, 0, 0, 0));
    for s in 0..=40u16 {
        t.observe(9, s, &p(s, 5.0));
    }
    assert_eq!(
        t.observe(9, 2, &p(2, 9.0)),
        SeqEvent::Backward { from: 40, to: 2 }
    );
    // the node's status counter starts again: it restarted
    assert!(t.observe_status(9, 0, &status(9, 0, 0, 1)));
    assert_eq!(
        t.observe(9, 0, &p(0, 9.0)),
        SeqEvent::Reset { from: 40, to: 0 }
    );
    // one restart explains one reset only
    for s in 1..=30u16 {
        t.observe(9, s, &p(s, 7.0));
    }
    assert_eq!(
        t.observe(9, 1, &p(1, 8.0)),
        SeqEvent::Backward { from: 30, to: 1 }
    );
    // a late frame sorts before the latest, a reset after everything before it
    let (_, late) = t.observe_ordered(9, 20, &p(20, 30.0));
    let (_, next) = t.observe_ordered(9, 31, &p(31, 7.0));
    assert!(late < next && late.late && !next.late);
}
