//! The dashboard's running summary of the store: per sensor channel and
//! defect the reports the state logic needs (first baseline reports, newest
//! valid, newest), per node its newest report and link counters, and the
//! state changes as alarm events. It is folded once over the store and then
//! only over new report rows, so a page costs O(channels), not O(reports).
//!
//! States come from `trend::evaluate` on each key's reduced list, which gives
//! the same baseline, newest score, detected bit and state as `gateway status`
//! over every observation (evaluate only reads the first `baseline_count`
//! valid scores, the newest valid score and the newest detected bit).

use super::data::{DataError, NewEvent, ReportRow, WebStore};
use crate::gateway::seq::{NodeSeqStats, SeqTracker};
use crate::gateway::store::Observation;
use crate::gateway::trend::{self, DefectState, Limits, State};
use std::collections::{BTreeMap, HashMap};

/// (node, bearing index, defect kind).
pub type Key = (u16, u8, String);

/// What the fold keeps of one key.
#[derive(Clone, Debug, Default)]
pub struct KeyFold {
    first: Vec<Lite>,
    last_valid: Option<Lite>,
    last: Option<Lite>,
    /// Valid scores seen.
    pub count: usize,
    /// State after the newest report (as folded, for events).
    pub state: Option<State>,
    /// Amplitude (1x) and harmonics of the newest report.
    pub last_amp: Option<(Option<f64>, Option<i64>)>,
}

/// One observation without its key (the key is the map's).
#[derive(Clone, Copy, Debug, Default)]
struct Lite {
    report_id: i64,
    seq: u16,
    score_db: Option<f64>,
    detected: bool,
}

impl KeyFold {
    /// The observations `trend::evaluate` needs, in arrival order.
    fn reduced(&self, key: &Key) -> Vec<Observation> {
        let mut v: Vec<Lite> = self.first.clone();
        for o in [&self.last_valid, &self.last].into_iter().flatten() {
            if v.iter().all(|x| x.report_id != o.report_id) {
                v.push(*o);
            }
        }
        v.into_iter()
            .map(|o| Observation {
                report_id: o.report_id,
                node: key.0,
                seq: o.seq,
                rx_time: None,
                bearing: key.1,
                kind: key.2.clone(),
                score_db: o.score_db,
                detected: o.detected,
            })
            .collect()
    }

    fn learned(&self, l: &Limits) -> Option<f64> {
        if l.baseline_count == 0 || self.first.len() < l.baseline_count {
            return None;
        }
        let s: Vec<f64> = self.first.iter().filter_map(|o| o.score_db).collect();
        #[allow(clippy::cast_precision_loss)]
        Some(s.iter().sum::<f64>() / s.len() as f64)
    }
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
    limits: Limits,
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
        State::Alert => "alert",
        State::Danger => "danger",
    }
}

impl Summary {
    /// An empty summary under these limits; `names` are the physical
    /// bearings' names of the gateway map (alarm events carry them).
    pub fn new(limits: Limits, names: HashMap<(u16, u8), String>) -> Self {
        Self {
            limits,
            names,
            upto: 0,
            keys: BTreeMap::new(),
            nodes: BTreeMap::new(),
            tracker: SeqTracker::new(),
            pending: Vec::new(),
        }
    }

    /// The limits in use.
    pub fn limits(&self) -> &Limits {
        &self.limits
    }

    /// Folds reports stored since the last call and records the state
    /// changes they caused as alarm events; returns the reports folded.
    pub fn refresh(&mut self, store: &mut dyn WebStore) -> Result<usize, DataError> {
        let manual: HashMap<Key, f64> = store
            .manual_baselines()?
            .into_iter()
            .map(|(n, b, k, v)| ((n, b, k), v))
            .collect();
        let mut n = 0;
        store.reports_after(self.upto, &mut |r| {
            self.fold(r, &manual);
            n += 1;
        })?;
        if !self.pending.is_empty() {
            store.record_events(&self.pending)?;
            self.pending.clear();
        }
        Ok(n)
    }

    fn fold(&mut self, mut r: ReportRow, manual: &HashMap<Key, f64>) {
        self.upto = self.upto.max(r.id);
        self.tracker.observe(r.node, r.seq, &r.payload);
        let time = r.time_ms();
        let flags = dsp_core::frame::QualityFlags::from_bits(r.flags);
        for d in std::mem::take(&mut r.defects) {
            let o = Lite {
                report_id: r.id,
                seq: r.seq,
                score_db: d.score_db,
                detected: d.detected,
            };
            let key = (r.node, d.bearing, d.kind);
            let k = match self.keys.get_mut(&key) {
                Some(k) => k,
                None => self.keys.entry(key.clone()).or_default(),
            };
            if o.score_db.is_some() {
                k.count += 1;
                if k.first.len() < self.limits.baseline_count {
                    k.first.push(o);
                }
                k.last_valid = Some(o);
            }
            k.last = Some(o);
            k.last_amp = Some((d.amplitude_1x_g, d.harmonics));
            let baseline = manual
                .get(&key)
                .copied()
                .or_else(|| k.learned(&self.limits));
            let latest = k.last_valid.as_ref().and_then(|o| o.score_db);
            let now = trend::classify(latest, baseline, &self.limits);
            let before = k.state.unwrap_or(State::NoData);
            k.state = Some(now);
            let alarm = |s: State| s >= State::Alert;
            if now != before && (alarm(now) || alarm(before)) {
                self.pending.push(NewEvent {
                    at_ms: time.unwrap_or(0),
                    node: r.node,
                    bearing: d.bearing,
                    bearing_name: self
                        .names
                        .get(&(r.node, d.bearing))
                        .cloned()
                        .unwrap_or_else(|| format!("node {} bearing {}", r.node, d.bearing)),
                    kind: key.2.clone(),
                    event: if alarm(now) { "enter" } else { "leave" },
                    from: state_name(before),
                    to: state_name(now),
                    report_id: r.id,
                });
            }
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

    /// Every key's state as `gateway status` computes it.
    pub fn states(&self, manual: &dyn Fn(u16, u8, &str) -> Option<f64>) -> Vec<DefectState> {
        let mut out = Vec::with_capacity(self.keys.len());
        for (key, k) in &self.keys {
            let obs = k.reduced(key);
            for mut s in trend::evaluate(&obs, &self.limits, manual) {
                s.reports = k.count;
                out.push(s);
            }
        }
        out
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
