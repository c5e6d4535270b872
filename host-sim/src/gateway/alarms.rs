//! Alarm changes seen by the service: a bearing's state (worst defect)
//! entering or leaving alert/danger, a node going silent or reporting
//! again, a node's sensor or tach fault flag set or cleared. "Before" is the
//! condition's last recorded event (so a restart neither repeats nor loses
//! a change); "after" is the state computed by [`super::trend::evaluate`]
//! once the frames are committed.

use super::db::{Db, DbError};
use super::queries::{self, AlarmEvent, AlarmKey};
use super::trend::{self, Limits, State};
use std::collections::{HashMap, HashSet};
use std::time::{Duration, Instant};

/// Event class of a bearing's alarm state.
pub const EV_STATE: &str = "state";
/// Event class of a node's silence.
pub const EV_SILENT: &str = "silent";
/// Event class of a sensor fault flag.
pub const EV_SENSOR: &str = "sensor_fault";
/// Event class of a tach fault flag (no pulses or irregular pulses).
pub const EV_TACH: &str = "tach_fault";

fn state_name(s: State) -> String {
    serde_json::to_value(s)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

fn is_alarm(s: &str) -> bool {
    s == "alert" || s == "danger"
}

/// The alarm tracker of one service instance.
pub struct Alarms {
    limits: Limits,
    last: HashMap<AlarmKey, String>,
    dirty: HashSet<u16>,
    last_seen: HashMap<u16, Instant>,
    silent_after: Duration,
    eval_every: Duration,
    last_eval: Instant,
}

fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
        .unwrap_or(0)
}

impl Alarms {
    /// Loads the last recorded events and the known nodes; every known node
    /// gets `silent_after` from now before it counts as silent.
    pub fn new(
        db: &mut dyn Db,
        limits: Limits,
        silent_after: Duration,
        eval_every: Duration,
    ) -> Result<Self, DbError> {
        let last = queries::last_alarm_states(db)?;
        let now = Instant::now();
        let mut last_seen = HashMap::new();
        let mut dirty = HashSet::new();
        for (node, _) in queries::latest_flags(db)? {
            last_seen.insert(node, now);
            dirty.insert(node);
        }
        for s in queries::latest_status(db)? {
            last_seen.insert(s.node, now);
        }
        Ok(Self {
            limits,
            last,
            dirty,
            last_seen,
            silent_after,
            eval_every,
            last_eval: now.checked_sub(eval_every).unwrap_or(now),
        })
    }

    fn change(
        &mut self,
        node: u16,
        bearing: Option<String>,
        event: &str,
        to: String,
        detail: serde_json::Value,
        out: &mut Vec<AlarmEvent>,
    ) {
        let key: AlarmKey = (node, bearing.clone(), None, event.to_string());
        let from = self.last.get(&key).cloned();
        if from.as_deref() == Some(to.as_str()) {
            return;
        }
        self.last.insert(key, to.clone());
        out.push(AlarmEvent {
            at_ms: now_ms(),
            node,
            bearing,
            kind: None,
            event: event.to_string(),
            state_from: from,
            state_to: to,
            detail,
        });
    }

    /// A committed new frame of `node` with its quality flag bits.
    pub fn frame(&mut self, node: u16, flags: u16, is_report: bool, out: &mut Vec<AlarmEvent>) {
        self.last_seen.insert(node, Instant::now());
        let silent_key: AlarmKey = (node, None, None, EV_SILENT.to_string());
        if self.last.get(&silent_key).is_some_and(|s| s == "silent") {
            self.change(
                node,
                None,
                EV_SILENT,
                "reporting".into(),
                serde_json::json!({}),
                out,
            );
        }
        let sensor = flags & 0x10 != 0;
        let tach = flags & 0x03 != 0;
        for (ev, on) in [(EV_SENSOR, sensor), (EV_TACH, tach)] {
            let key: AlarmKey = (node, None, None, ev.to_string());
            let was_on = self.last.get(&key).is_some_and(|s| s == "on");
            if on != was_on {
                let to = if on { "on" } else { "off" };
                self.change(
                    node,
                    None,
                    ev,
                    to.into(),
                    serde_json::json!({"flags": flags}),
                    out,
                );
            }
        }
        if is_report {
            self.dirty.insert(node);
        }
    }

    /// Nodes silent for longer than the limit.
    pub fn check_silence(&mut self, out: &mut Vec<AlarmEvent>) {
        let now = Instant::now();
        let silent: Vec<(u16, u64)> = self
            .last_seen
            .iter()
            .filter(|(_, t)| now.duration_since(**t) > self.silent_after)
            .map(|(n, t)| (*n, now.duration_since(*t).as_secs()))
            .collect();
        for (node, secs) in silent {
            let key: AlarmKey = (node, None, None, EV_SILENT.to_string());
            if self.last.get(&key).is_none_or(|s| s != "silent") {
                self.change(
                    node,
                    None,
                    EV_SILENT,
                    "silent".into(),
                    serde_json::json!({"silent_s": secs}),
                    out,
                );
            }
        }
    }

    /// Evaluates the alarm state of the nodes with new reports (at most
    /// once per `eval_every` unless `force`).
    pub fn evaluate(
        &mut self,
        db: &mut dyn Db,
        force: bool,
        out: &mut Vec<AlarmEvent>,
    ) -> Result<(), DbError> {
        if self.dirty.is_empty() || (!force && self.last_eval.elapsed() < self.eval_every) {
            return Ok(());
        }
        self.last_eval = Instant::now();
        let manual = queries::baselines(db)?;
        let lookup = |n: u16, b: u8, k: &str| manual.get(&(n, b, k.to_string())).copied();
        let mut nodes: Vec<u16> = self.dirty.drain().collect();
        nodes.sort_unstable();
        for node in nodes {
            let obs = queries::observations(db, Some(node))?;
            let states = trend::evaluate(&obs, &self.limits, &lookup);
            for b in super::bearing_states(&states) {
                let to = state_name(b.worst.state);
                let key: AlarmKey = (
                    node,
                    Some(b.bearing.to_string()),
                    None,
                    EV_STATE.to_string(),
                );
                let from = self.last.get(&key).cloned();
                let changed = from.as_deref() != Some(to.as_str());
                if changed && (is_alarm(&to) || from.as_deref().is_some_and(is_alarm)) {
                    let detail = serde_json::json!({
                        "kind": b.worst.kind, "score_db": b.worst.latest_db,
                        "baseline_db": b.worst.baseline_db,
                    });
                    self.change(node, Some(b.bearing.to_string()), EV_STATE, to, detail, out);
                }
            }
        }
        Ok(())
    }

    /// Records events (skipping any already recorded by another instance);
    /// returns those recorded, to publish.
    pub fn record(db: &mut dyn Db, events: Vec<AlarmEvent>) -> Result<Vec<AlarmEvent>, DbError> {
        if events.is_empty() {
            return Ok(events);
        }
        db.begin()?;
        let mut kept = Vec::new();
        for e in events {
            match queries::insert_alarm(db, &e) {
                Ok(true) => kept.push(e),
                Ok(false) => {}
                Err(err) => {
                    db.rollback();
                    return Err(err);
                }
            }
        }
        db.commit()?;
        Ok(kept)
    }
}
