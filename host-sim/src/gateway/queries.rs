//! Every query of the gateway store, written once over [`Db`] (SQLite and
//! PostgreSQL run the same text; see [`super::db`]).

use super::db::{Db, DbError, Row, Val};
use super::store::{is_report, node_seq, NodeStatus, Observation};
use dsp_core::frame::{DefectKind, Frame, IsoZone};
use std::collections::HashMap;

/// Where a frame came from and what the network said about it.
#[derive(Clone, Debug, Default)]
pub struct Origin {
    /// Input file name or MQTT topic.
    pub source: String,
    /// Line or frame index (file), message count (MQTT).
    pub line: usize,
    /// Receive time as given.
    pub rx_time: Option<String>,
    /// Receive time, ms since the Unix epoch, when it could be read.
    pub rx_time_ms: Option<i64>,
    /// Network device id (e.g. a LoRaWAN DevEUI).
    pub device_id: Option<String>,
    /// LoRaWAN fPort.
    pub fport: Option<i64>,
    /// Received signal strength, dBm.
    pub rssi_dbm: Option<f64>,
    /// Signal-to-noise ratio, dB.
    pub snr_db: Option<f64>,
}

fn opt(x: f32) -> Option<f64> {
    x.is_finite().then_some(f64::from(x))
}

fn zone_name(z: Option<IsoZone>) -> Option<&'static str> {
    z.map(|z| match z {
        IsoZone::A => "A",
        IsoZone::B => "B",
        IsoZone::C => "C",
        IsoZone::D => "D",
    })
}

/// JSON name of a serde unit variant (e.g. `"config_applied"`).
fn name_of<T: serde::Serialize>(v: &T) -> String {
    serde_json::to_value(v)
        .ok()
        .and_then(|x| x.as_str().map(str::to_string))
        .unwrap_or_default()
}

fn line_val(line: usize) -> Val {
    Val::Int(Some(i64::try_from(line).unwrap_or(i64::MAX)))
}

const INSERT_STATUS: &str = "INSERT INTO node_status (node_id, seq, payload, rx_time, source, line,
       flags, downlink_counter, last_downlink, refused_downlinks, survey, band_source, band_lo_hz,
       band_hi_hz, band_kurtosis, json, rx_time_ms, device_id, rssi_dbm, snr_db)
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, ?20)
     ON CONFLICT DO NOTHING";

const INSERT_REPORT: &str = "INSERT INTO reports (node_id, seq, frame_type, payload, rx_time,
       source, line, flags, speed_rpm, accel_rms_g, peak_g, crest_factor, kurtosis,
       velocity_rms_mm_s, iso_zone, json, rx_time_ms, device_id, fport, rssi_dbm, snr_db)
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, ?20, ?21)
     ON CONFLICT DO NOTHING RETURNING id";

