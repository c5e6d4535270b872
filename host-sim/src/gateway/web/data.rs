//! The dashboard's read queries (and its two writes: derived alarm events and
//! acknowledgements) behind a small trait, so that a PostgreSQL store can be
//! added beside the SQLite one.

use crate::gateway::store::{self, NodeStatus};
use rusqlite::{params, Connection, OpenFlags, OptionalExtension};
use std::fmt;

/// A failed store query.
#[derive(Debug)]
pub enum DataError {
    /// The database refused or failed a query.
    Query(String),
}

impl fmt::Display for DataError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            DataError::Query(m) => write!(f, "store query failed: {m}"),
        }
    }
}

impl std::error::Error for DataError {}

impl From<rusqlite::Error> for DataError {
    fn from(e: rusqlite::Error) -> Self {
        DataError::Query(e.to_string())
    }
}

/// One defect row of a report.
#[derive(Clone, Debug)]
pub struct DefectRow {
    /// Bearing index at the node.
    pub bearing: u8,
    /// Defect kind name.
    pub kind: String,
    /// Score, None when invalid.
    pub score_db: Option<f64>,
    /// Detected bit.
    pub detected: bool,
    /// Amplitude at the defect order (1x), g.
    pub amplitude_1x_g: Option<f64>,
    /// Harmonics found.
    pub harmonics: Option<i64>,
}

/// One stored report with its defect rows.
#[derive(Clone, Debug)]
pub struct ReportRow {
    /// Row id (arrival order).
    pub id: i64,
    /// Node.
    pub node: u16,
    /// Sequence number.
    pub seq: u16,
    /// "full" or "reduced".
    pub frame_type: String,
    /// Receive time text.
    pub rx_time: Option<String>,
    /// Receive time from uplink metadata, Unix ms.
    pub rx_time_ms: Option<i64>,
    /// Quality flag bits.
    pub flags: u16,
    /// RSSI, dBm.
    pub rssi_dbm: Option<f64>,
    /// SNR, dB.
    pub snr_db: Option<f64>,
    /// Speed, rpm.
    pub speed_rpm: Option<f64>,
    /// Payload (for sequence tracking).
    pub payload: Vec<u8>,
    /// Defect rows.
    pub defects: Vec<DefectRow>,
}

impl ReportRow {
    /// Receive time in Unix ms: the uplink's metadata, else the text.
    pub fn time_ms(&self) -> Option<i64> {
        self.rx_time_ms.or_else(|| {
            self.rx_time
                .as_deref()
                .and_then(super::clock::parse_rfc3339_ms)
        })
    }
}

/// One stored status frame.
#[derive(Clone, Debug, serde::Serialize)]
pub struct StatusRow {
    /// Row id.
    pub id: i64,
    /// Receive time in Unix ms if known.
    pub time_ms: Option<i64>,
    /// The frame's fields.
    #[serde(flatten)]
    pub status: NodeStatus,
}

/// One alarm event row.
#[derive(Clone, Debug, serde::Serialize)]
pub struct EventRow {
    /// Row id.
    pub id: i64,
    /// When, Unix ms.
    pub at_ms: i64,
    /// Node.
    pub node: u16,
    /// Physical bearing name.
    pub bearing: Option<String>,
    /// Bearing index at the node, from `detail` when the dashboard wrote it.
    pub bearing_index: Option<u8>,
    /// Defect kind.
    pub kind: Option<String>,
    /// "enter", "leave" or another event name.
    pub event: String,
    /// State before.
    pub state_from: Option<String>,
    /// State after.
    pub state_to: Option<String>,
    /// Report that caused it.
    pub report_id: Option<i64>,
    /// Who acknowledged it.
    pub acked_by: Option<String>,
    /// When, Unix ms.
    pub acked_at_ms: Option<i64>,
}

/// (report id, seq, payload, receive time ms) of one stored report.
pub type Arrival = (i64, u16, Vec<u8>, Option<i64>);

/// A new alarm event to record.
#[derive(Clone, Debug)]
pub struct NewEvent {
    /// When, Unix ms.
    pub at_ms: i64,
    /// Node.
    pub node: u16,
    /// Bearing index at the node (kept in `detail`).
    pub bearing: u8,
    /// Physical bearing name (the map's, else "node N bearing B").
    pub bearing_name: String,
    /// Defect kind.
    pub kind: String,
    /// "enter" (into alert or danger, or between them) or "leave".
    pub event: &'static str,
    /// State before.
    pub from: &'static str,
    /// State after.
    pub to: &'static str,
    /// Report that caused it.
    pub report_id: i64,
}

