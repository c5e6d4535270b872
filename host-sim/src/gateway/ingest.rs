//! The one path from an uplink to the store, used by `gateway import`
//! (file lines) and `gateway serve` (MQTT messages): decode, store
//! idempotently in one transaction per batch, then track sequences.
//!
//! A batch is written in a few multi-row statements: the status frames
//! first (one existence check and one insert per 64), then every report
//! (one existence check and one insert per 64, with the band in force) and
//! their defect rows (one insert per 512). Each report gets the band of the
//! node's latest stored status frame before it in arrival order (the rule
//! of `series::stamp_band`): the band stored before the batch (one query),
//! then the batch's new status frames in order. Statement shapes are few and
//! fixed (existence checks padded to 64 terms, inserts cut into 64 and then
//! powers of two), so every statement is prepared once per connection and
//! kept: before, a status frame ended a run of reports and every run had
//! its own row count, i.e. about ten times the round trips and a new
//! statement to prepare for nearly every run (docs/gateway.md, "Tests and
//! benchmark").

use super::db::{Db, DbError, Val};
use super::input::InputItem;
use super::seq::{SeqEvent, SeqTracker};
use super::store;
use std::collections::{HashMap, HashSet};
use wire::frame::{decode_any, DefectKind, Frame, IsoZone};

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

/// One uplink as received: its bytes (or why there are none) and origin.
#[derive(Clone, Debug)]
pub struct Uplink {
    /// Where it came from and the network's metadata.
    pub origin: Origin,
    /// The input as given (payload text, or the whole message), for the reject log.
    pub text: String,
    /// Frame bytes, or why the input did not give any (a reject reason).
    pub bytes: Result<Vec<u8>, String>,
    /// Node id the transport named (topic level, JSON field), checked against the frame.
    pub claimed_node: Option<u16>,
}

impl Uplink {
    /// An uplink of a file line of `gateway import`.
    pub fn from_item(item: &InputItem) -> Self {
        Self {
            origin: Origin {
                source: item.source.clone(),
                line: item.line,
                rx_time: item.rx_time.clone(),
                rx_time_ms: item
                    .rx_time
                    .as_deref()
                    .and_then(super::timefmt::parse_rfc3339_ms),
                ..Origin::default()
            },
            text: item.text.clone(),
            bytes: item.bytes.clone(),
            claimed_node: None,
        }
    }
}

/// What became of one uplink.
#[derive(Clone, Debug)]
pub enum Outcome {
    /// A frame stored for the first time.
    New {
        /// The decoded frame.
        frame: Frame,
        /// The sequence event (reports only; status frames count their own sequence).
        seq: Option<SeqEvent>,
    },
    /// A frame already stored (a redelivery or duplicate): nothing written.
    Known {
        /// The decoded frame.
        frame: Frame,
    },
    /// Not a frame: recorded in the reject table.
    Rejected {
        /// Why.
        reason: String,
        /// False when the same text and reason were already recorded.
        new: bool,
    },
}

/// Why an uplink gives no frame (its text is the reject reason stored).
#[derive(Clone, Debug, PartialEq)]
pub enum UplinkError {
    /// The input gave no bytes (why, as the reader said).
    Unreadable(String),
    /// The bytes are not a frame.
    Frame(wire::frame::DecodeError),
    /// The transport named another node than the frame.
    NodeMismatch {
        /// Node id the transport gave.
        claimed: u16,
        /// Node id in the frame.
        node: u16,
    },
}

impl std::fmt::Display for UplinkError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            UplinkError::Unreadable(e) => write!(f, "unreadable payload: {e}"),
            UplinkError::Frame(e) => write!(f, "{e}"),
            UplinkError::NodeMismatch { claimed, node } => write!(
                f,
                "node id {claimed} given by the transport differs from the frame's node id {node}"
            ),
        }
    }
}

impl std::error::Error for UplinkError {}

