//! `envord gateway decode`: sequence tracking, rejects, input forms.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;
use host_sim::gateway::input::to_base64;
use host_sim::gateway::seq::{SeqEvent, SeqTracker};

#[test]
fn tracker_finds_gaps_duplicates_resets_and_wraps() {
    let mut t = SeqTracker::new();
    let p = |s: u16| frame(7, s, 5.0, false);
    assert_eq!(t.observe(7, 65533, &p(65533)), SeqEvent::First);
    assert_eq!(t.observe(7, 65534, &p(65534)), SeqEvent::InOrder);
    // RFC 1982 serial number arithmetic (16 bits): 65534 -> 0 is forward by 2,
    // so 65535 was lost.
    assert_eq!(
        t.observe(7, 0, &p(0)),
        SeqEvent::Gap {
            from: 65534,
            to: 0,
            missing: 1
        }
    );
    assert_eq!(t.observe(7, 1, &p(1)), SeqEvent::InOrder);
    assert_eq!(t.observe(7, 1, &p(1)), SeqEvent::Duplicate);
    assert_eq!(
        t.observe(7, 5, &p(5)),
        SeqEvent::Gap {
            from: 1,
            to: 5,
            missing: 3
        }
    );
    // Same number, other content.
    assert_eq!(
        t.observe(7, 5, &frame(7, 5, 9.0, false)),
        SeqEvent::Conflict
    );
    // A late frame (3 was missing) goes backwards but is not a restart.
    assert_eq!(
        t.observe(7, 3, &p(3)),
        SeqEvent::Backward { from: 5, to: 3 }
    );
    assert_eq!(t.observe(7, 6, &p(6)), SeqEvent::InOrder);
    // Node restart: 6 -> 0 would be a 65530-frame gap forwards; a small number after
    // a backward jump is a counter reset when the node's status frames show the
    // restart (their own counter starts again).
    let far = 2000u16;
    assert_eq!(
        t.observe(7, far, &p(far)),
        SeqEvent::Gap {
            from: 6,
            to: far,
            missing: far - 7
        }
    );
    assert!(!t.observe_status(7, 2, &status(7, 2, 0, 0)));
    assert!(t.observe_status(7, 0, &status(7, 0, 0, 0)));
    assert_eq!(
        t.observe(7, 0, &frame(7, 0, 4.0, false)),
        SeqEvent::Reset { from: far, to: 0 }
    );
    let s = &t.stats()[0].1;
    assert_eq!(
        (
            s.gaps,
            s.missing,
            s.duplicates,
            s.conflicts,
            s.resets,
            s.backward
        ),
        (3, 1 + 3 + u64::from(far - 7), 1, 1, 1, 1)
    );
}

#[test]
fn decode_reports_events_and_keeps_rejects() {
    let dir = tempfile::tempdir().unwrap();
    let mut lines = Vec::new();
    for s in [10u16, 11, 14, 14, 15] {
        lines.push(format!(
            "2026-05-0{}T10:00:00Z {}",
            s % 9 + 1,
            hex(&frame(3, s, 5.0, false))
        ));
    }
    let mut bad = frame(3, 16, 5.0, false);
    bad[20] ^= 0x01;
    lines.push(hex(&bad)); // line 6: bad CRC
    lines.push("zz-not-a-frame!".into()); // line 7: unreadable
    lines.push(to_base64(&reduced(3, 16, 25.0))); // line 8: base64, reduced
    lines.push(hex(&frame(3, 17, 5.0, false)[..30])); // line 9: truncated
    std::fs::write(dir.path().join("uplinks.txt"), lines.join("\n")).unwrap();
    let o = run(
        &[
            "gateway",
            "decode",
            "uplinks.txt",
            "--rejects",
            "rejects.jsonl",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let recs: Vec<serde_json::Value> = stdout(&o)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    // Nothing dropped: one record per input line.
    assert_eq!(recs.len(), 9);
    let ev: Vec<String> = recs
        .iter()
        .filter(|r| r["type"] == "report")
        .map(|r| r["sequence"]["event"].as_str().unwrap().to_string())
        .collect();
    assert_eq!(
        ev,
        [
            "first",
            "in_order",
            "gap",
            "duplicate",
            "in_order",
            "in_order"
        ]
    );
    assert_eq!(recs[2]["sequence"]["missing"], 2);
    assert_eq!(recs[7]["report"]["frame"], "reduced");
    assert_eq!(recs[7]["report"]["worst"]["score_db"], 25.0);
    assert_eq!(recs[0]["rx_time"], "2026-05-02T10:00:00Z");
    let rejects: Vec<&serde_json::Value> = recs.iter().filter(|r| r["type"] == "reject").collect();
    assert_eq!(rejects.len(), 3);
    assert_eq!(rejects[0]["line"], 6);
    assert!(rejects[0]["reason"]
        .as_str()
        .unwrap()
        .starts_with("bad CRC"));
    assert!(rejects[1]["reason"].as_str().unwrap().contains("base64"));
    assert!(rejects[2]["reason"]
        .as_str()
        .unwrap()
        .starts_with("truncated"));
    let log = std::fs::read_to_string(dir.path().join("rejects.jsonl")).unwrap();
    assert_eq!(log.lines().count(), 3);
    // --strict turns rejects into exit code 2 naming file and line.
    let o = run(
        &["gateway", "decode", "uplinks.txt", "--strict", "--table"],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("uplinks.txt:6"));
    assert!(stdout(&o).contains("REJECT"));
}

#[test]
fn decode_binary_file_of_concatenated_frames() {
    let dir = tempfile::tempdir().unwrap();
    let mut data = Vec::new();
    data.extend(frame(9, 1, 5.0, false));
    data.extend(reduced(9, 2, 30.0));
    data.extend(frame(9, 3, 6.0, false));
    data.extend([0x77, 0x01, 0x02]); // trailing junk: kept as one reject
    std::fs::write(dir.path().join("frames.bin"), &data).unwrap();
    let o = run(
        &["gateway", "decode", "--format", "binary", "frames.bin"],
        dir.path(),
    );
    assert!(o.status.success());
    let recs: Vec<serde_json::Value> = stdout(&o)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(recs.len(), 4);
    assert_eq!(recs[1]["report"]["seq"], 2);
    assert_eq!(recs[2]["report"]["seq"], 3);
    assert_eq!(recs[3]["type"], "reject");
    assert_eq!(recs[3]["reason"], "unknown format version 7");
}

#[test]
fn missing_input_file_is_exit_2() {
    let dir = tempfile::tempdir().unwrap();
    let o = run(&["gateway", "decode", "nope.txt"], dir.path());
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("nope.txt"));
}
