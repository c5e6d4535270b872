//! Alarm limits per measuring point, kept in the store (`point_limits`,
//! docs/gateway.md "Alarms"). A row applies to one node or every node, one
//! bearing index or every bearing, one defect kind or every kind; each
//! setting resolves from the most specific row that holds it, then from the
//! built-in defaults ([`Limits::default`]).

use super::db::{Db, DbError};
use super::store::col;

/// The alarm settings of one line (node, bearing, defect kind), resolved.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct Limits {
    /// Quiet reports (nothing found) averaged into a learned baseline.
    pub baseline_count: usize,
    /// Alert at this rise of the amplitude over the baseline, dB.
    pub alert_db: f64,
    /// Danger at this rise over the baseline, dB (once the finding persists).
    pub danger_db: f64,
    /// Alert at or above this amplitude whatever the baseline, g.
    pub alert_abs_g: Option<f64>,
    /// Danger at or above this amplitude whatever the baseline, g.
    pub danger_abs_g: Option<f64>,
    /// Floor of "nothing found": baselines and amplitudes are taken as at
    /// least this, g.
    pub floor_g: f64,
    /// A hand-set baseline amplitude, g (replaces learning).
    pub baseline_g: Option<f64>,
    /// A node silent this long (s) before the reference time is stale.
    pub stale_after_s: Option<f64>,
}

impl Default for Limits {
    /// +6 dB alert / +12 dB danger over a learned baseline (the node
    /// record's defaults too) are common practice for spectral trending; the
    /// floor (1 mg) and the staleness (24 h, a day of the node's default
    /// hourly reports) are this project's choice: set them for the machine.
    fn default() -> Self {
        Self {
            baseline_count: 5,
            alert_db: 6.0,
            danger_db: 12.0,
            alert_abs_g: None,
            danger_abs_g: None,
            floor_g: 1e-3,
            baseline_g: None,
            stale_after_s: Some(86_400.0),
        }
    }
}

/// One stored row: where it applies and the settings it holds.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct LimitRow {
    /// Node, or every node (`None`).
    pub node: Option<u16>,
    /// Bearing index, or every bearing (`None`).
    pub bearing: Option<u8>,
    /// Defect kind (`BPFO`...), or every kind (`None`).
    pub kind: Option<String>,
    /// See [`Limits::baseline_count`].
    pub baseline_count: Option<usize>,
    /// See [`Limits::alert_db`].
    pub alert_db: Option<f64>,
    /// See [`Limits::danger_db`].
    pub danger_db: Option<f64>,
    /// See [`Limits::alert_abs_g`].
    pub alert_abs_g: Option<f64>,
    /// See [`Limits::danger_abs_g`].
    pub danger_abs_g: Option<f64>,
    /// See [`Limits::floor_g`].
    pub floor_g: Option<f64>,
    /// See [`Limits::baseline_g`].
    pub baseline_g: Option<f64>,
    /// See [`Limits::stale_after_s`].
    pub stale_after_s: Option<f64>,
    /// Who set it: `command` (`gateway limits set`) or `node config`
    /// (the levels a configuration downlink sent to the node).
    pub origin: String,
}

impl LimitRow {
    fn specificity(&self) -> u8 {
        4 * u8::from(self.node.is_some())
            + 2 * u8::from(self.bearing.is_some())
            + u8::from(self.kind.is_some())
    }

    fn applies(&self, node: u16, bearing: u8, kind: &str) -> bool {
        self.node.is_none_or(|n| n == node)
            && self.bearing.is_none_or(|b| b == bearing)
            && self
                .kind
                .as_deref()
                .is_none_or(|k| k.eq_ignore_ascii_case(kind))
    }

    /// Copies the settings `other` holds over this row's.
    pub fn merge_from(&mut self, other: &LimitRow) {
        macro_rules! take {
            ($($f:ident),*) => { $( if other.$f.is_some() { self.$f = other.$f; } )* };
        }
        take!(
            baseline_count,
            alert_db,
            danger_db,
            alert_abs_g,
            danger_abs_g,
            floor_g,
            baseline_g,
            stale_after_s
        );
        self.origin.clone_from(&other.origin);
    }
}

