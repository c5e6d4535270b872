//! Incremental grading: per line one running state ([`trend::LineRun`]),
//! kept between evaluations and fed only the reports stored since, so an
//! evaluation costs what arrived, not the store's history. The service's
//! alarm evaluation (`alarms.rs`) and the dashboard's cached grading
//! (`web/summary.rs`) both use it, and it gives exactly the states of a full
//! re-grade (`trend_cmd::grade_db`; test `incremental_equals_full_regrade`).
//!
//! A full re-grade reads, per node, every status frame and then every report
//! into the sequence tracker, sorts the defect rows by the decided order,
//! expands reduced frames "as before" and folds each line. The running
//! state of a node keeps what that fold needs: its tracker, the key (decided
//! order, report id) of the last report folded, the rows of its last full
//! frame and each line's [`trend::LineRun`]. New reports whose keys all come
//! after the last key are folded on, in key order: the fold then sees the
//! same sequence as a full re-grade. Anything else is read again from the
//! store for that node alone (a rebuild):
//! * a late, replayed or conflicting report (it sorts before the last one);
//! * a status frame showing a restart (the full re-grade reads every status
//!   frame first, so it can make an earlier backward report a reset);
//! * a change of the stored limits (every node, when it next reports).
//!
//! New rows are found by row id above each node's last one, minus a window
//! of [`WINDOW`] ids kept as a set: PostgreSQL hands out ids at insert, so
//! with several instances a smaller id can commit after a larger one.

use super::as_before;
use super::db::{Db, DbError, Val};
use super::limits::{self, LimitRow, Limits};
use super::seq::{Order, SeqTracker};
use super::series::{self, Point};
use super::store::{self, col};
use super::trend::{self, DefectState, Graded, LineRun, State};
use crate::error::CliError;
use std::collections::{BTreeMap, BTreeSet, HashMap};

/// Row ids below a node's newest one that are still looked at again (a row
/// committed late by another writer).
pub const WINDOW: i64 = 4096;

/// One change into, out of or between ALERT and DANGER of a line.
#[derive(Clone, Debug)]
pub struct Transition {
    /// State of the line's previous usable report (NoData before any).
    pub from: State,
    /// The report graded into the new state.
    pub graded: Graded,
}

fn is_alarm(s: State) -> bool {
    s >= State::Alert
}

/// The alarm changes of one graded history (the rule of `alarms.rs` and the
/// dashboard: a change into, out of or between the alarm states).
pub fn transitions(history: &[Graded]) -> Vec<Transition> {
    let mut prev = State::NoData;
    let mut out = Vec::new();
    for g in history {
        if g.state != prev && (is_alarm(g.state) || is_alarm(prev)) {
            out.push(Transition {
                from: prev,
                graded: g.clone(),
            });
        }
        prev = g.state;
    }
    out
}

/// Ids seen of one table for one node: all up to `floor`, and those in
/// `recent` above it.
#[derive(Debug, Default)]
struct Seen {
    floor: i64,
    recent: BTreeSet<i64>,
}

impl Seen {
    fn fresh() -> Self {
        Self {
            floor: i64::MIN,
            recent: BTreeSet::new(),
        }
    }
    /// Lowest id to read again.
    fn after(&self) -> i64 {
        self.floor
    }
    /// True the first time `id` is seen.
    fn insert(&mut self, id: i64) -> bool {
        id > self.floor && self.recent.insert(id)
    }
    fn prune(&mut self) {
        if let Some(&top) = self.recent.iter().next_back() {
            let floor = top.saturating_sub(WINDOW).max(self.floor);
            self.recent = self.recent.split_off(&floor.saturating_add(1));
            self.floor = floor;
        }
    }
}

