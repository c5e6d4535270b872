//! Sequence-number tracking per node: gaps, duplicates, counter resets, and
//! the decided order of a node's reports (which one is the latest).
//!
//! A report counter going back is a reset only when the node's status frames
//! show a restart: the node counts its status frames apart, from 0 at every
//! boot, and sends one after the first report of each boot. Any other
//! backward number is a late or replayed frame: stored and counted, never
//! the node's latest report (docs/gateway.md, "Sequence numbers").

use std::collections::{HashMap, HashSet};

/// A backward jump to a number below this, from more than this far ahead,
/// is read as a node restart (counter reset) when a status frame shows the
/// restart; shorter backward jumps, and any without that evidence, are late
/// frames. Status sequence numbers going back below this mark a restart.
pub const RESET_WINDOW: u16 = 16;

/// Without a status frame showing the restart, a counter reset is accepted
/// once this many reports in a row count up from the small number (a boot
/// status frame can be lost, or equal byte for byte to a stored one and so
/// stored once); a single replayed or forged frame never is.
pub const RESET_CONFIRM: u16 = 4;

/// Where a report stands in its node's history: by boot (`epoch`, counted
/// from the resets), then by its sequence number unwrapped over 16-bit wraps
/// (`pos`); a late, replayed or conflicting frame (`late`) sorts before an
/// on-time one at the same place. The latest report is the greatest.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct Order {
    /// Boots seen (resets) before this report.
    pub epoch: u32,
    /// Sequence number unwrapped within the boot.
    pub pos: i64,
    /// Late, replayed, duplicate or conflicting: not the node's position.
    pub late: bool,
}

/// What one frame's sequence number says about the link.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SeqEvent {
    /// First frame seen from this node.
    First,
    /// The next number (including the wrap 65535 -> 0).
    InOrder,
    /// `missing` frames lost between `from` and `to`.
    Gap {
        /// Last number seen before.
        from: u16,
        /// This number.
        to: u16,
        /// Frames lost in between.
        missing: u16,
    },
    /// The same node, number and payload were already seen.
    Duplicate,
    /// Same number as the previous frame but different content.
    Conflict,
    /// The counter went back to a small number: the node restarted.
    Reset {
        /// Last number seen before.
        from: u16,
        /// This number.
        to: u16,
    },
    /// A backward jump that is not a reset: a late or replayed frame.
    Backward {
        /// Last number seen before.
        from: u16,
        /// This number.
        to: u16,
    },
}

impl SeqEvent {
    /// Short name for JSON and tables.
    pub fn name(&self) -> &'static str {
        match self {
            SeqEvent::First => "first",
            SeqEvent::InOrder => "in_order",
            SeqEvent::Gap { .. } => "gap",
            SeqEvent::Duplicate => "duplicate",
            SeqEvent::Conflict => "conflict",
            SeqEvent::Reset { .. } => "reset",
            SeqEvent::Backward { .. } => "backward",
        }
    }

    /// One-line description.
    pub fn describe(&self) -> String {
        match self {
            SeqEvent::Gap { from, to, missing } => {
                format!("gap: {missing} lost between {from} and {to}")
            }
            SeqEvent::Reset { from, to } => format!("counter reset: {from} -> {to}"),
            SeqEvent::Backward { from, to } => format!("backward: {from} -> {to}"),
            e => e.name().to_string(),
        }
    }
}

/// Per-node counters and the last number seen.
#[derive(Clone, Debug, Default)]
pub struct NodeSeqStats {
    /// Last sequence number accepted as the node's position.
    pub last: Option<u16>,
    /// Frames seen (including duplicates).
    pub frames: u64,
    /// Frames lost in gaps.
    pub missing: u64,
    /// Gap events.
    pub gaps: u64,
    /// Exact duplicates.
    pub duplicates: u64,
    /// Same number, different content.
    pub conflicts: u64,
    /// Counter resets.
    pub resets: u64,
    /// Backward jumps.
    pub backward: u64,
}

/// Tracks every node's sequence numbers in arrival order.
#[derive(Debug, Default)]
pub struct SeqTracker {
    nodes: HashMap<u16, NodeSeqStats>,
    seen: HashSet<(u16, u16, Vec<u8>)>,
    /// False for a long-running service whose store already absorbs
    /// duplicates: the set of seen frames is not kept (memory stays flat).
    forget: bool,
    /// Per node: (epoch, unwrapped position) of its last accepted report.
    place: HashMap<u16, (u32, i64)>,
    /// Per node: last status sequence number seen.
    status_last: HashMap<u16, u16>,
    /// Per node: restarts shown by status frames not yet matched to a reset.
    restarts: HashMap<u16, u32>,
    /// Per node: a possible reset without evidence: (next number, run).
    candidate: HashMap<u16, (u16, u16)>,
}

impl SeqTracker {
    /// A tracker with no history.
    pub fn new() -> Self {
        Self::default()
    }

    /// A tracker that keeps no set of seen frames (duplicates are then
    /// the caller's to filter, e.g. by the store's unique key).
    pub fn without_history() -> Self {
        Self {
            forget: true,
            ..Self::default()
        }
    }

