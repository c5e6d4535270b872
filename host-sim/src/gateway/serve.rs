//! `envord gateway serve --config gateway.toml`: the long-running MQTT
//! consumer. Messages are read into uplinks ([`super::serve_config`]),
//! stored through the same path as `gateway import` ([`super::ingest`]) in
//! batches, and acknowledged to the broker only after their transaction
//! committed; the broker redelivers anything unacknowledged (persistent
//! session under a fixed client id) and the unique key absorbs repeats.

use super::alarms::{AlarmEvent, Alarms};
use super::db;
use super::ingest::{self, Outcome, Uplink};
use super::serve_config::{LogFormat, Protocol, ServeConfig};
use super::store;
use crate::error::CliError;
use std::io::Write;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{mpsc, Arc, Mutex};
use std::time::{Duration, Instant};

/// Arguments of `envord gateway serve`.
#[derive(clap::Args, Debug)]
pub struct ServeArgs {
    /// Service configuration (TOML; must not be readable by others).
    #[arg(long)]
    config: String,
}

/// Log lines as text or JSON, never with credentials.
#[derive(Clone, Copy)]
struct Log {
    json: bool,
}

impl Log {
    fn line(&self, level: &str, msg: &str, fields: serde_json::Value) {
        let ts = super::timefmt::format_rfc3339(now_ms());
        let line = if self.json {
            let mut v = serde_json::json!({"ts": ts, "level": level, "msg": msg});
            if let (Some(o), serde_json::Value::Object(f)) = (v.as_object_mut(), fields) {
                o.extend(f);
            }
            v.to_string()
        } else {
            let mut s = format!("{ts} {level:<5} {msg}");
            if let serde_json::Value::Object(f) = fields {
                for (k, v) in f {
                    s.push_str(&format!(" {k}={v}"));
                }
            }
            s
        };
        let mut err = std::io::stderr().lock();
        let _ = writeln!(err, "{line}");
    }
    fn info(&self, msg: &str, f: serde_json::Value) {
        self.line("info", msg, f);
    }
    fn warn(&self, msg: &str, f: serde_json::Value) {
        self.line("warn", msg, f);
    }
}

fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
        .unwrap_or(0)
}

/// A received message and what acknowledges it.
struct Msg {
    topic: String,
    payload: Vec<u8>,
    ack: Ack,
    /// Connection generation it arrived on: a message of an older
    /// connection is not acknowledged (its packet id may name another
    /// message now); the broker redelivers it and the unique key absorbs it.
    generation: u64,
}

static GENERATION: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);

enum Ack {
    V4(rumqttc::Publish),
    V5(rumqttc::v5::mqttbytes::v5::Publish),
}

/// Why a request (ack, publish, subscribe) was not queued to the MQTT client.
#[derive(Debug)]
enum QueueError {
    /// The MQTT 3.1.1 client refused it.
    V4(Box<rumqttc::ClientError>),
    /// The MQTT 5 client refused it (boxed: the request it returns is large).
    V5(Box<rumqttc::v5::ClientError>),
    /// An ack for a message of the other protocol version.
    OtherProtocol,
}

impl std::fmt::Display for QueueError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            QueueError::V4(e) => write!(f, "{e}"),
            QueueError::V5(e) => write!(f, "{e}"),
            QueueError::OtherProtocol => f.write_str("ack of another protocol"),
        }
    }
}

impl std::error::Error for QueueError {}

#[derive(Clone)]
enum Handle {
    V4(rumqttc::Client),
    V5(rumqttc::v5::Client),
}