/// The running grading state of one node.
#[derive(Debug)]
struct NodeRun {
    tracker: SeqTracker,
    reports: Seen,
    statuses: Seen,
    /// (decided order, report id) of the last report folded.
    last_key: Option<(Order, i64)>,
    /// Defect rows of the last full frame folded (reduced frames repeat them).
    last_full: Vec<Point>,
    /// Per line (bearing, kind): its limits and running state.
    lines: BTreeMap<(u8, String), (Limits, LineRun)>,
    /// Newest receive time over the node's folded rows.
    node_last: Option<i64>,
}

impl NodeRun {
    fn new() -> Self {
        Self {
            // stored frames are unique on (node, seq, payload): no history needed
            tracker: SeqTracker::without_history(),
            reports: Seen::fresh(),
            statuses: Seen::fresh(),
            last_key: None,
            last_full: Vec::new(),
            lines: BTreeMap::new(),
            node_last: None,
        }
    }
}

/// What a fold needs from the store for some nodes: new status frames and
/// reports (each in id order) and the defect rows of those reports.
struct Fresh {
    statuses: Vec<(i64, u16, u16, Vec<u8>)>,
    reports: Vec<(i64, u16, u16, Vec<u8>, bool)>,
    points: Vec<Point>,
}

fn read_fresh(
    db: &mut dyn Db,
    nodes: &[u16],
    after: i64,
    after_status: i64,
) -> Result<Fresh, DbError> {
    // the node list as parameters padded to CHUNK: one statement text for
    // every chunk, so PostgreSQL prepares it once per connection
    let Some(&pad) = nodes.last() else {
        return Ok(Fresh {
            statuses: Vec::new(),
            reports: Vec::new(),
            points: Vec::new(),
        });
    };
    let marks: Vec<String> = (2..=CHUNK + 1).map(|k| format!("?{k}")).collect();
    let list = marks.join(", ");
    let with = |first: i64| -> Vec<Val> {
        std::iter::once(Val::Int(Some(first)))
            .chain((0..CHUNK).map(|k| nodes.get(k).copied().unwrap_or(pad).into()))
            .collect()
    };
    let statuses = db
        .query(
            &format!(
                "SELECT id, node_id, seq, payload FROM node_status WHERE id > ?1 AND node_id IN ({list}) ORDER BY id"
            ),
            &with(after_status),
        )?
        .iter()
        .map(|r| {
            Ok((
                col(r, 0).int("id")?,
                store::u16_of(col(r, 1), "node_id")?,
                store::u16_of(col(r, 2), "seq")?,
                col(r, 3).blob("payload")?,
            ))
        })
        .collect::<Result<Vec<_>, DbError>>()?;
    let reports = db
        .query(
            &format!(
                "SELECT id, node_id, seq, payload, frame_type FROM reports WHERE id > ?1 AND node_id IN ({list}) ORDER BY id"
            ),
            &with(after),
        )?
        .iter()
        .map(|r| {
            Ok((
                col(r, 0).int("id")?,
                store::u16_of(col(r, 1), "node_id")?,
                store::u16_of(col(r, 2), "seq")?,
                col(r, 3).blob("payload")?,
                col(r, 4).opt_text().as_deref() == Some("reduced"),
            ))
        })
        .collect::<Result<Vec<_>, DbError>>()?;
    let points = series::points_where(
        db,
        &format!("r.id > ?1 AND r.node_id IN ({list})"),
        &with(after),
    )?;
    Ok(Fresh {
        statuses,
        reports,
        points,
    })
}

/// Running grading state of every node it was asked about.
pub struct Grading {
    url: String,
    nodes: HashMap<u16, NodeRun>,
    limits: Option<Vec<LimitRow>>,
    /// Rebuilds done (a node read whole again), for the health line and tests.
    pub rebuilds: u64,
}

/// Nodes read together in one update step.
const CHUNK: usize = 16;

impl Grading {
    /// No node graded yet; `url` names the store in errors.
    pub fn new(url: &str) -> Self {
        Self {
            url: url.to_string(),
            nodes: HashMap::new(),
            limits: None,
            rebuilds: 0,
        }
    }

    fn err(&self, e: DbError) -> CliError {
        CliError::Other(format!("{}: {e}", super::db::redact(&self.url)))
    }