    /// Records one status frame (status frames count their own sequence,
    /// from 0 at boot). Returns true when it shows a restart: a new status
    /// frame (not a duplicate) whose number is below [`RESET_WINDOW`] and not
    /// ahead of the node's last status number (back, or the same number with
    /// other content). The node's first status frame is its first boot, not
    /// a restart.
    pub fn observe_status(&mut self, node: u16, status_seq: u16, payload: &[u8]) -> bool {
        if !self.forget && !self.seen.insert((node, status_seq, payload.to_vec())) {
            return false;
        }
        let restart = match self.status_last.get(&node) {
            None => false,
            Some(&last) => {
                let d = status_seq.wrapping_sub(last);
                (d == 0 || d >= 0x8000) && status_seq < RESET_WINDOW
            }
        };
        let last = self.status_last.entry(node).or_insert(status_seq);
        // Late status frames do not move the status position either.
        if restart || status_seq.wrapping_sub(*last) < 0x8000 {
            *last = status_seq;
        }
        if restart {
            *self.restarts.entry(node).or_default() += 1;
        }
        restart
    }

    /// Records one frame (node, number, payload) and classifies it.
    pub fn observe(&mut self, node: u16, seq: u16, payload: &[u8]) -> SeqEvent {
        self.observe_ordered(node, seq, payload).0
    }

    /// As [`observe`](Self::observe), also giving the report's place in the
    /// node's decided order.
    pub fn observe_ordered(&mut self, node: u16, seq: u16, payload: &[u8]) -> (SeqEvent, Order) {
        let restarts = self.restarts.entry(node).or_default();
        let candidate = self.candidate.entry(node).or_insert((0, 0));
        let place = self.place.entry(node).or_insert((0, i64::from(seq)));
        let st = self.nodes.entry(node).or_default();
        st.frames += 1;
        let here = |late: bool, pos: i64, epoch: u32| Order { epoch, pos, late };
        if !self.forget && !self.seen.insert((node, seq, payload.to_vec())) {
            st.duplicates += 1;
            return (SeqEvent::Duplicate, here(true, place.1, place.0));
        }
        let ev = match st.last {
            None => SeqEvent::First,
            Some(last) => {
                // Serial number arithmetic on 16 bits (RFC 1982): forward when
                // the difference mod 2^16 is below 2^15.
                let d = seq.wrapping_sub(last);
                if d == 0 {
                    SeqEvent::Conflict
                } else if d == 1 {
                    SeqEvent::InOrder
                } else if d < 0x8000 {
                    SeqEvent::Gap {
                        from: last,
                        to: seq,
                        missing: d - 1,
                    }
                } else if seq < RESET_WINDOW
                    && last.wrapping_sub(seq) > RESET_WINDOW
                    && *restarts > 0
                {
                    *restarts -= 1;
                    SeqEvent::Reset {
                        from: last,
                        to: seq,
                    }
                } else if candidate.1 > 0 && seq == candidate.0 && candidate.1 + 1 >= RESET_CONFIRM
                {
                    // the run from a small number is long enough: a restart
                    SeqEvent::Reset {
                        from: last,
                        to: seq,
                    }
                } else {
                    if candidate.1 > 0 && seq == candidate.0 {
                        *candidate = (seq.wrapping_add(1), candidate.1 + 1);
                    } else if seq < RESET_WINDOW && last.wrapping_sub(seq) > RESET_WINDOW {
                        *candidate = (seq.wrapping_add(1), 1);
                    }
                    SeqEvent::Backward {
                        from: last,
                        to: seq,
                    }
                }
            }
        };
        match ev {
            SeqEvent::Gap { missing, .. } => {
                st.gaps += 1;
                st.missing += u64::from(missing);
            }
            SeqEvent::Conflict => st.conflicts += 1,
            SeqEvent::Reset { .. } => st.resets += 1,
            SeqEvent::Backward { .. } => st.backward += 1,
            _ => {}
        }
        // Late frames and conflicts do not move the node's position.
        if !matches!(ev, SeqEvent::Backward { .. } | SeqEvent::Conflict) {
            st.last = Some(seq);
            *candidate = (0, 0);
        }
        let order = match ev {
            SeqEvent::First | SeqEvent::Duplicate => here(false, place.1, place.0),
            SeqEvent::InOrder => {
                place.1 += 1;
                here(false, place.1, place.0)
            }
            SeqEvent::Gap { missing, .. } => {
                place.1 += i64::from(missing) + 1;
                here(false, place.1, place.0)
            }
            SeqEvent::Conflict => here(true, place.1, place.0),
            SeqEvent::Reset { .. } => {
                *place = (place.0.saturating_add(1), i64::from(seq));
                here(false, place.1, place.0)
            }
            SeqEvent::Backward { from, to } => {
                here(true, place.1 - i64::from(from.wrapping_sub(to)), place.0)
            }
        };
        (ev, order)
    }

    /// Counters of every node, sorted by node id.
    pub fn stats(&self) -> Vec<(u16, NodeSeqStats)> {
        let mut v: Vec<(u16, NodeSeqStats)> =
            self.nodes.iter().map(|(k, s)| (*k, s.clone())).collect();
        v.sort_by_key(|(k, _)| *k);
        v
    }
}