/// Inserts a decoded frame unless the same node+seq+payload is stored
/// (the unique key); returns whether it was new. Reports go to `reports`
/// and `defects`, status frames to `node_status`. Call inside a transaction.
pub fn insert_frame(
    db: &mut dyn Db,
    f: &Frame,
    payload: &[u8],
    o: &Origin,
) -> Result<bool, DbError> {
    let (node, seq) = node_seq(f);
    let json = serde_json::to_string(f).unwrap_or_default();
    if let Frame::Status(r) = f {
        let n = db.execute(
            INSERT_STATUS,
            &[
                node.into(),
                seq.into(),
                payload.into(),
                o.rx_time.as_deref().into(),
                o.source.as_str().into(),
                line_val(o.line),
                r.flags.to_bits().into(),
                r.downlink_counter.into(),
                name_of(&r.last_downlink).into(),
                r.refused_downlinks.into(),
                name_of(&r.survey).into(),
                name_of(&r.band_source).into(),
                f64::from(r.band_hz[0]).into(),
                f64::from(r.band_hz[1]).into(),
                opt(r.band_kurtosis).into(),
                json.into(),
                o.rx_time_ms.into(),
                o.device_id.as_deref().into(),
                o.rssi_dbm.into(),
                o.snr_db.into(),
            ],
        )?;
        return Ok(n > 0);
    }
    let none = || Val::Real(None);
    let (kind, flags, m) = match f {
        Frame::Full(r) => (
            "full",
            r.flags.to_bits(),
            [
                opt(r.speed_rpm).into(),
                opt(r.overall.accel_rms_g).into(),
                opt(r.overall.peak_g).into(),
                opt(r.overall.crest_factor).into(),
                opt(r.overall.kurtosis).into(),
                opt(r.overall.velocity_rms_mm_s).into(),
                zone_name(r.overall.iso_zone).into(),
            ],
        ),
        Frame::Reduced(r) => (
            "reduced",
            r.flags.to_bits(),
            [
                none(),
                none(),
                none(),
                none(),
                none(),
                none(),
                Val::Text(None),
            ],
        ),
        Frame::Status(_) => return Ok(false),
    };
    let mut p: Vec<Val> = vec![
        node.into(),
        seq.into(),
        kind.into(),
        payload.into(),
        o.rx_time.as_deref().into(),
        o.source.as_str().into(),
        line_val(o.line),
        flags.into(),
    ];
    p.extend(m);
    p.extend([
        json.into(),
        o.rx_time_ms.into(),
        o.device_id.as_deref().into(),
        o.fport.into(),
        o.rssi_dbm.into(),
        o.snr_db.into(),
    ]);
    // Looked up first: PostgreSQL spends an identity value on every
    // conflicting insert, and report ids (arrival order) should not depend
    // on the backend or on how many repeats arrived.
    let exists = db.query(
        "SELECT 1 FROM reports WHERE node_id = ?1 AND seq = ?2 AND payload = ?3",
        &[node.into(), seq.into(), payload.into()],
    )?;
    if !exists.is_empty() {
        return Ok(false);
    }
    let rows = db.query(INSERT_REPORT, &p)?;
    let Some(id) = rows.first().and_then(|r| r.first()).and_then(Val::opt_int) else {
        return Ok(false);
    };
    // All defect rows of the report in one statement (one round trip).
    let mut vals: Vec<Val> = Vec::new();
    let mut push =
        |b: u8, k: &str, score: Option<f64>, amp: Option<f64>, h: Option<i64>, det: bool| {
            vals.extend([
                id.into(),
                b.into(),
                k.into(),
                score.into(),
                amp.into(),
                h.into(),
                det.into(),
            ]);
        };
    match f {
        Frame::Full(r) => {
            for (b, br) in (0u8..).zip(r.bearings.iter()) {
                for (k, d) in DefectKind::ALL.iter().zip(br.defects.iter()) {
                    push(
                        b,
                        k.name(),
                        opt(d.score_db),
                        opt(d.amplitude_1x_g),
                        Some(i64::from(d.harmonics)),
                        d.detected,
                    );
                }
            }
        }
        Frame::Reduced(r) => {
            if let Some(w) = r.worst {
                push(
                    w.bearing,
                    w.kind.name(),
                    opt(w.score_db),
                    None,
                    None,
                    w.detected,
                );
            }
        }
        Frame::Status(_) => {}
    }
    if !vals.is_empty() {
        let rows = vals.len() / 7;
        let tuples: Vec<String> = (0..rows)
            .map(|i| {
                let b = i * 7;
                format!(
                    "(?{}, ?{}, ?{}, ?{}, ?{}, ?{}, ?{})",
                    b + 1,
                    b + 2,
                    b + 3,
                    b + 4,
                    b + 5,
                    b + 6,
                    b + 7
                )
            })
            .collect();
        let sql = format!(
            "INSERT INTO defects (report_id, bearing, kind, score_db, amplitude_1x_g, harmonics, detected) VALUES {}",
            tuples.join(", ")
        );
        db.execute(&sql, &vals)?;
    }
    debug_assert!(is_report(f));
    Ok(true)
}

/// Longest reject text kept whole; longer texts keep their start and a hash
/// of the whole (an index entry has a size limit in PostgreSQL).
pub const REJECT_TEXT_MAX: usize = 1500;