/// Decodes an uplink: the frame or the reject reason.
pub fn decode(u: &Uplink) -> Result<Frame, UplinkError> {
    let bytes = u
        .bytes
        .as_ref()
        .map_err(|e| UplinkError::Unreadable(e.clone()))?;
    let frame = decode_any(bytes).map_err(UplinkError::Frame)?;
    if let Some(claimed) = u.claimed_node {
        let (node, _) = store::node_seq(&frame);
        if node != claimed {
            return Err(UplinkError::NodeMismatch { claimed, node });
        }
    }
    Ok(frame)
}

/// Stores a batch in one transaction; on success the tracker has seen
/// every new frame in order. On error nothing is committed (the caller
/// may retry the whole batch: every insert is idempotent).
pub fn store_batch(
    db: &mut dyn Db,
    tracker: &mut SeqTracker,
    batch: &[Uplink],
) -> Result<Vec<Outcome>, DbError> {
    db.begin()?;
    let out = match write(db, batch) {
        Ok(out) => out,
        Err(e) => {
            db.rollback();
            return Err(e);
        }
    };
    if let Err(e) = db.commit() {
        db.rollback();
        return Err(e);
    }
    Ok(out
        .into_iter()
        .zip(batch)
        .map(|(o, u)| match o {
            Outcome::New { frame, .. } => {
                let (node, seq) = store::node_seq(&frame);
                let payload = u.bytes.as_deref().unwrap_or(&[]);
                let seq = if store::is_report(&frame) {
                    Some(tracker.observe(node, seq, payload))
                } else {
                    // status frames: their own sequence, restart evidence
                    tracker.observe_status(node, seq, payload);
                    None
                };
                Outcome::New { frame, seq }
            }
            o => o,
        })
        .collect())
}

/// Writes a batch inside the caller's transaction (no sequence tracking).
pub fn write(db: &mut dyn Db, batch: &[Uplink]) -> Result<Vec<Outcome>, DbError> {
    let decoded: Vec<Result<Frame, UplinkError>> = batch.iter().map(decode).collect();
    let mut out: Vec<Option<Outcome>> = vec![None; batch.len()];
    let mut statuses: Vec<usize> = Vec::new();
    let mut reports: Vec<usize> = Vec::new();
    for (i, (u, d)) in batch.iter().zip(&decoded).enumerate() {
        match d {
            Err(e) => {
                // the reason is stored as text (reject log, outcome)
                let reason = &e.to_string();
                let new = insert_reject(db, &u.origin.source, u.origin.line, &u.text, reason)?;
                set(
                    &mut out,
                    i,
                    Outcome::Rejected {
                        reason: reason.clone(),
                        new,
                    },
                );
            }
            Ok(Frame::Status(_)) => statuses.push(i),
            Ok(_) => reports.push(i),
        }
    }
    let frame_of = |i: usize| decoded.get(i).and_then(|d| d.as_ref().ok());
    // the band in force before the batch (read before its status frames go in)
    let mut nodes: Vec<u16> = reports
        .iter()
        .filter_map(|&i| frame_of(i))
        .map(|f| store::node_seq(f).0)
        .collect();
    nodes.sort_unstable();
    nodes.dedup();
    let mut band = latest_bands(db, &nodes)?;
    let new_status = write_statuses(db, batch, &decoded, &statuses, &mut out)?;
    let mut band_of: Vec<Option<[f64; 2]>> = vec![None; batch.len()];
    for (i, d) in decoded.iter().enumerate() {
        match d {
            Ok(Frame::Status(r)) if new_status.contains(&i) => {
                band.insert(
                    r.node_id,
                    [f64::from(r.band_hz[0]), f64::from(r.band_hz[1])],
                );
            }
            Ok(f) if store::is_report(f) => {
                if let Some(slot) = band_of.get_mut(i) {
                    *slot = band.get(&store::node_seq(f).0).copied();
                }
            }
            _ => {}
        }
    }
    flush_reports(db, batch, &decoded, &reports, &band_of, &mut out)?;
    Ok(out
        .into_iter()
        .map(|o| {
            o.unwrap_or(Outcome::Rejected {
                reason: "internal: not written".into(),
                new: false,
            })
        })
        .collect())
}

/// Terms of every existence check (padded), nodes of every band query.
const LOOKUP_TERMS: usize = 64;

