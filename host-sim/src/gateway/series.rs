//! The stored history of every line (node, bearing, defect kind) as the
//! alarm logic reads it: amplitude, detection, coverage, receive time and
//! the envelope band in force.

use super::timefmt::parse_rfc3339_ms;
use rusqlite::{params, Connection};

/// One stored defect row with what the alarm logic needs.
#[derive(Clone, Debug, serde::Serialize)]
pub struct Point {
    /// Report row id (arrival order).
    pub report_id: i64,
    /// Node.
    pub node: u16,
    /// Report sequence number.
    pub seq: u16,
    /// Receive time as given (text), if any.
    pub rx_time: Option<String>,
    /// Receive time, Unix ms: the network server's `rx_time_ms`, else the
    /// text parsed as RFC 3339; `None` when neither is known.
    pub time_ms: Option<i64>,
    /// Bearing index.
    pub bearing: u8,
    /// Defect kind name.
    pub kind: String,
    /// Score over the local floor, dB (the node's detection measure).
    pub score_db: Option<f64>,
    /// Envelope amplitude of the finding, g: `amplitude_g` (summed over the
    /// harmonics found) when the frame carries it, else the 1x amplitude.
    pub amplitude_g: Option<f64>,
    /// Which column `amplitude_g` came from (`amplitude_g` / `amplitude_1x_g`).
    pub amplitude_source: &'static str,
    /// The node's detection decision.
    pub detected: bool,
    /// False when the node's setting cannot search this line.
    pub searched: bool,
    /// Envelope band in force when the report arrived (from the node's
    /// latest status frame before it), Hz.
    pub band_hz: Option<[f64; 2]>,
}

/// Every stored defect row in arrival order (by report, bearing, kind).
pub fn points(conn: &Connection) -> rusqlite::Result<Vec<Point>> {
    let has_band = has_column(conn, "reports", "band_lo_hz")?;
    let band = if has_band {
        "r.band_lo_hz, r.band_hi_hz"
    } else {
        "NULL, NULL"
    };
    let sql = format!(
        "SELECT r.id, r.node_id, r.seq, r.rx_time, r.rx_time_ms, d.bearing, d.kind, d.score_db,
                d.amplitude_g, d.amplitude_1x_g, d.detected, d.searched, {band}
         FROM defects d JOIN reports r ON r.id = d.report_id ORDER BY r.id, d.bearing, d.kind"
    );
    let mut stmt = conn.prepare(&sql)?;
    let rows = stmt.query_map([], |r| {
        let rx_time: Option<String> = r.get(3)?;
        let rx_ms: Option<i64> = r.get(4)?;
        let amp: Option<f64> = r.get(8)?;
        let amp1: Option<f64> = r.get(9)?;
        let lo: Option<f64> = r.get(12)?;
        let hi: Option<f64> = r.get(13)?;
        let (amplitude_g, amplitude_source) = match amp {
            Some(a) => (Some(a), "amplitude_g"),
            None => (amp1, "amplitude_1x_g"),
        };
        Ok(Point {
            report_id: r.get(0)?,
            node: r.get(1)?,
            seq: r.get(2)?,
            time_ms: rx_ms.or_else(|| rx_time.as_deref().and_then(parse_rfc3339_ms)),
            rx_time,
            bearing: r.get(5)?,
            kind: r.get(6)?,
            score_db: r.get(7)?,
            amplitude_g,
            amplitude_source,
            detected: r.get(10)?,
            searched: r.get::<_, Option<i64>>(11)?.is_none_or(|s| s != 0),
            band_hz: lo.zip(hi).map(|(a, b)| [a, b]),
        })
    })?;
    rows.collect()
}

fn has_column(conn: &Connection, table: &str, col: &str) -> rusqlite::Result<bool> {
    let mut stmt = conn.prepare(&format!("PRAGMA table_info({table})"))?;
    let names = stmt.query_map([], |r| r.get::<_, String>(1))?;
    for n in names {
        if n? == col {
            return Ok(true);
        }
    }
    Ok(false)
}

/// Stamps report `id` of `node` with the band of the node's latest stored
/// status frame (the band in force when it arrived). Called by the store's
/// insert inside the import transaction, so arrival order decides.
pub fn stamp_band(conn: &Connection, id: i64, node: u16) -> rusqlite::Result<()> {
    conn.execute(
        "UPDATE reports SET (band_lo_hz, band_hi_hz) = (
           SELECT band_lo_hz, band_hi_hz FROM node_status WHERE node_id = ?2
           ORDER BY id DESC LIMIT 1)
         WHERE id = ?1",
        params![id, node],
    )?;
    Ok(())
}
