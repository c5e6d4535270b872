//! The gateway service's TOML configuration (docs/gateway.md, "gateway serve").

use super::ingest::Origin;
use super::ingest::Uplink;
use super::input::{parse_base64, parse_hex};
use crate::error::CliError;
use serde::Deserialize;

/// The whole `gateway.toml`.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ServeConfig {
    /// The MQTT broker.
    pub broker: BrokerConfig,
    /// What to subscribe to and how messages are read.
    pub uplink: UplinkConfig,
    /// The store.
    #[serde(default)]
    pub store: StoreConfig,
    /// Transactions.
    #[serde(default)]
    pub ingest: IngestConfig,
    /// Alarm changes.
    #[serde(default)]
    pub alarms: AlarmConfig,
    /// Logs and health.
    #[serde(default)]
    pub log: LogConfig,
    /// The dashboard, served from the same process and store (optional).
    pub web: Option<super::web::service::ServiceWebConfig>,
}

/// MQTT protocol version.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
pub enum Protocol {
    /// MQTT 3.1.1.
    #[serde(rename = "3.1.1")]
    V311,
    /// MQTT 5.
    #[serde(rename = "5")]
    V5,
}

/// Broker connection.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BrokerConfig {
    /// Host name or address.
    pub host: String,
    /// Port (1883 plain, 8883 TLS by convention).
    #[serde(default = "default_port")]
    pub port: u16,
    /// "3.1.1" or "5".
    #[serde(default = "default_protocol")]
    pub protocol: Protocol,
    /// Fixed client id: the broker keeps this session (and its unacknowledged messages).
    pub client_id: String,
    /// User name.
    pub username: Option<String>,
    /// Password (prefer `password_env`).
    pub password: Option<String>,
    /// Environment variable holding the password.
    pub password_env: Option<String>,
    /// Keep-alive, seconds.
    #[serde(default = "default_keep_alive")]
    pub keep_alive_s: u64,
    /// Session kept by an MQTT 5 broker after a disconnect, seconds.
    #[serde(default = "default_session_expiry")]
    pub session_expiry_s: u32,
    /// TLS (absent: plain TCP).
    pub tls: Option<TlsConfig>,
}

/// TLS to the broker.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TlsConfig {
    /// PEM file of the CA certificate(s) that signed the broker's certificate.
    pub ca_file: String,
    /// PEM client certificate (mutual TLS), with `client_key_file`.
    pub client_cert_file: Option<String>,
    /// PEM client key.
    pub client_key_file: Option<String>,
}

/// Message shape.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Shape {
    /// A JSON document with the payload and metadata at JSON pointers.
    Json,
    /// The MQTT payload is the frame; the node id comes from a topic level.
    Raw,
}

/// Payload text encoding in JSON messages.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Encoding {
    /// RFC 4648 base64.
    Base64,
    /// Hex digits.
    Hex,
}

/// Subscription and message mapping.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UplinkConfig {
    /// Topic filters (a shared subscription is `$share/GROUP/FILTER`).
    pub topics: Vec<String>,
    /// "json" or "raw".
    #[serde(default = "default_shape")]
    pub shape: Shape,
    /// JSON pointer (RFC 6901) of the payload text.
    #[serde(default = "p_payload")]
    pub payload: String,
    /// Payload text encoding.
    #[serde(default = "default_encoding")]
    pub encoding: Encoding,
    /// JSON pointer of the network device id ("" = not mapped).
    #[serde(default = "p_device")]
    pub device_id: String,
    /// JSON pointer of the node id, checked against the frame ("" = not mapped).
    #[serde(default = "p_node")]
    pub node_id: String,
    /// JSON pointer of the receive time (RFC 3339 text or ms since the epoch).
    #[serde(default = "p_time")]
    pub rx_time: String,
    /// JSON pointer of the fPort.
    #[serde(default = "p_port")]
    pub fport: String,
    /// JSON pointer of the RSSI (dBm), optional in messages.
    #[serde(default = "p_rssi")]
    pub rssi: String,
    /// JSON pointer of the SNR (dB), optional in messages.
    #[serde(default = "p_snr")]
    pub snr: String,
    /// Only this fPort carries frames (others are rejects); none: any.
    pub expect_fport: Option<i64>,
    /// Raw shape: 0-based topic level holding the node id (decimal).
    pub node_topic_level: Option<usize>,
}

