//! The gateway's SQLite store: schema, versioned migrations (`user_version`),
//! idempotent inserts. Described in docs/gateway.md.

use super::db::{Db, DbError, Row, SqliteRef, Val};
use crate::error::CliError;
use rusqlite::Connection;
use wire::frame::Frame;

/// Migrations in order; migration i brings `user_version` from i to i + 1.
pub const MIGRATIONS: &[&str] = &[
    // 1: reports, their defect rows, rejects, manual baselines.
    "CREATE TABLE reports (
        id INTEGER PRIMARY KEY,
        node_id INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        frame_type TEXT NOT NULL CHECK (frame_type IN ('full', 'reduced')),
        payload BLOB NOT NULL,
        rx_time TEXT,
        source TEXT NOT NULL,
        line INTEGER NOT NULL,
        flags INTEGER NOT NULL,
        speed_rpm REAL,
        accel_rms_g REAL,
        peak_g REAL,
        crest_factor REAL,
        kurtosis REAL,
        velocity_rms_mm_s REAL,
        iso_zone TEXT,
        json TEXT NOT NULL,
        UNIQUE (node_id, seq, payload)
    );
    CREATE TABLE defects (
        report_id INTEGER NOT NULL REFERENCES reports(id),
        bearing INTEGER NOT NULL,
        kind TEXT NOT NULL,
        score_db REAL,
        amplitude_1x_g REAL,
        harmonics INTEGER,
        detected INTEGER NOT NULL,
        PRIMARY KEY (report_id, bearing, kind)
    );
    CREATE TABLE rejects (
        id INTEGER PRIMARY KEY,
        source TEXT NOT NULL,
        line INTEGER NOT NULL,
        text TEXT NOT NULL,
        reason TEXT NOT NULL,
        UNIQUE (text, reason)
    );
    CREATE TABLE baselines (
        node_id INTEGER NOT NULL,
        bearing INTEGER NOT NULL,
        kind TEXT NOT NULL,
        score_db REAL NOT NULL,
        PRIMARY KEY (node_id, bearing, kind)
    );
    CREATE INDEX defects_by_kind ON defects (bearing, kind);",
    // 2: node status frames (configuration origin, downlink results, band).
    "CREATE TABLE node_status (
        id INTEGER PRIMARY KEY,
        node_id INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        payload BLOB NOT NULL,
        rx_time TEXT,
        source TEXT NOT NULL,
        line INTEGER NOT NULL,
        flags INTEGER NOT NULL,
        downlink_counter INTEGER NOT NULL,
        last_downlink TEXT NOT NULL,
        refused_downlinks INTEGER NOT NULL,
        survey TEXT NOT NULL,
        band_source TEXT NOT NULL,
        band_lo_hz REAL NOT NULL,
        band_hi_hz REAL NOT NULL,
        band_kurtosis REAL,
        json TEXT NOT NULL,
        UNIQUE (node_id, seq, payload)
    );",
    // 3: uplink metadata from a network server, the size and certainty of
    // each finding, and alarm events (written by the gateway service). New
    // columns are nullable so that rows of older builds stay valid.
    "ALTER TABLE reports ADD COLUMN rx_time_ms INTEGER;
    ALTER TABLE reports ADD COLUMN device_id TEXT;
    ALTER TABLE reports ADD COLUMN fport INTEGER;
    ALTER TABLE reports ADD COLUMN rssi_dbm REAL;
    ALTER TABLE reports ADD COLUMN snr_db REAL;
    ALTER TABLE node_status ADD COLUMN rx_time_ms INTEGER;
    ALTER TABLE node_status ADD COLUMN device_id TEXT;
    ALTER TABLE node_status ADD COLUMN rssi_dbm REAL;
    ALTER TABLE node_status ADD COLUMN snr_db REAL;
    ALTER TABLE defects ADD COLUMN searched INTEGER NOT NULL DEFAULT 1;
    ALTER TABLE defects ADD COLUMN amplitude_g REAL;
    ALTER TABLE defects ADD COLUMN harmonics_searched INTEGER;
    ALTER TABLE defects ADD COLUMN sidebands INTEGER;
    ALTER TABLE defects ADD COLUMN margin_db REAL;
    CREATE TABLE alarm_events (
        id INTEGER PRIMARY KEY,
        at_ms INTEGER NOT NULL,
        node_id INTEGER NOT NULL,
        bearing TEXT,
        kind TEXT,
        event TEXT NOT NULL,
        state_from TEXT,
        state_to TEXT,
        report_id INTEGER REFERENCES reports(id),
        detail TEXT NOT NULL DEFAULT '{}',
        acked_by TEXT,
        acked_at_ms INTEGER
    );
    CREATE INDEX alarm_events_by_time ON alarm_events (at_ms);
    CREATE INDEX reports_by_node ON reports (node_id, id);",
    // 4: the envelope band in force when each report arrived (from the
    // node's latest status frame; NULL when none was stored before it), and
    // alarm limits per measuring point (gateway/limits.rs). node_id -1,
    // bearing -1 and kind '*' mean every node, bearing or kind; a NULL
    // setting defers to a less specific row or the built-in default.
    "ALTER TABLE reports ADD COLUMN band_lo_hz REAL;
    ALTER TABLE reports ADD COLUMN band_hi_hz REAL;
    CREATE TABLE point_limits (
        node_id INTEGER NOT NULL,
        bearing INTEGER NOT NULL,
        kind TEXT NOT NULL,
        baseline_count INTEGER,
        alert_db REAL,
        danger_db REAL,
        alert_abs_g REAL,
        danger_abs_g REAL,
        floor_g REAL,
        baseline_g REAL,
        stale_after_s REAL,
        origin TEXT NOT NULL,
        PRIMARY KEY (node_id, bearing, kind)
    );",
    // 5: indexes of the dashboard's reads (`gateway web`): a node's status
    // frames, and the check that a derived alarm event is already stored.
    "CREATE INDEX node_status_by_node ON node_status (node_id, id);
    CREATE INDEX alarm_events_by_report ON alarm_events (report_id, node_id);",
];

