//! Severity and alarm states per line (node, bearing, defect kind), graded on
//! the envelope amplitude of the finding over a learned baseline. The rule
//! (docs/gateway.md "Alarms"):
//!
//! * The baseline is the geometric mean of the first `baseline_count` quiet
//!   reports (searched, nothing detected) in the current envelope band,
//!   never below the floor of "nothing found" (`floor_g`); a hand-set
//!   `baseline_g` replaces it. A band change starts learning again: the
//!   amplitudes of two bands are not comparable.
//! * Severity = 20 log10(amplitude / baseline) dB (amplitude floored too).
//! * DANGER: amplitude >= the absolute danger level, or severity >=
//!   `danger_db` while the finding persists (the previous report of the line
//!   was ALERT or DANGER). So a first detection over a quiet baseline is
//!   ALERT unless it crosses the absolute danger level.
//! * ALERT: the node detects the defect, or amplitude >= the absolute alert
//!   level. A rise over the baseline without a detection is not graded: at a
//!   line with nothing in it the amplitude is noise. `alert_db` marks the
//!   level on the trend plot.
//! * LEARNING until the baseline is known; NORMAL otherwise.
//! * NOT COVERED when the node's setting cannot search the line (never
//!   NORMAL); STALE when the node has been silent longer than
//!   `stale_after_s` and its last state was no worse than NORMAL.
//!
//! [`levels`] computes the amplitude levels; [`grade`] compares with them and
//! the trend plot draws them, so the plotted limits are the state logic's.

use super::limits::Limits;
use super::series::Point;
use std::collections::BTreeMap;

/// Alarm state, ordered from best to worst (a bearing shows its worst line).
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum State {
    /// No usable report yet.
    NoData,
    /// The baseline is not known yet and nothing is found.
    Learning,
    /// Under the alert levels.
    Normal,
    /// Last state was no worse than normal, but the node has been silent too long.
    Stale,
    /// The node's setting cannot search this line: no verdict.
    NotCovered,
    /// At or over an alert level.
    Alert,
    /// At or over a danger level.
    Danger,
}

impl State {
    /// Upper-case name for tables and plots.
    pub fn label(self) -> &'static str {
        match self {
            State::NoData => "NO DATA",
            State::Learning => "LEARNING",
            State::Normal => "NORMAL",
            State::Stale => "STALE",
            State::NotCovered => "NOT COVERED",
            State::Alert => "ALERT",
            State::Danger => "DANGER",
        }
    }
}

/// Where a baseline came from.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum BaselineOrigin {
    /// Geometric mean of the first quiet reports (at least the floor).
    Learned,
    /// Set by hand (`gateway limits set --baseline-g`).
    Manual,
    /// Not known yet: the floor of "nothing found" stands in.
    Floor,
}

/// The amplitude levels a report of a line is graded against, g.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct Levels {
    /// Baseline (never below the floor).
    pub baseline_g: f64,
    /// Its origin.
    pub origin: BaselineOrigin,
    /// Baseline raised by `alert_db`.
    pub alert_g: f64,
    /// Baseline raised by `danger_db`.
    pub danger_g: f64,
    /// Absolute alert level, if set.
    pub alert_abs_g: Option<f64>,
    /// Absolute danger level, if set.
    pub danger_abs_g: Option<f64>,
    /// Floor of "nothing found".
    pub floor_g: f64,
}

fn db_gain(db: f64) -> f64 {
    10f64.powf(db / 20.0)
}

/// The levels of a line with a known (`Some`) or unknown baseline.
pub fn levels(baseline_g: Option<f64>, origin: BaselineOrigin, l: &Limits) -> Levels {
    let (base, origin) = match baseline_g {
        Some(b) => (b.max(l.floor_g), origin),
        None => (l.floor_g, BaselineOrigin::Floor),
    };
    Levels {
        baseline_g: base,
        origin,
        alert_g: base * db_gain(l.alert_db),
        danger_g: base * db_gain(l.danger_db),
        alert_abs_g: l.alert_abs_g,
        danger_abs_g: l.danger_abs_g,
        floor_g: l.floor_g,
    }
}