/// Store.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StoreConfig {
    /// SQLite file path (`sqlite:` prefix optional) or `postgres://` URL.
    pub url: Option<String>,
    /// Environment variable holding the URL (wins over `url`).
    pub url_env: Option<String>,
}

impl Default for StoreConfig {
    fn default() -> Self {
        Self {
            url: Some("gateway.db".into()),
            url_env: None,
        }
    }
}

/// Transactions and acknowledgements.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IngestConfig {
    /// Messages per transaction at most.
    #[serde(default = "default_batch_max")]
    pub batch_max: usize,
    /// Longest wait for a batch to fill, ms (bounds the latency).
    #[serde(default = "default_batch_ms")]
    pub batch_ms: u64,
    /// Messages received but not yet acknowledged, at most: the MQTT 5
    /// receive maximum the broker is asked to keep to (what the service
    /// holds in memory). MQTT 3.1.1 has no such request: there the broker's
    /// own window (Mosquitto `max_inflight_messages`) bounds it. Default:
    /// two batches (`2 x batch_max`), so one fills while one commits.
    pub max_unacked: Option<usize>,
}

impl IngestConfig {
    /// The receive window in force (see `max_unacked`).
    pub fn window(&self) -> usize {
        self.max_unacked
            .unwrap_or(self.batch_max.saturating_mul(2))
            .min(65_535)
    }
}

impl Default for IngestConfig {
    fn default() -> Self {
        Self {
            batch_max: default_batch_max(),
            batch_ms: default_batch_ms(),
            max_unacked: None,
        }
    }
}

/// Alarm changes.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AlarmConfig {
    /// Topic that alarm changes are published to (QoS 1); none: not published.
    pub topic: Option<String>,
    /// Expected interval between a node's reports, seconds.
    #[serde(default = "default_interval")]
    pub expected_interval_s: u64,
    /// A node is silent after this many expected intervals without a frame.
    #[serde(default = "default_silent")]
    pub silent_intervals: u32,
    /// Alarm states of the nodes with new reports are evaluated this often,
    /// ms (limits are the store's, `envord gateway limits`).
    #[serde(default = "default_eval_ms")]
    pub eval_ms: u64,
}

impl Default for AlarmConfig {
    fn default() -> Self {
        Self {
            topic: None,
            expected_interval_s: default_interval(),
            silent_intervals: default_silent(),
            eval_ms: default_eval_ms(),
        }
    }
}

/// Log format.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum LogFormat {
    /// Human-readable lines.
    Text,
    /// One JSON object per line.
    Json,
}

/// Logs and health.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LogConfig {
    /// "text" or "json".
    #[serde(default = "default_log_format")]
    pub format: LogFormat,
    /// Health line every this many seconds (0: none).
    #[serde(default = "default_health")]
    pub health_interval_s: u64,
    /// Serve `GET /health` (JSON) on this loopback address, e.g. "127.0.0.1:8071".
    pub health_http: Option<String>,
}

impl Default for LogConfig {
    fn default() -> Self {
        Self {
            format: LogFormat::Text,
            health_interval_s: default_health(),
            health_http: None,
        }
    }
}