/// Prepared statements kept per SQLite connection.
pub const STATEMENTS_KEPT: usize = 128;

/// Schema version this build writes.
pub fn schema_version() -> i64 {
    i64::try_from(MIGRATIONS.len()).unwrap_or(i64::MAX)
}

fn db_err(path: &str) -> impl Fn(rusqlite::Error) -> CliError + '_ {
    move |e| open_err(path, e)
}

/// How to get a usable store back, for a file SQLite cannot read.
const RECOVER: &str = "restore the store from a backup, or move this file aside and re-import the \
     frame files into a new store with `envord gateway import --db NEW FILES...`; the file was \
     left as it is";

/// Names the store in an SQLite error; a damaged or foreign file is bad
/// input (exit 2) with the way to recover.
fn open_err(path: &str, e: rusqlite::Error) -> CliError {
    use rusqlite::ErrorCode::{DatabaseCorrupt, NotADatabase};
    match e.sqlite_error_code() {
        Some(DatabaseCorrupt | NotADatabase) => CliError::input(
            path,
            format!("not a readable envord store ({e}): {RECOVER}"),
        ),
        _ => CliError::Other(format!("{path}: {e}")),
    }
}

/// A store that is not there is bad input (a mistyped `--db`), never a
/// reason to create one.
fn must_exist(path: &str) -> Result<(), CliError> {
    match std::fs::metadata(path) {
        Ok(m) if m.is_file() => Ok(()),
        Ok(_) => Err(CliError::input(
            path,
            "not a file (the store is one SQLite file)",
        )),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Err(CliError::input(
            path,
            "no such store; check the --db path (only `envord gateway import` creates a store)",
        )),
        Err(e) => Err(CliError::input(path, e)),
    }
}