impl Handle {
    /// Queues an ack without waiting (the request queue may be full while
    /// the event thread waits for room in ours: never block on it here).
    fn try_ack(&self, a: &Ack) -> Result<(), QueueError> {
        match (self, a) {
            (Handle::V4(c), Ack::V4(p)) => c.try_ack(p).map_err(|e| QueueError::V4(Box::new(e))),
            (Handle::V5(c), Ack::V5(p)) => c.try_ack(p).map_err(|e| QueueError::V5(Box::new(e))),
            _ => Err(QueueError::OtherProtocol),
        }
    }
    fn publish(&self, topic: &str, payload: Vec<u8>) -> Result<(), QueueError> {
        match self {
            Handle::V4(c) => c
                .try_publish(topic, rumqttc::QoS::AtLeastOnce, false, payload)
                .map_err(|e| QueueError::V4(Box::new(e))),
            Handle::V5(c) => c
                .try_publish(
                    topic,
                    rumqttc::v5::mqttbytes::QoS::AtLeastOnce,
                    false,
                    payload,
                )
                .map_err(|e| QueueError::V5(Box::new(e))),
        }
    }
    /// Blocks until the request is queued (never call from the event thread).
    fn subscribe(&self, topic: &str) -> Result<(), QueueError> {
        match self {
            Handle::V4(c) => c
                .subscribe(topic, rumqttc::QoS::AtLeastOnce)
                .map_err(|e| QueueError::V4(Box::new(e))),
            Handle::V5(c) => c
                .subscribe(topic, rumqttc::v5::mqttbytes::QoS::AtLeastOnce)
                .map_err(|e| QueueError::V5(Box::new(e))),
        }
    }
    /// Queues a disconnect without waiting; false when the queue is full.
    fn try_disconnect(&self) -> bool {
        match self {
            Handle::V4(c) => c.try_disconnect().is_ok(),
            Handle::V5(c) => c.try_disconnect().is_ok(),
        }
    }
}

/// What the health line and endpoint report.
#[derive(Default, Clone, serde::Serialize)]
struct Health {
    broker_connected: bool,
    store: String,
    last_message: Option<String>,
    received: u64,
    stored: u64,
    known: u64,
    rejected: u64,
    alarm_events: u64,
    batches: u64,
    /// Messages received and waiting for the next batch (after the last take).
    queued: usize,
    /// Most messages held at once (waiting + the batch taken), since start.
    queued_max: usize,
    /// Commit time minus the uplink's receive time, ms (recent window).
    lag_p50_ms: Option<i64>,
    lag_p99_ms: Option<i64>,
    lag_max_ms: Option<i64>,
}

/// Recent lags (bounded: memory does not grow with the run).
struct LagWindow {
    v: Vec<i64>,
    next: usize,
}

const LAG_WINDOW: usize = 65_536;

impl LagWindow {
    fn push(&mut self, x: i64) {
        if self.v.len() < LAG_WINDOW {
            self.v.push(x);
        } else if let Some(slot) = self.v.get_mut(self.next) {
            *slot = x;
        }
        self.next = (self.next + 1) % LAG_WINDOW;
    }
    fn quantiles(&self) -> (Option<i64>, Option<i64>, Option<i64>) {
        if self.v.is_empty() {
            return (None, None, None);
        }
        let mut s = self.v.clone();
        s.sort_unstable();
        let q = |p: usize| s.get((s.len() - 1) * p / 100).copied();
        (q(50), q(99), s.last().copied())
    }
}

fn mqtt_options_tls(c: &ServeConfig) -> Result<Option<rumqttc::TlsConfiguration>, CliError> {
    let Some(t) = &c.broker.tls else {
        return Ok(None);
    };
    let _ = rustls::crypto::ring::default_provider().install_default();
    let read = |p: &str| std::fs::read(p).map_err(|e| CliError::input(p, e));
    let ca = read(&t.ca_file)?;
    let client_auth = match (&t.client_cert_file, &t.client_key_file) {
        (Some(c), Some(k)) => Some((read(c)?, read(k)?)),
        _ => None,
    };
    Ok(Some(rumqttc::TlsConfiguration::Simple {
        ca,
        alpn: None,
        client_auth,
    }))
}

/// (Re)subscribes on every connection, from its own thread: the request
/// queue may be full of acks at a reconnect, and the event thread that
/// empties it must not wait on it (a subscription request dropped there
/// would leave a broker that lost the session sending us nothing).
fn subscribe_all(h: &Handle, topics: &[String], log: Log) {
    let h = h.clone();
    let topics = topics.to_vec();
    std::thread::spawn(move || {
        for t in &topics {
            if let Err(e) = h.subscribe(t) {
                log.warn(
                    "subscribe failed",
                    serde_json::json!({"topic": t, "error": e.to_string()}),
                );
            }
        }
    });
}

/// What the event thread makes of one event of either protocol's loop.
// A step lives for one match; boxing the message would cost an allocation each.
#[allow(clippy::large_enum_variant)]
enum Step {
    /// Connected (again); whether the broker kept our session.
    Connected { session_present: bool },
    /// A message to store, and what acknowledges it.
    Message {
        topic: String,
        payload: Vec<u8>,
        ack: Ack,
    },
    /// Our own disconnect went out: the loop ends.
    Disconnected,
    /// Anything else (acks, pings, subscriptions).
    Other,
    /// The connection failed; the client reconnects on the next poll.
    Failed(String, Option<Refusal>),
}