/// What the dashboard reads from (and the two things it writes to) a store.
pub trait WebStore: Send {
    /// Reports with id > `after` in id order, with their defect rows.
    fn reports_after(&mut self, after: i64, f: &mut dyn FnMut(ReportRow)) -> Result<(), DataError>;
    /// Every report of one node with only the rows of one bearing index.
    fn sensor_reports(&mut self, node: u16, bearing: u8) -> Result<Vec<ReportRow>, DataError>;
    /// The newest `limit` reports of one node, newest first, all rows.
    fn node_reports(&mut self, node: u16, limit: usize) -> Result<Vec<ReportRow>, DataError>;
    /// (id, seq, payload, receive time ms) of every report of one node, in arrival order.
    fn node_arrivals(&mut self, node: u16) -> Result<Vec<Arrival>, DataError>;
    /// The JSON document of one report.
    fn report_json(&mut self, id: i64) -> Result<Option<String>, DataError>;
    /// Hand-set baselines: (node, bearing, kind, dB).
    fn manual_baselines(&mut self) -> Result<Vec<(u16, u8, String, f64)>, DataError>;
    /// The latest status frame of every node.
    fn latest_status(&mut self) -> Result<Vec<NodeStatus>, DataError>;
    /// Status frames of one node, oldest first.
    fn node_status(&mut self, node: u16) -> Result<Vec<StatusRow>, DataError>;
    /// The newest `limit` alarm events, newest first (one node if given).
    fn events(&mut self, node: Option<u16>, limit: usize) -> Result<Vec<EventRow>, DataError>;
    /// Records events not yet stored (same report, node, bearing, kind and
    /// event); returns how many were new.
    fn record_events(&mut self, ev: &[NewEvent]) -> Result<usize, DataError>;
    /// Acknowledges an event; false if it does not exist or is acknowledged.
    fn ack_event(&mut self, id: i64, by: &str, at_ms: i64) -> Result<bool, DataError>;
    /// Every line graded exactly as `gateway status` grades it (stored
    /// limits, decided order, reduced frames read "as before"), staleness
    /// judged at `now_ms`.
    fn graded(
        &mut self,
        now_ms: Option<i64>,
    ) -> Result<Vec<crate::gateway::trend::Line>, DataError>;
}

/// The SQLite store.
pub struct SqliteWeb {
    conn: Connection,
}

impl SqliteWeb {
    /// Opens an existing store (migrating it to this build's schema).
    pub fn open(path: &str) -> Result<Self, crate::error::CliError> {
        // Refuse to create an empty store by a typo in --db.
        Connection::open_with_flags(path, OpenFlags::SQLITE_OPEN_READ_ONLY).map_err(|e| {
            crate::error::CliError::input(path, format!("cannot open the store: {e}"))
        })?;
        Ok(Self {
            conn: store::open(path)?,
        })
    }

    /// Wraps an open connection.
    pub fn from_connection(conn: Connection) -> Self {
        Self { conn }
    }
}

const REPORT_COLS: &str = "r.id, r.node_id, r.seq, r.frame_type, r.rx_time, r.rx_time_ms, r.flags, r.rssi_dbm, r.snr_db, r.speed_rpm, r.payload";

fn report_of(r: &rusqlite::Row<'_>) -> rusqlite::Result<ReportRow> {
    Ok(ReportRow {
        id: r.get(0)?,
        node: r.get(1)?,
        seq: r.get(2)?,
        frame_type: r.get(3)?,
        rx_time: r.get(4)?,
        rx_time_ms: r.get(5)?,
        flags: r.get(6)?,
        rssi_dbm: r.get(7)?,
        snr_db: r.get(8)?,
        speed_rpm: r.get(9)?,
        payload: r.get(10)?,
        defects: Vec::new(),
    })
}

fn defect_of(r: &rusqlite::Row<'_>, at: usize) -> rusqlite::Result<DefectRow> {
    Ok(DefectRow {
        bearing: r.get(at)?,
        kind: r.get(at + 1)?,
        score_db: r.get(at + 2)?,
        detected: r.get(at + 3)?,
        amplitude_1x_g: r.get(at + 4)?,
        harmonics: r.get(at + 5)?,
    })
}