/// Row counts to cut `n` rows into: `max` while it fits, then powers of two
/// (so only a few statement shapes exist, each prepared once).
fn chunk_sizes(n: usize, max: usize) -> Vec<usize> {
    let mut v = vec![max; n / max];
    let mut rest = n % max;
    let mut p = max.next_power_of_two();
    while rest > 0 {
        p = p.min(rest.next_power_of_two());
        if p > rest {
            p /= 2;
        }
        v.push(p);
        rest -= p;
    }
    v
}

/// Cuts `items` by [`chunk_sizes`].
fn chunks_of<T>(items: &[T], max: usize) -> Vec<&[T]> {
    let mut out = Vec::new();
    let mut at = 0;
    for n in chunk_sizes(items.len(), max) {
        if let Some(part) = items.get(at..at + n) {
            out.push(part);
        }
        at += n;
    }
    out
}

/// The band of each node's latest stored status frame (nodes with one).
fn latest_bands(db: &mut dyn Db, nodes: &[u16]) -> Result<HashMap<u16, [f64; 2]>, DbError> {
    let mut out = HashMap::new();
    for part in nodes.chunks(LOOKUP_TERMS) {
        let Some(&pad) = part.last() else { continue };
        let marks: Vec<String> = (1..=LOOKUP_TERMS).map(|k| format!("?{k}")).collect();
        let params: Vec<Val> = (0..LOOKUP_TERMS)
            .map(|k| part.get(k).copied().unwrap_or(pad).into())
            .collect();
        let sql = format!(
            "SELECT node_id, band_lo_hz, band_hi_hz FROM node_status WHERE id IN
             (SELECT MAX(id) FROM node_status WHERE node_id IN ({}) GROUP BY node_id)",
            marks.join(", ")
        );
        for r in db.query(&sql, &params)? {
            let node = store::u16_of(store::col(&r, 0), "node_id")?;
            if let (Some(lo), Some(hi)) =
                (store::col(&r, 1).opt_real(), store::col(&r, 2).opt_real())
            {
                out.insert(node, [lo, hi]);
            }
        }
    }
    Ok(out)
}

/// (node, seq, payload) already stored in `table` among `keys` (one padded
/// query per 64).
fn stored_keys(db: &mut dyn Db, table: &str, keys: &[(u16, u16)]) -> Result<HashSet<Key>, DbError> {
    let mut stored: HashSet<Key> = HashSet::new();
    for part in keys.chunks(LOOKUP_TERMS) {
        let Some(&pad) = part.last() else { continue };
        let cond: Vec<String> = (0..LOOKUP_TERMS)
            .map(|j| format!("(node_id = ?{} AND seq = ?{})", 2 * j + 1, 2 * j + 2))
            .collect();
        let mut params: Vec<Val> = Vec::with_capacity(LOOKUP_TERMS * 2);
        for j in 0..LOOKUP_TERMS {
            let (n, s) = part.get(j).copied().unwrap_or(pad);
            params.extend([n.into(), s.into()]);
        }
        let sql = format!(
            "SELECT node_id, seq, payload FROM {table} WHERE {}",
            cond.join(" OR ")
        );
        for r in db.query(&sql, &params)? {
            if let Some(k) = key_of_row(&r, 0) {
                stored.insert(k);
            }
        }
    }
    Ok(stored)
}

/// (node, seq, payload) of a row's columns from `at`.
fn key_of_row(r: &[Val], at: usize) -> Option<Key> {
    let n = r.get(at).and_then(Val::opt_int)?;
    let s = r.get(at + 1).and_then(Val::opt_int)?;
    let Some(Val::Blob(p)) = r.get(at + 2) else {
        return None;
    };
    Some((u16::try_from(n).ok()?, u16::try_from(s).ok()?, p.clone()))
}

