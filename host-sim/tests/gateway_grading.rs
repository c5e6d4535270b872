//! The incremental grading (`gateway::grading`, what the service's alarm
//! evaluation and the dashboard keep between evaluations) gives exactly the
//! states of a full re-grade of the store (`trend_cmd::grade_db`, what
//! `gateway status` prints), checked after every batch of a replay with
//! gaps, counter resets (with and without the boot status frame), late and
//! conflicting frames, reduced frames, band changes and a limits change.
//! The reference is the project's own full re-grade, whose rules are checked
//! against their sources in gateway_alarm_grading and gateway_seq_order.
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

use host_sim::gateway::alarms::{line_changes, state_name};
use host_sim::gateway::db;
use host_sim::gateway::grading::Grading;
use host_sim::gateway::ingest::{self, Origin, Uplink};
use host_sim::gateway::seq::SeqTracker;
use host_sim::gateway::trend_cmd::grade_db;
use std::collections::BTreeSet;
use wire::frame::{encode, encode_reduced, BearingResult, DefectResult, FrameReport};

/// Small deterministic generator (64-bit LCG, Knuth's MMIX constants).
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> u32 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (self.0 >> 33) as u32
    }
    fn unit(&mut self) -> f32 {
        self.next() as f32 / (1u64 << 31) as f32
    }
}

fn full(node: u16, seq: u16, amp_g: f32, detected: bool, salt: f32) -> FrameReport {
    let mut r = FrameReport {
        node_id: node,
        seq,
        speed_rpm: 1180.0 + salt,
        ..FrameReport::default()
    };
    for b in 0..2 {
        let mut br = BearingResult::default();
        for (k, d) in br.defects.iter_mut().enumerate() {
            *d = DefectResult {
                score_db: 3.0 + k as f32 + salt * 0.01,
                amplitude_1x_g: 0.001 * (1.0 + 0.3 * salt / 100.0),
                harmonics: 1,
                detected: false,
                line: None,
            };
        }
        if b == 0 {
            br.defects[0] = DefectResult {
                score_db: if detected { 22.0 } else { 4.0 },
                amplitude_1x_g: amp_g,
                harmonics: 4,
                detected,
                line: None,
            };
        }
        r.bearings.push(br).unwrap();
    }
    r
}

fn bytes(r: &FrameReport, reduced: bool) -> Vec<u8> {
    if reduced {
        let mut buf = [0u8; 11];
        encode_reduced(r, &mut buf).unwrap();
        buf.to_vec()
    } else {
        let mut buf = [0u8; 64];
        let n = encode(r, &mut buf).unwrap();
        buf[..n].to_vec()
    }
}