/// Groups (report, defect) join rows into reports.
fn grouped(
    rows: impl Iterator<Item = rusqlite::Result<(ReportRow, Option<DefectRow>)>>,
    f: &mut dyn FnMut(ReportRow),
) -> Result<(), DataError> {
    let mut cur: Option<ReportRow> = None;
    for row in rows {
        let (rep, d) = row?;
        match cur.as_mut() {
            Some(c) if c.id == rep.id => c.defects.extend(d),
            _ => {
                if let Some(done) = cur.take() {
                    f(done);
                }
                let mut rep = rep;
                rep.defects.extend(d);
                cur = Some(rep);
            }
        }
    }
    if let Some(done) = cur {
        f(done);
    }
    Ok(())
}

const DEFECT_COLS: &str =
    "d.bearing, d.kind, d.score_db, d.detected, d.amplitude_1x_g, d.harmonics";

fn status_of(r: &rusqlite::Row<'_>) -> rusqlite::Result<StatusRow> {
    let rx_time: Option<String> = r.get(3)?;
    let ms: Option<i64> = r.get(12)?;
    Ok(StatusRow {
        id: r.get(0)?,
        time_ms: ms.or_else(|| rx_time.as_deref().and_then(super::clock::parse_rfc3339_ms)),
        status: NodeStatus {
            node: r.get(1)?,
            seq: r.get(2)?,
            rx_time,
            downlink_counter: r.get(4)?,
            last_downlink: r.get(5)?,
            refused_downlinks: r.get(6)?,
            survey: r.get(7)?,
            band_source: r.get(8)?,
            band_hz: [r.get(9)?, r.get(10)?],
            band_kurtosis: r.get(11)?,
        },
    })
}

impl WebStore for SqliteWeb {
    fn graded(
        &mut self,
        now_ms: Option<i64>,
    ) -> Result<Vec<crate::gateway::trend::Line>, DataError> {
        crate::gateway::trend_cmd::grade_store(&self.conn, "store", now_ms)
            .map_err(|e| DataError::Query(e.to_string()))
    }
    fn reports_after(&mut self, after: i64, f: &mut dyn FnMut(ReportRow)) -> Result<(), DataError> {
        let tx = self.conn.transaction()?;
        {
            let mut stmt = tx.prepare_cached(&format!(
                "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM reports r LEFT JOIN defects d ON d.report_id = r.id
                 WHERE r.id > ?1 ORDER BY r.id, d.bearing, d.kind"
            ))?;
            let rows = stmt.query_map([after], |r| {
                let d = if r.get_ref(11)?.data_type() == rusqlite::types::Type::Null {
                    None
                } else {
                    Some(defect_of(r, 11)?)
                };
                Ok((report_of(r)?, d))
            })?;
            grouped(rows, f)?;
        }
        tx.commit()?;
        Ok(())
    }

    fn sensor_reports(&mut self, node: u16, bearing: u8) -> Result<Vec<ReportRow>, DataError> {
        let mut stmt = self.conn.prepare_cached(&format!(
            "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM reports r CROSS JOIN defects d ON d.report_id = r.id AND d.bearing = ?2
             WHERE r.node_id = ?1 ORDER BY r.id, d.kind"
        ))?;
        let rows = stmt.query_map(params![node, bearing], |r| {
            Ok((report_of(r)?, Some(defect_of(r, 11)?)))
        })?;
        let mut out = Vec::new();
        grouped(rows, &mut |r| out.push(r))?;
        Ok(out)
    }

    fn node_reports(&mut self, node: u16, limit: usize) -> Result<Vec<ReportRow>, DataError> {
        let mut stmt = self.conn.prepare_cached(&format!(
            "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM
               (SELECT * FROM reports WHERE node_id = ?1 ORDER BY id DESC LIMIT ?2) r
             LEFT JOIN defects d ON d.report_id = r.id ORDER BY r.id DESC, d.bearing, d.kind"
        ))?;
        let lim = i64::try_from(limit).unwrap_or(i64::MAX);
        let rows = stmt.query_map(params![node, lim], |r| {
            let d = if r.get_ref(11)?.data_type() == rusqlite::types::Type::Null {
                None
            } else {
                Some(defect_of(r, 11)?)
            };
            Ok((report_of(r)?, d))
        })?;
        let mut out = Vec::new();
        grouped(rows, &mut |r| out.push(r))?;
        Ok(out)
    }