    /// Brings `nodes` up to date with the store (every node graded so far
    /// is kept; a node not graded yet is read whole) and returns the alarm
    /// changes of the reports folded now; for a node read whole, those of
    /// its whole history. A change of the stored limits grades every node
    /// graded so far again, whole.
    pub fn update(&mut self, db: &mut dyn Db, nodes: &[u16]) -> Result<Vec<Transition>, CliError> {
        let rows = limits::rows(db).map_err(|e| self.err(e))?;
        let mut nodes: BTreeSet<u16> = nodes.iter().copied().collect();
        if self.limits.as_ref() != Some(&rows) {
            // every line is graded again with the new limits
            nodes.extend(self.nodes.keys().copied());
            self.nodes.clear();
            self.limits = Some(rows);
        }
        let nodes: Vec<u16> = nodes.into_iter().collect();
        let mut out = Vec::new();
        for chunk in nodes.chunks(CHUNK) {
            self.update_chunk(db, chunk, &mut out)?;
        }
        Ok(out)
    }

    fn update_chunk(
        &mut self,
        db: &mut dyn Db,
        chunk: &[u16],
        out: &mut Vec<Transition>,
    ) -> Result<(), CliError> {
        let known: Vec<u16> = chunk
            .iter()
            .copied()
            .filter(|n| self.nodes.contains_key(n))
            .collect();
        let mut whole: Vec<u16> = chunk
            .iter()
            .copied()
            .filter(|n| !self.nodes.contains_key(n))
            .collect();
        if !known.is_empty() {
            let after = known
                .iter()
                .filter_map(|n| self.nodes.get(n))
                .map(|r| r.reports.after())
                .min()
                .unwrap_or(i64::MIN);
            let after_status = known
                .iter()
                .filter_map(|n| self.nodes.get(n))
                .map(|r| r.statuses.after())
                .min()
                .unwrap_or(i64::MIN);
            let fresh = read_fresh(db, &known, after, after_status).map_err(|e| self.err(e))?;
            for n in known {
                let mut run = self.nodes.remove(&n).unwrap_or_else(NodeRun::new);
                let mut moved = Vec::new();
                match self.fold(&mut run, n, &fresh, &mut moved) {
                    Ok(()) => {
                        out.append(&mut moved);
                        self.nodes.insert(n, run);
                    }
                    Err(Rebuild) => whole.push(n),
                }
            }
        }
        if !whole.is_empty() {
            let fresh = read_fresh(db, &whole, i64::MIN, i64::MIN).map_err(|e| self.err(e))?;
            for n in whole {
                let mut run = NodeRun::new();
                self.rebuilds += 1;
                // a fresh state never needs a rebuild (nothing folded before)
                let _ = self.fold(&mut run, n, &fresh, out);
                self.nodes.insert(n, run);
            }
        }
        if let Some(m) = self.bad_limits() {
            return Err(CliError::input(
                super::db::redact(&self.url),
                format!("stored limits unusable ({m}); fix them with `envord gateway limits set`"),
            ));
        }
        Ok(())
    }

    fn bad_limits(&self) -> Option<String> {
        let mut v: Vec<(u16, &NodeRun)> = self.nodes.iter().map(|(n, r)| (*n, r)).collect();
        v.sort_by_key(|(n, _)| *n);
        v.into_iter().find_map(|(n, r)| {
            r.lines.iter().find_map(|((b, k), (l, _))| {
                limits::check(l)
                    .err()
                    .map(|m| format!("node {n} bearing {b} {k}: {m}"))
            })
        })
    }