/// Resolves the limits of one line from the stored rows.
pub fn resolve(rows: &[LimitRow], node: u16, bearing: u8, kind: &str) -> Limits {
    let mut mine: Vec<&LimitRow> = rows
        .iter()
        .filter(|r| r.applies(node, bearing, kind))
        .collect();
    mine.sort_by_key(|r| r.specificity());
    let mut l = Limits::default();
    // least specific first, so the most specific setting wins
    for r in mine {
        if let Some(v) = r.baseline_count {
            l.baseline_count = v;
        }
        if let Some(v) = r.alert_db {
            l.alert_db = v;
        }
        if let Some(v) = r.danger_db {
            l.danger_db = v;
        }
        if r.alert_abs_g.is_some() {
            l.alert_abs_g = r.alert_abs_g.filter(|x| *x > 0.0);
        }
        if r.danger_abs_g.is_some() {
            l.danger_abs_g = r.danger_abs_g.filter(|x| *x > 0.0);
        }
        if let Some(v) = r.floor_g {
            l.floor_g = v;
        }
        if r.baseline_g.is_some() {
            l.baseline_g = r.baseline_g.filter(|x| *x > 0.0);
        }
        if r.stale_after_s.is_some() {
            l.stale_after_s = r.stale_after_s.filter(|x| *x > 0.0);
        }
    }
    l
}

/// Why a set of limits is not usable; the text names the setting.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LimitsError {
    /// `alert_db` / `danger_db` not with 0 < alert <= danger.
    Levels {
        /// `alert_db`.
        alert_db: f64,
        /// `danger_db`.
        danger_db: f64,
    },
    /// `floor_g` not a positive amplitude.
    Floor(f64),
    /// `alert_abs_g` above `danger_abs_g`.
    Absolute {
        /// `alert_abs_g`.
        alert: f64,
        /// `danger_abs_g`.
        danger: f64,
    },
    /// `baseline_count` 0 without a hand-set `baseline_g`.
    NoBaseline,
}

impl std::fmt::Display for LimitsError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match *self {
            Self::Levels {
                alert_db,
                danger_db,
            } => write!(
                f,
                "alert_db {alert_db} / danger_db {danger_db}: need 0 < alert_db <= danger_db"
            ),
            Self::Floor(g) => write!(f, "floor_g {g}: need a positive amplitude"),
            Self::Absolute { alert, danger } => write!(
                f,
                "alert_abs_g {alert} > danger_abs_g {danger}: need alert <= danger"
            ),
            Self::NoBaseline => f.write_str("baseline_count 0 needs a hand-set baseline_g"),
        }
    }
}

impl std::error::Error for LimitsError {}

/// Why a set of limits is not usable, naming the setting.
pub fn check(l: &Limits) -> Result<(), LimitsError> {
    let fin = |x: f64| x.is_finite();
    if !fin(l.alert_db) || !fin(l.danger_db) || l.alert_db <= 0.0 || l.alert_db > l.danger_db {
        return Err(LimitsError::Levels {
            alert_db: l.alert_db,
            danger_db: l.danger_db,
        });
    }
    if !fin(l.floor_g) || l.floor_g <= 0.0 {
        return Err(LimitsError::Floor(l.floor_g));
    }
    if let (Some(a), Some(d)) = (l.alert_abs_g, l.danger_abs_g) {
        if a > d {
            return Err(LimitsError::Absolute {
                alert: a,
                danger: d,
            });
        }
    }
    if l.baseline_count == 0 && l.baseline_g.is_none() {
        return Err(LimitsError::NoBaseline);
    }
    Ok(())
}

fn key(r: &LimitRow) -> (i64, i64, String) {
    (
        r.node.map_or(-1, i64::from),
        r.bearing.map_or(-1, i64::from),
        r.kind.clone().unwrap_or_else(|| "*".into()),
    )
}

