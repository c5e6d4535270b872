//! Signed downlinks for nodes, and node provisioning (keys and identity
//! records), for the gateway operator. Formats and key handling:
//! docs/downlink-security.md.
//!
//! * `envord gateway provision`: 32 random bytes from the operating
//!   system's cryptographic source as the node's key (a hex key file for the
//!   gateway) and the identity record the node reads
//!   (`wire::identity`), to write over the debug port.
//! * `envord gateway downlink ... config|measure-now|survey`: the command
//!   signed with the node's key and a counter (`wire::downlink_auth`);
//!   `config` turns a point file into the node's configuration record
//!   (`wire::config`), refusing anything the record cannot carry.

use std::path::{Path, PathBuf};

use dsp_core::config::PointConfig;
use wire::config::{PointRecord, MAX_RECORD_LEN};
use wire::downlink::{CMD_MEASURE_NOW, CMD_SET_CONFIG, CMD_SURVEY};
use wire::downlink_auth::{sign, DownlinkKey, HEADER_LEN, KEY_LEN, TAG_LEN};
use wire::identity::IDENTITY_LEN;
use wire::point::{NodeSettings, RecordError};

use crate::error::CliError;
use crate::output::Access;

mod checks;

/// Arguments of `envord gateway downlink`.
#[derive(clap::Args, Debug)]
pub struct DownlinkArgs {
    /// Node id the downlink addresses.
    #[arg(long)]
    pub node_id: u16,
    /// The node's key file (64 hex digits, from `envord gateway provision`).
    #[arg(long)]
    pub key: PathBuf,
    /// Replay counter: greater than every counter sent to this node before
    /// (the node refuses equal or older ones). Never reuse one.
    #[arg(long)]
    pub counter: u32,
    /// Write the frame here (raw bytes) instead of printing it as hex.
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// What to send.
    #[command(subcommand)]
    pub command: DownlinkCommand,
}

/// The command a downlink carries.
#[derive(clap::Subcommand, Debug)]
pub enum DownlinkCommand {
    /// Replace the node's measuring point with the one of a point file.
    Config(ConfigArgs),
    /// Measure again right away.
    MeasureNow,
    /// Run the band survey (commissioning) and store the band it chooses.
    Survey,
}

/// Node settings of a configuration downlink (not in point files).
#[derive(clap::Args, Debug)]
pub struct ConfigArgs {
    /// Measuring point (TOML point file). Without `[envelope] band_hz` the
    /// node chooses the band with its band survey.
    #[arg(long)]
    pub point: PathBuf,
    /// Sensor settling time after power-up, ms.
    #[arg(long, default_value_t = 200)]
    pub settle_ms: u16,
    /// Interval between measurements, s.
    #[arg(long, default_value_t = 3600)]
    pub interval_s: u32,
    /// LOW_BATTERY below this supply voltage, mV.
    #[arg(long, default_value_t = 3000)]
    pub low_battery_mv: u16,
    /// Alert level: rise of a defect's amplitude over its baseline, dB.
    #[arg(long, default_value_t = 6.0)]
    pub alert_db: f32,
    /// Danger level: rise of a defect's amplitude over its baseline, dB.
    #[arg(long, default_value_t = 12.0)]
    pub danger_db: f32,
    /// Gateway store: record the levels sent as this node's alarm limits
    /// (origin `node config`), so the gateway grades with the node's levels.
    #[arg(long)]
    pub db: Option<String>,
    /// SENSOR_FAULT when a record spans at most this many counts (flat).
    #[arg(long, default_value_t = 4)]
    pub flat_counts: u16,
    /// CLIPPING when this many per mille of samples reach the clip level.
    #[arg(long, default_value_t = 1)]
    pub clip_permille: u16,
    /// SENSOR_FAULT when this many per mille of samples are clipped.
    #[arg(long, default_value_t = 100)]
    pub saturated_permille: u16,
    /// Send the point although some of its watched lines cannot be searched
    /// with its setting (listed on stderr; without this flag such a point is
    /// refused, exit 1, nothing written).
    #[arg(long)]
    pub accept_gaps: bool,
    /// Write the downlink although it is longer than the largest EU868
    /// payload (222 bytes), for a link that carries it (e.g. the debug
    /// port); without this flag it is refused, exit 1, nothing written.
    #[arg(long)]
    pub accept_oversize: bool,
}

/// Arguments of `envord gateway provision`.
#[derive(clap::Args, Debug)]
pub struct ProvisionArgs {
    /// Node id to give the node.
    #[arg(long)]
    pub node_id: u16,
    /// Write the new key here (hex; created owner-only, 0600). An existing
    /// file is not overwritten without --force.
    #[arg(long)]
    pub key_out: PathBuf,
    /// Write the identity record here (raw bytes for the node's identity
    /// page; it holds the same key: created owner-only, 0600). An existing
    /// file is not overwritten without --force.
    #[arg(long)]
    pub identity_out: PathBuf,
}

/// Reads a key file: 64 hex digits (whitespace around them ignored).
pub fn read_key(path: &Path) -> Result<[u8; KEY_LEN], CliError> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| CliError::input(path.display(), format!("cannot read key file: {e}")))?;
    let hex = text.trim();
    let bad = || {
        CliError::input(
            path.display(),
            format!("a key file holds {} hex digits", 2 * KEY_LEN),
        )
    };
    if hex.len() != 2 * KEY_LEN || !hex.is_ascii() {
        return Err(bad());
    }
    let mut key = [0u8; KEY_LEN];
    for (k, pair) in key.iter_mut().zip(hex.as_bytes().chunks_exact(2)) {
        let s = std::str::from_utf8(pair).map_err(|_| bad())?;
        *k = u8::from_str_radix(s, 16).map_err(|_| bad())?;
    }
    if key.iter().all(|&b| b == 0) || key.iter().all(|&b| b == 0xFF) {
        return Err(CliError::input(path.display(), "the key is blank"));
    }
    warn_if_shared(path);
    Ok(key)
}

