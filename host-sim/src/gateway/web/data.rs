//! The dashboard's read queries (and its two writes: derived alarm events and
//! acknowledgements) behind a small trait, written once over the store trait
//! [`crate::gateway::db::Db`], so the dashboard runs on SQLite and
//! PostgreSQL alike.

use crate::gateway::db::{self, Db, DbError, Row, Val};
use crate::gateway::limits::LimitRow;
use crate::gateway::store::{self, col, u16_of, u8_of, NodeStatus};
use crate::gateway::trend::Line;
use std::collections::BTreeMap;
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

impl From<DbError> for DataError {
    fn from(e: DbError) -> Self {
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

/// Lines graded with no reference time (never stale) and each node's
/// newest receive time, from which staleness is judged at render time
/// ([`crate::gateway::trend::mark_stale`]).
pub type GradedNodes = (Vec<Line>, BTreeMap<u16, i64>);

/// What the dashboard reads from (and the two things it writes to) a store.
pub trait WebStore: Send {
    /// Reports with `after` < id <= `upto` in id order, with their defect rows.
    fn reports_between(
        &mut self,
        after: i64,
        upto: i64,
        f: &mut dyn FnMut(ReportRow),
    ) -> Result<(), DataError>;
    /// The largest report id stored (0 when none).
    fn max_report_id(&mut self) -> Result<i64, DataError>;
    /// Every report of one node with only the rows of one bearing index.
    fn sensor_reports(&mut self, node: u16, bearing: u8) -> Result<Vec<ReportRow>, DataError>;
    /// The newest `limit` reports of one node, newest first, all rows.
    fn node_reports(&mut self, node: u16, limit: usize) -> Result<Vec<ReportRow>, DataError>;
    /// (id, seq, payload, receive time ms) of every report of one node, in arrival order.
    fn node_arrivals(&mut self, node: u16) -> Result<Vec<Arrival>, DataError>;
    /// The JSON document of one report.
    fn report_json(&mut self, id: i64) -> Result<Option<String>, DataError>;
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
    /// The stored limit rows (a change regrades every line).
    fn limit_rows(&mut self) -> Result<Vec<LimitRow>, DataError>;
    /// The lines of these nodes graded exactly as `gateway status` grades
    /// them (`trend_cmd::grade_db`: stored limits, decided order, reduced
    /// frames read "as before"), without staleness.
    fn graded_nodes(&mut self, nodes: &[u16]) -> Result<GradedNodes, DataError>;
    /// The store connection (the incremental grading reads through it).
    fn db(&mut self) -> &mut dyn Db;
}

/// The dashboard's store on either backend.
pub struct StoreWeb {
    db: Box<dyn Db + Send>,
    /// The store URL, redacted (for messages).
    name: String,
}

impl StoreWeb {
    /// Opens an existing store: a SQLite file (migrated to this build's
    /// schema) or a `postgres://` URL.
    pub fn open(url: &str) -> Result<Self, crate::error::CliError> {
        Ok(Self {
            db: db::open_mode(url, db::Mode::Existing)?,
            name: db::redact(url),
        })
    }

    /// Wraps an open store connection.
    pub fn from_db(db: Box<dyn Db + Send>, name: &str) -> Self {
        Self {
            db,
            name: db::redact(name),
        }
    }
}

const REPORT_COLS: &str = "r.id, r.node_id, r.seq, r.frame_type, r.rx_time, r.rx_time_ms, r.flags, r.rssi_dbm, r.snr_db, r.speed_rpm, r.payload";

fn report_of(r: &Row) -> Result<ReportRow, DbError> {
    Ok(ReportRow {
        id: col(r, 0).int("id")?,
        node: u16_of(col(r, 1), "node_id")?,
        seq: u16_of(col(r, 2), "seq")?,
        frame_type: col(r, 3).text("frame_type")?,
        rx_time: col(r, 4).opt_text(),
        rx_time_ms: col(r, 5).opt_int(),
        flags: u16::try_from(col(r, 6).opt_int().unwrap_or(0))
            .map_err(|_| DbError::Type("flags: out of range".into()))?,
        rssi_dbm: col(r, 7).opt_real(),
        snr_db: col(r, 8).opt_real(),
        speed_rpm: col(r, 9).opt_real(),
        payload: col(r, 10).blob("payload")?,
        defects: Vec::new(),
    })
}

/// The defect columns at `at`, None when the LEFT JOIN found no row.
fn defect_of(r: &Row, at: usize) -> Result<Option<DefectRow>, DbError> {
    if col(r, at) == &Val::Int(None) {
        return Ok(None);
    }
    Ok(Some(DefectRow {
        bearing: u8_of(col(r, at), "bearing")?,
        kind: col(r, at + 1).text("kind")?,
        score_db: col(r, at + 2).opt_real(),
        detected: col(r, at + 3).opt_int().is_some_and(|d| d != 0),
        amplitude_1x_g: col(r, at + 4).opt_real(),
        harmonics: col(r, at + 5).opt_int(),
    }))
}

/// Groups (report, defect) join rows into reports.
fn grouped(rows: &[Row], f: &mut dyn FnMut(ReportRow)) -> Result<(), DataError> {
    let mut cur: Option<ReportRow> = None;
    for row in rows {
        let id = col(row, 0).int("id")?;
        let d = defect_of(row, 11)?;
        match cur.as_mut() {
            Some(c) if c.id == id => c.defects.extend(d),
            _ => {
                if let Some(done) = cur.take() {
                    f(done);
                }
                let mut rep = report_of(row)?;
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

fn status_of(r: &Row) -> Result<StatusRow, DbError> {
    let rx_time = col(r, 3).opt_text();
    let ms = col(r, 12).opt_int();
    let u32_of = |i: usize, name: &str| -> Result<u32, DbError> {
        u32::try_from(col(r, i).int(name)?)
            .map_err(|_| DbError::Type(format!("{name}: out of range")))
    };
    Ok(StatusRow {
        id: col(r, 0).int("id")?,
        time_ms: ms.or_else(|| rx_time.as_deref().and_then(super::clock::parse_rfc3339_ms)),
        status: NodeStatus {
            node: u16_of(col(r, 1), "node_id")?,
            seq: u16_of(col(r, 2), "seq")?,
            rx_time,
            downlink_counter: u32_of(4, "downlink_counter")?,
            last_downlink: col(r, 5).text("last_downlink")?,
            refused_downlinks: u8::try_from(col(r, 6).int("refused_downlinks")?)
                .map_err(|_| DbError::Type("refused_downlinks: out of range".into()))?,
            survey: col(r, 7).text("survey")?,
            band_source: col(r, 8).text("band_source")?,
            band_hz: [
                col(r, 9).real("band_lo_hz")?,
                col(r, 10).real("band_hi_hz")?,
            ],
            band_kurtosis: col(r, 11).opt_real(),
        },
    })
}

fn lim(limit: usize) -> Val {
    Val::Int(Some(i64::try_from(limit).unwrap_or(i64::MAX)))
}

impl WebStore for StoreWeb {
    fn db(&mut self) -> &mut dyn Db {
        self.db.as_mut()
    }

    fn graded_nodes(&mut self, nodes: &[u16]) -> Result<GradedNodes, DataError> {
        crate::gateway::trend_cmd::grade_db_unstaled(self.db.as_mut(), &self.name, Some(nodes))
            .map_err(|e| DataError::Query(e.to_string()))
    }

    fn limit_rows(&mut self) -> Result<Vec<LimitRow>, DataError> {
        Ok(crate::gateway::limits::rows(self.db.as_mut())?)
    }

    fn max_report_id(&mut self) -> Result<i64, DataError> {
        let rows = self
            .db
            .query("SELECT COALESCE(MAX(id), 0) FROM reports", &[])?;
        Ok(rows.first().map_or(0, |r| col(r, 0).opt_int().unwrap_or(0)))
    }

    fn reports_between(
        &mut self,
        after: i64,
        upto: i64,
        f: &mut dyn FnMut(ReportRow),
    ) -> Result<(), DataError> {
        let rows = self.db.query(
            &format!(
                "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM reports r LEFT JOIN defects d ON d.report_id = r.id
                 WHERE r.id > ?1 AND r.id <= ?2 ORDER BY r.id, d.bearing, d.kind"
            ),
            &[after.into(), upto.into()],
        )?;
        grouped(&rows, f)
    }

    fn sensor_reports(&mut self, node: u16, bearing: u8) -> Result<Vec<ReportRow>, DataError> {
        // CROSS JOIN: SQLite walks the node's reports (reports_by_node), then
        // each report's rows by the unique key, instead of defects by kind.
        let cross = match self.db.backend() {
            db::Backend::Sqlite => "CROSS JOIN",
            db::Backend::Postgres => "JOIN",
        };
        let rows = self.db.query(
            &format!(
                "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM reports r {cross} defects d ON d.report_id = r.id AND d.bearing = ?2
                 WHERE r.node_id = ?1 ORDER BY r.id, d.kind"
            ),
            &[node.into(), bearing.into()],
        )?;
        let mut out = Vec::new();
        grouped(&rows, &mut |r| out.push(r))?;
        Ok(out)
    }

    fn node_reports(&mut self, node: u16, limit: usize) -> Result<Vec<ReportRow>, DataError> {
        let rows = self.db.query(
            &format!(
                "SELECT {REPORT_COLS}, {DEFECT_COLS} FROM
                   (SELECT * FROM reports WHERE node_id = ?1 ORDER BY id DESC LIMIT ?2) r
                 LEFT JOIN defects d ON d.report_id = r.id ORDER BY r.id DESC, d.bearing, d.kind"
            ),
            &[node.into(), lim(limit)],
        )?;
        let mut out = Vec::new();
        grouped(&rows, &mut |r| out.push(r))?;
        Ok(out)
    }

    fn node_arrivals(&mut self, node: u16) -> Result<Vec<Arrival>, DataError> {
        let rows = self.db.query(
            "SELECT id, seq, payload, rx_time_ms, rx_time FROM reports WHERE node_id = ?1 ORDER BY id",
            &[node.into()],
        )?;
        rows.iter()
            .map(|r| {
                let ms = col(r, 3).opt_int();
                let text = col(r, 4).opt_text();
                Ok((
                    col(r, 0).int("id")?,
                    u16_of(col(r, 1), "seq")?,
                    col(r, 2).blob("payload")?,
                    ms.or_else(|| text.as_deref().and_then(super::clock::parse_rfc3339_ms)),
                ))
            })
            .collect()
    }

    fn report_json(&mut self, id: i64) -> Result<Option<String>, DataError> {
        let rows = self
            .db
            .query("SELECT json FROM reports WHERE id = ?1", &[id.into()])?;
        Ok(rows.first().and_then(|r| col(r, 0).opt_text()))
    }

    fn latest_status(&mut self) -> Result<Vec<NodeStatus>, DataError> {
        Ok(store::latest_status(self.db.as_mut())?)
    }

    fn node_status(&mut self, node: u16) -> Result<Vec<StatusRow>, DataError> {
        let rows = self.db.query(
            "SELECT id, node_id, seq, rx_time, downlink_counter, last_downlink, refused_downlinks, survey,
                    band_source, band_lo_hz, band_hi_hz, band_kurtosis, rx_time_ms
             FROM node_status WHERE node_id = ?1 ORDER BY id",
            &[node.into()],
        )?;
        Ok(rows.iter().map(status_of).collect::<Result<_, _>>()?)
    }

    fn events(&mut self, node: Option<u16>, limit: usize) -> Result<Vec<EventRow>, DataError> {
        const COLS: &str = "SELECT id, at_ms, node_id, bearing, kind, event, state_from, state_to, report_id, acked_by, acked_at_ms, detail FROM alarm_events";
        let rows = match node {
            Some(n) => self.db.query(
                &format!("{COLS} WHERE node_id = ?1 ORDER BY at_ms DESC, id DESC LIMIT ?2"),
                &[n.into(), lim(limit)],
            )?,
            None => self.db.query(
                &format!("{COLS} ORDER BY at_ms DESC, id DESC LIMIT ?1"),
                &[lim(limit)],
            )?,
        };
        let event = |r: &Row| -> Result<EventRow, DbError> {
            Ok(EventRow {
                id: col(r, 0).int("id")?,
                at_ms: col(r, 1).int("at_ms")?,
                node: u16_of(col(r, 2), "node_id")?,
                bearing: col(r, 3).opt_text(),
                bearing_index: col(r, 11)
                    .opt_text()
                    .and_then(|d| serde_json::from_str::<serde_json::Value>(&d).ok())
                    .and_then(|v| v.get("bearing_index").and_then(serde_json::Value::as_u64))
                    .and_then(|b| u8::try_from(b).ok()),
                kind: col(r, 4).opt_text(),
                event: col(r, 5).text("event")?,
                state_from: col(r, 6).opt_text(),
                state_to: col(r, 7).opt_text(),
                report_id: col(r, 8).opt_int(),
                acked_by: col(r, 9).opt_text(),
                acked_at_ms: col(r, 10).opt_int(),
            })
        };
        Ok(rows.iter().map(event).collect::<Result<_, _>>()?)
    }

    fn record_events(&mut self, ev: &[NewEvent]) -> Result<usize, DataError> {
        self.db.begin()?;
        let mut n = 0;
        let r = (|| {
            for e in ev {
                let b = e.bearing_name.as_str();
                let key: [Val; 6] = [
                    e.report_id.into(),
                    e.node.into(),
                    b.into(),
                    e.kind.as_str().into(),
                    e.event.into(),
                    e.to.into(),
                ];
                let exists = self.db.query(
                    "SELECT 1 FROM alarm_events WHERE report_id = ?1 AND node_id = ?2 AND bearing = ?3 AND kind = ?4 AND event = ?5 AND state_to = ?6",
                    &key,
                )?;
                if !exists.is_empty() {
                    continue;
                }
                let detail =
                    serde_json::json!({"source": "gateway web", "bearing_index": e.bearing})
                        .to_string();
                self.db.execute(
                    "INSERT INTO alarm_events (at_ms, node_id, bearing, kind, event, state_from, state_to, report_id, detail)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                    &[
                        e.at_ms.into(),
                        e.node.into(),
                        b.into(),
                        e.kind.as_str().into(),
                        e.event.into(),
                        e.from.into(),
                        e.to.into(),
                        e.report_id.into(),
                        detail.into(),
                    ],
                )?;
                n += 1;
            }
            Ok::<(), DbError>(())
        })();
        match r.and_then(|()| self.db.commit()) {
            Ok(()) => Ok(n),
            Err(e) => {
                self.db.rollback();
                Err(e.into())
            }
        }
    }

    fn ack_event(&mut self, id: i64, by: &str, at_ms: i64) -> Result<bool, DataError> {
        let n = self.db.execute(
            "UPDATE alarm_events SET acked_by = ?2, acked_at_ms = ?3 WHERE id = ?1 AND acked_by IS NULL",
            &[id.into(), by.into(), at_ms.into()],
        )?;
        Ok(n > 0)
    }
}