    /// Folds node `n`'s new rows of `fresh` into `run`; Err when the store
    /// must be read whole for it.
    fn fold(
        &self,
        run: &mut NodeRun,
        n: u16,
        fresh: &Fresh,
        out: &mut Vec<Transition>,
    ) -> Result<(), Rebuild> {
        let folded_before = run.last_key.is_some();
        for (id, node, seq, payload) in &fresh.statuses {
            if *node == n && run.statuses.insert(*id) {
                let restart = run.tracker.observe_status(n, *seq, payload);
                if restart && folded_before {
                    return Err(Rebuild);
                }
            }
        }
        run.statuses.prune();
        let mut new: Vec<((Order, i64), bool)> = Vec::new();
        for (id, node, seq, payload, reduced) in &fresh.reports {
            if *node == n && run.reports.insert(*id) {
                let (_, order) = run.tracker.observe_ordered(n, *seq, payload);
                new.push(((order, *id), *reduced));
            }
        }
        run.reports.prune();
        new.sort_by_key(|(k, _)| *k);
        if let (Some(first), Some(last)) = (new.first(), run.last_key) {
            if first.0 <= last {
                return Err(Rebuild);
            }
        }
        let rows_of: BTreeMap<i64, Vec<&Point>> =
            fresh
                .points
                .iter()
                .filter(|p| p.node == n)
                .fold(BTreeMap::new(), |mut m, p| {
                    m.entry(p.report_id).or_insert_with(Vec::new).push(p);
                    m
                });
        let rows = self.limits.as_deref().unwrap_or(&[]);
        for (key, reduced) in new {
            run.last_key = Some(key);
            let Some(group) = rows_of.get(&key.1) else {
                continue;
            };
            let group: Vec<Point> = group.iter().map(|p| (*p).clone()).collect();
            let expanded = if reduced {
                let k = run.last_full.len();
                let mut both = run.last_full.clone();
                both.extend(group);
                let ids = BTreeSet::from([key.1]);
                as_before::expand(both, &ids).split_off(k)
            } else {
                run.last_full.clone_from(&group);
                group
            };
            for p in &expanded {
                if let Some(t) = p.time_ms {
                    run.node_last = Some(run.node_last.map_or(t, |x| x.max(t)));
                }
                let (l, line) = run
                    .lines
                    .entry((p.bearing, p.kind.clone()))
                    .or_insert_with(|| {
                        (
                            limits::resolve(rows, n, p.bearing, &p.kind),
                            LineRun::default(),
                        )
                    });
                let from = line.previous().unwrap_or(State::NoData);
                if let Some(g) = line.push(p, l) {
                    if g.state != from && (is_alarm(g.state) || is_alarm(from)) {
                        out.push(Transition { from, graded: g });
                    }
                }
            }
        }
        Ok(())
    }

    /// The latest state of every graded line of `node` (not judged for
    /// staleness: see [`trend::mark_stale`] with [`Grading::node_last`]).
    pub fn states(&self, node: u16) -> Vec<DefectState> {
        self.nodes.get(&node).map_or_else(Vec::new, |r| {
            r.lines
                .iter()
                .map(|((b, k), (l, line))| line.state(node, *b, k, *l))
                .collect()
        })
    }

    /// Nodes graded so far, in order.
    pub fn nodes(&self) -> Vec<u16> {
        let mut v: Vec<u16> = self.nodes.keys().copied().collect();
        v.sort_unstable();
        v
    }

    /// Newest receive time over a node's graded rows.
    pub fn node_last(&self, node: u16) -> Option<i64> {
        self.nodes.get(&node).and_then(|r| r.node_last)
    }

    /// Drops a node's state (it is read whole when next asked about).
    pub fn forget(&mut self, node: u16) {
        self.nodes.remove(&node);
    }

    /// Every graded line's state judged for staleness at `now_ms`, in
    /// (node, bearing, kind) order: what `gateway status` prints.
    pub fn staled_states(&self, now_ms: Option<i64>) -> Vec<DefectState> {
        let mut v = Vec::new();
        for n in self.nodes() {
            for mut st in self.states(n) {
                trend::mark_stale(&mut st, self.node_last(n), now_ms);
                v.push(st);
            }
        }
        v
    }
}

/// The store must be read whole for a node.
#[derive(Debug)]
struct Rebuild;