/// Opens (creating if needed) and migrates the store at `path`: for
/// commands that write frames (`import`).
pub fn open(path: &str) -> Result<Connection, CliError> {
    let mut conn = Connection::open(path).map_err(db_err(path))?;
    // the ingest's and the grading's statement shapes all stay prepared
    // (rusqlite keeps 16 by default)
    conn.set_prepared_statement_cache_capacity(STATEMENTS_KEPT);
    // The busy timeout first: switching to WAL and migrating wait for the
    // write lock of another process opening the same new store.
    conn.busy_timeout(std::time::Duration::from_secs(10))
        .map_err(db_err(path))?;
    // SQLite does not call the busy handler for every lock it takes while a
    // new file changes journal mode under other processes: retry those
    // briefly (bounded) instead of failing the import.
    let busy =
        |e: &rusqlite::Error| e.sqlite_error_code() == Some(rusqlite::ErrorCode::DatabaseBusy);
    let mut tries = 0u32;
    loop {
        match conn.pragma_update(None, "journal_mode", "WAL") {
            Err(e) if busy(&e) && tries < 100 => {
                tries += 1;
                std::thread::sleep(std::time::Duration::from_millis(50));
            }
            r => break r.map_err(db_err(path))?,
        }
    }
    conn.pragma_update(None, "synchronous", "FULL")
        .map_err(db_err(path))?;
    migrate(&mut conn, path)?;
    Ok(conn)
}

/// Opens and migrates an existing store for writing; a missing one is bad
/// input (`baseline`).
pub fn open_existing(path: &str) -> Result<Connection, CliError> {
    must_exist(path)?;
    open(path)
}

/// Opens an existing store read-only (`status`, `trend`): never creates,
/// migrates or otherwise changes the file, and works on a store the user
/// can only read. A store of an older schema is refused with the command
/// that upgrades it.
pub fn open_read_only(path: &str) -> Result<Connection, CliError> {
    use rusqlite::OpenFlags;
    must_exist(path)?;
    let flags = OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX;
    // The store runs in WAL mode; its -wal file exists while a writer has it
    // open (or after a crash) and is removed by the last writer to close.
    // Without one, every committed row is in the main file, and it is read
    // as immutable: a read-only connection would otherwise create -wal and
    // -shm files it cannot remove (owned by this user, they can block the
    // store's writer), and could not open at all in a folder this user
    // cannot write (sqlite.org/wal.html, "Read-Only Databases"). A writer
    // starting meanwhile only appends to its own -wal until a checkpoint.
    let conn = if std::path::Path::new(&format!("{path}-wal")).exists() {
        Connection::open_with_flags(path, flags).map_err(db_err(path))?
    } else {
        let uri = format!("file:{}?immutable=1", uri_path(path));
        Connection::open_with_flags(uri, flags | OpenFlags::SQLITE_OPEN_URI)
            .map_err(db_err(path))?
    };
    conn.busy_timeout(std::time::Duration::from_secs(10))
        .map_err(db_err(path))?;
    let v = user_version(&conn, path)?;
    if v == 0 {
        return Err(CliError::input(
            path,
            format!("not an envord store (no schema version): {RECOVER}"),
        ));
    }
    if v < schema_version() {
        return Err(CliError::input(
            path,
            format!(
                "store schema version {v} is older than this build's {}; upgrade it once with \
                 `envord gateway import --db {path} </dev/null` (needs write access), then retry",
                schema_version()
            ),
        ));
    }
    check_not_newer(v, path)?;
    Ok(conn)
}

fn user_version(conn: &Connection, path: &str) -> Result<i64, CliError> {
    conn.query_row("PRAGMA user_version", [], |r| r.get(0))
        .map_err(db_err(path))
}

/// `path` for an SQLite `file:` URI: the characters the URI syntax gives a
/// meaning to are percent-escaped.
fn uri_path(path: &str) -> String {
    let mut s = String::with_capacity(path.len());
    for c in path.chars() {
        match c {
            '%' => s.push_str("%25"),
            '?' => s.push_str("%3f"),
            '#' => s.push_str("%23"),
            c => s.push(c),
        }
    }
    s
}

fn check_not_newer(current: i64, path: &str) -> Result<(), CliError> {
    if current > schema_version() {
        return Err(CliError::input(
            path,
            format!(
                "store schema version {current} is newer than this build's {}",
                schema_version()
            ),
        ));
    }
    Ok(())
}