fn default_port() -> u16 {
    1883
}
fn default_protocol() -> Protocol {
    Protocol::V5
}
fn default_keep_alive() -> u64 {
    30
}
fn default_session_expiry() -> u32 {
    7 * 24 * 3600
}
fn default_shape() -> Shape {
    Shape::Json
}
fn default_encoding() -> Encoding {
    Encoding::Base64
}
fn p_payload() -> String {
    "/data".into()
}
fn p_device() -> String {
    "/device".into()
}
fn p_node() -> String {
    "/node".into()
}
fn p_time() -> String {
    "/received".into()
}
fn p_port() -> String {
    "/port".into()
}
fn p_rssi() -> String {
    "/radio/rssi".into()
}
fn p_snr() -> String {
    "/radio/snr".into()
}
fn default_batch_max() -> usize {
    500
}
fn default_batch_ms() -> u64 {
    20
}
fn default_interval() -> u64 {
    600
}
fn default_silent() -> u32 {
    3
}
fn default_eval_ms() -> u64 {
    10_000
}
fn default_log_format() -> LogFormat {
    LogFormat::Text
}
fn default_health() -> u64 {
    10
}

impl ServeConfig {
    /// Reads the config file, refusing one that others can read (it may hold
    /// a password), and checks it.
    pub fn load(path: &str) -> Result<Self, CliError> {
        use std::os::unix::fs::PermissionsExt;
        let meta = std::fs::metadata(path).map_err(|e| CliError::input(path, e))?;
        let mode = meta.permissions().mode();
        if mode & 0o077 != 0 {
            return Err(CliError::input(
                path,
                format!(
                    "readable or writable by group/others (mode {:o}); it may hold credentials: run `chmod 600 {path}`",
                    mode & 0o777
                ),
            ));
        }
        let text = std::fs::read_to_string(path).map_err(|e| CliError::input(path, e))?;
        Self::parse(path, &text)
    }

    /// Parses and checks config text; `source` names it in errors.
    pub fn parse(source: &str, text: &str) -> Result<Self, CliError> {
        let c: ServeConfig = toml::from_str(text).map_err(|e| CliError::input(source, e))?;
        let bad = |key: &str, msg: &str| Err(CliError::input(source, format!("{key}: {msg}")));
        if c.uplink.topics.is_empty() {
            return bad("uplink.topics", "at least one topic filter is needed");
        }
        if c.broker.client_id.is_empty() {
            return bad(
                "broker.client_id",
                "must not be empty (the broker keeps the session under it)",
            );
        }
        if c.ingest.batch_max == 0 || c.ingest.batch_max > 10_000 {
            return bad("ingest.batch_max", "must be 1..=10000");
        }
        if c.ingest
            .max_unacked
            .is_some_and(|m| m < c.ingest.batch_max || m > 65_535)
        {
            return bad(
                "ingest.max_unacked",
                "must be at least batch_max and at most 65535 (MQTT receive maximum)",
            );
        }
        if c.alarms.expected_interval_s == 0 || c.alarms.silent_intervals == 0 {
            return bad(
                "alarms",
                "expected_interval_s and silent_intervals must be at least 1",
            );
        }
        if c.uplink.shape == Shape::Raw && c.uplink.node_topic_level.is_none() {
            return bad(
                "uplink.node_topic_level",
                "the raw shape needs the topic level of the node id",
            );
        }
        for (key, p) in [
            ("uplink.payload", &c.uplink.payload),
            ("uplink.device_id", &c.uplink.device_id),
            ("uplink.node_id", &c.uplink.node_id),
            ("uplink.rx_time", &c.uplink.rx_time),
            ("uplink.fport", &c.uplink.fport),
            ("uplink.rssi", &c.uplink.rssi),
            ("uplink.snr", &c.uplink.snr),
        ] {
            if !p.is_empty() && !p.starts_with('/') {
                return bad(
                    key,
                    "a JSON pointer (RFC 6901) starts with '/' (or is \"\" for not mapped)",
                );
            }
        }
        if c.uplink.payload.is_empty() {
            return bad("uplink.payload", "the payload pointer is needed");
        }
        if let Some(t) = &c.broker.tls {
            if t.client_cert_file.is_some() != t.client_key_file.is_some() {
                return bad(
                    "broker.tls",
                    "client_cert_file and client_key_file go together",
                );
            }
        }
        if let Some(a) = &c.log.health_http {
            if !a.starts_with("127.") && !a.starts_with("[::1]") && !a.starts_with("localhost") {
                return bad(
                    "log.health_http",
                    "the health endpoint listens on loopback only (127.0.0.1:PORT)",
                );
            }
        }
        Ok(c)
    }