/// The state of one report: `amplitude_g` (None when invalid), the node's
/// detection, whether the line was searched, the levels and the previous
/// report's state of the same line.
pub fn grade(
    amplitude_g: Option<f64>,
    detected: bool,
    searched: bool,
    lv: &Levels,
    previous: Option<State>,
) -> State {
    if !searched {
        return State::NotCovered;
    }
    let Some(a) = amplitude_g.filter(|a| a.is_finite() && *a >= 0.0) else {
        return State::NoData;
    };
    let a = a.max(lv.floor_g);
    let known = lv.origin != BaselineOrigin::Floor;
    let persists = matches!(previous, Some(State::Alert | State::Danger));
    if lv.danger_abs_g.is_some_and(|d| a >= d) || (persists && a >= lv.danger_g) {
        State::Danger
    } else if detected || lv.alert_abs_g.is_some_and(|x| a >= x) {
        // An amplitude risen over the baseline without the node's detection
        // is not a finding: at a line with nothing in it the amplitude is the
        // spectrum's noise, which wanders by more than the alert level.
        State::Alert
    } else if known {
        State::Normal
    } else {
        State::Learning
    }
}

/// Severity of an amplitude over the levels' baseline, dB.
pub fn severity_db(amplitude_g: Option<f64>, lv: &Levels) -> Option<f64> {
    amplitude_g
        .filter(|a| a.is_finite() && *a >= 0.0)
        .map(|a| 20.0 * (a.max(lv.floor_g) / lv.baseline_g).log10())
}

/// One graded report of a line.
#[derive(Clone, Debug, serde::Serialize)]
pub struct Graded {
    /// The stored report row.
    pub point: Point,
    /// Its state.
    pub state: State,
    /// Severity over the baseline in force, dB.
    pub severity_db: Option<f64>,
    /// The levels in force for this report.
    pub levels: Levels,
    /// The band differs from the previous report's (both known).
    pub band_changed: bool,
}

/// Latest state of one line, as `status` prints it.
#[derive(Clone, Debug, serde::Serialize)]
pub struct DefectState {
    /// Node.
    pub node: u16,
    /// Bearing index at the node.
    pub bearing: u8,
    /// Defect kind name.
    pub kind: String,
    /// Usable reports seen.
    pub reports: usize,
    /// Latest amplitude, g.
    pub amplitude_g: Option<f64>,
    /// Column the amplitude came from.
    pub amplitude_source: Option<&'static str>,
    /// Latest score over the local floor, dB (the node's detection measure).
    pub latest_db: Option<f64>,
    /// Detected bit of the latest report.
    pub detected: bool,
    /// Whether the latest report searched the line.
    pub searched: bool,
    /// Baseline in force, g.
    pub baseline_g: Option<f64>,
    /// Origin of the baseline.
    pub baseline_origin: Option<BaselineOrigin>,
    /// Latest severity over the baseline, dB.
    pub severity_db: Option<f64>,
    /// Levels in force for the latest report.
    pub levels: Option<Levels>,
    /// The limits used.
    pub limits: Limits,
    /// Receive time of the latest report, Unix ms.
    pub last_time_ms: Option<i64>,
    /// Band of the latest report, Hz.
    pub band_hz: Option<[f64; 2]>,
    /// Band changes seen in the history.
    pub band_changes: usize,
    /// The node is silent for longer than `stale_after_s`.
    pub stale: bool,
    /// Alarm state.
    pub state: State,
}

/// One line with its graded history and latest state.
#[derive(Clone, Debug)]
pub struct Line {
    /// Every usable report, graded, in arrival order.
    pub history: Vec<Graded>,
    /// The latest state.
    pub state: DefectState,
}

