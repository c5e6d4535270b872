//! Sequence-number tracking per node: gaps, duplicates, counter resets.

use std::collections::{HashMap, HashSet};

/// A backward jump to a number below this, from more than this far ahead,
/// is read as a node restart (counter reset); shorter backward jumps are late
/// frames.
pub const RESET_WINDOW: u16 = 16;

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

    /// Records one frame (node, number, payload) and classifies it.
    pub fn observe(&mut self, node: u16, seq: u16, payload: &[u8]) -> SeqEvent {
        let st = self.nodes.entry(node).or_default();
        st.frames += 1;
        if !self.forget && !self.seen.insert((node, seq, payload.to_vec())) {
            st.duplicates += 1;
            return SeqEvent::Duplicate;
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
                } else if seq < RESET_WINDOW && last.wrapping_sub(seq) > RESET_WINDOW {
                    SeqEvent::Reset {
                        from: last,
                        to: seq,
                    }
                } else {
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
        }
        ev
    }

    /// Counters of every node, sorted by node id.
    pub fn stats(&self) -> Vec<(u16, NodeSeqStats)> {
        let mut v: Vec<(u16, NodeSeqStats)> =
            self.nodes.iter().map(|(k, s)| (*k, s.clone())).collect();
        v.sort_by_key(|(k, _)| *k);
        v
    }
}
