//! The dashboard's running summary of the store: per node its newest report
//! and link counters, per line the newest amplitude and harmonics, the graded
//! lines and the state changes as alarm events. Node data is folded once over
//! the store and then only over new report rows.
//!
//! States are not computed here: each line's running grading state is the
//! one the service's alarm evaluation keeps ([`crate::gateway::grading`]),
//! which gives exactly what `gateway status` prints (`trend_cmd::grade_db`),
//! so the pages cannot disagree with it. A refresh feeds it only the reports
//! stored since the last one; a change of the stored limits grades every
//! line again. A bearing page's per-report history is graded on demand for
//! that node ([`WebStore::graded_nodes`]), so no history is kept here.
//! Staleness moves with the clock and is judged at each refresh's time from
//! each node's newest receive time ([`trend::mark_stale`]), as `grade_db`
//! judges it.

use super::data::{DataError, NewEvent, ReportRow, WebStore};
use crate::gateway::grading::Grading;
use crate::gateway::seq::{NodeSeqStats, SeqTracker};
use crate::gateway::trend::{self, DefectState, Line, State};
use std::collections::{BTreeMap, BTreeSet, HashMap};

/// Reports read per query while folding (bounds memory on a large store).
const FOLD_CHUNK: i64 = 20_000;

/// (node, bearing index, defect kind).
pub type Key = (u16, u8, String);

/// What the fold keeps of one key.
#[derive(Clone, Debug, Default)]
pub struct KeyFold {
    /// Valid scores seen.
    pub count: usize,
    /// Amplitude (1x) and harmonics of the newest report.
    pub last_amp: Option<(Option<f64>, Option<i64>)>,
}

/// What the fold keeps of one node.
#[derive(Clone, Debug, Default)]
pub struct NodeFold {
    /// Newest report (without its payload and defect rows).
    pub last: Option<ReportRow>,
    /// Receive time of the newest report with one, Unix ms.
    pub last_time_ms: Option<i64>,
    /// Reports stored.
    pub reports: u64,
    /// Reports flagged sensor fault / tach missing or irregular / low battery.
    pub sensor_faults: u64,
    /// Reports with a tach fault.
    pub tach_faults: u64,
    /// Reports with low battery.
    pub low_battery: u64,
}

/// The summary.
pub struct Summary {
    /// Each line's running grading state.
    grading: Grading,
    /// The reference time of the last refresh.
    now_ms: Option<i64>,
    names: HashMap<(u16, u8), String>,
    record: bool,
    upto: i64,
    /// Per key.
    pub keys: BTreeMap<Key, KeyFold>,
    /// Per node.
    pub nodes: BTreeMap<u16, NodeFold>,
    tracker: SeqTracker,
    pending: Vec<NewEvent>,
}

/// What one refresh did.
#[derive(Clone, Copy, Debug, Default)]
pub struct Refreshed {
    /// Reports folded.
    pub reports: usize,
    /// Nodes graded again.
    pub nodes_graded: usize,
}

fn state_name(s: State) -> &'static str {
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

impl Summary {
    /// An empty summary; `names` are the physical bearings' names of the
    /// gateway map (alarm events carry them); `record`: write the state
    /// changes as alarm events (off when the MQTT service, which records
    /// them itself, serves the dashboard).
    pub fn new(names: HashMap<(u16, u8), String>, record: bool) -> Self {
        Self {
            grading: Grading::new("the dashboard's store"),
            now_ms: None,
            names,
            record,
            upto: 0,
            keys: BTreeMap::new(),
            nodes: BTreeMap::new(),
            tracker: SeqTracker::new(),
            pending: Vec::new(),
        }
    }