fn status(node: u16, seq: u16, band_lo: f32) -> Vec<u8> {
    use wire::frame::status::{
        encode_status, BandSource, DownlinkResult, StatusReport, SurveyStatus,
    };
    let r = StatusReport {
        node_id: node,
        seq,
        provisioned: true,
        downlink_counter: u32::from(seq),
        last_downlink: DownlinkResult::ConfigApplied,
        survey: SurveyStatus::Stored,
        band_source: BandSource::Survey,
        band_hz: [band_lo, band_lo * 2.0],
        band_kurtosis: 6.5,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 32];
    let n = encode_status(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

const T0: i64 = 1_772_409_600_000;

/// The replay: (receive time, node, frame bytes) in arrival order.
fn replay() -> Vec<(i64, u16, Vec<u8>)> {
    let mut g = Lcg(0x656e_766f_7264);
    let nodes = 10u16;
    let mut seq = [0u16; 10];
    let mut sseq = [0u16; 10];
    let mut out = Vec::new();
    for slot in 0..240u16 {
        for node in 0..nodes {
            let n = usize::from(node);
            let t = T0 + i64::from(slot) * 600_000 + i64::from(node) * 1000;
            // node 3 restarts at slot 120 and sends its boot status frame
            // after the first report; node 4 restarts without one (the reset
            // is accepted after a run of reports); node 8 goes silent
            if (node == 3 || node == 4) && slot == 120 {
                seq[n] = 0;
            }
            if node == 8 && slot > 200 {
                continue;
            }
            let band = if node % 2 == 0 && slot >= 100 {
                3000.0
            } else {
                2519.842
            };
            if slot % 12 == 11 {
                out.push((t, node, status(node, sseq[n], band)));
                sseq[n] = sseq[n].wrapping_add(1);
                continue;
            }
            let q = seq[n];
            seq[n] = q.wrapping_add(1);
            if g.next() % 29 == 0 {
                continue; // a gap
            }
            // nodes 0..3 rise into danger and back; the others wander
            let rise = if node < 3 {
                let x = f32::from(slot % 120) / 60.0;
                if x < 1.0 {
                    x
                } else {
                    2.0 - x
                }
            } else {
                0.0
            };
            let amp = 0.01 * 10f32.powf(rise * 1.6) * (0.8 + 0.4 * g.unit());
            let detected = rise > 0.4 || (node == 9 && g.next() % 11 == 0);
            let r = full(node, q, amp, detected, g.unit() * 100.0);
            let reduced = (usize::from(slot) + n) % 3 == 0;
            out.push((t, node, bytes(&r, reduced)));
            if node == 3 && slot == 120 {
                sseq[n] = 0;
                out.push((t + 10, node, status(node, 0, band)));
                sseq[n] = 1;
            }
            // node 5 replays an older number with a new payload (late);
            // node 6 sends one number twice with other content (conflict)
            if node == 5 && slot % 37 == 5 && q > 10 {
                let late = full(node, q - 7, amp * 3.0, true, 7.0);
                out.push((t + 20, node, bytes(&late, false)));
            }
            if node == 6 && slot == 77 {
                let other = full(node, q, amp * 1.5, true, 9.0);
                out.push((t + 20, node, bytes(&other, false)));
            }
        }
    }
    out
}

fn uplink(t: i64, i: usize, b: Vec<u8>) -> Uplink {
    Uplink {
        origin: Origin {
            source: "replay".into(),
            line: i,
            rx_time_ms: Some(t),
            ..Origin::default()
        },
        text: String::new(),
        bytes: Ok(b),
        claimed_node: None,
    }
}

fn states_json(v: &[host_sim::gateway::trend::DefectState]) -> String {
    serde_json::to_string(v).unwrap()
}

#[test]
fn incremental_equals_full_regrade() {
    let dir = tempfile::tempdir().unwrap();
    let url = dir.path().join("g.sqlite").to_string_lossy().into_owned();
    let mut db = db::open(&url).unwrap();
    let mut grading = Grading::new(&url);
    let mut tracker = SeqTracker::without_history();
    let frames = replay();
    let mut g = Lcg(7);
    let mut i = 0;
    let mut batches = 0;
    let mut seen: BTreeSet<(i64, u8, String, String)> = BTreeSet::new();
    let mut limits_changed = false;
    while i < frames.len() {
        let n = 1 + (g.next() % 40) as usize;
        let part = &frames[i..(i + n).min(frames.len())];
        let batch: Vec<Uplink> = part
            .iter()
            .enumerate()
            .map(|(j, (t, _, b))| uplink(*t, i + j, b.clone()))
            .collect();
        ingest::store_batch(db.as_mut(), &mut tracker, &batch).unwrap();
        let mut dirty: Vec<u16> = part.iter().map(|(_, n, _)| *n).collect();
        dirty.sort_unstable();
        dirty.dedup();
        i += part.len();
        batches += 1;
        // halfway: a hand-set limit for node 1 (every line graded again)
        if !limits_changed && i > frames.len() / 2 {
            db.execute(
                "INSERT INTO point_limits (node_id, bearing, kind, alert_db, danger_db, stale_after_s, origin) VALUES (1, 0, 'BPFO', 4.0, 10.0, 1800.0, 'test')",
                &[],
            )
            .unwrap();
            limits_changed = true;
        }
        for t in grading.update(db.as_mut(), &dirty).unwrap() {
            let p = &t.graded.point;
            seen.insert((
                p.report_id,
                p.bearing,
                p.kind.clone(),
                state_name(t.graded.state).to_string(),
            ));
        }
        let now = part.last().map(|(t, _, _)| *t + 900_000);
        let full: Vec<_> = grade_db(db.as_mut(), &url, now, None)
            .unwrap()
            .into_iter()
            .map(|l| l.state)
            .collect();
        assert_eq!(
            states_json(&grading.staled_states(now)),
            states_json(&full),
            "after batch {batches} (frame {i})"
        );
    }
    // every alarm change of the final full history was given on the way
    let lines = grade_db(db.as_mut(), &url, None, None).unwrap();
    let changes = line_changes(&lines);
    assert!(
        changes.len() >= 6,
        "the replay must cross the alarm states: {}",
        changes.len()
    );
    for e in &changes {
        let key = (
            e.report_id.unwrap(),
            e.bearing_index.unwrap(),
            e.kind.clone().unwrap(),
            e.state_to.clone(),
        );
        let found = seen.iter().any(|(r, b, k, s)| {
            (*r, *b, k.clone()) == (key.0, key.1, key.2.clone()) && *s == key.3
        });
        assert!(found, "change not given incrementally: {e:?}");
    }
    // the late and conflicting frames and the restarts were read whole
    // again; everything else was folded on
    assert!(grading.rebuilds > 20, "rebuilds {}", grading.rebuilds);
    assert!(
        grading.rebuilds < u64::try_from(batches).unwrap(),
        "rebuilds {} of {batches} batches: not incremental",
        grading.rebuilds
    );
    let resets: u64 = tracker.stats().iter().map(|(_, s)| s.resets).sum();
    let backward: u64 = tracker.stats().iter().map(|(_, s)| s.backward).sum();
    assert!(
        resets >= 2 && backward >= 3,
        "resets {resets}, backward {backward}"
    );
    eprintln!(
        "{} frames in {batches} batches; {} changes; {} rebuilds; resets {resets}, backward {backward}",
        frames.len(),
        changes.len(),
        grading.rebuilds
    );
}
