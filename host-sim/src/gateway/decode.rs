//! `envord gateway decode`: frames to JSON lines or a table, with sequence
//! tracking and a reject log.

use super::input::{read_inputs, InputItem};
use super::seq::{SeqEvent, SeqTracker};
use super::{store, DecodeArgs};
use crate::error::CliError;
use std::io::Write;
use wire::frame::{decode_any, Frame};

/// Why an input item was rejected (its text is the reject reason).
#[derive(Debug, Clone, PartialEq)]
pub enum RejectReason {
    /// The payload text could not be turned into bytes (hex/base64).
    Unreadable(String),
    /// The bytes are not a valid frame.
    Frame(wire::frame::DecodeError),
}

impl std::fmt::Display for RejectReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Unreadable(e) => write!(f, "unreadable payload: {e}"),
            Self::Frame(e) => write!(f, "{e}"),
        }
    }
}

impl std::error::Error for RejectReason {}

/// Decodes one input item: the frame or the reject reason.
pub fn decode_item(item: &InputItem) -> Result<Frame, RejectReason> {
    let bytes = item
        .bytes
        .as_ref()
        .map_err(|e| RejectReason::Unreadable(e.clone()))?;
    decode_any(bytes).map_err(RejectReason::Frame)
}

fn seq_json(ev: &SeqEvent) -> serde_json::Value {
    match ev {
        SeqEvent::Gap { from, to, missing } => {
            serde_json::json!({"event": "gap", "from": from, "to": to, "missing": missing})
        }
        SeqEvent::Reset { from, to } => {
            serde_json::json!({"event": "reset", "from": from, "to": to})
        }
        SeqEvent::Backward { from, to } => {
            serde_json::json!({"event": "backward", "from": from, "to": to})
        }
        e => serde_json::json!({"event": e.name()}),
    }
}

fn out_err(e: std::io::Error) -> CliError {
    CliError::stdout(e)
}

pub(super) fn run(a: DecodeArgs) -> Result<(), CliError> {
    let items = read_inputs(&a.files, a.format)?;
    let mut tracker = SeqTracker::new();
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    let mut reject_log = match &a.rejects {
        Some(p) => Some(
            std::fs::OpenOptions::new()
                .create(true)
                .append(true)
                .open(p)
                .map_err(|e| CliError::Other(format!("{p}: {e}")))?,
        ),
        None => None,
    };
    let mut first_reject: Option<String> = None;
    if a.table {
        writeln!(
            out,
            "{:<16} {:>5} {:<8} {:>6} {:>6} {:>9} {:<22} detail",
            "source:line", "node", "frame", "seq", "flags", "speed", "sequence"
        )
        .map_err(out_err)?;
    }
    for item in &items {
        match decode_item(item) {
            Ok(frame) => {
                let (node, seq) = store::node_seq(&frame);
                // status frames count their own sequence: not link-tracked
                let bytes = item.bytes.as_deref().unwrap_or(&[]);
                let ev = if store::is_report(&frame) {
                    Some(tracker.observe(node, seq, bytes))
                } else {
                    tracker.observe_status(node, seq, bytes); // restart evidence
                    None
                };
                let ev_text = ev.as_ref().map_or("-".to_string(), |e| e.describe());
                if a.table {
                    let (kind, flags, speed, detail) = match &frame {
                        Frame::Full(r) => {
                            let worst = wire::frame::ReducedReport::from_report(r).worst;
                            (
                                "full",
                                r.flags.to_bits(),
                                format!("{:.2}", r.speed_rpm),
                                worst_text(worst),
                            )
                        }
                        Frame::Reduced(r) => (
                            "reduced",
                            r.flags.to_bits(),
                            "-".into(),
                            worst_text(r.worst),
                        ),
                        Frame::Status(r) => {
                            ("status", r.flags.to_bits(), "-".into(), status_text(r))
                        }
                    };
                    writeln!(
                        out,
                        "{:<16} {:>5} {:<8} {:>6} {:>#6x} {:>9} {:<22} {}",
                        format!("{}:{}", item.source, item.line),
                        node,
                        kind,
                        seq,
                        flags,
                        speed,
                        ev_text,
                        detail
                    )
                    .map_err(out_err)?;
                } else {
                    let v = match &ev {
                        Some(ev) => serde_json::json!({
                            "type": "report", "source": item.source, "line": item.line,
                            "rx_time": item.rx_time, "sequence": seq_json(ev), "report": frame,
                        }),
                        None => serde_json::json!({
                            "type": "status", "source": item.source, "line": item.line,
                            "rx_time": item.rx_time, "status": frame,
                        }),
                    };
                    writeln!(out, "{v}").map_err(out_err)?;
                }
            }
            Err(reason) => {
                let reason = reason.to_string();
                let v = serde_json::json!({
                    "type": "reject", "source": item.source, "line": item.line,
                    "rx_time": item.rx_time, "text": item.text, "reason": reason,
                });
                if a.table {
                    writeln!(
                        out,
                        "{:<16} REJECT {}: {}",
                        format!("{}:{}", item.source, item.line),
                        reason,
                        item.text
                    )
                    .map_err(out_err)?;
                } else {
                    writeln!(out, "{v}").map_err(out_err)?;
                }
                if let Some(f) = reject_log.as_mut() {
                    writeln!(f, "{v}").map_err(|e| CliError::Other(format!("reject log: {e}")))?;
                }
                first_reject.get_or_insert(format!("{}:{}: {reason}", item.source, item.line));
            }
        }
    }
    out.flush().map_err(out_err)?;
    match first_reject {
        Some(r) if a.strict => Err(CliError::Input(format!("rejected frame(s), first at {r}"))),
        _ => Ok(()),
    }
}

fn status_text(r: &wire::frame::StatusReport) -> String {
    let name = |v: serde_json::Value| v.as_str().unwrap_or("?").to_string();
    format!(
        "counter {} last downlink {} refused {} band {:.0}-{:.0} Hz ({}{}) survey {}",
        r.downlink_counter,
        name(serde_json::json!(r.last_downlink)),
        r.refused_downlinks,
        r.band_hz[0],
        r.band_hz[1],
        name(serde_json::json!(r.band_source)),
        if r.band_kurtosis.is_finite() {
            format!(", kurtosis {:.2}", r.band_kurtosis)
        } else {
            String::new()
        },
        name(serde_json::json!(r.survey)),
    )
}

fn worst_text(w: Option<wire::frame::WorstDefect>) -> String {
    match w {
        Some(w) => format!(
            "worst: bearing {} {} {:.0} dB{}",
            w.bearing,
            w.kind.name(),
            w.score_db,
            if w.detected { " detected" } else { "" }
        ),
        None => "no bearings".into(),
    }
}