/// The reject text as stored: whole when short, else the start, the length
/// and a 64-bit FNV-1a hash of the whole (distinct inputs stay distinct).
pub fn reject_text(text: &str) -> String {
    if text.len() <= REJECT_TEXT_MAX {
        return text.to_string();
    }
    let mut cut = REJECT_TEXT_MAX;
    while !text.is_char_boundary(cut) {
        cut -= 1;
    }
    let h = text.bytes().fold(0xcbf2_9ce4_8422_2325u64, |h, b| {
        (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01b3)
    });
    format!(
        "{}... ({} bytes, fnv1a64 {h:016x})",
        text.get(..cut).unwrap_or(""),
        text.len()
    )
}

/// Records a rejected input; returns whether it was new (unique on text and reason).
pub fn insert_reject(
    db: &mut dyn Db,
    source: &str,
    line: usize,
    text: &str,
    reason: &str,
) -> Result<bool, DbError> {
    let n = db.execute(
        "INSERT INTO rejects (source, line, text, reason) VALUES (?1, ?2, ?3, ?4) ON CONFLICT DO NOTHING",
        &[source.into(), line_val(line), reject_text(text).into(), reason.into()],
    )?;
    Ok(n > 0)
}

fn u16_of(v: &Val, col: &str) -> Result<u16, DbError> {
    u16::try_from(v.int(col)?).map_err(|_| DbError::Type(format!("{col}: out of range")))
}

fn u8_of(v: &Val, col: &str) -> Result<u8, DbError> {
    u8::try_from(v.int(col)?).map_err(|_| DbError::Type(format!("{col}: out of range")))
}

fn col(r: &Row, i: usize) -> &Val {
    const NULL: Val = Val::Int(None);
    r.get(i).unwrap_or(&NULL)
}

/// (node, seq, payload) of every stored report in arrival order.
pub fn arrivals(db: &mut dyn Db) -> Result<Vec<(u16, u16, Vec<u8>)>, DbError> {
    db.query("SELECT node_id, seq, payload FROM reports ORDER BY id", &[])?
        .iter()
        .map(|r| {
            Ok((
                u16_of(col(r, 0), "node_id")?,
                u16_of(col(r, 1), "seq")?,
                col(r, 2).blob("payload")?,
            ))
        })
        .collect()
}

/// A stored report's row id, node, sequence number and payload.
pub type ReportArrival = (i64, u16, u16, Vec<u8>);

/// Every stored report in arrival order, with its row id.
pub fn report_arrivals(db: &mut dyn Db) -> Result<Vec<ReportArrival>, DbError> {
    db.query(
        "SELECT id, node_id, seq, payload FROM reports ORDER BY id",
        &[],
    )?
    .iter()
    .map(|r| {
        Ok((
            col(r, 0).int("id")?,
            u16_of(col(r, 1), "node_id")?,
            u16_of(col(r, 2), "seq")?,
            col(r, 3).blob("payload")?,
        ))
    })
    .collect()
}

/// (node, status seq, payload) of every stored status frame in arrival order.
pub fn status_arrivals(db: &mut dyn Db) -> Result<Vec<(u16, u16, Vec<u8>)>, DbError> {
    db.query(
        "SELECT node_id, seq, payload FROM node_status ORDER BY id",
        &[],
    )?
    .iter()
    .map(|r| {
        Ok((
            u16_of(col(r, 0), "node_id")?,
            u16_of(col(r, 1), "seq")?,
            col(r, 2).blob("payload")?,
        ))
    })
    .collect()
}

fn observation(r: &Row) -> Result<Observation, DbError> {
    Ok(Observation {
        report_id: col(r, 0).int("id")?,
        node: u16_of(col(r, 1), "node_id")?,
        seq: u16_of(col(r, 2), "seq")?,
        rx_time: col(r, 3).opt_text(),
        bearing: u8_of(col(r, 4), "bearing")?,
        kind: col(r, 5).text("kind")?,
        score_db: col(r, 6).opt_real(),
        detected: col(r, 7).int("detected")? != 0,
    })
}

