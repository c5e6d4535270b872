//! Reduced frames read as "as before".
//!
//! A node reporting by exception (`wire::exception`) sends the reduced
//! frame when no finding moved by its margin since its last full frame: the
//! frame means "everything as in my last full frame, and this is my worst
//! defect now". The store keeps what arrived (the reduced frame's one
//! defect row); [`observations`] gives the trend and status evaluation one
//! observation per defect for every report, so trends stay whole: each
//! defect of the node's last full frame (received before it) is repeated
//! with the reduced frame's report id, sequence number and time, and the
//! worst defect takes the reduced frame's score and decision. A reduced
//! frame before any full frame of its node gives only its worst defect, as
//! stored.

use std::collections::{BTreeMap, BTreeSet};

use super::db::{Db, DbError};
use super::series::Point;
use super::store::{self, Observation};

/// Every defect observation in arrival order, reduced frames expanded "as before".
pub fn observations(db: &mut dyn Db) -> Result<Vec<Observation>, DbError> {
    let obs = store::observations(db)?;
    Ok(expand(obs, &reduced_reports(db, None)?))
}

/// Report ids of the stored reduced frames (of these nodes when given).
pub fn reduced_reports(db: &mut dyn Db, nodes: Option<&[u16]>) -> Result<BTreeSet<i64>, DbError> {
    let sql = format!(
        "SELECT id FROM reports WHERE frame_type = 'reduced'{}",
        store::node_filter("node_id", nodes)
    );
    db.query(&sql, &[])?
        .iter()
        .map(|r| store::col(r, 0).int("id"))
        .collect()
}

/// One defect row of a report, as the expansion needs it: the store's
/// [`Observation`] and the trend's [`Point`] (which also carries the size).
pub trait DefectRow: Clone {
    /// Report row id.
    fn report_id(&self) -> i64;
    /// Node.
    fn node(&self) -> u16;
    /// Bearing index and defect kind.
    fn line(&self) -> (u8, &str);
    /// This row of the last full frame, restamped as report `at` (its id,
    /// sequence number and time); with the reduced frame's own row of the
    /// same line (`fresh`, its worst defect) taking the decision.
    fn as_before(&self, at: &Self, fresh: Option<&Self>) -> Self;
}

impl DefectRow for Observation {
    fn report_id(&self) -> i64 {
        self.report_id
    }
    fn node(&self) -> u16 {
        self.node
    }
    fn line(&self) -> (u8, &str) {
        (self.bearing, &self.kind)
    }
    fn as_before(&self, at: &Self, fresh: Option<&Self>) -> Self {
        let (score_db, detected) =
            fresh.map_or((self.score_db, self.detected), |w| (w.score_db, w.detected));
        Observation {
            report_id: at.report_id,
            node: at.node,
            seq: at.seq,
            rx_time: at.rx_time.clone(),
            bearing: self.bearing,
            kind: self.kind.clone(),
            score_db,
            detected,
        }
    }
}

impl DefectRow for Point {
    fn report_id(&self) -> i64 {
        self.report_id
    }
    fn node(&self) -> u16 {
        self.node
    }
    fn line(&self) -> (u8, &str) {
        (self.bearing, &self.kind)
    }
    fn as_before(&self, at: &Self, fresh: Option<&Self>) -> Self {
        let mut p = self.clone();
        p.report_id = at.report_id;
        p.seq = at.seq;
        p.rx_time.clone_from(&at.rx_time);
        p.time_ms = at.time_ms;
        p.band_hz = at.band_hz;
        if let Some(w) = fresh {
            p.score_db = w.score_db;
            p.detected = w.detected;
            // the reduced frame's own size of its worst defect, when it has one
            if w.amplitude_g.is_some() {
                p.amplitude_g = w.amplitude_g;
                p.amplitude_source = w.amplitude_source;
            }
        }
        p
    }
}

/// Expands the rows of the reports in `reduced` (report ids) from the last
/// full report of the same node; `obs` in the order to evaluate (each
/// report's rows together).
pub fn expand<R: DefectRow>(obs: Vec<R>, reduced: &BTreeSet<i64>) -> Vec<R> {
    let mut out = Vec::with_capacity(obs.len());
    let mut last_full: BTreeMap<u16, Vec<R>> = BTreeMap::new();
    let mut i = 0;
    while i < obs.len() {
        let id = obs.get(i).map_or(0, DefectRow::report_id);
        let end = obs
            .iter()
            .skip(i)
            .position(|o| o.report_id() != id)
            .map_or(obs.len(), |n| i + n);
        let group = obs.get(i..end).unwrap_or(&[]);
        i = end;
        let Some(first) = group.first() else { continue };
        if !reduced.contains(&id) {
            last_full.insert(first.node(), group.to_vec());
            out.extend_from_slice(group);
            continue;
        }
        let Some(before) = last_full.get(&first.node()) else {
            out.extend_from_slice(group);
            continue;
        };
        for b in before {
            let fresh = group.iter().find(|w| w.line() == b.line());
            out.push(b.as_before(first, fresh));
        }
        // a worst defect the full frame did not have is kept as it came
        out.extend(
            group
                .iter()
                .filter(|w| !before.iter().any(|b| b.line() == w.line()))
                .cloned(),
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn o(
        id: i64,
        node: u16,
        bearing: u8,
        kind: &str,
        score: Option<f64>,
        detected: bool,
    ) -> Observation {
        Observation {
            report_id: id,
            node,
            seq: u16::try_from(id).unwrap(),
            rx_time: None,
            bearing,
            kind: kind.into(),
            score_db: score,
            detected,
        }
    }

    #[test]
    fn reduced_reports_repeat_the_last_full_with_the_fresh_worst() {
        let obs = vec![
            // a reduced frame before any full frame of node 1: kept as is
            o(1, 1, 0, "bpfo", Some(4.0), false),
            o(2, 1, 0, "bpfo", Some(5.0), false),
            o(2, 1, 0, "bpfi", None, false),
            o(2, 1, 1, "bpfo", Some(9.0), true),
            // node 2's full frame between: does not count for node 1
            o(3, 2, 0, "bpfo", Some(30.0), true),
            o(4, 1, 1, "bpfo", Some(11.0), true),
            o(5, 1, 2, "bsf", Some(3.0), false),
        ];
        let reduced: BTreeSet<i64> = [1, 4, 5].into();
        let got = expand(obs, &reduced);
        let view: Vec<(i64, u8, &str, Option<f64>, bool)> = got
            .iter()
            .map(|o| {
                (
                    o.report_id,
                    o.bearing,
                    o.kind.as_str(),
                    o.score_db,
                    o.detected,
                )
            })
            .collect();
        assert_eq!(
            view,
            [
                (1, 0, "bpfo", Some(4.0), false),
                (2, 0, "bpfo", Some(5.0), false),
                (2, 0, "bpfi", None, false),
                (2, 1, "bpfo", Some(9.0), true),
                (3, 0, "bpfo", Some(30.0), true),
                (4, 0, "bpfo", Some(5.0), false),
                (4, 0, "bpfi", None, false),
                (4, 1, "bpfo", Some(11.0), true),
                (5, 0, "bpfo", Some(5.0), false),
                (5, 0, "bpfi", None, false),
                (5, 1, "bpfo", Some(9.0), true),
                (5, 2, "bsf", Some(3.0), false),
            ]
        );
        assert!(got.iter().filter(|o| o.report_id == 4).all(|o| o.seq == 4));
    }
}