/// Applies the migrations past the file's `user_version` in one transaction
/// that takes the write lock before it reads the version (BEGIN IMMEDIATE),
/// so that processes opening a new store together migrate it once.
pub fn migrate(conn: &mut Connection, path: &str) -> Result<(), CliError> {
    let tx = conn
        .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)
        .map_err(db_err(path))?;
    let current = user_version(&tx, path)?;
    check_not_newer(current, path)?;
    if current == schema_version() {
        return Ok(()); // the transaction rolls back on drop: nothing written
    }
    for sql in MIGRATIONS
        .iter()
        .skip(usize::try_from(current).unwrap_or(0))
    {
        tx.execute_batch(sql).map_err(db_err(path))?;
    }
    tx.pragma_update(None, "user_version", schema_version())
        .map_err(db_err(path))?;
    tx.commit().map_err(db_err(path))?;
    Ok(())
}

/// Node and sequence number of a decoded frame. Status frames count their
/// own sequence; the link statistics track reports only ([`is_report`]).
pub fn node_seq(f: &Frame) -> (u16, u16) {
    match f {
        Frame::Full(r) => (r.node_id, r.seq),
        Frame::Reduced(r) => (r.node_id, r.seq),
        Frame::Status(r) => (r.node_id, r.seq),
    }
}

/// True for report frames (full, reduced), false for status frames.
pub fn is_report(f: &Frame) -> bool {
    !matches!(f, Frame::Status(_))
}

/// The latest status frame of one node.
#[derive(Clone, Debug, serde::Serialize)]
pub struct NodeStatus {
    /// Node.
    pub node: u16,
    /// Status sequence number.
    pub seq: u16,
    /// Receive time if known.
    pub rx_time: Option<String>,
    /// Replay counter the node stores.
    pub downlink_counter: u32,
    /// Result of its last downlink.
    pub last_downlink: String,
    /// Downlinks it refused since its boot.
    pub refused_downlinks: u8,
    /// Result of its last band survey.
    pub survey: String,
    /// Origin of its band.
    pub band_source: String,
    /// Band in use, Hz.
    pub band_hz: [f64; 2],
    /// Spectral kurtosis of a survey-chosen band.
    pub band_kurtosis: Option<f64>,
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

/// A value as u16, naming the column when it does not fit.
pub fn u16_of(v: &Val, col: &str) -> Result<u16, DbError> {
    u16::try_from(v.int(col)?).map_err(|_| DbError::Type(format!("{col}: out of range")))
}

/// A value as u8, naming the column when it does not fit.
pub fn u8_of(v: &Val, col: &str) -> Result<u8, DbError> {
    u8::try_from(v.int(col)?).map_err(|_| DbError::Type(format!("{col}: out of range")))
}

/// Column `i` of a row (NULL past its end).
pub fn col(r: &Row, i: usize) -> &Val {
    const NULL: Val = Val::Int(None);
    r.get(i).unwrap_or(&NULL)
}

/// `AND node_id IN (...)` for a node filter (node ids are numbers: inlined).
pub fn node_filter(column: &str, nodes: Option<&[u16]>) -> String {
    match nodes {
        None => String::new(),
        Some(ns) => {
            let list: Vec<String> = ns.iter().map(u16::to_string).collect();
            if list.is_empty() {
                format!(" AND {column} IS NULL")
            } else {
                format!(" AND {column} IN ({})", list.join(", "))
            }
        }
    }
}

/// Where a frame came from.
pub struct Origin<'a> {
    /// Input file name.
    pub source: &'a str,
    /// Line or frame index.
    pub line: usize,
    /// Receive time, if given.
    pub rx_time: Option<&'a str>,
}

