//! `envord gateway status`: the alarm state of every watched bearing, per
//! sensor and per physical bearing (gateway map), and the link statistics.

use super::trend::State;
use super::{db, decided_order, map, sql_err, store, trend, trend_cmd, StatusArgs};
use crate::error::CliError;
use wire::frame::DefectKind;

pub(super) fn run(a: StatusArgs) -> Result<(), CliError> {
    let gmap = match &a.map {
        Some(p) => Some(map::GatewayMap::load(p)?),
        None => None,
    };
    let mut conn = db::open_mode(&a.db, db::Mode::ReadOnly)?;
    let conn = conn.as_mut();
    let now = trend_cmd::now_ms(a.now.as_deref())?;
    let states: Vec<trend::DefectState> = trend_cmd::grade_db(conn, &a.db, now, None)?
        .into_iter()
        .map(|l| l.state)
        .collect();
    let (tracker, _) = decided_order(conn)?;
    let rejects = store::count(conn, "rejects").map_err(sql_err)?;
    let nodes = store::latest_status(conn).map_err(sql_err)?;
    let combined = gmap
        .as_ref()
        .map(|m| combine(m, &states))
        .unwrap_or_default();
    if a.json {
        let links: Vec<serde_json::Value> = tracker
            .stats()
            .iter()
            .map(|(n, s)| serde_json::json!({"node": n, "frames": s.frames, "missing": s.missing, "gaps": s.gaps, "duplicates": s.duplicates, "conflicts": s.conflicts, "resets": s.resets, "backward": s.backward, "last_seq": s.last}))
            .collect();
        let v = serde_json::json!({"defects": states, "bearings": bearing_states(&states), "physical": combined, "links": links, "nodes": nodes, "rejects": rejects});
        println!("{v}");
        return Ok(());
    }
    println!(
        "bearings (state = worst line; severity = amplitude over the baseline; limits: `envord gateway limits show`)"
    );
    println!(
        "{:>5} {:>7} {:<11} {:<5} {:>10} {:>10} {:>7} {:>9}  name",
        "node", "bearing", "state", "worst", "amp g", "baseline", "sev dB", "levels dB"
    );
    for b in bearing_states(&states) {
        let name = gmap
            .as_ref()
            .and_then(|m| m.name_of(b.node, b.bearing))
            .unwrap_or("-");
        let w = &b.worst;
        println!(
            "{:>5} {:>7} {:<11} {:<5} {:>10} {:>10} {:>7} {:>9}  {name}{}",
            b.node,
            b.bearing,
            w.state.label(),
            w.kind,
            fmt_g(w.amplitude_g),
            fmt_g(w.baseline_g),
            fmt_db(w.severity_db),
            format!("+{}/+{}", w.limits.alert_db, w.limits.danger_db),
            if w.stale && w.state != State::Stale {
                " (node silent: stale)"
            } else {
                ""
            }
        );
    }
    if !combined.is_empty() {
        println!("\nphysical bearings (sensors combined: worst latest amplitude, sensors detecting / sensors)");
        for p in &combined {
            println!("{:<9} {}", p.state.label(), p.name);
            for d in &p.defects {
                println!(
                    "          {:<5} worst {:>7}  detected by {}/{}  state {}",
                    d.kind,
                    fmt_g(d.worst_amplitude_g),
                    d.detecting,
                    p.sensors,
                    d.state.label()
                );
            }
        }
    }
    println!("\nlinks");
    println!(
        "{:>5} {:>8} {:>8} {:>5} {:>10} {:>9} {:>6} {:>8} {:>8}",
        "node",
        "frames",
        "missing",
        "gaps",
        "duplicates",
        "conflicts",
        "resets",
        "backward",
        "last_seq"
    );
    for (n, s) in tracker.stats() {
        println!(
            "{n:>5} {:>8} {:>8} {:>5} {:>10} {:>9} {:>6} {:>8} {:>8}",
            s.frames,
            s.missing,
            s.gaps,
            s.duplicates,
            s.conflicts,
            s.resets,
            s.backward,
            s.last.map_or("-".into(), |x| x.to_string())
        );
    }
    if !nodes.is_empty() {
        println!("\nnodes (latest status frame)");
        println!(
            "{:>5} {:>8} {:<17} {:>7} {:<15} {:<11} {:>17} {:>8}",
            "node",
            "counter",
            "last_downlink",
            "refused",
            "survey",
            "band_source",
            "band Hz",
            "kurtosis"
        );
        for n in &nodes {
            println!(
                "{:>5} {:>8} {:<17} {:>7} {:<15} {:<11} {:>17} {:>8}",
                n.node,
                n.downlink_counter,
                n.last_downlink,
                n.refused_downlinks,
                n.survey,
                n.band_source,
                format!("{:.0}-{:.0}", n.band_hz[0], n.band_hz[1]),
                n.band_kurtosis.map_or("-".into(), |k| format!("{k:.2}"))
            );
        }
    }
    println!("rejected inputs stored: {rejects}");
    Ok(())
}