/// Writes the batch's status frames; returns the indices stored now.
fn write_statuses(
    db: &mut dyn Db,
    batch: &[Uplink],
    decoded: &[Result<Frame, UplinkError>],
    idx: &[usize],
    out: &mut [Option<Outcome>],
) -> Result<HashSet<usize>, DbError> {
    let mut new = HashSet::new();
    if idx.is_empty() {
        return Ok(new);
    }
    let frame_of = |i: usize| decoded.get(i).and_then(|d| d.as_ref().ok());
    let payload_of = |i: usize| {
        batch
            .get(i)
            .and_then(|u| u.bytes.as_deref().ok())
            .unwrap_or(&[])
    };
    let keys: Vec<(u16, u16)> = idx
        .iter()
        .filter_map(|&i| frame_of(i))
        .map(store::node_seq)
        .collect();
    let mut stored = stored_keys(db, "node_status", &keys)?;
    let mut fresh: Vec<usize> = Vec::new();
    for &i in idx {
        let Some(f) = frame_of(i) else { continue };
        if stored.insert(key_of(f, payload_of(i))) {
            fresh.push(i);
        } else {
            set(out, i, Outcome::Known { frame: f.clone() });
        }
    }
    let mut inserted: HashSet<Key> = HashSet::new();
    for part in chunks_of(&fresh, REPORTS_PER_STATEMENT) {
        let mut tuples = Vec::with_capacity(part.len());
        let mut params: Vec<Val> = Vec::with_capacity(part.len() * STATUS_PARAMS);
        for (j, &i) in part.iter().enumerate() {
            let (Some(f), Some(u)) = (frame_of(i), batch.get(i)) else {
                continue;
            };
            let b = j * STATUS_PARAMS;
            let ph: Vec<String> = (1..=STATUS_PARAMS).map(|k| format!("?{}", b + k)).collect();
            tuples.push(format!("({})", ph.join(", ")));
            params.extend(status_params(f, payload_of(i), &u.origin));
        }
        let sql = format!(
            "INSERT INTO node_status ({STATUS_COLS}) VALUES {} ON CONFLICT DO NOTHING RETURNING node_id, seq, payload",
            tuples.join(", ")
        );
        for r in db.query(&sql, &params)? {
            if let Some(k) = key_of_row(&r, 0) {
                inserted.insert(k);
            }
        }
    }
    for &i in &fresh {
        let Some(f) = frame_of(i) else { continue };
        if inserted.contains(&key_of(f, payload_of(i))) {
            new.insert(i);
            set(
                out,
                i,
                Outcome::New {
                    frame: f.clone(),
                    seq: None,
                },
            );
        } else {
            // inserted meanwhile by another instance
            set(out, i, Outcome::Known { frame: f.clone() });
        }
    }
    Ok(new)
}