#[cfg(unix)]
fn warn_if_shared(path: &Path) {
    use std::os::unix::fs::PermissionsExt;
    if let Ok(m) = std::fs::metadata(path) {
        if m.permissions().mode() & 0o077 != 0 {
            eprintln!(
                "envord: warning: {} is readable by other users; keep keys readable by the gateway service only (chmod 600)",
                path.display()
            );
        }
    }
}

#[cfg(not(unix))]
fn warn_if_shared(_path: &Path) {}

/// The node's configuration record for a measuring point and node settings
/// (the mapping is `wire::point::record_from_point`; its error names the key).
pub fn record_from_point(p: &PointConfig, s: &ConfigArgs) -> Result<PointRecord, RecordError> {
    let node = NodeSettings {
        settle_ms: s.settle_ms,
        interval_s: s.interval_s,
        low_battery_mv: s.low_battery_mv,
        alert_db: s.alert_db,
        danger_db: s.danger_db,
        flat_counts: s.flat_counts,
        clip_permille: s.clip_permille,
        saturated_permille: s.saturated_permille,
    };
    wire::point::record_from_point(p, &node)
}

/// The payload (command byte and data) of a downlink command.
pub fn payload(cmd: &DownlinkCommand) -> Result<Vec<u8>, CliError> {
    Ok(match cmd {
        DownlinkCommand::MeasureNow => vec![CMD_MEASURE_NOW],
        DownlinkCommand::Survey => vec![CMD_SURVEY],
        DownlinkCommand::Config(c) => {
            let point = crate::point::load(&c.point)?;
            // The node cannot tell coinciding lines apart either: say so
            // before the configuration is sent.
            for caution in crate::cmd_analyze::coincidences(&point).0 {
                eprintln!("{}: {caution}", c.point.display());
            }
            let rec =
                record_from_point(&point, c).map_err(|m| CliError::input(c.point.display(), m))?;
            checks::coverage(&point, c)?;
            let mut buf = [0u8; MAX_RECORD_LEN];
            let n = rec
                .encode(&mut buf)
                .map_err(|e| CliError::input(c.point.display(), e))?;
            let mut v = vec![CMD_SET_CONFIG];
            v.extend_from_slice(buf.get(..n).unwrap_or(&[]));
            v
        }
    })
}

/// Runs `envord gateway downlink`.
pub fn downlink_cmd(a: &DownlinkArgs) -> Result<(), CliError> {
    let key = DownlinkKey::new(read_key(&a.key)?);
    let payload = payload(&a.command)?;
    let mut frame = vec![0u8; HEADER_LEN + payload.len() + TAG_LEN];
    let n = sign(&key, a.node_id, a.counter, &payload, &mut frame)
        .map_err(|e| CliError::Other(e.to_string()))?;
    frame.truncate(n);
    let rate = crate::cmd_analyze::slowest_eu868_rate(n);
    eprintln!(
        "envord: downlink for node {} with counter {}: {n} bytes, slowest EU868 data rate that \
         carries it: {}",
        a.node_id,
        a.counter,
        rate.unwrap_or("none (over 222 bytes)")
    );
    if let DownlinkCommand::Config(c) = &a.command {
        checks::size(n, c)?;
    }
    match &a.out {
        Some(p) => crate::output::write(p, &frame)?,
        None => println!("{}", super::input::to_hex(&frame)),
    }
    if let DownlinkCommand::Config(c) = &a.command {
        if let Some(db) = &c.db {
            super::limits_cmd::record_node_levels(db, a.node_id, c.alert_db, c.danger_db)?;
        }
    }
    Ok(())
}

/// Runs `envord gateway provision`.
pub fn provision_cmd(a: &ProvisionArgs) -> Result<(), CliError> {
    // Both outputs are checked before either is written: a key is never
    // left without its identity record (or the other way round).
    crate::output::check_free(&a.key_out)?;
    crate::output::check_free(&a.identity_out)?;
    let mut key = [0u8; KEY_LEN];
    getrandom::fill(&mut key)
        .map_err(|e| CliError::Other(format!("operating system random source: {e}")))?;
    let mut ident = [0u8; IDENTITY_LEN];
    wire::identity::encode(a.node_id, &key, &mut ident)
        .map_err(|e| CliError::Other(e.to_string()))?;
    // Both hold the secret key: created owner-only (docs/downlink-security.md).
    crate::output::write_as(
        &a.key_out,
        format!("{}\n", super::input::to_hex(&key)).as_bytes(),
        Access::OwnerOnly,
    )?;
    if let Err(e) = crate::output::write_as(&a.identity_out, &ident, Access::OwnerOnly) {
        // The key just made is of no use without its identity: take it back
        // (with --force an older key it replaced is gone either way).
        let _ = std::fs::remove_file(&a.key_out);
        return Err(e);
    }
    println!(
        "node {}: key in {} (keep it with the gateway only), identity record in {} ({IDENTITY_LEN} bytes)",
        a.node_id,
        a.key_out.display(),
        a.identity_out.display()
    );
    println!(
        "write it over the debug port, e.g. nRF52840: probe-rs download --chip nRF52840_xxAA --binary-format bin --base-address 0xFB000 {}",
        a.identity_out.display()
    );
    Ok(())
}