/// A connection failure that retrying cannot mend: the configuration is at
/// fault. Fatal before the first connection (a service started with a
/// wrong CA or password says so and exits); after it, retried like any
/// other failure (a broker being reconfigured or restarted).
#[derive(Clone, Copy)]
enum Refusal {
    /// The TLS handshake failed (certificate not from `ca_file`, wrong name).
    Tls,
    /// The broker refused the login (bad user name or password, not authorised).
    Login,
}

/// Classifies a TLS set-up failure: a handshake cut short (the broker
/// restarting) is retried, anything else is the configuration's.
fn tls_refusal(e: &rumqttc::TlsError) -> Option<Refusal> {
    match e {
        rumqttc::TlsError::Io(io) => io_refusal(io),
        _ => Some(Refusal::Tls),
    }
}

/// Classifies an I/O failure: rustls' handshake errors arrive as I/O errors.
fn io_refusal(e: &std::io::Error) -> Option<Refusal> {
    e.get_ref()
        .is_some_and(|i| i.downcast_ref::<rustls::Error>().is_some())
        .then_some(Refusal::Tls)
}

/// One MQTT version's event type, mapped onto [`Step`]. The payload is
/// copied out and the client's buffers (the payload and topic of the packet
/// share the read buffer) are dropped: a queued message holds only its own
/// bytes and what acknowledges it (packet id, QoS).
trait EventSource {
    fn step(self) -> Step;
}

impl EventSource for Result<rumqttc::Event, rumqttc::ConnectionError> {
    fn step(self) -> Step {
        use rumqttc::{Event, Outgoing, Packet};
        match self {
            Ok(Event::Incoming(Packet::ConnAck(a))) => Step::Connected {
                session_present: a.session_present,
            },
            Ok(Event::Incoming(Packet::Publish(mut p))) => {
                let topic = std::mem::take(&mut p.topic);
                let payload = std::mem::take(&mut p.payload).to_vec();
                Step::Message {
                    topic,
                    payload,
                    ack: Ack::V4(p),
                }
            }
            Ok(Event::Outgoing(Outgoing::Disconnect)) => Step::Disconnected,
            Ok(_) => Step::Other,
            Err(e) => {
                use rumqttc::{ConnectReturnCode as C, ConnectionError as E};
                let r = match &e {
                    E::Tls(t) => tls_refusal(t),
                    E::Io(io) => io_refusal(io),
                    E::ConnectionRefused(C::BadUserNamePassword | C::NotAuthorized) => {
                        Some(Refusal::Login)
                    }
                    _ => None,
                };
                Step::Failed(e.to_string(), r)
            }
        }
    }
}

impl EventSource for Result<rumqttc::v5::Event, rumqttc::v5::ConnectionError> {
    fn step(self) -> Step {
        use rumqttc::v5::mqttbytes::v5::Packet;
        use rumqttc::v5::Event;
        use rumqttc::Outgoing;
        match self {
            Ok(Event::Incoming(Packet::ConnAck(a))) => Step::Connected {
                session_present: a.session_present,
            },
            Ok(Event::Incoming(Packet::Publish(mut p))) => {
                let topic = String::from_utf8_lossy(&std::mem::take(&mut p.topic)).into_owned();
                let payload = std::mem::take(&mut p.payload).to_vec();
                p.properties = None;
                Step::Message {
                    topic,
                    payload,
                    ack: Ack::V5(p),
                }
            }
            Ok(Event::Outgoing(Outgoing::Disconnect)) => Step::Disconnected,
            Ok(_) => Step::Other,
            Err(e) => {
                use rumqttc::v5::mqttbytes::v5::ConnectReturnCode as C;
                use rumqttc::v5::ConnectionError as E;
                let r = match &e {
                    E::Tls(t) => tls_refusal(t),
                    E::Io(io) => io_refusal(io),
                    E::ConnectionRefused(C::BadUserNamePassword | C::NotAuthorized) => {
                        Some(Refusal::Login)
                    }
                    _ => None,
                };
                Step::Failed(e.to_string(), r)
            }
        }
    }
}

