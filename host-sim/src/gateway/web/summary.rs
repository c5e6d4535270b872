//! The dashboard's running summary of the store: per node its newest report
//! and link counters, per line the newest amplitude and harmonics, the graded
//! lines and the state changes as alarm events. Node data is folded once over
//! the store and then only over new report rows.
//!
//! States are not computed here: every refresh takes the graded lines from
//! [`WebStore::graded`], i.e. `trend_cmd::grade_store`, the function
//! `gateway status` prints, so the pages cannot disagree with it.

use super::data::{DataError, NewEvent, ReportRow, WebStore};
use crate::gateway::seq::{NodeSeqStats, SeqTracker};
use crate::gateway::trend::{DefectState, Line, State};
use std::collections::{BTreeMap, HashMap};

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
    lines: Vec<Line>,
    names: HashMap<(u16, u8), String>,
    upto: i64,
    /// Per key.
    pub keys: BTreeMap<Key, KeyFold>,
    /// Per node.
    pub nodes: BTreeMap<u16, NodeFold>,
    tracker: SeqTracker,
    pending: Vec<NewEvent>,
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
    /// gateway map (alarm events carry them).
    pub fn new(names: HashMap<(u16, u8), String>) -> Self {
        Self {
            lines: Vec::new(),
            names,
            upto: 0,
            keys: BTreeMap::new(),
            nodes: BTreeMap::new(),
            tracker: SeqTracker::new(),
            pending: Vec::new(),
        }
    }

    /// Folds reports stored since the last call, grades the store again at
    /// `now_ms` and records the state changes of the new reports as alarm
    /// events; returns the reports folded.
    pub fn refresh(
        &mut self,
        store: &mut dyn WebStore,
        now_ms: Option<i64>,
    ) -> Result<usize, DataError> {
        let before = self.upto;
        let mut n = 0;
        store.reports_after(self.upto, &mut |r| {
            self.fold(r);
            n += 1;
        })?;
        // staleness moves with the clock: grade on every refresh
        self.lines = store.graded(now_ms)?;
        if n > 0 {
            self.events_after(before);
        }
        if !self.pending.is_empty() {
            store.record_events(&self.pending)?;
            self.pending.clear();
        }
        Ok(n)
    }

    /// Alarm events (entering or leaving ALERT/DANGER) caused by reports
    /// with id > `after`, from the graded history of each line.
    fn events_after(&mut self, after: i64) {
        let alarm = |s: State| s >= State::Alert;
        for l in &self.lines {
            let mut prev = State::NoData;
            for g in &l.history {
                let now = g.state;
                let p = &g.point;
                if p.report_id > after && now != prev && (alarm(now) || alarm(prev)) {
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
                        from: state_name(prev),
                        to: state_name(now),
                        report_id: p.report_id,
                    });
                }
                prev = now;
            }
        }
    }

    fn fold(&mut self, mut r: ReportRow) {
        self.upto = self.upto.max(r.id);
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

    /// Every line's state as `gateway status` prints it.
    pub fn states(&self) -> Vec<DefectState> {
        self.lines.iter().map(|l| l.state.clone()).collect()
    }

    /// The graded lines (state and per-report history with its levels).
    pub fn lines(&self) -> &[Line] {
        &self.lines
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
