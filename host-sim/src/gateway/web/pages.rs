//! The pages: fleet, bearing, node, alarm events, login, and the exports.
//! Plain server-rendered HTML with inline SVG; no script on any page.

use super::auth::{Role, Session};
use super::chart::{self, esc, Bar, Mark, Marker, Series};
use super::clock;
use super::data::{DataError, ReportRow};
use super::estimate::{self, Eta};
use super::summary::Summary;
use super::{Inner, WebConfig};
use crate::gateway::map::SensorRef;
use crate::gateway::trend::{DefectState, State};
use crate::gateway::{bearing_states, combine};
use std::collections::HashMap;
use std::fmt::Write as _;
use wire::frame::{DefectKind, FrameFlags};

const CSS: &str = r#"
:root{--ink:#1d2330;--paper:#f6f4ef;--panel:#fff;--line:#d9d4c7;--muted:#5d6472;
--normal:#2f6f8f;--learning:#6a6a6a;--alert:#b86e00;--danger:#9b1d48;--nodata:#8a8a8a;--stale:#4b3f8f;
--s0:#2f6f8f;--s1:#b86e00;--s2:#5b8c2a;--s3:#8a3fa0}
*{box-sizing:border-box}body{margin:0;font:15px/1.4 system-ui,-apple-system,"Segoe UI",sans-serif;color:var(--ink);background:var(--paper)}
header.top{display:flex;flex-wrap:wrap;gap:.4rem 1.2rem;align-items:center;padding:.55rem 1rem;background:#24303f;color:#f3efe4}
header.top a{color:#f3efe4;text-decoration:none;padding:.2rem .4rem;border-bottom:2px solid transparent}
header.top a.on{border-bottom-color:#e8b44a}.brand{font-weight:700;letter-spacing:.02em;margin-right:.6rem}
header.top form{margin-left:auto}header.top button{background:none;border:1px solid #8d99a8;color:#f3efe4;border-radius:3px;padding:.15rem .5rem;cursor:pointer}
main{padding:.8rem 1rem 2rem;max-width:1280px;margin:0 auto}h1{font-size:1.3rem;margin:.3rem 0 .6rem}h2{font-size:1.05rem;margin:1.2rem 0 .4rem}
.panel{background:var(--panel);border:1px solid var(--line);border-radius:4px;padding:.6rem .8rem;margin:.6rem 0}
.wrap{overflow-x:auto;-webkit-overflow-scrolling:touch}
table{border-collapse:collapse;width:100%;background:var(--panel);font-variant-numeric:tabular-nums}
th,td{padding:.3rem .5rem;border-bottom:1px solid var(--line);text-align:left;vertical-align:top}td.nw,th{white-space:nowrap}
th{background:#ece8dd;font-weight:600}th a{color:inherit}td.num,th.num{text-align:right}
.st{display:inline-block;white-space:nowrap;min-width:6.8em;font-weight:700;padding:.05rem .35rem;border-radius:3px;border:1.5px solid currentColor}
.st-normal{color:var(--normal)}.st-learning{color:var(--learning);border-style:dashed}.st-alert{color:var(--alert);background:#fff4dc}
.st-danger{color:#fff;background:var(--danger);border-color:var(--danger)}.st-nodata,.st-notcovered{color:var(--nodata);border-style:dotted}
.st-stale{color:var(--stale);border-style:double;border-width:3px}
.muted{color:var(--muted)}.small{font-size:.85em}.warn{color:#7a4a00}
.filters a{margin-right:.5rem}.filters a.on{font-weight:700;text-decoration:none;border-bottom:2px solid var(--ink)}
.grid2{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(100%,560px),1fr));gap:.6rem}svg.bars{max-width:900px}
svg.chart{width:100%;height:auto;display:block;background:#fff}
svg .grid{stroke:#e6e1d5;stroke-width:1}svg .tick{font-size:10px;fill:#4a505c}svg .axis{font-size:11px;fill:#30343d}
svg .ln{fill:none;stroke-width:1.6}svg .pt{stroke:none}
svg .s0{stroke:var(--s0);fill:var(--s0)}svg .s1{stroke:var(--s1);fill:var(--s1)}svg .s2{stroke:var(--s2);fill:var(--s2)}svg .s3{stroke:var(--s3);fill:var(--s3)}
svg path.ln{fill:none}svg .bar{stroke:none}
svg .lv-base{stroke:#777;stroke-dasharray:2 3;stroke-width:1.3}svg .lv-alert{stroke:var(--alert);stroke-dasharray:7 4;stroke-width:1.5}
svg .lv-danger{stroke:var(--danger);stroke-width:2.2}svg .mark{stroke:#4b3f8f;stroke-dasharray:1 2;stroke-width:1.2}svg .marktxt{font-size:9px;fill:#4b3f8f}
svg.icon{vertical-align:middle;margin-right:.2rem}
.legend{list-style:none;padding:0;margin:.3rem 0 0;display:flex;flex-wrap:wrap;gap:.2rem 1rem;font-size:.85em}
.lg{display:inline-block;width:26px;height:0;vertical-align:middle;margin-right:.3rem;border-top:2px solid}
.lg-base{border-top:2px dotted #777}.lg-alert{border-top:2px dashed var(--alert)}.lg-danger{border-top:3px solid var(--danger)}.lg-mark{border-top:2px dotted #4b3f8f}
.caution{border-left:4px solid var(--alert);padding:.4rem .6rem;background:#fff8ea}
form.inline{display:inline}button.ack{padding:.15rem .6rem}
.login{max-width:360px;margin:3rem auto}.login label{display:block;margin:.5rem 0 .2rem}.login input{width:100%;padding:.45rem;font-size:1rem}
.login button{margin-top:.8rem;padding:.45rem 1rem;font-size:1rem}.err{color:var(--danger);font-weight:600}
@media (max-width:640px){main{padding:.5rem}th,td{padding:.25rem .35rem}.hide-s{display:none}body{font-size:14px}
table.cards thead{display:none}table.cards tr{display:block;border-bottom:2px solid var(--line);padding:.3rem 0}table.cards td{display:block;border:none;padding:.1rem .4rem;text-align:left}
table.cards td[data-l]::before{content:attr(data-l) ": ";font-weight:600;color:var(--muted)}}
"#;

/// Glyph + word of a state (shape and text besides colour).
fn state_badge(class: &str, word: &str) -> String {
    let glyph = match class {
        "normal" => "&#9675;",
        "learning" => "&#9676;",
        "alert" => "&#9650;",
        "danger" => "&#9632;",
        "stale" => "&#9719;",
        "notcovered" => "&#8856;",
        _ => "&#8211;",
    };
    format!(
        "<span class=\"st st-{class}\" data-state=\"{class}\">{glyph} {}</span>",
        esc(word)
    )
}

/// CSS class of a state.
pub fn state_class(s: State) -> &'static str {
    match s {
        State::NoData => "nodata",
        State::Learning => "learning",
        State::Normal => "normal",
        State::Stale => "stale",
        State::NotCovered => "notcovered",
        State::Alert => "alert",
        State::Danger => "danger",
    }
}

/// Page frame around `body`.
pub fn layout(title: &str, on: &str, session: Option<&Session>, body: &str) -> String {
    let nav = |href: &str, key: &str, text: &str| {
        format!(
            "<a href=\"{href}\"{}>{text}</a>",
            if on == key { " class=\"on\"" } else { "" }
        )
    };
    let who = session.map_or(String::new(), |s| {
        format!(
            "<form method=\"post\" action=\"/logout\"><input type=\"hidden\" name=\"csrf\" value=\"{}\"><button>Sign out {} ({})</button></form>",
            esc(&s.csrf),
            esc(&s.user),
            s.role.name()
        )
    });
    let links = if session.is_some() {
        format!(
            "<nav>{}{}</nav>",
            nav("/", "fleet", "Fleet"),
            nav("/events", "events", "Alarm events")
        )
    } else {
        String::new()
    };
    format!(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width,initial-scale=1\"><title>{} · envord plant view</title><style>{CSS}</style></head><body><header class=\"top\"><span class=\"brand\">envord plant view</span>{links}{who}</header><main>{body}</main></body></html>",
        esc(title)
    )
}

/// The login page.
pub fn login_page(pre: &str, next: &str, error: Option<&str>) -> String {
    let err = error.map_or(String::new(), |e| {
        format!("<p class=\"err\" id=\"login-error\">{}</p>", esc(e))
    });
    let body = format!(
        "<div class=\"login panel\" id=\"login\"><h1>Sign in</h1><p class=\"muted small\">The plant view needs a user of the gateway's users file.</p>{err}<form method=\"post\" action=\"/login\"><input type=\"hidden\" name=\"pre\" value=\"{}\"><input type=\"hidden\" name=\"next\" value=\"{}\"><label for=\"u\">User</label><input id=\"u\" name=\"user\" autocomplete=\"username\" required><label for=\"p\">Password</label><input id=\"p\" name=\"password\" type=\"password\" autocomplete=\"current-password\" required><button type=\"submit\">Sign in</button></form></div>",
        esc(pre),
        esc(next)
    );
    layout("Sign in", "", None, &body)
}

/// A plain message page.
pub fn message_page(title: &str, session: Option<&Session>, msg: &str) -> String {
    layout(
        title,
        "",
        session,
        &format!(
            "<h1>{}</h1><p id=\"message\">{}</p><p><a href=\"/\">Back to the fleet</a></p>",
            esc(title),
            esc(msg)
        ),
    )
}

fn fmt_db(x: Option<f64>) -> String {
    x.map_or("–".into(), |v| format!("{v:.1}"))
}

fn fmt_g(x: Option<f64>) -> String {
    x.map_or("–".into(), |v| format!("{v:.3e}"))
}

fn fmt_time(ms: Option<i64>) -> String {
    ms.map_or("–".into(), clock::label)
}

/// One row of the fleet's sensor-channel table (also the fleet export).
#[derive(Clone, Debug, serde::Serialize)]
pub struct ChannelRow {
    /// Node.
    pub node: u16,
    /// Bearing index at the node.
    pub bearing: u8,
    /// Physical bearing name from the map.
    pub name: Option<String>,
    /// State as `gateway status` prints it.
    pub state: State,
    /// Node silent for longer than the stale limit.
    pub stale: bool,
    /// Worst defect kind.
    pub worst_kind: String,
    /// Its newest score, dB (a detection measure, not a size).
    pub score_db: Option<f64>,
    /// Its newest amplitude, g (the one the state is graded on).
    pub amplitude_g: Option<f64>,
    /// Its baseline, g.
    pub baseline_g: Option<f64>,
    /// Severity = amplitude over baseline, dB.
    pub severity_db: Option<f64>,
    /// The levels the newest report was graded against.
    pub levels: Option<crate::gateway::trend::Levels>,
    /// Detected bit.
    pub detected: bool,
    /// Newest report's receive time, Unix ms.
    pub last_report_ms: Option<i64>,
    /// Reports stored from the node.
    pub reports: u64,
    /// Frames lost in sequence gaps.
    pub missing: u64,
    /// Gap events.
    pub gaps: u64,
    /// RSSI of the newest report, dBm.
    pub rssi_dbm: Option<f64>,
    /// SNR of the newest report, dB.
    pub snr_db: Option<f64>,
    /// Reports flagged sensor fault or clipping.
    pub sensor_faults: u64,
    /// Reports flagged tach missing or irregular.
    pub tach_faults: u64,
    /// Newest report flags low battery.
    pub battery_low: bool,
    /// Downlinks refused (newest status frame).
    pub refused_downlinks: Option<u8>,
    /// Band in use, Hz.
    pub band_hz: Option<[f64; 2]>,
    /// Origin of the band.
    pub band_source: Option<String>,
}

/// One row of the physical-bearing table.
#[derive(Clone, Debug, serde::Serialize)]
pub struct PhysicalRow {
    /// Name.
    pub name: String,
    /// Worst state over sensors and kinds; "not covered" when no sensor has data.
    pub state: State,
    /// Worst kind and score.
    pub worst_kind: Option<String>,
    /// Its worst newest amplitude over the sensors, g.
    pub worst_amplitude_g: Option<f64>,
    /// Sensors mapped.
    #[serde(serialize_with = "ser_sensors")]
    pub sensors: Vec<SensorRef>,
    /// Sensors detecting the worst kind.
    pub detecting: usize,
    /// Some sensor's node is stale.
    pub stale: bool,
}

fn ser_sensors<S: serde::Serializer>(v: &[SensorRef], s: S) -> Result<S::Ok, S::Error> {
    use serde::ser::SerializeSeq;
    let mut q = s.serialize_seq(Some(v.len()))?;
    for x in v {
        q.serialize_element(&serde_json::json!({"node": x.node, "bearing": x.bearing}))?;
    }
    q.end()
}

/// The fleet's rows, computed as `gateway status` does.
pub struct Fleet {
    /// Sensor channels.
    pub channels: Vec<ChannelRow>,
    /// Physical bearings (empty without a map).
    pub physical: Vec<PhysicalRow>,
    /// Every defect state.
    pub states: Vec<DefectState>,
}

/// Computes the fleet.
pub fn fleet(inner: &mut Inner, cfg: &WebConfig, now_ms: i64) -> Result<Fleet, DataError> {
    let states = inner.summary.states();
    let links = inner.summary.links();
    let status: HashMap<u16, crate::gateway::store::NodeStatus> = inner
        .store
        .latest_status()?
        .into_iter()
        .map(|s| (s.node, s))
        .collect();
    let stale_of = |node: u16, s: &Summary| {
        s.nodes
            .get(&node)
            .and_then(|n| n.last_time_ms)
            .is_some_and(|t| now_ms - t > cfg.stale_after_ms)
    };
    let mut channels = Vec::new();
    // bearing_states and combine scan their whole input per entry; hand them
    // one channel's (one physical bearing's) states at a time.
    let mut by_channel: std::collections::BTreeMap<(u16, u8), Vec<DefectState>> =
        std::collections::BTreeMap::new();
    for st in &states {
        by_channel
            .entry((st.node, st.bearing))
            .or_default()
            .push(st.clone());
    }
    let channel_states = by_channel.values().flat_map(|v| bearing_states(v));
    for b in channel_states {
        let nf = inner.summary.nodes.get(&b.node);
        let last = nf.and_then(|n| n.last.as_ref());
        let link = links.get(&b.node);
        let st = status.get(&b.node);
        channels.push(ChannelRow {
            node: b.node,
            bearing: b.bearing,
            name: cfg
                .map
                .as_ref()
                .and_then(|m| m.name_of(b.node, b.bearing))
                .map(str::to_string),
            state: b.worst.state,
            stale: b.worst.stale || stale_of(b.node, &inner.summary),
            worst_kind: b.worst.kind.clone(),
            score_db: b.worst.latest_db,
            amplitude_g: b.worst.amplitude_g,
            baseline_g: b.worst.baseline_g,
            severity_db: b.worst.severity_db,
            levels: b.worst.levels,
            detected: b.worst.detected,
            last_report_ms: nf.and_then(|n| n.last_time_ms),
            reports: nf.map_or(0, |n| n.reports),
            missing: link.map_or(0, |l| l.missing),
            gaps: link.map_or(0, |l| l.gaps),
            rssi_dbm: last.and_then(|r| r.rssi_dbm),
            snr_db: last.and_then(|r| r.snr_db),
            sensor_faults: nf.map_or(0, |n| n.sensor_faults),
            tach_faults: nf.map_or(0, |n| n.tach_faults),
            battery_low: last.is_some_and(|r| FrameFlags::from_bits(r.flags).low_battery),
            refused_downlinks: st.map(|s| s.refused_downlinks),
            band_hz: st.map(|s| s.band_hz),
            band_source: st.map(|s| s.band_source.clone()),
        });
    }
    let physical = match &cfg.map {
        Some(m) => m
            .bearing
            .iter()
            .flat_map(|pb| {
                let mine: Vec<DefectState> = pb
                    .sensors
                    .iter()
                    .flat_map(|s| {
                        by_channel
                            .get(&(s.node, s.bearing))
                            .into_iter()
                            .flatten()
                            .cloned()
                    })
                    .collect();
                let one = crate::gateway::map::GatewayMap {
                    bearing: vec![pb.clone()],
                };
                combine(&one, &mine)
            })
            .zip(&m.bearing)
            .map(|(c, pb)| {
                let worst = c
                    .defects
                    .iter()
                    .filter(|d| d.state == c.state && d.worst_amplitude_g.is_some())
                    .max_by(|a, b| {
                        a.worst_amplitude_g
                            .unwrap_or(f64::MIN)
                            .total_cmp(&b.worst_amplitude_g.unwrap_or(f64::MIN))
                    });
                PhysicalRow {
                    name: c.name.clone(),
                    state: c.state,
                    worst_kind: worst.map(|d| d.kind.clone()),
                    worst_amplitude_g: worst.and_then(|d| d.worst_amplitude_g),
                    detecting: worst.map_or(0, |d| d.detecting),
                    sensors: pb.sensors.clone(),
                    stale: pb.sensors.iter().any(|s| stale_of(s.node, &inner.summary)),
                }
            })
            .collect(),
        None => Vec::new(),
    };
    Ok(Fleet {
        channels,
        physical,
        states,
    })
}

/// Filter and sort of the fleet page.
#[derive(Clone, Debug, Default, serde::Deserialize)]
pub struct FleetQuery {
    /// normal, alert, danger, learning, nodata, notcovered, stale, or empty.
    pub state: Option<String>,
    /// state (default), node, name, last, rssi, score.
    pub sort: Option<String>,
    /// asc or desc.
    pub dir: Option<String>,
}

fn sensor_link(node: u16, bearing: u8) -> String {
    format!("<a href=\"/bearing/{node}/{bearing}\">node {node} · b{bearing}</a>")
}

fn state_cell(state: State, stale: bool, not_covered: bool) -> String {
    let mut s = if not_covered {
        state_badge("notcovered", "NOT COVERED")
    } else {
        state_badge(state_class(state), state.label())
    };
    if stale && state != State::Stale {
        s.push(' ');
        s.push_str(&state_badge("stale", "STALE"));
    }
    s
}

fn matches_filter(f: &str, state: State, stale: bool, not_covered: bool) -> bool {
    match f {
        "" | "all" => true,
        "stale" => stale || state == State::Stale,
        "notcovered" => not_covered || state == State::NotCovered,
        x => state_class(state) == x && !not_covered,
    }
}

/// The fleet page.
pub fn fleet_page(f: &Fleet, q: &FleetQuery, session: &Session, cfg: &WebConfig) -> String {
    let filter = q.state.clone().unwrap_or_default();
    let sort = q.sort.clone().unwrap_or_else(|| "state".into());
    let desc = q
        .dir
        .as_deref()
        .map_or(sort == "state" || sort == "score" || sort == "last", |d| {
            d == "desc"
        });
    let mut rows: Vec<&ChannelRow> = f
        .channels
        .iter()
        .filter(|c| matches_filter(&filter, c.state, c.stale, false))
        .collect();
    rows.sort_by(|a, b| {
        let o = match sort.as_str() {
            "node" => (a.node, a.bearing).cmp(&(b.node, b.bearing)),
            "name" => a.name.cmp(&b.name),
            "last" => a.last_report_ms.cmp(&b.last_report_ms),
            "rssi" => a
                .rssi_dbm
                .unwrap_or(f64::MIN)
                .total_cmp(&b.rssi_dbm.unwrap_or(f64::MIN)),
            "score" => a
                .score_db
                .unwrap_or(f64::MIN)
                .total_cmp(&b.score_db.unwrap_or(f64::MIN)),
            _ => (a.state, a.stale).cmp(&(b.state, b.stale)).then(
                a.score_db
                    .unwrap_or(f64::MIN)
                    .total_cmp(&b.score_db.unwrap_or(f64::MIN)),
            ),
        };
        let o = if desc { o.reverse() } else { o };
        o.then((a.node, a.bearing).cmp(&(b.node, b.bearing)))
    });
    let qs = |st: &str, so: &str, dir: &str| {
        let mut v = Vec::new();
        if !st.is_empty() {
            v.push(format!("state={st}"));
        }
        if !so.is_empty() {
            v.push(format!("sort={so}"));
        }
        if !dir.is_empty() {
            v.push(format!("dir={dir}"));
        }
        if v.is_empty() {
            "/".to_string()
        } else {
            format!("/?{}", v.join("&amp;"))
        }
    };
    let count = |st: &str| {
        f.channels
            .iter()
            .filter(|c| matches_filter(st, c.state, c.stale, false))
            .count()
    };
    let mut b = String::new();
    let worst = f
        .channels
        .iter()
        .map(|c| c.state)
        .max()
        .unwrap_or(State::NoData);
    let _ = write!(
        b,
        "<h1>Fleet</h1><p class=\"muted small\">{} sensor channels on {} nodes · worst state {} · states graded on amplitude over the learned baseline with the limits stored per measuring point (<code>envord gateway limits show</code>) · node silent after {} without a report</p>",
        f.channels.len(),
        f.channels.iter().map(|c| c.node).collect::<std::collections::BTreeSet<_>>().len(),
        state_badge(state_class(worst), worst.label()),
        clock::span(cfg.stale_after_ms)
    );
    b.push_str("<p class=\"filters\">Show: ");
    for (k, label) in [
        ("", "all"),
        ("danger", "danger"),
        ("alert", "alert"),
        ("normal", "normal"),
        ("learning", "learning"),
        ("nodata", "no data"),
        ("notcovered", "not covered"),
        ("stale", "stale"),
    ] {
        let _ = write!(
            b,
            "<a href=\"{}\"{}>{label} ({})</a>",
            qs(k, if sort == "state" { "" } else { &sort }, ""),
            if filter == k { " class=\"on\"" } else { "" },
            count(k)
        );
    }
    b.push_str("· Export: <a href=\"/export/fleet.csv\">CSV</a> <a href=\"/export/fleet.json\">JSON</a></p>");
    if !f.physical.is_empty() {
        b.push_str("<h2>Physical bearings</h2><div class=\"wrap\"><table id=\"physical\" class=\"cards\"><thead><tr><th>State</th><th>Bearing</th><th>Worst finding</th><th class=\"num\">Amplitude g</th><th>Sensors</th><th>Detected by</th></tr></thead><tbody>");
        let mut ph: Vec<&PhysicalRow> = f
            .physical
            .iter()
            .filter(|p| matches_filter(&filter, p.state, p.stale, p.state == State::NoData))
            .collect();
        ph.sort_by(|a, b| {
            b.state.cmp(&a.state).then(
                b.worst_amplitude_g
                    .unwrap_or(f64::MIN)
                    .total_cmp(&a.worst_amplitude_g.unwrap_or(f64::MIN)),
            )
        });
        for p in ph {
            let sensors: Vec<String> = p
                .sensors
                .iter()
                .map(|s| sensor_link(s.node, s.bearing))
                .collect();
            let _ = write!(
                b,
                "<tr data-name=\"{}\"><td>{}</td><td data-l=\"Bearing\"><a href=\"/bearing/{}/{}\">{}</a></td><td data-l=\"Worst\">{}</td><td class=\"num\" data-l=\"Amplitude g\">{}</td><td data-l=\"Sensors\">{}</td><td data-l=\"Detected by\">{}/{}</td></tr>",
                esc(&p.name),
                state_cell(p.state, p.stale, p.state == State::NoData),
                p.sensors.first().map_or(0, |s| s.node),
                p.sensors.first().map_or(0, |s| s.bearing),
                esc(&p.name),
                esc(p.worst_kind.as_deref().unwrap_or("–")),
                fmt_g(p.worst_amplitude_g),
                sensors.join(", "),
                p.detecting,
                p.sensors.len()
            );
        }
        b.push_str("</tbody></table></div>");
    }
    b.push_str("<h2>Sensor channels</h2><div class=\"wrap\"><table id=\"channels\" class=\"cards\"><thead><tr>");
    for (key, label, num) in [
        ("state", "State", false),
        ("node", "Channel", false),
        ("name", "Bearing", false),
        ("score", "Worst finding", false),
        ("last", "Last report", false),
        ("rssi", "Link", false),
    ] {
        let next_dir = if sort == key {
            if desc {
                "asc"
            } else {
                "desc"
            }
        } else {
            ""
        };
        let arrow = if sort == key {
            if desc {
                " &#9660;"
            } else {
                " &#9650;"
            }
        } else {
            ""
        };
        let _ = write!(
            b,
            "<th{}><a href=\"{}\">{label}</a>{arrow}</th>",
            if num { " class=\"num\"" } else { "" },
            qs(&filter, key, next_dir)
        );
    }
    b.push_str("<th>Health</th><th>Band</th></tr></thead><tbody>");
    for c in rows {
        let finding = format!(
            "{} {} g · baseline {} g{}{}{}",
            esc(&c.worst_kind),
            fmt_g(c.amplitude_g),
            fmt_g(c.baseline_g),
            c.severity_db
                .map_or(String::new(), |r| format!(" · {r:+.1} dB over baseline")),
            c.levels.map_or(String::new(), |l| format!(
                " · alert {:.3e} / danger {:.3e} g",
                l.alert_abs_g.map_or(l.alert_g, |a| a.min(l.alert_g)),
                l.danger_abs_g.map_or(l.danger_g, |a| a.min(l.danger_g))
            )),
            if c.detected { " · detected" } else { "" }
        );
        let link = format!(
            "{} lost in {} gap(s){}{}",
            c.missing,
            c.gaps,
            c.rssi_dbm
                .map_or(String::new(), |r| format!(" · RSSI {r:.0} dBm")),
            c.snr_db
                .map_or(String::new(), |s| format!(" · SNR {s:.1} dB"))
        );
        let mut health = Vec::new();
        if c.battery_low {
            health.push("battery low".to_string());
        }
        if c.sensor_faults > 0 {
            health.push(format!("sensor fault in {} report(s)", c.sensor_faults));
        }
        if c.tach_faults > 0 {
            health.push(format!("tach fault in {} report(s)", c.tach_faults));
        }
        if let Some(r) = c.refused_downlinks.filter(|r| *r > 0) {
            health.push(format!("{r} downlink(s) refused"));
        }
        let health = if health.is_empty() {
            "ok".to_string()
        } else {
            health.join("; ")
        };
        let band = match (&c.band_hz, &c.band_source) {
            (Some(h), Some(s)) => format!("{:.0}–{:.0} Hz ({})", h[0], h[1], esc(s)),
            _ => "– (no status frame)".into(),
        };
        let _ = write!(
            b,
            "<tr data-node=\"{}\" data-bearing=\"{}\" data-state=\"{}\"><td class=\"nw\">{}</td><td class=\"nw\" data-l=\"Channel\">{}</td><td data-l=\"Bearing\">{}</td><td data-l=\"Worst\">{finding}</td><td data-l=\"Last report\"><a href=\"/node/{}\">{}</a></td><td data-l=\"Link\">{link}</td><td data-l=\"Health\">{}</td><td data-l=\"Band\">{band}</td></tr>",
            c.node,
            c.bearing,
            state_class(c.state),
            state_cell(c.state, c.stale, false),
            sensor_link(c.node, c.bearing),
            esc(c.name.as_deref().unwrap_or("– (not in the map)")),
            c.node,
            fmt_time(c.last_report_ms),
            esc(&health)
        );
    }
    b.push_str("</tbody></table></div><p class=\"muted small\">States: &#9675; NORMAL, &#9676; LEARNING (baseline not yet learned), &#9650; ALERT, &#9632; DANGER, &#8211; NO DATA, &#8856; NOT COVERED (the node's setting cannot search the line), &#9719; STALE (node silent). The state is the worst defect of the channel, as <code>envord gateway status</code> prints it.</p>");
    layout("Fleet", "fleet", Some(session), &b)
}

/// Fleet export as CSV.
pub fn fleet_csv(f: &Fleet) -> String {
    let mut s = String::from("node,bearing,name,state,stale,worst_kind,score_db,amplitude_g,baseline_g,severity_db,detected,last_report,reports,missing,gaps,rssi_dbm,snr_db,sensor_faults,tach_faults,battery_low,refused_downlinks,band_lo_hz,band_hi_hz,band_source\n");
    let o = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v}"));
    for c in &f.channels {
        let _ = writeln!(
            s,
            "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
            c.node,
            c.bearing,
            csv_field(c.name.as_deref().unwrap_or("")),
            state_class(c.state),
            c.stale,
            c.worst_kind,
            o(c.score_db),
            o(c.amplitude_g),
            o(c.baseline_g),
            o(c.severity_db),
            c.detected,
            c.last_report_ms.map_or(String::new(), clock::rfc3339),
            c.reports,
            c.missing,
            c.gaps,
            o(c.rssi_dbm),
            o(c.snr_db),
            c.sensor_faults,
            c.tach_faults,
            c.battery_low,
            c.refused_downlinks.map_or(String::new(), |r| r.to_string()),
            o(c.band_hz.map(|b| b[0])),
            o(c.band_hz.map(|b| b[1])),
            csv_field(c.band_source.as_deref().unwrap_or(""))
        );
    }
    s
}

/// Quotes a CSV field when needed (RFC 4180).
pub fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// The sensors of a bearing page: the physical bearing's (the mesh) or the one channel.
pub fn sensors_of(cfg: &WebConfig, node: u16, bearing: u8) -> (Option<String>, Vec<SensorRef>) {
    let one = SensorRef { node, bearing };
    match cfg
        .map
        .as_ref()
        .and_then(|m| m.bearing.iter().find(|b| b.sensors.contains(&one)))
    {
        Some(pb) => (Some(pb.name.clone()), pb.sensors.clone()),
        None => (None, vec![one]),
    }
}

/// Everything the bearing page shows of one sensor.
pub struct SensorData {
    /// The sensor.
    pub sensor: SensorRef,
    /// Its reports (rows of its bearing index only).
    pub reports: Vec<ReportRow>,
    /// States per kind.
    pub states: Vec<DefectState>,
    /// Graded lines per kind (as `gateway trend` lists them, with the
    /// levels each report was graded against).
    pub lines: Vec<crate::gateway::trend::Line>,
    /// Band changes (time or arrival index, label).
    pub band_changes: Vec<(Option<i64>, i64, String)>,
}

/// Loads the bearing page's data.
pub fn bearing_data(
    inner: &mut Inner,
    sensors: &[SensorRef],
) -> Result<Vec<SensorData>, DataError> {
    let mut out = Vec::new();
    for s in sensors {
        let reports = inner.store.sensor_reports(s.node, s.bearing)?;
        let lines = inner
            .summary
            .lines_of(inner.store.as_mut(), s.node, s.bearing)?;
        let states = lines.iter().map(|l| l.state.clone()).collect();
        let status = inner.store.node_status(s.node)?;
        let mut band_changes = Vec::new();
        for w in status.windows(2) {
            if let [a, b] = w {
                if a.status.band_hz != b.status.band_hz
                    || a.status.band_source != b.status.band_source
                {
                    band_changes.push((
                        b.time_ms,
                        b.id,
                        format!(
                            "band {:.0}–{:.0} Hz ({}) from status seq {}",
                            b.status.band_hz[0],
                            b.status.band_hz[1],
                            b.status.band_source,
                            b.status.seq
                        ),
                    ));
                }
            }
        }
        out.push(SensorData {
            sensor: *s,
            reports,
            states,
            lines,
            band_changes,
        });
    }
    Ok(out)
}

fn kind_caption(k: DefectKind) -> &'static str {
    match k {
        DefectKind::Bpfo => "BPFO (outer race)",
        DefectKind::Bpfi => "BPFI (inner race)",
        DefectKind::Ftf => "FTF (cage)",
        DefectKind::Bsf => "BSF (rolling element)",
    }
}

/// The bearing page.
pub fn bearing_page(
    name: Option<&str>,
    data: &[SensorData],
    session: &Session,
    cfg: &WebConfig,
    focus: SensorRef,
) -> String {
    let _ = cfg;
    let time_axis = data
        .iter()
        .all(|d| d.reports.iter().all(|r| r.time_ms().is_some()))
        && data.iter().any(|d| !d.reports.is_empty());
    let title = name.map_or(
        format!("node {} bearing {}", focus.node, focus.bearing),
        str::to_string,
    );
    let mut b = String::new();
    let worst = data
        .iter()
        .flat_map(|d| d.states.iter().map(|s| s.state))
        .max()
        .unwrap_or(State::NoData);
    let _ = write!(
        b,
        "<h1>{} {}</h1>",
        state_badge(state_class(worst), worst.label()),
        esc(&title)
    );
    b.push_str("<p class=\"muted small\">Watched by: ");
    for (i, d) in data.iter().enumerate() {
        let _ = write!(
            b,
            "{}{} {} ({} reports; <a href=\"/node/{}\">node page</a>; export <a href=\"/export/trend.csv?node={}&amp;bearing={}\">CSV</a> <a href=\"/export/trend.json?node={}&amp;bearing={}\">JSON</a>)",
            if i > 0 { " · " } else { "" },
            Marker::nth(i).icon(&format!("s{}", i % 4)),
            sensor_link(d.sensor.node, d.sensor.bearing),
            d.reports.len(),
            d.sensor.node,
            d.sensor.node,
            d.sensor.bearing,
            d.sensor.node,
            d.sensor.bearing
        );
    }
    b.push_str("</p>");
    // Estimates.
    let mut etas = Vec::new();
    b.push_str("<div class=\"grid2\">");
    for k in DefectKind::ALL {
        let mut series = Vec::new();
        let mut amps = Vec::new();
        let mut levels_series: Vec<Series> = Vec::new();
        let mut marks = Vec::new();
        let mut legend = String::new();
        for (i, d) in data.iter().enumerate() {
            let label = format!("node {} b{}", d.sensor.node, d.sensor.bearing);
            let line = d.lines.iter().find(|l| l.state.kind == k.name());
            let hist: &[crate::gateway::trend::Graded] = line.map_or(&[], |l| &l.history);
            let xg = |g: &crate::gateway::trend::Graded, idx: usize| -> f64 {
                #[allow(clippy::cast_precision_loss)]
                let v = if time_axis {
                    g.point.time_ms.unwrap_or(0) as f64
                } else {
                    idx as f64 + 1.0
                };
                v
            };
            // amplitude (what the state is graded on) and each report's levels
            let mut pts = Vec::new();
            let mut spts = Vec::new();
            let mut lv_alert = Vec::new();
            let mut lv_danger = Vec::new();
            let mut lv_base = Vec::new();
            let mut timed = Vec::new();
            for (idx, g) in hist.iter().enumerate() {
                let x = xg(g, idx);
                pts.push((x, g.point.amplitude_g.filter(|_| g.point.searched)));
                spts.push((x, g.severity_db));
                lv_base.push((x, Some(g.levels.baseline_g)));
                lv_alert.push((
                    x,
                    Some(
                        g.levels
                            .alert_abs_g
                            .map_or(g.levels.alert_g, |a| a.min(g.levels.alert_g)),
                    ),
                ));
                lv_danger.push((
                    x,
                    Some(
                        g.levels
                            .danger_abs_g
                            .map_or(g.levels.danger_g, |a| a.min(g.levels.danger_g)),
                    ),
                ));
                if let (Some(t), Some(y)) = (g.point.time_ms, g.severity_db) {
                    timed.push((t, y));
                }
            }
            let st = line.map(|l| &l.state);
            if let Some(st) = st {
                let lv = st.levels;
                let _ = write!(
                    legend,
                    "<li>{}{label}: {} {} g · baseline {} g{} · severity {} dB · alert {} g (+{:.1} dB) · danger {} g (+{:.1} dB){}</li>",
                    Marker::nth(i).icon(&format!("s{}", i % 4)),
                    state_cell(st.state, st.stale, false),
                    fmt_g(st.amplitude_g),
                    fmt_g(st.baseline_g),
                    match st.baseline_origin {
                        Some(crate::gateway::trend::BaselineOrigin::Manual) => " (set by hand)",
                        Some(crate::gateway::trend::BaselineOrigin::Learned) => " (learned)",
                        Some(crate::gateway::trend::BaselineOrigin::Floor) | None => " (learning; floor)",
                    },
                    fmt_db(st.severity_db),
                    fmt_g(lv.map(|l| l.alert_g)),
                    st.limits.alert_db,
                    fmt_g(lv.map(|l| l.danger_g)),
                    st.limits.danger_db,
                    match (lv.and_then(|l| l.alert_abs_g), lv.and_then(|l| l.danger_abs_g)) {
                        (None, None) => String::new(),
                        (a, d) => format!(" · absolute alert {} / danger {} g", fmt_g(a), fmt_g(d)),
                    }
                );
                if time_axis {
                    etas.push((
                        k,
                        label.clone(),
                        estimate::time_to_danger(&timed, st.limits.danger_db),
                    ));
                }
            }
            for (t, id, l) in &d.band_changes {
                #[allow(clippy::cast_precision_loss)]
                let x = match (time_axis, t) {
                    (true, Some(t)) => Some(*t as f64),
                    // arrival axis: the first report after the status frame
                    (false, _) => d
                        .reports
                        .iter()
                        .position(|r| r.id > *id)
                        .map(|p| p as f64 + 1.0),
                    _ => None,
                };
                if let Some(x) = x {
                    marks.push(Mark {
                        x,
                        label: format!("{label}: {l}"),
                    });
                }
            }
            let sensor = format!("{}-{}", d.sensor.node, d.sensor.bearing);
            for (name, class, p) in [
                ("baseline", "lv-base", lv_base),
                ("alert level", "lv-alert", lv_alert),
                ("danger level", "lv-danger", lv_danger),
            ] {
                if !p.is_empty() {
                    levels_series.push(Series {
                        label: format!("{label}: {name} of each report"),
                        class: class.to_string(),
                        marker: Marker::Circle,
                        dash: "",
                        sensor: format!("levels-{sensor}"),
                        points: p,
                    });
                }
            }
            series.push(Series {
                label: label.clone(),
                class: format!("s{}", i % 4),
                marker: Marker::nth(i),
                dash: "",
                sensor: sensor.clone(),
                points: pts,
            });
            amps.push(Series {
                label,
                class: format!("s{}", i % 4),
                marker: Marker::nth(i),
                dash: "",
                sensor,
                points: spts,
            });
        }
        if series.iter().all(|s| s.points.is_empty()) {
            continue;
        }
        let _ = write!(
            b,
            "<section class=\"panel\" data-kind=\"{}\"><h2>{}: amplitude</h2>{}<ul class=\"legend\">{legend}<li><span class=\"lg lg-base\"></span>baseline of each report</li><li><span class=\"lg lg-alert\"></span>alert level of each report</li><li><span class=\"lg lg-danger\"></span>danger level of each report (the lower of the absolute level and the baseline raised by danger dB)</li>{}</ul>",
            k.name(),
            kind_caption(k),
            {
                series.extend(levels_series);
                chart::series_chart(&format!("{} amplitude against time", k.name()), "g", &series, &[], &marks, time_axis)
            },
            if marks.is_empty() { String::new() } else { "<li><span class=\"lg lg-mark\"></span>band change</li>".to_string() }
        );
        if amps.iter().any(|s| s.points.iter().any(|p| p.1.is_some())) {
            let _ = write!(
                b,
                "<details><summary>{} severity over the baseline, dB</summary>{}</details>",
                k.name(),
                chart::series_chart(
                    &format!("{} severity against time", k.name()),
                    "dB over baseline",
                    &amps,
                    &[],
                    &marks,
                    time_axis
                )
            );
        }
        b.push_str("</section>");
    }
    b.push_str("</div>");
    // Newest report's amplitudes.
    b.push_str("<section class=\"panel\"><h2>Newest report: amplitude at each defect order</h2>");
    let mut bars = Vec::new();
    for (i, d) in data.iter().enumerate() {
        if let Some(r) = d.reports.last() {
            for x in &r.defects {
                if let Some(a) = x.amplitude_1x_g {
                    bars.push(Bar {
                        group: format!("{} · node {} b{}", x.kind, d.sensor.node, d.sensor.bearing),
                        value: a,
                        note: format!(
                            "{a:.4} g · {} harm.",
                            x.harmonics.map_or("?".into(), |h| h.to_string())
                        ),
                        class: format!("s{}", i % 4),
                    });
                }
            }
        }
    }
    b.push_str(&chart::bar_chart(
        "amplitude at each defect order, newest report",
        "g at 1x",
        &bars,
    ));
    b.push_str("<p class=\"muted small\">The frame carries the amplitude at each defect's first order and how many of its harmonics were found (beside each bar), not each harmonic's amplitude.</p></section>");
    // Time to danger.
    b.push_str("<section class=\"panel\" id=\"eta\"><h2>Rough time to the danger level</h2>");
    let shown: Vec<&(DefectKind, String, Eta)> = etas
        .iter()
        .filter(|e| matches!(e.2, Eta::Days { .. } | Eta::AtDanger))
        .collect();
    if shown.is_empty() {
        let _ = write!(b, "<p class=\"muted\">No estimate: every trend is flat, falling or shorter than {} reports.</p>", estimate::MIN_POINTS);
    } else {
        b.push_str("<ul>");
        for (k, l, e) in shown {
            match e {
                Eta::Days {
                    days,
                    db_per_day,
                    points,
                } => {
                    let when = if *days < 2.0 {
                        format!("{:.0} hours", days * 24.0)
                    } else {
                        format!("{days:.0} days")
                    };
                    let _ = write!(b, "<li><b>{}</b> {l}: about <b>{when}</b> at {db_per_day:+.2} dB/day (Theil-Sen over the newest {points} reports)</li>", k.name());
                }
                _ => {
                    let _ = write!(
                        b,
                        "<li><b>{}</b> {l}: the trend line is at or over the danger level</li>",
                        k.name()
                    );
                }
            }
        }
        b.push_str("</ul>");
    }
    b.push_str("<p class=\"caution small\"><b>Estimate, not a prediction.</b> A straight line through the newest reports; bearing damage often grows in steps and faster near the end, speed and load change scores, and a rising trend may also be a sensor or mounting problem. Plan inspection by the state and a qualified person's judgement, not by this date.</p></section>");
    layout(&title, "fleet", Some(session), &b)
}

/// Trend export rows (the `gateway trend` rows plus time and amplitude).
pub fn trend_rows(data: &SensorData) -> Vec<serde_json::Value> {
    let mut v = Vec::new();
    for r in &data.reports {
        for d in &r.defects {
            v.push(serde_json::json!({
                "report": r.id, "node": r.node, "bearing": d.bearing, "seq": r.seq,
                "rx_time": r.rx_time, "time_ms": r.time_ms(), "kind": d.kind,
                "score_db": d.score_db, "detected": d.detected,
                "amplitude_1x_g": d.amplitude_1x_g, "harmonics": d.harmonics,
            }));
        }
    }
    v
}

/// Trend export as CSV.
pub fn trend_csv(data: &SensorData) -> String {
    let mut s = String::from(
        "report,node,bearing,seq,rx_time,kind,score_db,detected,amplitude_1x_g,harmonics\n",
    );
    let o = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v}"));
    for r in &data.reports {
        for d in &r.defects {
            let _ = writeln!(
                s,
                "{},{},{},{},{},{},{},{},{},{}",
                r.id,
                r.node,
                d.bearing,
                r.seq,
                csv_field(r.rx_time.as_deref().unwrap_or("")),
                d.kind,
                o(d.score_db),
                d.detected,
                o(d.amplitude_1x_g),
                d.harmonics.map_or(String::new(), |h| h.to_string())
            );
        }
    }
    s
}

/// The node page.
pub fn node_page(
    inner: &mut Inner,
    node: u16,
    session: &Session,
    cfg: &WebConfig,
    now_ms: i64,
) -> Result<String, DataError> {
    let status = inner.store.node_status(node)?;
    let reports = inner.store.node_reports(node, 50)?;
    let nf = inner.summary.nodes.get(&node).cloned();
    let mut b = String::new();
    let _ = write!(b, "<h1>Node {node}</h1>");
    if nf.is_none() && status.is_empty() {
        b.push_str("<p>No frames from this node are stored.</p>");
        return Ok(layout(&format!("node {node}"), "fleet", Some(session), &b));
    }
    let version = match reports.first() {
        Some(r) => inner
            .store
            .report_json(r.id)?
            .and_then(|j| serde_json::from_str::<serde_json::Value>(&j).ok())
            .and_then(|v| {
                v.get("Full")
                    .or_else(|| v.get("Reduced"))
                    .cloned()
                    .or(Some(v))
            })
            .and_then(|v| v.get("version").and_then(serde_json::Value::as_u64)),
        None => None,
    };
    b.push_str("<section class=\"panel\"><h2>Configuration in force</h2><ul>");
    match status.last() {
        Some(s) => {
            let _ = write!(
                b,
                "<li>Band {:.0}–{:.0} Hz, origin <b>{}</b>{}</li><li>Last band survey: {}</li><li>Last downlink: {} · downlink counter {} · refused since boot {}</li><li>As of status frame seq {} received {}</li>",
                s.status.band_hz[0],
                s.status.band_hz[1],
                esc(&s.status.band_source),
                s.status.band_kurtosis.map_or(String::new(), |k| format!(", spectral kurtosis {k:.2}")),
                esc(&s.status.survey),
                esc(&s.status.last_downlink),
                s.status.downlink_counter,
                s.status.refused_downlinks,
                s.status.seq,
                fmt_time(s.time_ms)
            );
        }
        None => b.push_str("<li>No status frame stored: band and downlink state unknown.</li>"),
    }
    let _ = write!(
        b,
        "<li>Frame format version {}</li>{}</ul></section>",
        version.map_or("–".into(), |v| v.to_string()),
        nf.as_ref().map_or(String::new(), |n| format!(
            "<li>{} reports; newest {}{}</li>",
            n.reports,
            fmt_time(n.last_time_ms),
            n.last_time_ms
                .filter(|t| now_ms - t > cfg.stale_after_ms)
                .map_or(String::new(), |t| format!(
                    " · {} silent for {}",
                    state_badge("stale", "STALE"),
                    clock::span(now_ms - t)
                ))
        ))
    );
    // Sequence events: the node's arrivals replayed as `gateway import` does.
    let all = inner.store.node_arrivals(node)?;
    let mut tracker = crate::gateway::seq::SeqTracker::new();
    let mut events = Vec::new();
    for (_, seq, payload, t) in &all {
        let ev = tracker.observe(node, *seq, payload);
        if !matches!(
            ev,
            crate::gateway::seq::SeqEvent::InOrder | crate::gateway::seq::SeqEvent::First
        ) {
            events.push((*t, *seq, ev.describe()));
        }
    }
    let _ = write!(
        b,
        "<section class=\"panel\"><h2>Sequence events ({})</h2>",
        events.len()
    );
    if events.is_empty() {
        b.push_str("<p class=\"muted\">None: every report arrived in order.</p>");
    } else {
        b.push_str("<div class=\"wrap\"><table id=\"seq-events\"><thead><tr><th>Received</th><th class=\"num\">Seq</th><th>Event</th></tr></thead><tbody>");
        for (t, s, d) in events.iter().rev().take(100) {
            let _ = write!(
                b,
                "<tr><td>{}</td><td class=\"num\">{s}</td><td>{}</td></tr>",
                fmt_time(*t),
                esc(d)
            );
        }
        b.push_str("</tbody></table></div>");
    }
    b.push_str("</section>");
    let _ = write!(
        b,
        "<section class=\"panel\"><h2>Status frames ({})</h2>",
        status.len()
    );
    if !status.is_empty() {
        b.push_str("<div class=\"wrap\"><table id=\"status-frames\"><thead><tr><th>Received</th><th class=\"num\">Seq</th><th>Band Hz</th><th>Origin</th><th>Survey</th><th>Last downlink</th><th class=\"num\">Counter</th><th class=\"num\">Refused</th></tr></thead><tbody>");
        for s in status.iter().rev().take(100) {
            let _ = write!(
                b,
                "<tr><td>{}</td><td class=\"num\">{}</td><td>{:.0}–{:.0}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                fmt_time(s.time_ms),
                s.status.seq,
                s.status.band_hz[0],
                s.status.band_hz[1],
                esc(&s.status.band_source),
                esc(&s.status.survey),
                esc(&s.status.last_downlink),
                s.status.downlink_counter,
                s.status.refused_downlinks
            );
        }
        b.push_str("</tbody></table></div>");
    }
    b.push_str("</section><section class=\"panel\"><h2>Newest reports</h2><div class=\"wrap\"><table id=\"node-reports\"><thead><tr><th>Received</th><th class=\"num\">Seq</th><th>Frame</th><th class=\"num\">Speed rpm</th><th>Flags</th><th class=\"hide-s\">Link</th><th>Worst</th></tr></thead><tbody>");
    for r in &reports {
        let fl = FrameFlags::from_bits(r.flags);
        let mut names = Vec::new();
        for (on, n) in [
            (fl.tach_missing, "tach missing"),
            (fl.tach_irregular, "tach irregular"),
            (fl.speed_out_of_range, "speed out of range"),
            (fl.clipping, "clipping"),
            (fl.sensor_fault, "sensor fault"),
            (fl.processing_overrun, "overrun"),
            (fl.low_battery, "battery low"),
        ] {
            if on {
                names.push(n);
            }
        }
        let worst = r
            .defects
            .iter()
            .filter(|d| d.score_db.is_some())
            .max_by(|a, b| {
                a.score_db
                    .unwrap_or(f64::MIN)
                    .total_cmp(&b.score_db.unwrap_or(f64::MIN))
            });
        let _ = write!(
            b,
            "<tr><td>{}</td><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td><td>{}</td><td class=\"hide-s\">{}{}</td><td>{}</td></tr>",
            fmt_time(r.time_ms()),
            r.seq,
            esc(&r.frame_type),
            r.speed_rpm.map_or("–".into(), |v| format!("{v:.1}")),
            if names.is_empty() { "ok".to_string() } else { names.join(", ") },
            r.rssi_dbm.map_or(String::new(), |v| format!("RSSI {v:.0} dBm ")),
            r.snr_db.map_or(String::new(), |v| format!("SNR {v:.1} dB")),
            worst.map_or("–".into(), |w| format!("b{} {} {} dB{}", w.bearing, esc(&w.kind), fmt_db(w.score_db), if w.detected { " detected" } else { "" }))
        );
    }
    b.push_str("</tbody></table></div></section>");
    Ok(layout(&format!("node {node}"), "fleet", Some(session), &b))
}

/// The alarm events page.
pub fn events_page(
    inner: &mut Inner,
    session: &Session,
    cfg: &WebConfig,
    now_ms: i64,
    notice: Option<&str>,
) -> Result<String, DataError> {
    let events = inner.store.events(None, 500)?;
    let mut b = String::from("<h1>Alarm events</h1>");
    if let Some(n) = notice {
        let _ = write!(b, "<p class=\"panel\" id=\"notice\">{}</p>", esc(n));
    }
    let silent: Vec<(u16, i64)> = inner
        .summary
        .nodes
        .iter()
        .filter_map(|(n, f)| {
            f.last_time_ms
                .filter(|t| now_ms - t > cfg.stale_after_ms)
                .map(|t| (*n, t))
        })
        .collect();
    b.push_str("<section class=\"panel\"><h2>Silent nodes</h2>");
    if silent.is_empty() {
        let _ = write!(
            b,
            "<p class=\"muted\">Every node reported within {}.</p>",
            clock::span(cfg.stale_after_ms)
        );
    } else {
        b.push_str("<ul id=\"silent\">");
        for (n, t) in silent {
            let _ = write!(
                b,
                "<li>{} <a href=\"/node/{n}\">node {n}</a> silent since {} ({})</li>",
                state_badge("stale", "STALE"),
                clock::label(t),
                clock::span(now_ms - t)
            );
        }
        b.push_str("</ul>");
    }
    b.push_str("</section>");
    let can_ack = session.role >= Role::Operator;
    if !can_ack {
        b.push_str("<p class=\"muted small\" id=\"viewer-note\">Acknowledging needs the operator role; you are signed in as a viewer.</p>");
    }
    b.push_str("<div class=\"wrap\"><table id=\"events\"><thead><tr><th>When</th><th>Event</th><th>Channel</th><th>Bearing</th><th>Kind</th><th>Change</th><th>Acknowledged</th></tr></thead><tbody>");
    for e in &events {
        let bearing_idx = e.bearing_index;
        let name = e.bearing.as_deref();
        let to = e.state_to.as_deref().unwrap_or("");
        let ack = match (&e.acked_by, can_ack) {
            (Some(by), _) => format!("{} at {}", esc(by), fmt_time(e.acked_at_ms)),
            (None, true) => format!(
                "<form class=\"inline\" method=\"post\" action=\"/events/{}/ack\"><input type=\"hidden\" name=\"csrf\" value=\"{}\"><button class=\"ack\">Acknowledge</button></form>",
                e.id,
                esc(&session.csrf)
            ),
            (None, false) => "not yet".into(),
        };
        let _ = write!(
            b,
            "<tr data-event=\"{}\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{} &#8594; {}</td><td>{ack}</td></tr>",
            e.id,
            fmt_time(Some(e.at_ms)),
            if e.event == "enter" { "entered" } else if e.event == "leave" { "left" } else { e.event.as_str() },
            bearing_idx.map_or(format!("node {}", e.node), |bi| sensor_link(e.node, bi)),
            esc(name.unwrap_or("–")),
            esc(e.kind.as_deref().unwrap_or("–")),
            esc(e.state_from.as_deref().unwrap_or("–")),
            state_badge(to, &to.to_uppercase())
        );
    }
    b.push_str("</tbody></table></div><p class=\"muted small\">Events are state changes into, between and out of ALERT and DANGER, found by replaying each channel's reports through the state logic; times are the reports' receive times.</p>");
    Ok(layout("Alarm events", "events", Some(session), &b))
}