    /// The broker password: the environment variable when named and set, else the file's.
    pub fn password(&self) -> Result<Option<String>, CliError> {
        if let Some(var) = &self.broker.password_env {
            return match std::env::var(var) {
                Ok(v) => Ok(Some(v)),
                Err(_) => Err(CliError::input(
                    "broker.password_env",
                    format!("environment variable {var} is not set"),
                )),
            };
        }
        Ok(self.broker.password.clone())
    }

    /// The store URL: the environment variable when named, else the file's.
    pub fn store_url(&self) -> Result<String, CliError> {
        if let Some(var) = &self.store.url_env {
            return std::env::var(var).map_err(|_| {
                CliError::input(
                    "store.url_env",
                    format!("environment variable {var} is not set"),
                )
            });
        }
        self.store
            .url
            .clone()
            .ok_or_else(|| CliError::input("store.url", "no store URL (set url or url_env)"))
    }
}

fn pointer<'a>(v: &'a serde_json::Value, p: &str) -> Option<&'a serde_json::Value> {
    if p.is_empty() {
        None
    } else {
        v.pointer(p)
    }
}

fn hex_text(b: &[u8]) -> String {
    super::input::to_hex(b)
}

/// Reads one MQTT message into an uplink. Anything that does not fit the
/// mapping gives an uplink whose `bytes` is the reason (stored as a reject).
pub fn read_message(
    u: &UplinkConfig,
    topic: &str,
    payload: &[u8],
    index: usize,
    now_ms: i64,
) -> Uplink {
    let mut origin = Origin {
        source: topic.to_string(),
        line: index,
        ..Origin::default()
    };
    match u.shape {
        Shape::Raw => {
            let level = u.node_topic_level.unwrap_or(0);
            let claimed = topic.split('/').nth(level);
            let (bytes, claimed_node) = match claimed.map(str::parse::<u16>) {
                Some(Ok(n)) => (Ok(payload.to_vec()), Some(n)),
                _ => (
                    Err(format!(
                        "topic {topic:?} has no node id (decimal) at level {level}"
                    )),
                    None,
                ),
            };
            origin.rx_time_ms = Some(now_ms);
            Uplink {
                origin,
                text: hex_text(payload),
                bytes,
                claimed_node,
            }
        }
        Shape::Json => {
            let text = String::from_utf8_lossy(payload).into_owned();
            let fail = |origin: Origin, why: String| Uplink {
                origin,
                text: text.clone(),
                bytes: Err(why),
                claimed_node: None,
            };
            let v: serde_json::Value = match serde_json::from_slice(payload) {
                Ok(v) => v,
                Err(e) => return fail(origin, format!("message is not JSON: {e}")),
            };
            origin.device_id = pointer(&v, &u.device_id).map(|d| match d {
                serde_json::Value::String(s) => s.clone(),
                other => other.to_string(),
            });
            match pointer(&v, &u.rx_time) {
                Some(serde_json::Value::String(s)) => {
                    origin.rx_time = Some(s.clone());
                    origin.rx_time_ms = super::timefmt::parse_rfc3339_ms(s);
                    if origin.rx_time_ms.is_none() {
                        return fail(
                            origin,
                            format!("receive time {s:?} at {} is not RFC 3339", u.rx_time),
                        );
                    }
                }
                Some(n) if n.is_i64() => {
                    origin.rx_time_ms = n.as_i64();
                    origin.rx_time = n.as_i64().map(super::timefmt::format_rfc3339);
                }
                Some(other) => {
                    return fail(
                        origin,
                        format!(
                            "receive time at {} is neither text nor integer ms: {other}",
                            u.rx_time
                        ),
                    )
                }
                None => origin.rx_time_ms = Some(now_ms),
            }
            origin.fport = pointer(&v, &u.fport).and_then(serde_json::Value::as_i64);
            origin.rssi_dbm = pointer(&v, &u.rssi).and_then(serde_json::Value::as_f64);
            origin.snr_db = pointer(&v, &u.snr).and_then(serde_json::Value::as_f64);
            if let (Some(want), got) = (u.expect_fport, origin.fport) {
                if got != Some(want) {
                    return fail(
                        origin,
                        format!("fPort {got:?} is not the frames' port {want}"),
                    );
                }
            }
            let claimed_node = match pointer(&v, &u.node_id) {
                None => None,
                Some(n) => match n.as_u64().and_then(|x| u16::try_from(x).ok()) {
                    Some(x) => Some(x),
                    None => {
                        return fail(
                            origin,
                            format!("node id at {} is not 0..=65535: {n}", u.node_id),
                        )
                    }
                },
            };
            let bytes = match pointer(&v, &u.payload) {
                Some(serde_json::Value::String(s)) => match u.encoding {
                    Encoding::Base64 => parse_base64(s),
                    Encoding::Hex => parse_hex(s),
                }
                .map_err(|e| format!("payload at {}: {e}", u.payload)),
                Some(_) => Err(format!("payload at {} is not text", u.payload)),
                None => Err(format!("message has no payload at {}", u.payload)),
            };
            Uplink {
                origin,
                text,
                bytes,
                claimed_node,
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MIN: &str = r#"
[broker]
host = "127.0.0.1"
client_id = "gw-test"
[uplink]
topics = ["plant/+/up"]
"#;

    #[test]
    fn defaults_and_mapping() {
        let c = ServeConfig::parse("t.toml", MIN).unwrap();
        assert_eq!(c.broker.protocol, Protocol::V5);
        let msg = br#"{"device":"a1","node":7,"port":2,"received":"2026-03-01T08:00:00Z","data":"AAE=","radio":{"rssi":-97,"snr":7.5}}"#;
        let u = read_message(&c.uplink, "plant/7/up", msg, 1, 0);
        assert_eq!(u.bytes.as_ref().unwrap(), &vec![0, 1]);
        assert_eq!(u.claimed_node, Some(7));
        assert_eq!(u.origin.device_id.as_deref(), Some("a1"));
        assert_eq!(u.origin.fport, Some(2));
        assert_eq!(u.origin.rssi_dbm, Some(-97.0));
        assert_eq!(u.origin.snr_db, Some(7.5));
        assert!(u.origin.rx_time_ms.is_some());
        let bad = read_message(&c.uplink, "plant/7/up", b"{not json", 2, 0);
        assert!(bad.bytes.unwrap_err().contains("not JSON"));
        let none = read_message(&c.uplink, "plant/7/up", br#"{"node":7}"#, 3, 0);
        assert!(none.bytes.unwrap_err().contains("no payload at /data"));
    }

    #[test]
    fn bad_config_names_the_key() {
        let e = ServeConfig::parse("t.toml", &MIN.replace("plant/+/up", "")).map(|_| ());
        assert!(e.is_ok()); // an empty filter string is the broker's to refuse
        let e =
            ServeConfig::parse("t.toml", &format!("{MIN}\n[ingest]\nbatch_max = 0\n")).unwrap_err();
        assert!(e.to_string().contains("ingest.batch_max"), "{e}");
        let e = ServeConfig::parse(
            "t.toml",
            &format!("{MIN}\n[ingest]\nbatch_max = 500\nmax_unacked = 100\n"),
        )
        .unwrap_err();
        assert!(e.to_string().contains("ingest.max_unacked"), "{e}");
        let c =
            ServeConfig::parse("t.toml", &format!("{MIN}\n[ingest]\nbatch_max = 300\n")).unwrap();
        assert_eq!(c.ingest.window(), 600);
        let raw = MIN.replace("[uplink]", "[uplink]\nshape = \"raw\"");
        let e = ServeConfig::parse("t.toml", &raw).unwrap_err();
        assert!(e.to_string().contains("node_topic_level"), "{e}");
    }
}
