//! Baselines and alarm states per node, bearing and defect.

use super::store::Observation;
use std::collections::BTreeMap;

/// Alarm settings. The defaults are this project's choice (rise over the
/// baseline of +6 dB alert / +12 dB danger is common practice for spectral
/// trending; the absolute limits are ours).
#[derive(Clone, Copy, Debug)]
pub struct Limits {
    /// Reports averaged into a learned baseline.
    pub baseline_count: usize,
    /// Alert when the score rises this much over the baseline (dB).
    pub alert_rise_db: f64,
    /// Danger when the score rises this much over the baseline (dB).
    pub danger_rise_db: f64,
    /// Alert at or above this score whatever the baseline (dB).
    pub alert_abs_db: f64,
    /// Danger at or above this score whatever the baseline (dB).
    pub danger_abs_db: f64,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            baseline_count: 5,
            alert_rise_db: 6.0,
            danger_rise_db: 12.0,
            alert_abs_db: 20.0,
            danger_abs_db: 30.0,
        }
    }
}

/// Alarm state, ordered from best to worst.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum State {
    /// No valid score yet.
    NoData,
    /// Fewer reports than the baseline needs, and under the absolute limits.
    Learning,
    /// Under the alert levels.
    Normal,
    /// At or over an alert level.
    Alert,
    /// At or over a danger level.
    Danger,
}

impl State {
    /// Upper-case name for tables.
    pub fn label(self) -> &'static str {
        match self {
            State::NoData => "NO-DATA",
            State::Learning => "LEARNING",
            State::Normal => "NORMAL",
            State::Alert => "ALERT",
            State::Danger => "DANGER",
        }
    }
}

/// Where a baseline came from.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum BaselineOrigin {
    /// Mean of the first N scores.
    Learned,
    /// Set by hand.
    Manual,
}

/// State of one node/bearing/defect.
#[derive(Clone, Debug, serde::Serialize)]
pub struct DefectState {
    /// Node.
    pub node: u16,
    /// Bearing index at the node.
    pub bearing: u8,
    /// Defect kind name.
    pub kind: String,
    /// Valid scores seen.
    pub reports: usize,
    /// Most recent valid score.
    pub latest_db: Option<f64>,
    /// Detected bit of the most recent report.
    pub detected: bool,
    /// Baseline in dB, once known.
    pub baseline_db: Option<f64>,
    /// Origin of the baseline.
    pub baseline_origin: Option<BaselineOrigin>,
    /// Alarm state.
    pub state: State,
}

/// Classifies a score against a baseline and the limits.
pub fn classify(latest: Option<f64>, baseline: Option<f64>, l: &Limits) -> State {
    let Some(s) = latest else {
        return State::NoData;
    };
    let rise = baseline.map(|b| s - b);
    if s >= l.danger_abs_db || rise.is_some_and(|r| r >= l.danger_rise_db) {
        State::Danger
    } else if s >= l.alert_abs_db || rise.is_some_and(|r| r >= l.alert_rise_db) {
        State::Alert
    } else if baseline.is_none() {
        State::Learning
    } else {
        State::Normal
    }
}

/// States of every (node, bearing, defect) with observations; `manual`
/// gives the hand-set baseline of a key if there is one.
pub fn evaluate(
    obs: &[Observation],
    limits: &Limits,
    manual: &dyn Fn(u16, u8, &str) -> Option<f64>,
) -> Vec<DefectState> {
    let mut groups: BTreeMap<(u16, u8, String), Vec<&Observation>> = BTreeMap::new();
    for o in obs {
        groups
            .entry((o.node, o.bearing, o.kind.clone()))
            .or_default()
            .push(o);
    }
    groups
        .into_iter()
        .map(|((node, bearing, kind), list)| {
            let scores: Vec<f64> = list.iter().filter_map(|o| o.score_db).collect();
            let (baseline_db, baseline_origin) = match manual(node, bearing, &kind) {
                Some(b) => (Some(b), Some(BaselineOrigin::Manual)),
                None if limits.baseline_count > 0 && scores.len() >= limits.baseline_count => {
                    let first = scores.get(..limits.baseline_count).unwrap_or(&[]);
                    let n = f64::from(u32::try_from(first.len()).unwrap_or(u32::MAX));
                    (
                        Some(first.iter().sum::<f64>() / n),
                        Some(BaselineOrigin::Learned),
                    )
                }
                None => (None, None),
            };
            let latest_db = scores.last().copied();
            let detected = list.last().is_some_and(|o| o.detected);
            DefectState {
                state: classify(latest_db, baseline_db, limits),
                node,
                bearing,
                kind,
                reports: scores.len(),
                latest_db,
                detected,
                baseline_db,
                baseline_origin,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn classify_levels() {
        let l = Limits::default();
        assert_eq!(classify(None, Some(5.0), &l), State::NoData);
        assert_eq!(classify(Some(8.0), None, &l), State::Learning);
        assert_eq!(classify(Some(10.9), Some(5.0), &l), State::Normal);
        assert_eq!(classify(Some(11.0), Some(5.0), &l), State::Alert);
        assert_eq!(classify(Some(17.0), Some(5.0), &l), State::Danger);
        assert_eq!(classify(Some(21.0), None, &l), State::Alert);
        assert_eq!(classify(Some(30.0), Some(29.0), &l), State::Danger);
    }
}
