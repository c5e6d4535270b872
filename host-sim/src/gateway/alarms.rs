//! Alarm changes seen by the service, written to `alarm_events` and
//! published to the alarm topic:
//!
//! * a line (node, bearing, defect kind) entering or leaving ALERT/DANGER:
//!   the transitions of its graded history as `trend_cmd::grade_db` gives it,
//!   i.e. the states `gateway status` and the dashboard print, recorded in
//!   the dashboard's form (event `enter`/`leave`, bearing name, report id)
//!   and with its check, so that the two never record one change twice;
//! * a node going silent (no frame for N expected intervals) or reporting
//!   again (`silent`: `silent`/`reporting`);
//! * a node's sensor or tach fault flag set or cleared (`sensor_fault`,
//!   `tach_fault`: `on`/`off`; sensor fault = sensor fault or clipping, tach
//!   fault = pulses missing or irregular, as the dashboard counts them).
//!
//! Grading is incremental (`grading.rs`): every `eval_ms` the nodes with new
//! frames since the last evaluation fold only those frames into their lines'
//! running states (a node seen for the first time, or whose new frames do
//! not come after what it folded, is read whole once), so an evaluation
//! costs what arrived, not the store's history.

use super::db::{Db, DbError, Val};
use super::grading::{Grading, Transition};
use super::store::col;
use super::trend::{Line, State};
use crate::error::CliError;
use std::collections::{BTreeSet, HashMap, HashSet};
use std::time::{Duration, Instant};

/// One alarm change to record and publish.
#[derive(Clone, Debug, serde::Serialize)]
pub struct AlarmEvent {
    /// When: the causing report's receive time (line states) or the
    /// service's clock (node events), ms since the Unix epoch.
    pub at_ms: i64,
    /// Node.
    pub node: u16,
    /// Bearing name ("node N bearing B"), for line events.
    pub bearing: Option<String>,
    /// Bearing index at the node, for line events.
    pub bearing_index: Option<u8>,
    /// Defect kind, for line events.
    pub kind: Option<String>,
    /// `enter`, `leave`, `silent`, `sensor_fault`, `tach_fault`.
    pub event: String,
    /// State before.
    pub state_from: Option<String>,
    /// State after.
    pub state_to: String,
    /// The report that caused a line event.
    pub report_id: Option<i64>,
}

/// The state names the dashboard records (web/summary.rs).
pub fn state_name(s: State) -> &'static str {
    match s {
        State::NoData => "nodata",
        State::Learning => "learning",
        State::Normal => "normal",
        State::Stale => "stale",
        State::NotCovered => "not_covered",
        State::Alert => "alert",
        State::Danger => "danger",
    }
}

fn is_alarm(s: State) -> bool {
    s >= State::Alert
}

/// Every entering/leaving of ALERT/DANGER in the graded histories (the
/// dashboard's rule: a change into, out of or between the alarm states).
pub fn line_changes(lines: &[Line]) -> Vec<AlarmEvent> {
    lines
        .iter()
        .flat_map(|l| super::grading::transitions(&l.history))
        .map(|t| event_of(&t))
        .collect()
}

/// The alarm event of one line transition.
pub fn event_of(t: &Transition) -> AlarmEvent {
    let p = &t.graded.point;
    let now = t.graded.state;
    AlarmEvent {
        at_ms: p.time_ms.unwrap_or(0),
        node: p.node,
        bearing: Some(format!("node {} bearing {}", p.node, p.bearing)),
        bearing_index: Some(p.bearing),
        kind: Some(p.kind.clone()),
        event: if is_alarm(now) { "enter" } else { "leave" }.into(),
        state_from: Some(state_name(t.from).into()),
        state_to: state_name(now).into(),
        report_id: Some(p.report_id),
    }
}

/// (report id, bearing, kind, event, state_to): the dashboard's check key.
type LineKey = (i64, String, String, String, String);

fn line_key(e: &AlarmEvent) -> Option<LineKey> {
    Some((
        e.report_id?,
        e.bearing.clone()?,
        e.kind.clone()?,
        e.event.clone(),
        e.state_to.clone(),
    ))
}

/// Node event classes.
pub const EV_SILENT: &str = "silent";
/// Sensor fault flag (sensor fault or clipping).
pub const EV_SENSOR: &str = "sensor_fault";
/// Tach fault flag (pulses missing or irregular).
pub const EV_TACH: &str = "tach_fault";

fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
        .unwrap_or(0)
}

