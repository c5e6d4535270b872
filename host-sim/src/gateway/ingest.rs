//! The one path from an uplink to the store, used by `gateway import`
//! (file lines) and `gateway serve` (MQTT messages): decode, store
//! idempotently in one transaction per batch, then track sequences.

use super::db::{Db, DbError};
use super::input::InputItem;
use super::queries::{self, Origin};
use super::seq::{SeqEvent, SeqTracker};
use super::store;
use dsp_core::frame::{decode_any, Frame};

/// One uplink as received: its bytes (or why there are none) and origin.
#[derive(Clone, Debug)]
pub struct Uplink {
    /// Where it came from and the network's metadata.
    pub origin: Origin,
    /// The input as given (payload text, or the whole message), for the reject log.
    pub text: String,
    /// Frame bytes, or why the input did not give any (a reject reason).
    pub bytes: Result<Vec<u8>, String>,
    /// Node id the transport named (topic level, JSON field), checked against the frame.
    pub claimed_node: Option<u16>,
}

impl Uplink {
    /// An uplink of a file line of `gateway import`.
    pub fn from_item(item: &InputItem) -> Self {
        Self {
            origin: Origin {
                source: item.source.clone(),
                line: item.line,
                rx_time: item.rx_time.clone(),
                rx_time_ms: item.rx_time.as_deref().and_then(super::rfc3339::parse_ms),
                ..Origin::default()
            },
            text: item.text.clone(),
            bytes: item.bytes.clone(),
            claimed_node: None,
        }
    }
}

/// What became of one uplink.
#[derive(Clone, Debug)]
pub enum Outcome {
    /// A frame stored for the first time.
    New {
        /// The decoded frame.
        frame: Frame,
        /// The sequence event (reports only; status frames count their own sequence).
        seq: Option<SeqEvent>,
    },
    /// A frame already stored (a redelivery or duplicate): nothing written.
    Known {
        /// The decoded frame.
        frame: Frame,
    },
    /// Not a frame: recorded in the reject table.
    Rejected {
        /// Why.
        reason: String,
        /// False when the same text and reason were already recorded.
        new: bool,
    },
}

/// Decodes an uplink: the frame or the reject reason.
pub fn decode(u: &Uplink) -> Result<Frame, String> {
    let bytes = u
        .bytes
        .as_ref()
        .map_err(|e| format!("unreadable payload: {e}"))?;
    let frame = decode_any(bytes).map_err(|e| format!("{e}"))?;
    if let Some(claimed) = u.claimed_node {
        let (node, _) = store::node_seq(&frame);
        if node != claimed {
            return Err(format!(
                "node id {claimed} given by the transport differs from the frame's node id {node}"
            ));
        }
    }
    Ok(frame)
}

/// Stores a batch in one transaction; on success the tracker has seen
/// every new report in order. On error nothing is committed (the caller
/// may retry the whole batch: every insert is idempotent).
pub fn store_batch(
    db: &mut dyn Db,
    tracker: &mut SeqTracker,
    batch: &[Uplink],
) -> Result<Vec<Outcome>, DbError> {
    db.begin()?;
    match write(db, batch) {
        Ok(out) => {
            db.commit()?;
            Ok(out
                .into_iter()
                .zip(batch)
                .map(|(o, u)| match o {
                    Outcome::New { frame, .. } => {
                        let (node, seq) = store::node_seq(&frame);
                        let payload = u.bytes.as_deref().unwrap_or(&[]);
                        let seq = if store::is_report(&frame) {
                            Some(tracker.observe(node, seq, payload))
                        } else {
                            // status frames: their own sequence, restart evidence
                            tracker.observe_status(node, seq, payload);
                            None
                        };
                        Outcome::New { frame, seq }
                    }
                    o => o,
                })
                .collect())
        }
        Err(e) => {
            db.rollback();
            Err(e)
        }
    }
}

fn write(db: &mut dyn Db, batch: &[Uplink]) -> Result<Vec<Outcome>, DbError> {
    let mut out = Vec::with_capacity(batch.len());
    for u in batch {
        out.push(match decode(u) {
            Ok(frame) => {
                let payload = u.bytes.as_deref().unwrap_or(&[]);
                if queries::insert_frame(db, &frame, payload, &u.origin)? {
                    Outcome::New { frame, seq: None }
                } else {
                    Outcome::Known { frame }
                }
            }
            Err(reason) => {
                let new =
                    queries::insert_reject(db, &u.origin.source, u.origin.line, &u.text, &reason)?;
                Outcome::Rejected { reason, new }
            }
        });
    }
    Ok(out)
}

/// A tracker that has seen every stored status frame then every stored
/// report (events then refer to the full history), and each report's place
/// in its node's decided order, by report id.
pub fn decided_order(
    db: &mut dyn Db,
    mut tracker: SeqTracker,
) -> Result<
    (
        SeqTracker,
        std::collections::HashMap<i64, super::seq::Order>,
    ),
    DbError,
> {
    for (node, seq, payload) in queries::status_arrivals(db)? {
        tracker.observe_status(node, seq, &payload);
    }
    let mut order = std::collections::HashMap::new();
    for (id, node, seq, payload) in queries::report_arrivals(db)? {
        order.insert(id, tracker.observe_ordered(node, seq, &payload).1);
    }
    Ok((tracker, order))
}

/// A tracker that has seen every stored frame.
pub fn seeded_tracker(db: &mut dyn Db) -> Result<SeqTracker, DbError> {
    Ok(decided_order(db, SeqTracker::new())?.0)
}