fn fmt_db(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.1}"))
}

fn fmt_g(x: Option<f64>) -> String {
    x.map_or("-".into(), |v| format!("{v:.3e}"))
}

/// State of one sensor channel (node + bearing index): its worst defect.
#[derive(Debug, serde::Serialize)]
pub struct BearingState {
    /// Node.
    pub node: u16,
    /// Bearing index.
    pub bearing: u8,
    /// The defect in the worst state (highest severity on ties).
    pub worst: trend::DefectState,
}

/// Worst defect state per (node, bearing).
pub fn bearing_states(states: &[trend::DefectState]) -> Vec<BearingState> {
    let mut out: Vec<BearingState> = Vec::new();
    for s in states {
        let key = |d: &trend::DefectState| (d.state, d.severity_db.unwrap_or(f64::NEG_INFINITY));
        match out
            .iter_mut()
            .find(|b| b.node == s.node && b.bearing == s.bearing)
        {
            Some(b) => {
                if key(s) > key(&b.worst) {
                    b.worst = s.clone();
                }
            }
            None => out.push(BearingState {
                node: s.node,
                bearing: s.bearing,
                worst: s.clone(),
            }),
        }
    }
    out
}

/// Combined view of one defect of a physical bearing.
#[derive(Debug, serde::Serialize)]
pub struct CombinedDefect {
    /// Defect kind name.
    pub kind: String,
    /// Worst latest amplitude over the sensors, g.
    pub worst_amplitude_g: Option<f64>,
    /// Sensors whose latest report detects this defect.
    pub detecting: usize,
    /// Worst state over the sensors.
    pub state: State,
}

/// Combined view of a physical bearing of the gateway map.
#[derive(Debug, serde::Serialize)]
pub struct CombinedBearing {
    /// Name from the map.
    pub name: String,
    /// Sensors mapped to it.
    pub sensors: usize,
    /// Worst state over sensors and defects.
    pub state: State,
    /// Per defect kind.
    pub defects: Vec<CombinedDefect>,
}

/// Combines the sensors of each physical bearing.
pub fn combine(m: &map::GatewayMap, states: &[trend::DefectState]) -> Vec<CombinedBearing> {
    m.bearing
        .iter()
        .map(|pb| {
            let defects: Vec<CombinedDefect> = DefectKind::ALL
                .iter()
                .map(|k| {
                    let mine: Vec<&trend::DefectState> = states
                        .iter()
                        .filter(|s| {
                            s.kind == k.name()
                                && pb.sensors.contains(&map::SensorRef {
                                    node: s.node,
                                    bearing: s.bearing,
                                })
                        })
                        .collect();
                    CombinedDefect {
                        kind: k.name().to_string(),
                        worst_amplitude_g: mine
                            .iter()
                            .filter_map(|s| s.amplitude_g)
                            .reduce(f64::max),
                        detecting: mine.iter().filter(|s| s.detected).count(),
                        state: mine.iter().map(|s| s.state).max().unwrap_or(State::NoData),
                    }
                })
                .collect();
            CombinedBearing {
                name: pb.name.clone(),
                sensors: pb.sensors.len(),
                state: defects
                    .iter()
                    .map(|d| d.state)
                    .max()
                    .unwrap_or(State::NoData),
                defects,
            }
        })
        .collect()
}