/// The alarm tracker of one service instance (runs on its own thread
/// and store connection).
pub struct Alarms {
    url: String,
    /// Each line's running grading state.
    grading: Grading,
    /// Nodes with new frames since the last evaluation.
    dirty: BTreeSet<u16>,
    /// Per node, the stored line events (loaded once per node).
    recorded: HashMap<u16, HashSet<LineKey>>,
    /// Last recorded state of every node condition (node, event class).
    node_state: HashMap<(u16, String), String>,
    last_seen: HashMap<u16, Instant>,
    silent_after: Duration,
}

impl Alarms {
    /// Loads the last recorded node events and the known nodes; every known
    /// node gets `silent_after` from now before it counts as silent.
    pub fn new(db: &mut dyn Db, url: &str, silent_after: Duration) -> Result<Self, DbError> {
        let mut node_state = HashMap::new();
        for r in db.query(
            "SELECT node_id, event, state_to FROM alarm_events WHERE report_id IS NULL ORDER BY id",
            &[],
        )? {
            let node = super::store::u16_of(col(&r, 0), "node_id")?;
            if let (Some(ev), Some(to)) = (col(&r, 1).opt_text(), col(&r, 2).opt_text()) {
                node_state.insert((node, ev), to);
            }
        }
        let now = Instant::now();
        let mut last_seen = HashMap::new();
        for r in db.query(
            "SELECT DISTINCT node_id FROM reports UNION SELECT DISTINCT node_id FROM node_status",
            &[],
        )? {
            last_seen.insert(super::store::u16_of(col(&r, 0), "node_id")?, now);
        }
        Ok(Self {
            url: url.to_string(),
            grading: Grading::new(url),
            dirty: BTreeSet::new(),
            recorded: HashMap::new(),
            node_state,
            last_seen,
            silent_after,
        })
    }

    fn node_change(&mut self, node: u16, event: &str, to: &str, out: &mut Vec<AlarmEvent>) {
        let key = (node, event.to_string());
        let from = self.node_state.get(&key).cloned();
        if from.as_deref() == Some(to) {
            return;
        }
        self.node_state.insert(key, to.to_string());
        out.push(AlarmEvent {
            at_ms: now_ms(),
            node,
            bearing: None,
            bearing_index: None,
            kind: None,
            event: event.to_string(),
            state_from: from,
            state_to: to.to_string(),
            report_id: None,
        });
    }

    /// A committed new frame of `node` with its quality flag bits.
    pub fn frame(&mut self, node: u16, flags: u16, is_report: bool, out: &mut Vec<AlarmEvent>) {
        self.last_seen.insert(node, Instant::now());
        let silent_key = (node, EV_SILENT.to_string());
        if self
            .node_state
            .get(&silent_key)
            .is_some_and(|s| s == "silent")
        {
            self.node_change(node, EV_SILENT, "reporting", out);
        }
        let f = wire::frame::FrameFlags::from_bits(flags);
        for (ev, on) in [
            (EV_SENSOR, f.sensor_fault || f.clipping),
            (EV_TACH, f.tach_missing || f.tach_irregular),
        ] {
            let was_on = self
                .node_state
                .get(&(node, ev.to_string()))
                .is_some_and(|s| s == "on");
            if on != was_on {
                self.node_change(node, ev, if on { "on" } else { "off" }, out);
            }
        }
        // a status frame can change the decided order (a restart)
        let _ = is_report;
        self.dirty.insert(node);
    }

    /// Nodes silent for longer than the limit.
    pub fn check_silence(&mut self, out: &mut Vec<AlarmEvent>) {
        let now = Instant::now();
        let silent: Vec<u16> = self
            .last_seen
            .iter()
            .filter(|(_, t)| now.duration_since(**t) > self.silent_after)
            .map(|(n, _)| *n)
            .collect();
        for n in silent {
            self.node_change(n, EV_SILENT, "silent", out);
        }
    }

    /// Grades the nodes with new frames and gives their line changes not
    /// recorded yet.
    pub fn evaluate(&mut self, db: &mut dyn Db, out: &mut Vec<AlarmEvent>) -> Result<(), CliError> {
        if self.dirty.is_empty() {
            return Ok(());
        }
        let nodes: Vec<u16> = std::mem::take(&mut self.dirty).into_iter().collect();
        let r = self.evaluate_nodes(db, &nodes, out);
        if r.is_err() {
            // tried again at the next evaluation
            self.dirty.extend(nodes);
        }
        r
    }