    /// Folds reports stored since the last call, grades again the nodes
    /// that have new reports (every node when the stored limits changed),
    /// judges staleness at `now_ms` and records the state changes of the new
    /// reports as alarm events.
    pub fn refresh(
        &mut self,
        store: &mut dyn WebStore,
        now_ms: Option<i64>,
    ) -> Result<Refreshed, DataError> {
        let before = self.upto;
        let top = store.max_report_id()?;
        let mut dirty: BTreeSet<u16> = BTreeSet::new();
        let mut n = 0;
        let mut from = self.upto;
        while from < top {
            let to = from.saturating_add(FOLD_CHUNK).min(top);
            store.reports_between(from, to, &mut |r| {
                dirty.insert(r.node);
                self.fold(r);
                n += 1;
            })?;
            from = to;
        }
        self.upto = self.upto.max(top);
        let dirty: Vec<u16> = dirty.into_iter().collect();
        // (a change of the stored limits grades every node again in there)
        let moved = self
            .grading
            .update(store.db(), &dirty)
            .map_err(|e| DataError::Query(e.to_string()))?;
        if self.record && n > 0 {
            let alarm = |s: State| s >= State::Alert;
            for t in moved {
                let p = &t.graded.point;
                if p.report_id <= before {
                    continue;
                }
                let now = t.graded.state;
                self.pending.push(NewEvent {
                    at_ms: p.time_ms.unwrap_or(0),
                    node: p.node,
                    bearing: p.bearing,
                    bearing_name: self
                        .names
                        .get(&(p.node, p.bearing))
                        .cloned()
                        .unwrap_or_else(|| format!("node {} bearing {}", p.node, p.bearing)),
                    kind: p.kind.clone(),
                    event: if alarm(now) { "enter" } else { "leave" },
                    from: state_name(t.from),
                    to: state_name(now),
                    report_id: p.report_id,
                });
            }
        }
        self.now_ms = now_ms;
        if !self.pending.is_empty() {
            store.record_events(&self.pending)?;
            self.pending.clear();
        }
        Ok(Refreshed {
            reports: n,
            nodes_graded: dirty.len(),
        })
    }

    fn fold(&mut self, mut r: ReportRow) {
        self.tracker.observe(r.node, r.seq, &r.payload);
        let time = r.time_ms();
        let flags = wire::frame::FrameFlags::from_bits(r.flags);
        for d in std::mem::take(&mut r.defects) {
            let k = self.keys.entry((r.node, d.bearing, d.kind)).or_default();
            if d.score_db.is_some() {
                k.count += 1;
            }
            k.last_amp = Some((d.amplitude_1x_g, d.harmonics));
        }
        let nf = self.nodes.entry(r.node).or_default();
        nf.reports += 1;
        nf.sensor_faults += u64::from(flags.sensor_fault || flags.clipping);
        nf.tach_faults += u64::from(flags.tach_missing || flags.tach_irregular);
        nf.low_battery += u64::from(flags.low_battery);
        if time.is_some() {
            nf.last_time_ms = time;
        }
        r.payload = Vec::new();
        r.defects = Vec::new();
        nf.last = Some(r);
    }

    /// Every line's state as `gateway status` prints it (at the last
    /// refresh's time), in its order (node, bearing, kind).
    pub fn states(&self) -> Vec<DefectState> {
        self.grading.staled_states(self.now_ms)
    }

    /// The graded lines of one node's bearing (state and per-report history
    /// with its levels, graded now for that node), staleness judged at the
    /// last refresh's time.
    pub fn lines_of(
        &self,
        store: &mut dyn WebStore,
        node: u16,
        bearing: u8,
    ) -> Result<Vec<Line>, DataError> {
        let (lines, last) = store.graded_nodes(&[node])?;
        Ok(lines
            .into_iter()
            .filter(|l| l.state.bearing == bearing)
            .map(|mut l| {
                trend::mark_stale(&mut l.state, last.get(&node).copied(), self.now_ms);
                l
            })
            .collect())
    }

    /// Link counters per node (as `gateway status` prints them).
    pub fn links(&self) -> BTreeMap<u16, NodeSeqStats> {
        self.tracker.stats().into_iter().collect()
    }

    /// Amplitude (1x, g) and harmonics of the newest report of a key.
    pub fn last_amp(&self, key: &Key) -> Option<(Option<f64>, Option<i64>)> {
        self.keys.get(key).and_then(|k| k.last_amp)
    }
}