/// What the event thread shares with the rest of the service.
struct EventCtx {
    handle: Handle,
    topics: Vec<String>,
    tx: mpsc::SyncSender<Msg>,
    /// Messages handed over and not yet taken by the ingest loop.
    queued: Arc<AtomicUsize>,
    connected: Arc<AtomicBool>,
    stopping: Arc<AtomicBool>,
    log: Log,
    /// "host:port", for messages.
    broker: String,
    /// Why the thread gave up, when the configuration is at fault.
    refused: Arc<Mutex<Option<String>>>,
}

/// The event thread of either protocol: drives the client (which also
/// carries our acks out), hands messages over (waiting while the ingest
/// loop holds a full window of them), resubscribes on every connection and
/// keeps reconnecting.
fn event_loop<E: EventSource>(events: impl Iterator<Item = E>, ctx: EventCtx) {
    let mut ever_connected = false;
    for ev in events {
        match ev.step() {
            Step::Connected { session_present } => {
                GENERATION.fetch_add(1, Ordering::SeqCst);
                ever_connected = true;
                ctx.connected.store(true, Ordering::SeqCst);
                ctx.log.info(
                    "broker connected",
                    serde_json::json!({"session_present": session_present}),
                );
                subscribe_all(&ctx.handle, &ctx.topics, ctx.log);
            }
            Step::Message {
                topic,
                payload,
                ack,
            } => {
                let m = Msg {
                    topic,
                    payload,
                    ack,
                    generation: GENERATION.load(Ordering::SeqCst),
                };
                ctx.queued.fetch_add(1, Ordering::SeqCst);
                if ctx.tx.send(m).is_err() {
                    break;
                }
            }
            Step::Disconnected => break,
            Step::Other => {}
            Step::Failed(e, refusal) => {
                ctx.connected.store(false, Ordering::SeqCst);
                if ctx.stopping.load(Ordering::SeqCst) {
                    break;
                }
                if let (false, Some(r)) = (ever_connected, refusal) {
                    let b = &ctx.broker;
                    let msg = match r {
                        Refusal::Tls => format!(
                            "TLS connection to the broker at {b} failed ({e}): check broker.tls.ca_file (the CA that signed the broker's certificate) and that broker.host is a name in that certificate"
                        ),
                        Refusal::Login => format!(
                            "the broker at {b} refused the login ({e}): check broker.username and broker.password / broker.password_env"
                        ),
                    };
                    if let Ok(mut f) = ctx.refused.lock() {
                        *f = Some(msg);
                    }
                    break;
                }
                ctx.log.warn(
                    "broker connection lost, retrying in 1 s",
                    serde_json::json!({"error": e}),
                );
                std::thread::sleep(Duration::from_secs(1));
            }
        }
    }
    ctx.connected.store(false, Ordering::SeqCst);
}

