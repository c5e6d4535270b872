//! Reduced frames read as "as before".
//!
//! A node reporting by exception (`firmware::exception`) sends the reduced
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

use rusqlite::Connection;

use super::store::{self, Observation};

/// Every defect observation in arrival order, reduced frames expanded "as before".
pub fn observations(conn: &Connection) -> rusqlite::Result<Vec<Observation>> {
    let obs = store::observations(conn)?;
    let mut stmt = conn.prepare("SELECT id FROM reports WHERE frame_type = 'reduced'")?;
    let reduced = stmt
        .query_map([], |r| r.get::<_, i64>(0))?
        .collect::<rusqlite::Result<BTreeSet<i64>>>()?;
    Ok(expand(obs, &reduced))
}

/// Expands the observations of the reports in `reduced` (report ids) from
/// the last full report of the same node; `obs` in arrival order.
pub fn expand(obs: Vec<Observation>, reduced: &BTreeSet<i64>) -> Vec<Observation> {
    let mut out = Vec::with_capacity(obs.len());
    let mut last_full: BTreeMap<u16, Vec<Observation>> = BTreeMap::new();
    let mut i = 0;
    while i < obs.len() {
        let id = obs.get(i).map_or(0, |o| o.report_id);
        let end = obs
            .iter()
            .skip(i)
            .position(|o| o.report_id != id)
            .map_or(obs.len(), |n| i + n);
        let group = obs.get(i..end).unwrap_or(&[]);
        i = end;
        let Some(first) = group.first() else { continue };
        if !reduced.contains(&id) {
            last_full.insert(first.node, group.to_vec());
            out.extend_from_slice(group);
            continue;
        }
        let Some(before) = last_full.get(&first.node) else {
            out.extend_from_slice(group);
            continue;
        };
        let fresh = |b: &Observation| {
            group
                .iter()
                .find(|w| w.bearing == b.bearing && w.kind == b.kind)
        };
        for b in before {
            let (score_db, detected) =
                fresh(b).map_or((b.score_db, b.detected), |w| (w.score_db, w.detected));
            out.push(Observation {
                report_id: first.report_id,
                node: first.node,
                seq: first.seq,
                rx_time: first.rx_time.clone(),
                bearing: b.bearing,
                kind: b.kind.clone(),
                score_db,
                detected,
            });
        }
        // a worst defect the full frame did not have is kept as it came
        out.extend(
            group
                .iter()
                .filter(|w| {
                    !before
                        .iter()
                        .any(|b| b.bearing == w.bearing && b.kind == w.kind)
                })
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