/// Every defect observation in arrival order (of one node when given).
pub fn observations(db: &mut dyn Db, node: Option<u16>) -> Result<Vec<Observation>, DbError> {
    let rows = match node {
        None => db.query(
            "SELECT r.id, r.node_id, r.seq, r.rx_time, d.bearing, d.kind, d.score_db, d.detected
             FROM defects d JOIN reports r ON r.id = d.report_id ORDER BY r.id, d.bearing, d.kind",
            &[],
        )?,
        Some(n) => db.query(
            "SELECT r.id, r.node_id, r.seq, r.rx_time, d.bearing, d.kind, d.score_db, d.detected
             FROM defects d JOIN reports r ON r.id = d.report_id WHERE r.node_id = ?1
             ORDER BY r.id, d.bearing, d.kind",
            &[n.into()],
        )?,
    };
    rows.iter().map(observation).collect()
}

/// Every hand-set baseline by (node, bearing, kind).
pub fn baselines(db: &mut dyn Db) -> Result<HashMap<(u16, u8, String), f64>, DbError> {
    db.query(
        "SELECT node_id, bearing, kind, score_db FROM baselines",
        &[],
    )?
    .iter()
    .map(|r| {
        Ok((
            (
                u16_of(col(r, 0), "node_id")?,
                u8_of(col(r, 1), "bearing")?,
                col(r, 2).text("kind")?,
            ),
            col(r, 3).real("score_db")?,
        ))
    })
    .collect()
}

/// Sets (Some) or clears (None) a hand-set baseline.
pub fn set_baseline(
    db: &mut dyn Db,
    node: u16,
    bearing: u8,
    kind: &str,
    v: Option<f64>,
) -> Result<(), DbError> {
    match v {
        Some(x) => db.execute(
            "INSERT INTO baselines (node_id, bearing, kind, score_db) VALUES (?1, ?2, ?3, ?4)
             ON CONFLICT (node_id, bearing, kind) DO UPDATE SET score_db = excluded.score_db",
            &[node.into(), bearing.into(), kind.into(), x.into()],
        )?,
        None => db.execute(
            "DELETE FROM baselines WHERE node_id = ?1 AND bearing = ?2 AND kind = ?3",
            &[node.into(), bearing.into(), kind.into()],
        )?,
    };
    Ok(())
}

/// Count of rows in a table of this schema.
pub fn count(db: &mut dyn Db, table: &str) -> Result<i64, DbError> {
    let sql = match table {
        "reports" => "SELECT COUNT(*) FROM reports",
        "defects" => "SELECT COUNT(*) FROM defects",
        "rejects" => "SELECT COUNT(*) FROM rejects",
        "node_status" => "SELECT COUNT(*) FROM node_status",
        "alarm_events" => "SELECT COUNT(*) FROM alarm_events",
        _ => "SELECT COUNT(*) FROM baselines",
    };
    let rows = db.query(sql, &[])?;
    rows.first()
        .map(|r| col(r, 0).int("count"))
        .unwrap_or(Ok(0))
}

/// The latest (last arrived) status frame of every node, by node.
pub fn latest_status(db: &mut dyn Db) -> Result<Vec<NodeStatus>, DbError> {
    let rows = db.query(
        "SELECT node_id, seq, rx_time, downlink_counter, last_downlink, refused_downlinks, survey,
                band_source, band_lo_hz, band_hi_hz, band_kurtosis
         FROM node_status WHERE id IN (SELECT MAX(id) FROM node_status GROUP BY node_id)
         ORDER BY node_id",
        &[],
    )?;
    rows.iter()
        .map(|r| {
            Ok(NodeStatus {
                node: u16_of(col(r, 0), "node_id")?,
                seq: u16_of(col(r, 1), "seq")?,
                rx_time: col(r, 2).opt_text(),
                downlink_counter: u32::try_from(col(r, 3).int("downlink_counter")?)
                    .map_err(|_| DbError::Type("downlink_counter: out of range".into()))?,
                last_downlink: col(r, 4).text("last_downlink")?,
                refused_downlinks: u8_of(col(r, 5), "refused_downlinks")?,
                survey: col(r, 6).text("survey")?,
                band_source: col(r, 7).text("band_source")?,
                band_hz: [col(r, 8).real("band_lo_hz")?, col(r, 9).real("band_hi_hz")?],
                band_kurtosis: col(r, 10).opt_real(),
            })
        })
        .collect()
}