    fn node_arrivals(&mut self, node: u16) -> Result<Vec<Arrival>, DataError> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT id, seq, payload, rx_time_ms, rx_time FROM reports WHERE node_id = ?1 ORDER BY id",
        )?;
        let rows = stmt.query_map([node], |r| {
            let ms: Option<i64> = r.get(3)?;
            let text: Option<String> = r.get(4)?;
            Ok((
                r.get(0)?,
                r.get(1)?,
                r.get(2)?,
                ms.or_else(|| text.as_deref().and_then(super::clock::parse_rfc3339_ms)),
            ))
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    fn report_json(&mut self, id: i64) -> Result<Option<String>, DataError> {
        Ok(self
            .conn
            .query_row("SELECT json FROM reports WHERE id = ?1", [id], |r| r.get(0))
            .optional()?)
    }

    fn manual_baselines(&mut self) -> Result<Vec<(u16, u8, String, f64)>, DataError> {
        let mut stmt = self
            .conn
            .prepare_cached("SELECT node_id, bearing, kind, score_db FROM baselines")?;
        let rows = stmt.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    fn latest_status(&mut self) -> Result<Vec<NodeStatus>, DataError> {
        store::latest_status(&mut self.conn).map_err(|e| DataError::Query(e.to_string()))
    }

    fn node_status(&mut self, node: u16) -> Result<Vec<StatusRow>, DataError> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT id, node_id, seq, rx_time, downlink_counter, last_downlink, refused_downlinks, survey,
                    band_source, band_lo_hz, band_hi_hz, band_kurtosis, rx_time_ms
             FROM node_status WHERE node_id = ?1 ORDER BY id",
        )?;
        let rows = stmt.query_map([node], status_of)?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    fn events(&mut self, node: Option<u16>, limit: usize) -> Result<Vec<EventRow>, DataError> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT id, at_ms, node_id, bearing, kind, event, state_from, state_to, report_id, acked_by, acked_at_ms, detail
             FROM alarm_events WHERE ?1 IS NULL OR node_id = ?1 ORDER BY at_ms DESC, id DESC LIMIT ?2",
        )?;
        let lim = i64::try_from(limit).unwrap_or(i64::MAX);
        let rows = stmt.query_map(params![node, lim], |r| {
            Ok(EventRow {
                id: r.get(0)?,
                at_ms: r.get(1)?,
                node: r.get(2)?,
                bearing: r.get(3)?,
                bearing_index: r
                    .get::<_, String>(11)
                    .ok()
                    .and_then(|d| serde_json::from_str::<serde_json::Value>(&d).ok())
                    .and_then(|v| v.get("bearing_index").and_then(serde_json::Value::as_u64))
                    .and_then(|b| u8::try_from(b).ok()),
                kind: r.get(4)?,
                event: r.get(5)?,
                state_from: r.get(6)?,
                state_to: r.get(7)?,
                report_id: r.get(8)?,
                acked_by: r.get(9)?,
                acked_at_ms: r.get(10)?,
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }

    fn record_events(&mut self, ev: &[NewEvent]) -> Result<usize, DataError> {
        let tx = self.conn.transaction()?;
        let mut n = 0;
        {
            let mut exists = tx.prepare_cached(
                "SELECT 1 FROM alarm_events WHERE report_id = ?1 AND node_id = ?2 AND bearing = ?3 AND kind = ?4 AND event = ?5 AND state_to = ?6",
            )?;
            let mut ins = tx.prepare_cached(
                "INSERT INTO alarm_events (at_ms, node_id, bearing, kind, event, state_from, state_to, report_id, detail)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
            )?;
            for e in ev {
                let b = &e.bearing_name;
                let detail =
                    serde_json::json!({"source": "gateway web", "bearing_index": e.bearing})
                        .to_string();
                if exists
                    .query_row(
                        params![e.report_id, e.node, b, e.kind, e.event, e.to],
                        |_| Ok(()),
                    )
                    .optional()?
                    .is_none()
                {
                    ins.execute(params![
                        e.at_ms,
                        e.node,
                        b,
                        e.kind,
                        e.event,
                        e.from,
                        e.to,
                        e.report_id,
                        detail
                    ])?;
                    n += 1;
                }
            }
        }
        tx.commit()?;
        Ok(n)
    }

    fn ack_event(&mut self, id: i64, by: &str, at_ms: i64) -> Result<bool, DataError> {
        let n = self.conn.execute(
            "UPDATE alarm_events SET acked_by = ?2, acked_at_ms = ?3 WHERE id = ?1 AND acked_by IS NULL",
            params![id, by, at_ms],
        )?;
        Ok(n > 0)
    }
}