/// Inserts a decoded frame unless the same node+seq+payload is stored;
/// returns whether it was new. Reports go to `reports` (and `defects`),
/// status frames to `node_status`. Call inside a transaction. The same
/// writer as `gateway import` and `gateway serve` ([`super::ingest`]).
pub fn insert_frame(
    conn: &Connection,
    f: &Frame,
    payload: &[u8],
    o: &Origin<'_>,
) -> Result<bool, DbError> {
    let u = super::ingest::Uplink {
        origin: super::ingest::Origin {
            source: o.source.to_string(),
            line: o.line,
            rx_time: o.rx_time.map(str::to_string),
            rx_time_ms: o.rx_time.and_then(super::timefmt::parse_rfc3339_ms),
            ..super::ingest::Origin::default()
        },
        text: String::new(),
        bytes: Ok(payload.to_vec()),
        claimed_node: None,
    };
    let mut db = SqliteRef(conn);
    let out = super::ingest::write(&mut db, std::slice::from_ref(&u))?;
    let (node, seq) = node_seq(f);
    Ok(out.iter().any(|o| {
        matches!(o, super::ingest::Outcome::New { frame, .. } if node_seq(frame) == (node, seq))
    }))
}

fn triples(rows: &[Row]) -> Result<Vec<(u16, u16, Vec<u8>)>, DbError> {
    rows.iter()
        .map(|r| {
            Ok((
                u16_of(col(r, 0), "node_id")?,
                u16_of(col(r, 1), "seq")?,
                col(r, 2).blob("payload")?,
            ))
        })
        .collect()
}

/// (node, seq, payload) of every stored report in arrival order.
pub fn arrivals(db: &mut dyn Db) -> Result<Vec<(u16, u16, Vec<u8>)>, DbError> {
    triples(&db.query("SELECT node_id, seq, payload FROM reports ORDER BY id", &[])?)
}

/// A stored report's row id, node, sequence number and payload.
pub type ReportArrival = (i64, u16, u16, Vec<u8>);

/// Every stored report in arrival order (of these nodes when given).
pub fn report_arrivals(
    db: &mut dyn Db,
    nodes: Option<&[u16]>,
) -> Result<Vec<ReportArrival>, DbError> {
    let sql = format!(
        "SELECT id, node_id, seq, payload FROM reports WHERE 1 = 1{} ORDER BY id",
        node_filter("node_id", nodes)
    );
    db.query(&sql, &[])?
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

/// (node, status seq, payload) of every stored status frame in arrival
/// order (of these nodes when given).
pub fn status_arrivals(
    db: &mut dyn Db,
    nodes: Option<&[u16]>,
) -> Result<Vec<(u16, u16, Vec<u8>)>, DbError> {
    let sql = format!(
        "SELECT node_id, seq, payload FROM node_status WHERE 1 = 1{} ORDER BY id",
        node_filter("node_id", nodes)
    );
    triples(&db.query(&sql, &[])?)
}

/// One stored score observation.
#[derive(Clone, Debug)]
pub struct Observation {
    /// Report row id (arrival order).
    pub report_id: i64,
    /// Node.
    pub node: u16,
    /// Sequence number.
    pub seq: u16,
    /// Receive time if known.
    pub rx_time: Option<String>,
    /// Bearing index.
    pub bearing: u8,
    /// Defect kind name.
    pub kind: String,
    /// Score, None when invalid.
    pub score_db: Option<f64>,
    /// Detected bit.
    pub detected: bool,
}

/// Every defect observation in arrival order.
pub fn observations(db: &mut dyn Db) -> Result<Vec<Observation>, DbError> {
    let rows = db.query(
        "SELECT r.id, r.node_id, r.seq, r.rx_time, d.bearing, d.kind, d.score_db, d.detected
         FROM defects d JOIN reports r ON r.id = d.report_id ORDER BY r.id, d.bearing, d.kind",
        &[],
    )?;
    rows.iter()
        .map(|r| {
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
        })
        .collect()
}

/// Count of rows in a table of this schema.
pub fn count(db: &mut dyn Db, table: &str) -> Result<i64, DbError> {
    let sql = match table {
        "reports" => "SELECT COUNT(*) FROM reports",
        "defects" => "SELECT COUNT(*) FROM defects",
        "rejects" => "SELECT COUNT(*) FROM rejects",
        "node_status" => "SELECT COUNT(*) FROM node_status",
        "alarm_events" => "SELECT COUNT(*) FROM alarm_events",
        _ => "SELECT COUNT(*) FROM point_limits",
    };
    let rows = db.query(sql, &[])?;
    rows.first()
        .map(|r| col(r, 0).int("count"))
        .unwrap_or(Ok(0))
}
