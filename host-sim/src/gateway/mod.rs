//! `envord gateway ...`: reading node frames at the plant gateway.
//!
//! * `decode` (decode.rs): frames (hex/base64 lines or raw binary) to JSON lines or a
//!   table, with sequence tracking and a reject log.
//! * `import` (import.rs): into the SQLite store (docs/gateway.md), idempotent and safe
//!   against interruption (batched transactions, unique node+seq+payload).
//! * `status` (status.rs): alarm state of every watched bearing, per sensor and per
//!   physical bearing (gateway map), plus link statistics.
//! * `trend`: one bearing's amplitude and state over receive time, as a
//!   table and an SVG plot (trend_cmd.rs).
//! * `limits`: alarm limits per measuring point in the store (limits_cmd.rs);
//!   `baseline` (baseline.rs): set or clear a hand-set amplitude baseline.
//!   Reduced frames count as "as before" ([`as_before`]) in both.
//! * `downlink`: build a signed downlink (configuration, measure now, band
//!   survey) for a node from its key file; `provision`: make a node's key and
//!   identity record.
//! * `serve`: the long-running MQTT consumer (docs/gateway.md), storing
//!   through the same path as `import` ([`ingest`]) and publishing alarm
//!   changes ([`alarms`]).
//!
//! Every command that takes `--db` accepts an SQLite file or a
//! `postgres://` URL ([`db`]); the dashboard (`web`) reads SQLite only.
//!
//! This file holds the command line (the argument structs) and the
//! dispatch; each handler lives in the module named after its subcommand.

pub mod alarms;
pub mod as_before;
mod baseline;
pub mod db;
mod decode;
pub mod downlink;
pub mod grading;
mod import;
pub mod ingest;
pub mod input;
pub mod limits;
pub mod limits_cmd;
pub mod line_columns;
pub mod map;
pub mod plot;
pub mod seq;
pub mod series;
pub mod serve;
pub mod serve_config;
mod status;
pub mod store;
pub mod timefmt;
pub mod trend;
pub mod trend_cmd;
pub mod web;

use crate::error::CliError;
use input::InputFormat;
use seq::SeqTracker;

pub use decode::{decode_item, RejectReason};
pub use status::{bearing_states, combine, BearingState, CombinedBearing, CombinedDefect};

/// Arguments of `envord gateway`.
#[derive(clap::Args, Debug)]
pub struct GatewayArgs {
    #[command(subcommand)]
    command: GatewayCommand,
}

#[derive(clap::Subcommand, Debug)]
enum GatewayCommand {
    /// Decode frames and print them (JSON lines by default).
    Decode(DecodeArgs),
    /// Store frames in the gateway database.
    Import(ImportArgs),
    /// Print the alarm state of every watched bearing and the link statistics.
    Status(StatusArgs),
    /// Print one bearing's amplitude and alarm state over time and plot them as SVG.
    Trend(trend_cmd::TrendArgs),
    /// Set, show or clear the alarm limits of measuring points (stored).
    Limits(limits_cmd::LimitsArgs),
    /// Set or clear the hand-set amplitude baseline of one defect.
    Baseline(BaselineArgs),
    /// Build a signed downlink for a node (configuration, measure now, band survey).
    Downlink(downlink::DownlinkArgs),
    /// Make a node's downlink key and identity record (provisioning).
    Provision(downlink::ProvisionArgs),
    /// Serve the plant dashboard (fleet, trends, alarm events) behind a login.
    Web(web::WebArgs),
    /// Manage the dashboard's users file (add a user, hash a password).
    User(web::UserArgs),
    /// Run the gateway service: MQTT uplinks into the store, alarm changes out.
    Serve(serve::ServeArgs),
}

#[derive(clap::Args, Debug)]
struct DecodeArgs {
    /// Input files (none or "-" for stdin).
    files: Vec<String>,
    /// How payloads are written.
    #[arg(long, value_enum, default_value = "auto")]
    format: InputFormat,
    /// Print a table instead of JSON lines.
    #[arg(long)]
    table: bool,
    /// Append rejected frames (JSON lines with the reason) to this file.
    #[arg(long)]
    rejects: Option<String>,
    /// Exit with code 2 if any frame was rejected.
    #[arg(long)]
    strict: bool,
}

#[derive(clap::Args, Debug)]
struct ImportArgs {
    /// Gateway store: SQLite file (created if missing) or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Input files (none or "-" for stdin).
    files: Vec<String>,
    /// How payloads are written.
    #[arg(long, value_enum, default_value = "auto")]
    format: InputFormat,
    /// Frames per transaction.
    #[arg(long, default_value_t = 500)]
    batch_size: usize,
    /// Pause after each committed batch (ms); lets tests interrupt an import.
    #[arg(long, default_value_t = 0, hide = true)]
    batch_pause_ms: u64,
    /// Print each sequence event, not only the summary.
    #[arg(long)]
    verbose: bool,
}

#[derive(clap::Args, Debug)]
struct StatusArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Gateway map (TOML) naming physical bearings.
    #[arg(long)]
    map: Option<String>,
    /// Print JSON instead of tables.
    #[arg(long)]
    json: bool,
    /// Reference time for staleness (RFC 3339); default: now.
    #[arg(long)]
    now: Option<String>,
}

#[derive(clap::Args, Debug)]
struct BaselineArgs {
    /// Gateway store: SQLite file or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Node id.
    #[arg(long)]
    node: u16,
    /// Bearing index at the node.
    #[arg(long)]
    bearing: u8,
    /// Defect kind (bpfo, bpfi, ftf, bsf).
    #[arg(long)]
    defect: String,
    /// Baseline envelope amplitude in g (stored as this line's `baseline_g` limit).
    #[arg(long, conflicts_with = "clear", required_unless_present = "clear")]
    amplitude_g: Option<f64>,
    /// Remove the hand-set baseline (back to learning from the first reports).
    #[arg(long)]
    clear: bool,
}

/// Runs `envord gateway ...`.
pub fn run(args: GatewayArgs) -> Result<(), CliError> {
    match args.command {
        GatewayCommand::Decode(a) => decode::run(a),
        GatewayCommand::Import(a) => import::run(a),
        GatewayCommand::Status(a) => status::run(a),
        GatewayCommand::Trend(a) => trend_cmd::trend_cmd(&a),
        GatewayCommand::Limits(a) => limits_cmd::run(&a),
        GatewayCommand::Baseline(a) => baseline::run(a),
        GatewayCommand::Downlink(a) => downlink::downlink_cmd(&a),
        GatewayCommand::Provision(a) => downlink::provision_cmd(&a),
        GatewayCommand::Web(a) => web::web_cmd(&a),
        GatewayCommand::User(a) => web::user_cmd(&a),
        GatewayCommand::Serve(a) => serve::serve_cmd(&a),
    }
}

fn sql_err(e: db::DbError) -> CliError {
    CliError::Other(format!("database: {e}"))
}

/// Replays the stored history through a tracker: status frames first (the
/// restart evidence; the two tables keep no common arrival order), then the
/// reports in arrival order, giving each report id its decided place.
pub(crate) fn decided_order(
    conn: &mut dyn db::Db,
) -> Result<(SeqTracker, std::collections::HashMap<i64, seq::Order>), CliError> {
    ingest::decided_order(conn, SeqTracker::new(), None).map_err(sql_err)
}