    /// Rebuilds done by the grading (nodes read whole), for the stop line.
    pub fn rebuilds(&self) -> u64 {
        self.grading.rebuilds
    }

    fn evaluate_nodes(
        &mut self,
        db: &mut dyn Db,
        nodes: &[u16],
        out: &mut Vec<AlarmEvent>,
    ) -> Result<(), CliError> {
        let moved = self.grading.update(db, nodes)?;
        let sql = |e: DbError| CliError::Other(format!("{}: {e}", super::db::redact(&self.url)));
        let mut missing: Vec<u16> = moved
            .iter()
            .map(|t| t.graded.point.node)
            .filter(|n| !self.recorded.contains_key(n))
            .collect();
        missing.sort_unstable();
        missing.dedup();
        if !missing.is_empty() {
            let q = format!(
                "SELECT report_id, bearing, kind, event, state_to, node_id FROM alarm_events
                 WHERE report_id IS NOT NULL{}",
                super::store::node_filter("node_id", Some(&missing))
            );
            for n in &missing {
                self.recorded.entry(*n).or_default();
            }
            for r in db.query(&q, &[]).map_err(sql)? {
                let key = (
                    col(&r, 0).opt_int().unwrap_or(0),
                    col(&r, 1).opt_text().unwrap_or_default(),
                    col(&r, 2).opt_text().unwrap_or_default(),
                    col(&r, 3).opt_text().unwrap_or_default(),
                    col(&r, 4).opt_text().unwrap_or_default(),
                );
                let node = super::store::u16_of(col(&r, 5), "node_id").map_err(sql)?;
                self.recorded.entry(node).or_default().insert(key);
            }
        }
        for e in moved.iter().map(event_of) {
            let Some(k) = line_key(&e) else { continue };
            if !self.recorded.get(&e.node).is_some_and(|s| s.contains(&k)) {
                out.push(e);
            }
        }
        Ok(())
    }

    /// Records events in one transaction; returns those written (a line
    /// event another writer recorded meanwhile is skipped).
    pub fn record(
        &mut self,
        db: &mut dyn Db,
        events: Vec<AlarmEvent>,
    ) -> Result<Vec<AlarmEvent>, DbError> {
        if events.is_empty() {
            return Ok(events);
        }
        let line_nodes: BTreeSet<u16> = events
            .iter()
            .filter(|e| e.report_id.is_some())
            .map(|e| e.node)
            .collect();
        db.begin()?;
        let mut kept = Vec::new();
        let r = (|| {
            for e in events {
                if e.report_id.is_some() {
                    let exists = db.query(
                        "SELECT 1 FROM alarm_events WHERE report_id = ?1 AND node_id = ?2 AND bearing = ?3 AND kind = ?4 AND event = ?5 AND state_to = ?6",
                        &[
                            Val::Int(e.report_id),
                            e.node.into(),
                            e.bearing.as_deref().into(),
                            e.kind.as_deref().into(),
                            e.event.as_str().into(),
                            e.state_to.as_str().into(),
                        ],
                    )?;
                    if !exists.is_empty() {
                        continue;
                    }
                }
                let detail = match e.bearing_index {
                    Some(b) => serde_json::json!({"source": "gateway serve", "bearing_index": b}),
                    None => serde_json::json!({"source": "gateway serve"}),
                };
                db.execute(
                    "INSERT INTO alarm_events (at_ms, node_id, bearing, kind, event, state_from, state_to, report_id, detail)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                    &[
                        e.at_ms.into(),
                        e.node.into(),
                        e.bearing.as_deref().into(),
                        e.kind.as_deref().into(),
                        e.event.as_str().into(),
                        e.state_from.as_deref().into(),
                        e.state_to.as_str().into(),
                        Val::Int(e.report_id),
                        detail.to_string().into(),
                    ],
                )?;
                kept.push(e);
            }
            Ok::<(), DbError>(())
        })();
        match r.and_then(|()| db.commit()) {
            Ok(()) => {
                for e in &kept {
                    if let Some(k) = line_key(e) {
                        self.recorded.entry(e.node).or_default().insert(k);
                    }
                }
                Ok(kept)
            }
            Err(e) => {
                db.rollback();
                // graded past these events: read those nodes whole again at
                // the next evaluation, which gives the unrecorded changes again
                for n in line_nodes {
                    self.grading.forget(n);
                    self.dirty.insert(n);
                }
                Err(e)
            }
        }
    }
}