/// Quality flags of every node's latest report, by node.
pub fn latest_flags(db: &mut dyn Db) -> Result<Vec<(u16, u16)>, DbError> {
    db.query(
        "SELECT node_id, flags FROM reports WHERE id IN (SELECT MAX(id) FROM reports GROUP BY node_id)
         ORDER BY node_id",
        &[],
    )?
    .iter()
    .map(|r| Ok((u16_of(col(r, 0), "node_id")?, u16_of(col(r, 1), "flags")?)))
    .collect()
}

/// Key of an alarm condition: node, bearing (as text, e.g. "0"), defect kind, event class.
pub type AlarmKey = (u16, Option<String>, Option<String>, String);

/// The last recorded `state_to` of every alarm condition.
pub fn last_alarm_states(db: &mut dyn Db) -> Result<HashMap<AlarmKey, String>, DbError> {
    let rows = db.query(
        "SELECT node_id, bearing, kind, event, state_to FROM alarm_events ORDER BY id",
        &[],
    )?;
    let mut out = HashMap::new();
    for r in &rows {
        out.insert(
            (
                u16_of(col(r, 0), "node_id")?,
                col(r, 1).opt_text(),
                col(r, 2).opt_text(),
                col(r, 3).text("event")?,
            ),
            col(r, 4).opt_text().unwrap_or_default(),
        );
    }
    Ok(out)
}

/// One alarm change to record.
#[derive(Clone, Debug, serde::Serialize)]
pub struct AlarmEvent {
    /// When it was seen, ms since the Unix epoch.
    pub at_ms: i64,
    /// Node.
    pub node: u16,
    /// Bearing index as text, when the event is about a bearing.
    pub bearing: Option<String>,
    /// Defect kind, when the event is about a defect.
    pub kind: Option<String>,
    /// Event class: `state`, `silent`, `sensor_fault`, `tach_fault`.
    pub event: String,
    /// State before.
    pub state_from: Option<String>,
    /// State after.
    pub state_to: String,
    /// Details (JSON object).
    pub detail: serde_json::Value,
}

/// Records an alarm event unless the condition's last recorded state is
/// already `state_to` (another instance or an earlier run recorded it);
/// returns whether it was recorded. Call inside a transaction.
pub fn insert_alarm(db: &mut dyn Db, e: &AlarmEvent) -> Result<bool, DbError> {
    let last = db.query(
        "SELECT state_to FROM alarm_events WHERE node_id = ?1 AND event = ?2
           AND COALESCE(bearing, '') = ?3 AND COALESCE(kind, '') = ?4
         ORDER BY id DESC LIMIT 1",
        &[
            e.node.into(),
            e.event.as_str().into(),
            e.bearing.clone().unwrap_or_default().into(),
            e.kind.clone().unwrap_or_default().into(),
        ],
    )?;
    if last
        .first()
        .and_then(|r| col(r, 0).opt_text())
        .is_some_and(|s| s == e.state_to)
    {
        return Ok(false);
    }
    db.execute(
        "INSERT INTO alarm_events (at_ms, node_id, bearing, kind, event, state_from, state_to, detail)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
        &[
            e.at_ms.into(),
            e.node.into(),
            e.bearing.as_deref().into(),
            e.kind.as_deref().into(),
            e.event.as_str().into(),
            e.state_from.as_deref().into(),
            e.state_to.as_str().into(),
            e.detail.to_string().into(),
        ],
    )?;
    Ok(true)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_reject_text_keeps_start_and_hash() {
        let a = "x".repeat(3000);
        let mut b = a.clone();
        b.push('y');
        assert_eq!(reject_text("short"), "short");
        assert!(reject_text(&a).starts_with(&"x".repeat(REJECT_TEXT_MAX)));
        assert_ne!(reject_text(&a), reject_text(&b));
        assert!(reject_text(&a).len() < 1600);
    }
}