fn geo_mean(v: &[f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let n = f64::from(u32::try_from(v.len()).unwrap_or(u32::MAX));
    Some(10f64.powf(v.iter().map(|x| x.log10()).sum::<f64>() / n))
}

/// The running grading state of one line: what grading its next report
/// needs of the reports before it (the quiet amplitudes while learning, the
/// learned baseline, the band in force, the previous state) and what its
/// [`DefectState`] says (usable reports, band changes, the latest graded
/// report). [`grade_line`] and [`evaluate`] fold it over a whole history;
/// the service and the dashboard keep one per line between evaluations
/// (`gateway::grading`) and feed it the new reports only.
#[derive(Clone, Debug, Default)]
pub struct LineRun {
    quiet: Vec<f64>,
    learned: Option<f64>,
    band: Option<[f64; 2]>,
    previous: Option<State>,
    reports: usize,
    band_changes: usize,
    last: Option<Graded>,
}

impl LineRun {
    /// Grades the line's next point (in the node's decided order); None
    /// when the point is not usable (searched with no finite amplitude).
    pub fn push(&mut self, p: &Point, l: &Limits) -> Option<Graded> {
        let usable = !p.searched || p.amplitude_g.is_some_and(f64::is_finite);
        if !usable {
            return None;
        }
        let band_changed = matches!((self.band, p.band_hz), (Some(a), Some(b)) if a != b);
        if band_changed {
            self.quiet.clear();
            self.learned = None;
        }
        if p.band_hz.is_some() {
            self.band = p.band_hz;
        }
        if self.learned.is_none()
            && p.searched
            && !p.detected
            && l.baseline_count > 0
            && self.quiet.len() < l.baseline_count
        {
            if let Some(a) = p.amplitude_g {
                self.quiet.push(a.max(l.floor_g));
            }
            if self.quiet.len() == l.baseline_count {
                self.learned = geo_mean(&self.quiet);
            }
        }
        let lv = match (l.baseline_g, self.learned) {
            (Some(b), _) => levels(Some(b), BaselineOrigin::Manual, l),
            (None, Some(b)) => levels(Some(b), BaselineOrigin::Learned, l),
            (None, None) => levels(None, BaselineOrigin::Floor, l),
        };
        let state = grade(p.amplitude_g, p.detected, p.searched, &lv, self.previous);
        self.previous = Some(state);
        self.reports += 1;
        self.band_changes += usize::from(band_changed);
        let g = Graded {
            point: p.clone(),
            severity_db: if p.searched {
                severity_db(p.amplitude_g, &lv)
            } else {
                None
            },
            state,
            levels: lv,
            band_changed,
        };
        self.last = Some(g.clone());
        Some(g)
    }

    /// State of the latest usable report (None before any).
    pub fn previous(&self) -> Option<State> {
        self.previous
    }

    /// The line's latest state, not judged for staleness (see [`mark_stale`]).
    pub fn state(&self, node: u16, bearing: u8, kind: &str, limits: Limits) -> DefectState {
        let last = self.last.as_ref();
        DefectState {
            node,
            bearing,
            kind: kind.to_string(),
            reports: self.reports,
            amplitude_g: last.and_then(|g| g.point.amplitude_g),
            amplitude_source: last.map(|g| g.point.amplitude_source),
            latest_db: last.and_then(|g| g.point.score_db),
            detected: last.is_some_and(|g| g.point.detected),
            searched: last.is_none_or(|g| g.point.searched),
            baseline_g: last.map(|g| g.levels.baseline_g),
            baseline_origin: last.map(|g| g.levels.origin),
            severity_db: last.and_then(|g| g.severity_db),
            levels: last.map(|g| g.levels),
            limits,
            last_time_ms: last.and_then(|g| g.point.time_ms),
            band_hz: last.and_then(|g| g.point.band_hz),
            band_changes: self.band_changes,
            stale: false,
            state: last.map_or(State::NoData, |g| g.state),
        }
    }
}

/// Grades the history of one line (its points in arrival order).
pub fn grade_line(points: &[&Point], l: &Limits) -> Vec<Graded> {
    let mut run = LineRun::default();
    points.iter().filter_map(|p| run.push(p, l)).collect()
}

/// The newest receive time of each node's points (staleness is judged
/// against it).
pub fn node_last(points: &[Point]) -> BTreeMap<u16, i64> {
    let mut last: BTreeMap<u16, i64> = BTreeMap::new();
    for p in points {
        if let Some(t) = p.time_ms {
            let e = last.entry(p.node).or_insert(t);
            *e = (*e).max(t);
        }
    }
    last
}

/// Marks a line stale when its node (newest receive time `node_last`) is
/// silent for longer than its limits' `stale_after_s` at `now_ms`: a state
/// up to NORMAL then reads STALE. `st` must be the line's state as graded
/// with no reference time (so a cached state can be judged again later).
pub fn mark_stale(st: &mut DefectState, node_last: Option<i64>, now_ms: Option<i64>) {
    st.stale = match (now_ms, node_last, st.limits.stale_after_s) {
        (Some(now), Some(t), Some(s)) => {
            #[allow(clippy::cast_precision_loss)] // ms spans far below 2^52
            let silent_s = (now - t) as f64 / 1000.0;
            silent_s > s
        }
        _ => false,
    };
    if st.stale && st.state <= State::Normal {
        st.state = State::Stale;
    }
}

/// Grades every line of `points`; `limits_of` gives each line's limits;
/// `now_ms` is the reference time for staleness (None: never stale).
pub fn evaluate(
    points: &[Point],
    limits_of: &dyn Fn(u16, u8, &str) -> Limits,
    now_ms: Option<i64>,
) -> Vec<Line> {
    let mut groups: BTreeMap<(u16, u8, String), Vec<&Point>> = BTreeMap::new();
    for p in points {
        groups
            .entry((p.node, p.bearing, p.kind.clone()))
            .or_default()
            .push(p);
    }
    let node_last = node_last(points);
    groups
        .into_iter()
        .map(|((node, bearing, kind), list)| {
            let limits = limits_of(node, bearing, &kind);
            let mut run = LineRun::default();
            let history: Vec<Graded> = list.iter().filter_map(|p| run.push(p, &limits)).collect();
            let mut st = run.state(node, bearing, &kind, limits);
            mark_stale(&mut st, node_last.get(&node).copied(), now_ms);
            Line { history, state: st }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lv(base: Option<f64>) -> Levels {
        levels(base, BaselineOrigin::Learned, &Limits::default())
    }

    #[test]
    fn first_detection_is_alert_and_danger_needs_persistence() {
        let quiet = lv(Some(1e-3));
        // +6 dB = 2.0 mg, +12 dB = 3.98 mg over a 1 mg baseline
        assert!((quiet.alert_g - 1.995e-3).abs() < 1e-5);
        assert!((quiet.danger_g - 3.981e-3).abs() < 1e-5);
        assert_eq!(
            grade(Some(1.5e-3), false, true, &quiet, None),
            State::Normal
        );
        // over +6 dB without the node's detection: not graded (noise)
        assert_eq!(
            grade(Some(2.1e-3), false, true, &quiet, None),
            State::Normal
        );
        assert_eq!(grade(Some(2.1e-3), true, true, &quiet, None), State::Alert);
        // 30 dB over the baseline, first time: alert
        assert_eq!(
            grade(Some(3.2e-2), true, true, &quiet, Some(State::Normal)),
            State::Alert
        );
        assert_eq!(
            grade(Some(3.2e-2), true, true, &quiet, Some(State::Alert)),
            State::Danger
        );
        let abs = Levels {
            danger_abs_g: Some(0.03),
            ..quiet
        };
        assert_eq!(
            grade(Some(3.2e-2), true, true, &abs, Some(State::Normal)),
            State::Danger
        );
        assert_eq!(grade(Some(1.0), true, false, &abs, None), State::NotCovered);
        assert_eq!(grade(None, false, true, &quiet, None), State::NoData);
        // learning: a detection is still an alert, noise is not
        let learning = lv(None);
        assert_eq!(learning.origin, BaselineOrigin::Floor);
        assert_eq!(
            grade(Some(5e-3), false, true, &learning, None),
            State::Learning
        );
        assert_eq!(grade(Some(5e-3), true, true, &learning, None), State::Alert);
        // "nothing found" amplitudes below the floor grade as the floor: 0 dB
        assert_eq!(severity_db(Some(0.0), &quiet), Some(0.0));
    }
}