/// Every stored row (none on a store without the table, i.e. an old
/// read-only store).
pub fn rows(db: &mut dyn Db) -> Result<Vec<LimitRow>, DbError> {
    if !db.has_column("point_limits", "node_id")? {
        return Ok(Vec::new());
    }
    db.query(
        "SELECT node_id, bearing, kind, baseline_count, alert_db, danger_db, alert_abs_g,
                danger_abs_g, floor_g, baseline_g, stale_after_s, origin
         FROM point_limits ORDER BY node_id, bearing, kind",
        &[],
    )?
    .iter()
    .map(|r| {
        let kind = col(r, 2).text("kind")?;
        Ok(LimitRow {
            node: u16::try_from(col(r, 0).int("node_id")?).ok(),
            bearing: u8::try_from(col(r, 1).int("bearing")?).ok(),
            kind: (kind != "*").then_some(kind),
            baseline_count: col(r, 3).opt_int().and_then(|c| usize::try_from(c).ok()),
            alert_db: col(r, 4).opt_real(),
            danger_db: col(r, 5).opt_real(),
            alert_abs_g: col(r, 6).opt_real(),
            danger_abs_g: col(r, 7).opt_real(),
            floor_g: col(r, 8).opt_real(),
            baseline_g: col(r, 9).opt_real(),
            stale_after_s: col(r, 10).opt_real(),
            origin: col(r, 11).text("origin")?,
        })
    })
    .collect()
}

/// Stores `row`, merged over the stored row of the same scope.
pub fn upsert(db: &mut dyn Db, row: &LimitRow) -> Result<LimitRow, DbError> {
    let mut merged = rows(db)?
        .into_iter()
        .find(|r| key(r) == key(row))
        .unwrap_or_else(|| LimitRow {
            node: row.node,
            bearing: row.bearing,
            kind: row.kind.clone(),
            ..LimitRow::default()
        });
    merged.merge_from(row);
    let (n, b, k) = key(&merged);
    db.execute(
        "INSERT INTO point_limits (node_id, bearing, kind, baseline_count, alert_db, danger_db,
           alert_abs_g, danger_abs_g, floor_g, baseline_g, stale_after_s, origin)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)
         ON CONFLICT (node_id, bearing, kind) DO UPDATE SET
           baseline_count = excluded.baseline_count, alert_db = excluded.alert_db,
           danger_db = excluded.danger_db, alert_abs_g = excluded.alert_abs_g,
           danger_abs_g = excluded.danger_abs_g, floor_g = excluded.floor_g,
           baseline_g = excluded.baseline_g, stale_after_s = excluded.stale_after_s,
           origin = excluded.origin",
        &[
            n.into(),
            b.into(),
            k.into(),
            merged
                .baseline_count
                .map(|c| i64::try_from(c).unwrap_or(i64::MAX))
                .into(),
            merged.alert_db.into(),
            merged.danger_db.into(),
            merged.alert_abs_g.into(),
            merged.danger_abs_g.into(),
            merged.floor_g.into(),
            merged.baseline_g.into(),
            merged.stale_after_s.into(),
            merged.origin.as_str().into(),
        ],
    )?;
    Ok(merged)
}

/// Removes the row of one scope; returns whether there was one.
pub fn clear(
    db: &mut dyn Db,
    node: Option<u16>,
    bearing: Option<u8>,
    kind: Option<&str>,
) -> Result<bool, DbError> {
    let n = db.execute(
        "DELETE FROM point_limits WHERE node_id = ?1 AND bearing = ?2 AND kind = ?3",
        &[
            node.map_or(-1, i64::from).into(),
            bearing.map_or(-1, i64::from).into(),
            kind.unwrap_or("*").into(),
        ],
    )?;
    Ok(n > 0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn most_specific_setting_wins_field_by_field() {
        let rows = vec![
            LimitRow {
                alert_db: Some(4.0),
                floor_g: Some(0.002),
                ..LimitRow::default()
            },
            LimitRow {
                node: Some(3),
                alert_db: Some(5.0),
                danger_db: Some(15.0),
                ..LimitRow::default()
            },
            LimitRow {
                node: Some(3),
                bearing: Some(0),
                kind: Some("BPFO".into()),
                danger_abs_g: Some(0.5),
                ..LimitRow::default()
            },
        ];
        let l = resolve(&rows, 3, 0, "BPFO");
        assert_eq!(l.alert_db, 5.0);
        assert_eq!(l.danger_db, 15.0);
        assert_eq!(l.floor_g, 0.002);
        assert_eq!(l.danger_abs_g, Some(0.5));
        let other = resolve(&rows, 3, 1, "BPFO");
        assert_eq!(other.danger_abs_g, None);
        let node4 = resolve(&rows, 4, 0, "BPFO");
        assert_eq!((node4.alert_db, node4.danger_db), (4.0, 12.0));
        assert!(check(&l).is_ok());
        assert!(check(&Limits {
            alert_db: 16.0,
            ..l
        })
        .is_err());
    }
}
