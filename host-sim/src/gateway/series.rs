//! The stored history of every line (node, bearing, defect kind) as the
//! alarm logic reads it: amplitude, detection, coverage, receive time and
//! the envelope band in force.

use super::db::{Db, DbError, Val};
use super::store::{col, node_filter, u16_of, u8_of};
use super::timefmt::parse_rfc3339_ms;

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
    /// latest status frame before it, stamped by [`super::ingest`]), Hz.
    pub band_hz: Option<[f64; 2]>,
}

/// Every stored defect row in arrival order (by report, bearing, kind),
/// of these nodes when given (a line's grading reads only its own node's
/// rows, so grading a node's rows alone gives the whole store's states of it).
pub fn points(db: &mut dyn Db, nodes: Option<&[u16]>) -> Result<Vec<Point>, DbError> {
    points_after(db, nodes, i64::MIN)
}

/// [`points`] of the reports with a row id above `after` only (what the
/// incremental grading reads of the reports stored since its last look).
pub fn points_after(
    db: &mut dyn Db,
    nodes: Option<&[u16]>,
    after: i64,
) -> Result<Vec<Point>, DbError> {
    points_where(
        db,
        &format!("r.id > ?1{}", node_filter("r.node_id", nodes)),
        &[Val::Int(Some(after))],
    )
}

/// [`points`] of the rows matching `cond` (SQL over `r`, the reports, and
/// `d`, the defect rows) with its parameters.
pub fn points_where(db: &mut dyn Db, cond: &str, params: &[Val]) -> Result<Vec<Point>, DbError> {
    let band = if db.has_column("reports", "band_lo_hz")? {
        "r.band_lo_hz, r.band_hi_hz"
    } else {
        "NULL, NULL"
    };
    let sql = format!(
        "SELECT r.id, r.node_id, r.seq, r.rx_time, r.rx_time_ms, d.bearing, d.kind, d.score_db,
                d.amplitude_g, d.amplitude_1x_g, d.detected, d.searched, {band}
         FROM defects d JOIN reports r ON r.id = d.report_id WHERE {cond}
         ORDER BY r.id, d.bearing, d.kind"
    );
    db.query(&sql, params)?
        .iter()
        .map(|r| {
            let rx_time = col(r, 3).opt_text();
            let rx_ms = col(r, 4).opt_int();
            let amp = col(r, 8).opt_real();
            let amp1 = col(r, 9).opt_real();
            let lo = col(r, 12).opt_real();
            let hi = col(r, 13).opt_real();
            let (amplitude_g, amplitude_source) = match amp {
                Some(a) => (Some(a), "amplitude_g"),
                None => (amp1, "amplitude_1x_g"),
            };
            Ok(Point {
                report_id: col(r, 0).int("id")?,
                node: u16_of(col(r, 1), "node_id")?,
                seq: u16_of(col(r, 2), "seq")?,
                time_ms: rx_ms.or_else(|| rx_time.as_deref().and_then(parse_rfc3339_ms)),
                rx_time,
                bearing: u8_of(col(r, 5), "bearing")?,
                kind: col(r, 6).text("kind")?,
                score_db: col(r, 7).opt_real(),
                amplitude_g,
                amplitude_source,
                detected: col(r, 10).int("detected")? != 0,
                searched: col(r, 11).opt_int().is_none_or(|s| s != 0),
                band_hz: lo.zip(hi).map(|(a, b)| [a, b]),
            })
        })
        .collect()
}