fn set(out: &mut [Option<Outcome>], i: usize, o: Outcome) {
    if let Some(slot) = out.get_mut(i) {
        *slot = Some(o);
    }
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

/// Columns of one status row, in INSERT order.
const STATUS_COLS: &str = "node_id, seq, payload, rx_time, source, line,
       flags, downlink_counter, last_downlink, refused_downlinks, survey, band_source, band_lo_hz,
       band_hi_hz, band_kurtosis, json, rx_time_ms, device_id, rssi_dbm, snr_db";
/// Parameters per status row.
const STATUS_PARAMS: usize = 20;

fn status_params(f: &Frame, payload: &[u8], o: &Origin) -> Vec<Val> {
    let Frame::Status(r) = f else {
        return Vec::new();
    };
    let json = serde_json::to_string(f).unwrap_or_default();
    vec![
        r.node_id.into(),
        r.seq.into(),
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
    ]
}

/// Columns of one report row, in INSERT order (the last two are the band).
const REPORT_COLS: &str = "node_id, seq, frame_type, payload, rx_time, source, line, flags,
    speed_rpm, accel_rms_g, peak_g, crest_factor, kurtosis, velocity_rms_mm_s, iso_zone, json,
    rx_time_ms, device_id, fport, rssi_dbm, snr_db, band_lo_hz, band_hi_hz";
/// Parameters per report row (the band last).
const REPORT_PARAMS: usize = 23;
/// Reports per statement (well under either backend's parameter limit).
const REPORTS_PER_STATEMENT: usize = 64;
/// Defect rows per statement (12 columns each: 6,144 parameters).
const DEFECTS_PER_STATEMENT: usize = 512;
/// Columns of one `defects` row, the v3 columns included.
const DEFECT_COLUMNS: usize = 12;

fn report_params(f: &Frame, payload: &[u8], o: &Origin) -> Vec<Val> {
    let (node, seq) = store::node_seq(f);
    let json = serde_json::to_string(f).unwrap_or_default();
    let none = || Val::Real(None);
    let (kind, flags, m): (&str, u16, [Val; 7]) = match f {
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
        Frame::Status(r) => (
            "status",
            r.flags.to_bits(),
            std::array::from_fn(|_| Val::Real(None)),
        ),
    };
    let mut p: Vec<Val> = Vec::with_capacity(REPORT_PARAMS);
    p.extend([
        node.into(),
        seq.into(),
        kind.into(),
        payload.into(),
        o.rx_time.as_deref().into(),
        o.source.as_str().into(),
        line_val(o.line),
        flags.into(),
    ]);
    p.extend(m);
    p.extend([
        json.into(),
        o.rx_time_ms.into(),
        o.device_id.as_deref().into(),
        o.fport.into(),
        o.rssi_dbm.into(),
        o.snr_db.into(),
    ]);
    p
}

type Key = (u16, u16, Vec<u8>);

fn key_of(f: &Frame, payload: &[u8]) -> Key {
    let (n, s) = store::node_seq(f);
    (n, s, payload.to_vec())
}

/// Writes the batch's reports (`run`, in arrival order) with the band in
/// force for each (`band_of`, by batch index): which are stored already,
/// the new ones (one insert per 64), then their defect rows.
fn flush_reports(
    db: &mut dyn Db,
    batch: &[Uplink],
    decoded: &[Result<Frame, UplinkError>],
    run: &[usize],
    band_of: &[Option<[f64; 2]>],
    out: &mut [Option<Outcome>],
) -> Result<(), DbError> {
    if run.is_empty() {
        return Ok(());
    }
    let frame_of = |i: usize| decoded.get(i).and_then(|d| d.as_ref().ok());
    let payload_of = |i: usize| {
        batch
            .get(i)
            .and_then(|u| u.bytes.as_deref().ok())
            .unwrap_or(&[])
    };
    // 1. stored already? (looked up first: PostgreSQL spends an identity
    // value on every conflicting insert, and report ids, i.e. arrival
    // order, must not depend on the backend or on how many repeats came)
    let keys: Vec<(u16, u16)> = run
        .iter()
        .filter_map(|&i| frame_of(i))
        .map(store::node_seq)
        .collect();
    let mut stored = stored_keys(db, "reports", &keys)?;
    // 2. the new ones (first of repeats within the run), in arrival order
    let mut fresh: Vec<usize> = Vec::new();
    for &i in run {
        let Some(f) = frame_of(i) else { continue };
        let k = key_of(f, payload_of(i));
        if stored.insert(k) {
            fresh.push(i);
        } else {
            set(out, i, Outcome::Known { frame: f.clone() });
        }
    }
    let mut ids: HashMap<Key, i64> = HashMap::new();
    for part in chunks_of(&fresh, REPORTS_PER_STATEMENT) {
        let mut tuples = Vec::with_capacity(part.len());
        let mut params: Vec<Val> = Vec::with_capacity(part.len() * REPORT_PARAMS);
        for (j, &i) in part.iter().enumerate() {
            let (Some(f), Some(u)) = (frame_of(i), batch.get(i)) else {
                continue;
            };
            let b = j * REPORT_PARAMS;
            let ph: Vec<String> = (1..=REPORT_PARAMS).map(|k| format!("?{}", b + k)).collect();
            tuples.push(format!("({})", ph.join(", ")));
            params.extend(report_params(f, payload_of(i), &u.origin));
            let band = band_of.get(i).copied().flatten();
            params.extend([Val::Real(band.map(|b| b[0])), Val::Real(band.map(|b| b[1]))]);
        }
        let sql = format!(
            "INSERT INTO reports ({REPORT_COLS}) VALUES {} ON CONFLICT DO NOTHING RETURNING id, node_id, seq, payload",
            tuples.join(", ")
        );
        for r in db.query(&sql, &params)? {
            if let (Some(id), Some(k)) = (r.first().and_then(Val::opt_int), key_of_row(&r, 1)) {
                ids.insert(k, id);
            }
        }
    }
    // 3. defect rows of the inserted reports
    let mut rows: Vec<[Val; DEFECT_COLUMNS]> = Vec::new();
    for &i in &fresh {
        let Some(f) = frame_of(i) else { continue };
        let Some(&id) = ids.get(&key_of(f, payload_of(i))) else {
            // inserted meanwhile by another instance: stored, not by us
            set(out, i, Outcome::Known { frame: f.clone() });
            continue;
        };
        set(
            out,
            i,
            Outcome::New {
                frame: f.clone(),
                seq: None,
            },
        );
        match f {
            Frame::Full(r) => {
                for (b, br) in (0u8..).zip(r.bearings.iter()) {
                    for (k, d) in DefectKind::ALL.iter().zip(br.defects.iter()) {
                        // v3 columns: from v2 frames, NULL for v1 (line_columns).
                        let c = super::line_columns::line_columns(d);
                        rows.push([
                            id.into(),
                            b.into(),
                            k.name().into(),
                            opt(d.score_db).into(),
                            opt(d.amplitude_1x_g).into(),
                            Val::Int(Some(i64::from(d.harmonics))),
                            d.detected.into(),
                            c.searched.into(),
                            c.amplitude_g.into(),
                            Val::Int(c.harmonics_searched.map(i64::from)),
                            Val::Int(c.sidebands.map(i64::from)),
                            c.margin_db.into(),
                        ]);
                    }
                }
            }
            Frame::Reduced(r) => {
                if let Some(w) = r.worst {
                    rows.push([
                        id.into(),
                        w.bearing.into(),
                        w.kind.name().into(),
                        opt(w.score_db).into(),
                        Val::Real(None),
                        Val::Int(None),
                        w.detected.into(),
                        true.into(),
                        Val::Real(None),
                        Val::Int(None),
                        Val::Int(None),
                        Val::Real(None),
                    ]);
                }
            }
            Frame::Status(_) => {}
        }
    }
    for part in chunks_of(&rows, DEFECTS_PER_STATEMENT) {
        let tuples: Vec<String> = (0..part.len())
            .map(|j| {
                let b = j * DEFECT_COLUMNS;
                let marks: Vec<String> = (1..=DEFECT_COLUMNS)
                    .map(|c| format!("?{}", b + c))
                    .collect();
                format!("({})", marks.join(", "))
            })
            .collect();
        let sql = format!(
            "INSERT INTO defects (report_id, bearing, kind, score_db, amplitude_1x_g, harmonics, detected, \
             searched, amplitude_g, harmonics_searched, sidebands, margin_db) VALUES {}",
            tuples.join(", ")
        );
        let params: Vec<Val> = part.iter().flat_map(|r| r.iter().cloned()).collect();
        db.execute(&sql, &params)?;
    }
    Ok(())
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

/// A tracker that has seen every stored status frame then every stored
/// report (events then refer to the full history), and each report's place
/// in its node's decided order, by report id. `nodes`: only these nodes.
pub fn decided_order(
    db: &mut dyn Db,
    mut tracker: SeqTracker,
    nodes: Option<&[u16]>,
) -> Result<(SeqTracker, HashMap<i64, super::seq::Order>), DbError> {
    for (node, seq, payload) in store::status_arrivals(db, nodes)? {
        tracker.observe_status(node, seq, &payload);
    }
    let mut order = HashMap::new();
    for (id, node, seq, payload) in store::report_arrivals(db, nodes)? {
        order.insert(id, tracker.observe_ordered(node, seq, &payload).1);
    }
    Ok((tracker, order))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn statement_row_counts_are_few_and_cover_every_row() {
        let mut shapes = HashSet::new();
        for n in 0..2000 {
            let v = chunk_sizes(n, 64);
            assert_eq!(v.iter().sum::<usize>(), n);
            assert!(v
                .iter()
                .all(|&k| k == 64 || (k.is_power_of_two() && k < 64)));
            shapes.extend(v);
        }
        assert_eq!(shapes.len(), 7, "{shapes:?}");
        assert_eq!(chunk_sizes(100, 64), vec![64, 32, 4]);
        assert_eq!(chunk_sizes(5, 512), vec![4, 1]);
    }

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