/// Connects to the broker; the event thread feeds `tx` and keeps reconnecting.
///
/// What the service holds unacknowledged is bounded by the broker's send
/// window: with MQTT 5 our receive maximum (`ingest.max_unacked`), with
/// MQTT 3.1.1 the broker's own setting (Mosquitto: `max_inflight_messages`).
fn connect(
    c: &ServeConfig,
    tx: mpsc::SyncSender<Msg>,
    queued: Arc<AtomicUsize>,
    connected: Arc<AtomicBool>,
    stopping: Arc<AtomicBool>,
    refused: Arc<Mutex<Option<String>>>,
    log: Log,
) -> Result<(Handle, std::thread::JoinHandle<()>), CliError> {
    let b = &c.broker;
    let password = c.password()?;
    let tls = mqtt_options_tls(c)?;
    let keep_alive = Duration::from_secs(b.keep_alive_s.max(5));
    // requests (acks of up to `max_unacked` messages, alarm publishes)
    let cap = c.ingest.window() + c.ingest.batch_max + 64;
    let transport = tls.map(rumqttc::Transport::Tls);
    let (handle, spawn): (Handle, Box<dyn FnOnce(EventCtx) + Send>) = match b.protocol {
        Protocol::V311 => {
            let mut o = rumqttc::MqttOptions::new(&b.client_id, &b.host, b.port);
            o.set_keep_alive(keep_alive)
                .set_clean_session(false)
                .set_manual_acks(true)
                .set_max_packet_size(1 << 20, 1 << 20);
            if let (Some(u), p) = (&b.username, &password) {
                o.set_credentials(u, p.clone().unwrap_or_default());
            }
            if let Some(t) = transport {
                o.set_transport(t);
            }
            let (client, mut conn) = rumqttc::Client::new(o, cap);
            (
                Handle::V4(client),
                Box::new(move |ctx| event_loop(conn.iter(), ctx)),
            )
        }
        Protocol::V5 => {
            let mut o = rumqttc::v5::MqttOptions::new(&b.client_id, &b.host, b.port);
            o.set_keep_alive(keep_alive)
                .set_clean_start(false)
                .set_session_expiry_interval(Some(b.session_expiry_s))
                .set_receive_maximum(Some(u16::try_from(c.ingest.window()).unwrap_or(u16::MAX)))
                .set_manual_acks(true)
                .set_max_packet_size(Some(1 << 20));
            if let (Some(u), p) = (&b.username, &password) {
                o.set_credentials(u, p.clone().unwrap_or_default());
            }
            if let Some(t) = transport {
                o.set_transport(t);
            }
            let (client, mut conn) = rumqttc::v5::Client::new(o, cap);
            (
                Handle::V5(client),
                Box::new(move |ctx| event_loop(conn.iter(), ctx)),
            )
        }
    };
    let ctx = EventCtx {
        handle: handle.clone(),
        topics: c.uplink.topics.clone(),
        tx,
        queued,
        connected,
        stopping,
        log,
        broker: format!("{}:{}", b.host, b.port),
        refused,
    };
    Ok((handle, std::thread::spawn(move || spawn(ctx))))
}

fn health_http(addr: &str, health: Arc<Mutex<Health>>, log: Log) -> Result<(), CliError> {
    use std::io::Read;
    let listener = std::net::TcpListener::bind(addr)
        .map_err(|e| CliError::input("log.health_http", format!("{addr}: {e}")))?;
    log.info(
        "health endpoint listening",
        serde_json::json!({"addr": addr}),
    );
    std::thread::spawn(move || {
        for stream in listener.incoming() {
            let Ok(mut s) = stream else { continue };
            let _ = s.set_read_timeout(Some(Duration::from_secs(2)));
            let mut buf = [0u8; 1024];
            let _ = s.read(&mut buf);
            let body = health
                .lock()
                .map(|h| serde_json::to_string(&*h).unwrap_or_default())
                .unwrap_or_default();
            let _ = write!(
                s,
                "HTTP/1.1 200 OK\r\nContent-Type: application/json\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
                body.len()
            );
        }
    });
    Ok(())
}

fn frame_flags(f: &wire::frame::Frame) -> u16 {
    use wire::frame::Frame;
    match f {
        Frame::Full(r) => r.flags.to_bits(),
        Frame::Reduced(r) => r.flags.to_bits(),
        Frame::Status(r) => r.flags.to_bits(),
    }
}

/// Runs the service until SIGTERM/SIGINT.
pub fn serve_cmd(a: &ServeArgs) -> Result<(), CliError> {
    let cfg = ServeConfig::load(&a.config)?;
    let log = Log {
        json: cfg.log.format == LogFormat::Json,
    };
    let url = cfg.store_url()?;
    let shown_url = db::redact(&url);
    let mut db = db::open(&url)?;
    let silent_after = Duration::from_secs(
        cfg.alarms
            .expected_interval_s
            .saturating_mul(u64::from(cfg.alarms.silent_intervals)),
    );
    // The history of frames is the store's (unique key); keep only positions.
    let (mut tracker, _) =
        ingest::decided_order(db.as_mut(), super::seq::SeqTracker::without_history(), None)
            .map_err(|e| CliError::Other(format!("{shown_url}: {e}")))?;

    let stop = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGTERM, signal_hook::consts::SIGINT] {
        signal_hook::flag::register(sig, Arc::clone(&stop))
            .map_err(|e| CliError::Other(format!("signal handler: {e}")))?;
    }
    let health = Arc::new(Mutex::new(Health {
        store: shown_url.clone(),
        ..Health::default()
    }));
    if let Some(addr) = &cfg.log.health_http {
        health_http(addr, Arc::clone(&health), log)?;
    }
    super::web::service::start_in_service(cfg.web.as_ref(), &url)?;
    let connected = Arc::new(AtomicBool::new(false));
    let stopping = Arc::new(AtomicBool::new(false));
    // Bounded by the receive window: a broker that sends past it (Mosquitto
    // 2.0 was measured doing so) makes the event thread wait here and the
    // rest wait in the socket, not in our memory. Our acks go out through
    // that thread, so the ingest loop never blocks on them (`flush_acks`).
    let (tx, rx) = mpsc::sync_channel::<Msg>(cfg.ingest.window());
    let mut unsent: std::collections::VecDeque<(u64, Ack)> = std::collections::VecDeque::new();
    let queued = Arc::new(AtomicUsize::new(0));
    let refused = Arc::new(Mutex::new(None));
    let (mqtt, event_thread) = connect(
        &cfg,
        tx,
        Arc::clone(&queued),
        Arc::clone(&connected),
        Arc::clone(&stopping),
        Arc::clone(&refused),
        log,
    )?;
    let (alarm_tx, alarm_thread) = spawn_alarms(
        url.clone(),
        &cfg,
        mqtt.clone(),
        Arc::clone(&health),
        log,
        silent_after,
    )?;
    log.info(
        "gateway serve started",
        serde_json::json!({
            "broker": format!("{}:{}", cfg.broker.host, cfg.broker.port),
            "protocol": match cfg.broker.protocol { Protocol::V311 => "3.1.1", Protocol::V5 => "5" },
            "client_id": cfg.broker.client_id, "topics": cfg.uplink.topics,
            "tls": cfg.broker.tls.is_some(), "store": shown_url,
            "schema_version": store::schema_version(),
        }),
    );

    let mut lags = LagWindow {
        v: Vec::new(),
        next: 0,
    };
    let mut received: u64 = 0;
    let mut last_health = Instant::now();
    let mut last_quantiles = Instant::now();
    let batch_wait = Duration::from_millis(cfg.ingest.batch_ms);
    let health_every = Duration::from_secs(cfg.log.health_interval_s);
    let mut pending: Vec<Msg> = Vec::new();
    let mut exit_err: Option<CliError> = None;
    loop {
        let stopping_now = stop.load(Ordering::SeqCst);
        // Fill a batch: wait for a first message, then until full or batch_ms.
        if pending.is_empty() {
            match rx.recv_timeout(Duration::from_millis(if stopping_now { 50 } else { 200 })) {
                Ok(m) => pending.push(m),
                Err(mpsc::RecvTimeoutError::Timeout) => {}
                Err(mpsc::RecvTimeoutError::Disconnected) => {
                    if !stopping_now {
                        exit_err = Some(match refused.lock().ok().and_then(|mut r| r.take()) {
                            Some(m) => CliError::input(&a.config, m),
                            None => CliError::Other("broker event thread ended".into()),
                        });
                    }
                }
            }
        }
        if !pending.is_empty() {
            let deadline = Instant::now() + batch_wait;
            while pending.len() < cfg.ingest.batch_max {
                let left = deadline.saturating_duration_since(Instant::now());
                match rx.recv_timeout(left) {
                    Ok(m) => pending.push(m),
                    Err(_) => break,
                }
            }
        }
        if !pending.is_empty() {
            let left = queued
                .fetch_sub(pending.len(), Ordering::SeqCst)
                .saturating_sub(pending.len());
            if let Ok(mut h) = health.lock() {
                h.queued = left;
                h.queued_max = h.queued_max.max(left + pending.len());
            }
            let now = now_ms();
            let uplinks: Vec<Uplink> = pending
                .iter()
                .map(|m| {
                    received += 1;
                    let idx = usize::try_from(received).unwrap_or(usize::MAX);
                    super::serve_config::read_message(&cfg.uplink, &m.topic, &m.payload, idx, now)
                })
                .collect();
            // Commit (retrying through a store outage), then acknowledge.
            let outcomes = loop {
                match ingest::store_batch(db.as_mut(), &mut tracker, &uplinks) {
                    Ok(o) => break Some(o),
                    Err(e) => {
                        log.warn(
                            "store write failed, batch kept unacknowledged; retrying in 1 s",
                            serde_json::json!({"error": e.to_string(), "messages": uplinks.len()}),
                        );
                        if stop.load(Ordering::SeqCst) {
                            break None;
                        }
                        std::thread::sleep(Duration::from_secs(1));
                        if db.backend() == db::Backend::Postgres {
                            match db::open(&url) {
                                Ok(n) => {
                                    db = n;
                                    log.info(
                                        "store reconnected",
                                        serde_json::json!({"store": shown_url}),
                                    );
                                }
                                Err(e) => log.warn(
                                    "store reconnect failed",
                                    serde_json::json!({"error": e.to_string()}),
                                ),
                            }
                        }
                    }
                }
            };
            let Some(outcomes) = outcomes else {
                exit_err = Some(CliError::Other(format!(
                    "stopped with {} message(s) not committed; the broker redelivers them",
                    pending.len()
                )));
                break;
            };
            let commit_ms = now_ms();
            unsent.extend(pending.drain(..).map(|m| (m.generation, m.ack)));
            flush_acks(&mqtt, &mut unsent);
            let (mut stored, mut known, mut rejected) = (0u64, 0u64, 0u64);
            for (o, u) in outcomes.iter().zip(&uplinks) {
                match o {
                    Outcome::New { frame, .. } => {
                        stored += 1;
                        let (node, _) = store::node_seq(frame);
                        let _ = alarm_tx.send(AlarmMsg::Frame {
                            node,
                            flags: frame_flags(frame),
                            is_report: store::is_report(frame),
                        });
                        if let Some(rx) = u.origin.rx_time_ms {
                            lags.push(commit_ms - rx);
                        }
                    }
                    Outcome::Known { .. } => known += 1,
                    Outcome::Rejected { reason, new } => {
                        rejected += 1;
                        if *new {
                            log.warn(
                                "rejected message",
                                serde_json::json!({"topic": u.origin.source, "reason": reason}),
                            );
                        }
                    }
                }
            }
            if let Ok(mut h) = health.lock() {
                h.received = received;
                h.stored += stored;
                h.known += known;
                h.rejected += rejected;
                h.batches += 1;
                h.last_message = Some(super::timefmt::format_rfc3339(commit_ms));
            }
        }
        flush_acks(&mqtt, &mut unsent);

        // The quantiles sort the whole window: once a second is enough.
        let quantiles = if last_quantiles.elapsed() >= Duration::from_secs(1) || stopping_now {
            last_quantiles = Instant::now();
            Some(lags.quantiles())
        } else {
            None
        };
        if let Ok(mut h) = health.lock() {
            h.broker_connected = connected.load(Ordering::SeqCst);
            if let Some((p50, p99, max)) = quantiles {
                h.lag_p50_ms = p50;
                h.lag_p99_ms = p99;
                h.lag_max_ms = max;
            }
        }
        if !health_every.is_zero() && last_health.elapsed() >= health_every {
            last_health = Instant::now();
            if let Ok(h) = health.lock() {
                log.info("health", serde_json::to_value(&*h).unwrap_or_default());
            }
        }
        if exit_err.is_some() {
            break;
        }
        if stopping_now && pending.is_empty() {
            // Drain: whatever the event thread already handed over is in the channel.
            match rx.try_recv() {
                Ok(m) => pending.push(m),
                Err(_) => break,
            }
        }
    }
    let t0 = Instant::now();
    while !unsent.is_empty() && t0.elapsed() < Duration::from_secs(2) {
        flush_acks(&mqtt, &mut unsent);
        std::thread::sleep(Duration::from_millis(10));
    }
    // Last evaluation of what was committed, before leaving.
    let _ = alarm_tx.send(AlarmMsg::Stop);
    let _ = alarm_thread.join();
    std::thread::sleep(Duration::from_millis(100)); // let the event loop send them
    stopping.store(true, Ordering::SeqCst);
    // The event thread may be waiting for room in our queue (a broker still
    // sending): messages arriving now are not stored, so not acknowledged
    // (the broker redelivers them); taking them lets it reach our acks and
    // the disconnect. Never block on the client's request queue here.
    let mut disconnect_queued = mqtt.try_disconnect();
    let t0 = Instant::now();
    while !event_thread.is_finished() && t0.elapsed() < Duration::from_secs(5) {
        while rx.try_recv().is_ok() {}
        if !disconnect_queued {
            disconnect_queued = mqtt.try_disconnect();
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    if let Ok(mut h) = health.lock() {
        (h.lag_p50_ms, h.lag_p99_ms, h.lag_max_ms) = lags.quantiles();
        log.info(
            "gateway serve stopped",
            serde_json::to_value(&*h).unwrap_or_default(),
        );
    }
    match exit_err {
        Some(e) => Err(e),
        None => Ok(()),
    }
}

/// Sends the acks of committed messages as far as the client's request
/// queue takes them; the rest stay for the next call. An ack of an earlier
/// connection is dropped (its packet id may name another message now; the
/// broker redelivers the message and the unique key absorbs it).
fn flush_acks(mqtt: &Handle, unsent: &mut std::collections::VecDeque<(u64, Ack)>) {
    let generation = GENERATION.load(Ordering::SeqCst);
    while let Some((g, a)) = unsent.front() {
        if *g != generation {
            unsent.pop_front();
            continue;
        }
        if mqtt.try_ack(a).is_err() {
            return; // full (or the client is gone): retried next time
        }
        unsent.pop_front();
    }
}

/// What the ingest loop tells the alarm thread.
enum AlarmMsg {
    /// A frame committed for the first time.
    Frame {
        node: u16,
        flags: u16,
        is_report: bool,
    },
    /// Evaluate once more, record, publish, end.
    Stop,
}

/// The alarm thread: its own store connection, so grading (which reads
/// each dirty node's history) never holds up the commits and acks.
fn spawn_alarms(
    url: String,
    cfg: &ServeConfig,
    mqtt: Handle,
    health: Arc<Mutex<Health>>,
    log: Log,
    silent_after: Duration,
) -> Result<(mpsc::Sender<AlarmMsg>, std::thread::JoinHandle<()>), CliError> {
    let mut db = db::open(&url)?;
    let shown = db::redact(&url);
    let mut alarms = Alarms::new(db.as_mut(), &url, silent_after)
        .map_err(|e| CliError::Other(format!("{shown}: {e}")))?;
    let topic = cfg.alarms.topic.clone();
    let every = Duration::from_millis(cfg.alarms.eval_ms.max(10));
    let (tx, rx) = mpsc::channel::<AlarmMsg>();
    let th = std::thread::spawn(move || {
        let mut next = Instant::now() + every;
        let mut events: Vec<AlarmEvent> = Vec::new();
        loop {
            let left = next.saturating_duration_since(Instant::now());
            let stop = match rx.recv_timeout(left) {
                Ok(AlarmMsg::Frame {
                    node,
                    flags,
                    is_report,
                }) => {
                    alarms.frame(node, flags, is_report, &mut events);
                    false
                }
                Ok(AlarmMsg::Stop) | Err(mpsc::RecvTimeoutError::Disconnected) => true,
                Err(mpsc::RecvTimeoutError::Timeout) => false,
            };
            if stop || Instant::now() >= next {
                next = Instant::now() + every;
                if let Err(e) = alarms.evaluate(db.as_mut(), &mut events) {
                    log.warn(
                        "alarm evaluation failed",
                        serde_json::json!({"error": e.to_string()}),
                    );
                }
                if !stop {
                    alarms.check_silence(&mut events);
                }
            }
            if !events.is_empty() {
                let batch = std::mem::take(&mut events);
                publish_alarms(
                    &mut alarms,
                    db.as_mut(),
                    topic.as_deref(),
                    &mqtt,
                    batch,
                    &health,
                    log,
                );
            }
            if stop {
                break;
            }
        }
    });
    Ok((tx, th))
}

fn publish_alarms(
    alarms: &mut Alarms,
    db: &mut dyn db::Db,
    topic: Option<&str>,
    mqtt: &Handle,
    events: Vec<AlarmEvent>,
    health: &Arc<Mutex<Health>>,
    log: Log,
) {
    let kept = match alarms.record(db, events) {
        Ok(k) => k,
        Err(e) => {
            log.warn(
                "alarm events not recorded",
                serde_json::json!({"error": e.to_string()}),
            );
            return;
        }
    };
    if let Ok(mut h) = health.lock() {
        h.alarm_events += u64::try_from(kept.len()).unwrap_or(0);
    }
    for e in kept {
        let v = serde_json::to_value(&e).unwrap_or_default();
        log.info("alarm change", v.clone());
        if let Some(t) = topic {
            if let Err(err) = mqtt.publish(t, v.to_string().into_bytes()) {
                log.warn(
                    "alarm publish failed",
                    serde_json::json!({"error": err.to_string()}),
                );
            }
        }
    }
}
