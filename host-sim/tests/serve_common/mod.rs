// Real servers and a simulated fleet for the gateway service tests and the
// ingest benchmark (included with `#[path]`). Started by .ci/services.sh:
// ENVORD_TEST_MOSQUITTO (broker binary; each test starts its own brokers),
// ENVORD_TEST_PG_URL (a PostgreSQL superuser URL on 127.0.0.1),
// ENVORD_TEST_PG_CTL (pg_ctl command line of that cluster, for restarts).
#![allow(dead_code)]

use host_sim::gateway::input::to_base64;
use std::collections::{BTreeSet, HashSet};
use std::io::Write;
use std::net::TcpStream;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};
use wire::frame::{encode, encode_reduced, BearingResult, DefectResult, FrameReport};

pub const BIN: &str = env!("CARGO_BIN_EXE_envord");

fn need_env(var: &str) -> String {
    std::env::var(var).unwrap_or_else(|_| {
        panic!("{var} is not set: the gateway service tests need real servers; run them through .ci/services.sh (it installs and starts Mosquitto and PostgreSQL)")
    })
}

pub fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

fn wait_port(port: u16, secs: u64) -> bool {
    let t0 = Instant::now();
    while t0.elapsed() < Duration::from_secs(secs) {
        if TcpStream::connect(("127.0.0.1", port)).is_ok() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    false
}

/// A Mosquitto broker on a loopback port, persistent sessions saved under its dir.
pub struct Broker {
    pub port: u16,
    dir: PathBuf,
    child: Option<Child>,
}

/// What [`Broker::start_tls`] made: a second listener with TLS and login.
pub struct TlsListener {
    pub port: u16,
    /// The CA that signed the broker's certificate (PEM).
    pub ca: PathBuf,
    /// Another CA, which did not.
    pub other_ca: PathBuf,
}

fn openssl(dir: &Path, args: &[&str]) {
    let out = Command::new("openssl")
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap_or_else(|e| {
            panic!("the openssl command could not run ({e}): .ci/services.sh installs it")
        });
    assert!(
        out.status.success(),
        "openssl {}: {}",
        args.join(" "),
        String::from_utf8_lossy(&out.stderr)
    );
}

/// A CA (EC P-256, self-signed) in `dir` as `{name}.pem` / `{name}.key`.
fn make_ca(dir: &Path, name: &str) -> PathBuf {
    openssl(
        dir,
        &[
            "req",
            "-x509",
            "-newkey",
            "ec",
            "-pkeyopt",
            "ec_paramgen_curve:prime256v1",
            "-nodes",
            "-keyout",
            &format!("{name}.key"),
            "-out",
            &format!("{name}.pem"),
            "-days",
            "2",
            "-subj",
            &format!("/CN=envord test {name}"),
            "-addext",
            "basicConstraints=critical,CA:TRUE",
            "-addext",
            "keyUsage=critical,keyCertSign,cRLSign",
        ],
    );
    dir.join(format!("{name}.pem"))
}

impl Broker {
    pub fn start(dir: &Path) -> Broker {
        Self::start_with(dir, |_| String::new())
    }

    /// A broker with its plain loopback listener (anonymous, for the test's
    /// publisher) and a TLS listener on 127.0.0.1 with a server
    /// certificate (name 127.0.0.1 and localhost) signed by a CA made in
    /// the broker's dir, which takes only `user`/`password`.
    pub fn start_tls(dir: &Path, user: &str, password: &str) -> (Broker, TlsListener) {
        let tls_port = free_port();
        let mut made = None;
        let b = Self::start_with(dir, |d| {
            let ca = make_ca(d, "ca");
            let other_ca = make_ca(d, "other-ca");
            std::fs::write(
                d.join("server.ext"),
                "subjectAltName=IP:127.0.0.1,DNS:localhost\nbasicConstraints=CA:FALSE\n\
                 keyUsage=critical,digitalSignature\nextendedKeyUsage=serverAuth\n",
            )
            .unwrap();
            openssl(
                d,
                &[
                    "req",
                    "-newkey",
                    "ec",
                    "-pkeyopt",
                    "ec_paramgen_curve:prime256v1",
                    "-nodes",
                    "-keyout",
                    "server.key",
                    "-out",
                    "server.csr",
                    "-subj",
                    "/CN=127.0.0.1",
                ],
            );
            openssl(
                d,
                &[
                    "x509",
                    "-req",
                    "-in",
                    "server.csr",
                    "-CA",
                    "ca.pem",
                    "-CAkey",
                    "ca.key",
                    "-CAcreateserial",
                    "-out",
                    "server.pem",
                    "-days",
                    "2",
                    "-extfile",
                    "server.ext",
                ],
            );
            let passwd = d.join("passwd");
            let st = Command::new("mosquitto_passwd")
                .args(["-c", "-b"])
                .arg(&passwd)
                .args([user, password])
                .output()
                .unwrap_or_else(|e| {
                    panic!(
                        "mosquitto_passwd could not run ({e}): it comes with the mosquitto package"
                    )
                });
            assert!(
                st.status.success(),
                "mosquitto_passwd: {}",
                String::from_utf8_lossy(&st.stderr)
            );
            made = Some(TlsListener {
                port: tls_port,
                ca,
                other_ca,
            });
            format!(
                "listener {tls_port} 127.0.0.1\nallow_anonymous false\npassword_file {}\n\
                 cafile {}\ncertfile {}\nkeyfile {}\n",
                passwd.display(),
                d.join("ca.pem").display(),
                d.join("server.pem").display(),
                d.join("server.key").display()
            )
        });
        assert!(
            wait_port(tls_port, 10),
            "mosquitto did not listen with TLS on 127.0.0.1:{tls_port} (log in {})",
            b.dir.display()
        );
        (b, made.unwrap())
    }

    /// `extra(dir)`: more listeners (they follow the plain one, so with
    /// per-listener settings each has its own login rules).
    fn start_with(dir: &Path, extra: impl FnOnce(&Path) -> String) -> Broker {
        let port = free_port();
        let dir = dir.join(format!("mosquitto-{port}"));
        std::fs::create_dir_all(&dir).unwrap();
        let user = if unsafe_is_root() { "user root\n" } else { "" };
        // ENVORD_TEST_MOSQUITTO_DEBUG=1: every packet in the broker's log
        let debug = if std::env::var_os("ENVORD_TEST_MOSQUITTO_DEBUG").is_some() {
            "log_type all\n"
        } else {
            ""
        };
        let more = extra(&dir);
        let per_listener = if more.is_empty() {
            ""
        } else {
            "per_listener_settings true\n"
        };
        let conf = format!(
            "{per_listener}persistence true\npersistence_location {}/\n\
             autosave_interval 1\nmax_inflight_messages 1000\nmax_queued_messages 10000000\nmax_queued_bytes 0\n\
             log_dest file {}/log\n{user}{debug}listener {port} 127.0.0.1\nallow_anonymous true\n{more}",
            dir.display(),
            dir.display()
        );
        std::fs::write(dir.join("mosquitto.conf"), conf).unwrap();
        let mut b = Broker {
            port,
            dir,
            child: None,
        };
        b.spawn();
        b
    }

    fn spawn(&mut self) {
        let bin = need_env("ENVORD_TEST_MOSQUITTO");
        let child = Command::new(&bin)
            .arg("-c")
            .arg(self.dir.join("mosquitto.conf"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap_or_else(|e| panic!("mosquitto ({bin}) could not start: {e}"));
        self.child = Some(child);
        assert!(
            wait_port(self.port, 10),
            "mosquitto did not listen on 127.0.0.1:{} within 10 s (log in {})",
            self.port,
            self.dir.display()
        );
    }

    /// Stops with SIGTERM (the broker saves its sessions) and starts again on the same port.
    pub fn restart(&mut self) {
        self.stop();
        self.spawn();
    }

    pub fn stop(&mut self) {
        if let Some(mut c) = self.child.take() {
            sig(c.id(), "TERM");
            let _ = c.wait();
        }
    }
}

impl Drop for Broker {
    fn drop(&mut self) {
        if let Some(keep) = std::env::var_os("ENVORD_TEST_KEEP_LOGS") {
            let _ = std::fs::copy(
                self.dir.join("log"),
                Path::new(&keep).join(format!("mosquitto-{}.log", self.port)),
            );
        }
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }
}

fn unsafe_is_root() -> bool {
    Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false)
}

pub fn sig(pid: u32, name: &str) {
    let _ = Command::new("kill")
        .arg(format!("-{name}"))
        .arg(pid.to_string())
        .status();
}

/// A fresh PostgreSQL database for one test; returns its URL.
pub fn pg_database(name: &str) -> String {
    let admin = need_env("ENVORD_TEST_PG_URL");
    let mut c = postgres::Client::connect(&admin, postgres::NoTls)
        .unwrap_or_else(|e| panic!("PostgreSQL at ENVORD_TEST_PG_URL is not reachable: {e}"));
    c.batch_execute(&format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)"))
        .unwrap();
    c.batch_execute(&format!("CREATE DATABASE {name}")).unwrap();
    match admin.rfind('/') {
        Some(i) => format!("{}/{name}", &admin[..i]),
        None => panic!("ENVORD_TEST_PG_URL has no database part"),
    }
}

/// Restarts the PostgreSQL cluster (fast shutdown: sessions are cut).
pub fn pg_restart() {
    let ctl = need_env("ENVORD_TEST_PG_CTL");
    let st = Command::new("sh")
        .arg("-c")
        .arg(format!("{ctl} restart >/dev/null"))
        .status()
        .unwrap();
    assert!(st.success(), "PostgreSQL restart ({ctl} restart) failed");
}

/// What was published: the messages, and what the store must hold.
pub struct Stream {
    /// (topic, payload) in publish order (duplicates included).
    pub messages: Vec<(String, Vec<u8>)>,
    /// Distinct valid report frames (node, seq, payload).
    pub reports: BTreeSet<(u16, u16, Vec<u8>)>,
    /// Distinct valid status frames.
    pub statuses: BTreeSet<(u16, u16, Vec<u8>)>,
    /// Distinct bad messages (each must be one reject).
    pub bad: usize,
    /// Messages published twice.
    pub duplicates: usize,
    /// Report sequence numbers left out (gaps).
    pub gaps: usize,
    pub full: usize,
    pub reduced: usize,
}

fn full_frame(node: u16, seq: u16, bpfo_db: f32, flags_sensor: bool) -> Vec<u8> {
    let mut r = FrameReport {
        node_id: node,
        seq,
        speed_rpm: 1180.0 + f32::from(node % 40),
        ..FrameReport::default()
    };
    r.flags.sensor_fault = flags_sensor;
    for b in 0..2 {
        let mut br = BearingResult::default();
        for (k, d) in br.defects.iter_mut().enumerate() {
            *d = DefectResult {
                score_db: 3.0 + k as f32 + f32::from(seq % 7) * 0.25,
                amplitude_1x_g: 0.001,
                harmonics: 1,
                detected: false,
                line: None,
            };
        }
        if b == 0 {
            // the envelope amplitude rises with the score (the amplitude
            // grading reads it): +30 dB over the quiet 10 mg at the end
            br.defects[0] = DefectResult {
                score_db: bpfo_db,
                amplitude_1x_g: 0.01 * 10f32.powf((bpfo_db - 5.0).max(0.0) / 20.0),
                harmonics: 4,
                detected: bpfo_db > 20.0,
                line: None,
            };
        }
        r.bearings.push(br).unwrap();
    }
    let mut buf = [0u8; 64];
    let n = encode(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

fn status_frame(node: u16, seq: u16) -> Vec<u8> {
    use wire::frame::status::{
        encode_status, BandSource, DownlinkResult, StatusReport, SurveyStatus,
    };
    let r = StatusReport {
        node_id: node,
        seq,
        provisioned: true,
        downlink_counter: u32::from(seq),
        last_downlink: DownlinkResult::ConfigApplied,
        refused_downlinks: 0,
        survey: SurveyStatus::Stored,
        band_source: BandSource::Survey,
        band_hz: [2519.842, 5039.684],
        band_kurtosis: 6.5,
        ..StatusReport::default()
    };
    let mut buf = [0u8; 32];
    let n = encode_status(&r, &mut buf).unwrap();
    buf[..n].to_vec()
}

/// The day starts at 2026-03-02T00:00:00Z (invented plant, simulated clock).
pub const DAY0_MS: i64 = 1_772_409_600_000;

fn json_msg(node: u16, claimed: u16, t_ms: i64, data: &str) -> Vec<u8> {
    format!(
        r#"{{"device":"a84041000000{node:04x}","node":{claimed},"port":2,"received":{t_ms},"data":"{data}","radio":{{"rssi":{},"snr":{}}}}}"#,
        -70 - i64::from(node % 40),
        7.5 - f64::from(node % 10)
    )
    .into_bytes()
}

/// `nodes` nodes x `per_node` slots (one frame per node per 10 minutes): every
/// 12th slot a status frame, else full or reduced; nodes 0..4 ramp their
/// BPFO score into danger; node 7 reports a sensor fault for a while; node 3
/// restarts (counter reset) at mid-day; every 97th report is left out (gap);
/// every 50th message is published twice; every 300th is corrupt (bad CRC,
/// not JSON, bad base64, or the wrong node id), each in its own way.
/// `raw`: topics `plant/NODE/raw` with the frame bytes as payload.
pub fn day_stream(nodes: u16, per_node: u16, raw: bool, topic_prefix: &str) -> Stream {
    let mut s = Stream {
        messages: Vec::new(),
        reports: BTreeSet::new(),
        statuses: BTreeSet::new(),
        bad: 0,
        duplicates: 0,
        gaps: 0,
        full: 0,
        reduced: 0,
    };
    let mut seq = vec![0u16; usize::from(nodes)];
    let mut sseq = vec![0u16; usize::from(nodes)];
    let mut count = 0usize;
    for slot in 0..per_node {
        for node in 0..nodes {
            count += 1;
            let t = DAY0_MS + i64::from(slot) * 600_000 + i64::from(node) * 1000;
            let topic = if raw {
                format!("{topic_prefix}/{node}/raw")
            } else {
                format!("{topic_prefix}/{node}/up")
            };
            if node == 3 && slot == per_node / 2 {
                seq[3] = 0; // the node restarted
            }
            let (frame, is_status) = if slot % 12 == 11 {
                let f = status_frame(node, sseq[usize::from(node)]);
                sseq[usize::from(node)] = sseq[usize::from(node)].wrapping_add(1);
                (f, true)
            } else {
                let q = seq[usize::from(node)];
                seq[usize::from(node)] = q.wrapping_add(1);
                if count % 97 == 0 {
                    s.gaps += 1;
                    continue; // lost on the radio link
                }
                let bpfo = if node < 5 {
                    5.0 + 30.0 * f32::from(slot) / f32::from(per_node.max(1))
                } else {
                    5.0 + f32::from(node % 3)
                };
                let sensor = node == 7 && (40..60).contains(&slot);
                let full = full_frame(node, q, bpfo, sensor);
                if (usize::from(slot) + usize::from(node)) % 3 == 0 {
                    let d = wire::frame::decode(&full).unwrap();
                    let mut buf = [0u8; 11];
                    encode_reduced(&d, &mut buf).unwrap();
                    s.reduced += 1;
                    (buf.to_vec(), false)
                } else {
                    s.full += 1;
                    (full, false)
                }
            };
            if count % 300 == 0 {
                s.bad += 1;
                let kind = (count / 300) % 4;
                let body = if raw {
                    let mut b = frame.clone();
                    let last = b.len() - 1;
                    b[last] ^= 0x5a;
                    b.extend_from_slice(&(count as u32).to_be_bytes()); // distinct
                    b
                } else {
                    match kind {
                        0 => {
                            let mut b = frame.clone();
                            b[4] ^= 0xff;
                            json_msg(node, node, t, &to_base64(&b))
                        }
                        1 => format!("garbage uplink {count}").into_bytes(),
                        2 => json_msg(node, node, t, "!!not base64!!"),
                        _ => json_msg(node, node.wrapping_add(1000), t, &to_base64(&frame)),
                    }
                };
                s.messages.push((topic, body));
                continue;
            }
            let body = if raw {
                frame.clone()
            } else {
                json_msg(node, node, t, &to_base64(&frame))
            };
            if is_status {
                s.statuses
                    .insert((node, sseq[usize::from(node)].wrapping_sub(1), frame));
            } else {
                s.reports
                    .insert((node, seq[usize::from(node)].wrapping_sub(1), frame));
            }
            s.messages.push((topic.clone(), body.clone()));
            if count % 50 == 0 {
                s.duplicates += 1;
                s.messages.push((topic, body));
            }
        }
    }
    s
}

/// What the publisher's event thread reports.
enum PubEv {
    /// A publish written to the network with this packet id.
    Out(u16),
    /// The broker acknowledged this packet id.
    Ack(u16),
    /// (Re)connected; whether the broker kept the session.
    Conn(bool),
}

/// Publishes every message at QoS 1, in chunks, as an at-least-once
/// publisher must: a persistent session (fixed client id, clean session
/// off), so that after a broker restart the client retransmits what the
/// broker had not acknowledged, and a chunk counts as done only when every
/// packet id written for it has its PubAck (acks are matched by id, never
/// counted). The earlier version of this helper used a clean session and
/// counted PubAcks: on a reconnect the MQTT client dropped its unacknowledged
/// and queued publishes (a new session has none to resume) while acks of the
/// first sending completed the count of the re-sent chunk, so messages the
/// publisher took as delivered never reached the broker (the
/// broker-restart "loss"). Should the broker come back without the session,
/// the chunk is sent again whole (repeats are the store's to absorb).
/// `on_progress(i)` runs after chunk i (e.g. to restart a server
/// mid-stream). Returns the publish wall times (ms since the epoch) of each
/// message's last sending.
pub fn publish(
    port: u16,
    msgs: &[(String, Vec<u8>)],
    chunk: usize,
    mut on_progress: impl FnMut(usize),
) -> Vec<i64> {
    use rumqttc::{Client, Event, MqttOptions, Outgoing, Packet, QoS};
    let mut o = MqttOptions::new(
        format!("envord-test-pub-{port}-{}", std::process::id()),
        "127.0.0.1",
        port,
    );
    o.set_keep_alive(Duration::from_secs(10))
        .set_clean_session(false)
        .set_inflight(1000);
    let (client, mut conn) = Client::new(o, 2000);
    let (tx, rx) = mpsc::channel::<PubEv>();
    std::thread::spawn(move || {
        for ev in conn.iter() {
            let m = match ev {
                Ok(Event::Outgoing(Outgoing::Publish(pkid))) => PubEv::Out(pkid),
                Ok(Event::Incoming(Packet::PubAck(a))) => PubEv::Ack(a.pkid),
                Ok(Event::Incoming(Packet::ConnAck(c))) => PubEv::Conn(c.session_present),
                Ok(_) => continue,
                Err(_) => {
                    std::thread::sleep(Duration::from_millis(200));
                    continue;
                }
            };
            if tx.send(m).is_err() {
                break;
            }
        }
    });
    let t0 = Instant::now();
    loop {
        match rx.recv_timeout(Duration::from_secs(20)) {
            Ok(PubEv::Conn(_)) => break,
            Ok(_) => {}
            Err(_) => panic!("publisher could not connect to the broker on 127.0.0.1:{port}"),
        }
    }
    let mut times = vec![0i64; msgs.len()];
    let deadline = t0 + Duration::from_secs(600);
    let mut outstanding: HashSet<u16> = HashSet::new();
    for (ci, part) in msgs.chunks(chunk).enumerate() {
        'resend: loop {
            assert!(
                Instant::now() < deadline,
                "publishing took longer than 600 s"
            );
            let base = ci * chunk;
            for (i, (topic, body)) in part.iter().enumerate() {
                times[base + i] = now_ms();
                // try_publish: a full request queue must not block past the deadline
                while client
                    .try_publish(topic.as_str(), QoS::AtLeastOnce, false, body.clone())
                    .is_err()
                {
                    assert!(
                        Instant::now() < deadline,
                        "publishing took longer than 600 s"
                    );
                    std::thread::sleep(Duration::from_millis(2));
                }
            }
            // written = publishes of this chunk given a fresh packet id
            let mut written = 0usize;
            while written < part.len() || !outstanding.is_empty() {
                match rx.recv_timeout(Duration::from_secs(30)) {
                    Ok(PubEv::Out(p)) => {
                        // a retransmission reuses its outstanding id
                        if outstanding.insert(p) {
                            written += 1;
                        }
                    }
                    Ok(PubEv::Ack(p)) => {
                        outstanding.remove(&p);
                    }
                    Ok(PubEv::Conn(true)) => {} // the client retransmits
                    Ok(PubEv::Conn(false)) => {
                        // the broker lost the session: the client dropped its queue
                        outstanding.clear();
                        continue 'resend;
                    }
                    Err(_) => panic!(
                        "chunk {ci}: {written} of {} written, {} unacknowledged after 30 s of silence",
                        part.len(),
                        outstanding.len()
                    ),
                }
            }
            break;
        }
        on_progress(ci);
    }
    let _ = client.disconnect();
    times
}

pub fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_millis() as i64
}

/// A running `envord gateway serve`.
pub struct Gateway {
    pub child: Child,
    pub config: PathBuf,
    pub log: PathBuf,
}

pub struct GwSpec<'a> {
    pub port: u16,
    pub protocol: &'a str,
    pub client_id: &'a str,
    pub topics: &'a [&'a str],
    pub store: &'a str,
    pub raw: bool,
    pub alarm_topic: Option<&'a str>,
    pub extra: &'a str,
    /// Lines added to the [alarms] table.
    pub alarms_extra: &'a str,
}

/// The gateway config of a spec (the tests' common shape).
pub fn config_text(g: &GwSpec<'_>) -> String {
    let topics: Vec<String> = g.topics.iter().map(|t| format!("{t:?}")).collect();
    let shape = if g.raw {
        "shape = \"raw\"\nnode_topic_level = 1\n"
    } else {
        ""
    };
    let alarm = g
        .alarm_topic
        .map(|t| format!("topic = {t:?}\n"))
        .unwrap_or_default();
    format!(
        "[broker]\nhost = \"127.0.0.1\"\nport = {}\nprotocol = {:?}\nclient_id = {:?}\n\n[uplink]\ntopics = [{}]\n{shape}\n\
         [store]\nurl_env = \"ENVORD_TEST_GW_STORE\"\n\n[alarms]\n{alarm}{}\n[log]\nformat = \"json\"\nhealth_interval_s = 2\n{}",
        g.port,
        g.protocol,
        g.client_id,
        topics.join(", "),
        g.alarms_extra,
        g.extra
    )
}

impl Gateway {
    pub fn start(dir: &Path, name: &str, g: &GwSpec<'_>) -> Gateway {
        let mut gw = Self::spawn(dir, name, &config_text(g), g.store);
        gw.wait_connected();
        gw
    }

    /// Writes `text` as the config (mode 0600) and starts the gateway on
    /// it, without waiting for anything.
    pub fn spawn(dir: &Path, name: &str, text: &str, store: &str) -> Gateway {
        let config = dir.join(format!("{name}.toml"));
        {
            use std::os::unix::fs::OpenOptionsExt;
            let mut f = std::fs::OpenOptions::new()
                .create(true)
                .write(true)
                .truncate(true)
                .mode(0o600)
                .open(&config)
                .unwrap();
            f.write_all(text.as_bytes()).unwrap();
        }
        let log = dir.join(format!("{name}.log"));
        Gateway {
            child: spawn_gw(&config, &log, store),
            config,
            log,
        }
    }

    /// Waits (bounded) for the gateway to exit on its own; its exit code and log.
    pub fn wait_exit(mut self, secs: u64) -> (Option<i32>, String) {
        let t0 = Instant::now();
        while t0.elapsed() < Duration::from_secs(secs) {
            if let Ok(Some(st)) = self.child.try_wait() {
                return (st.code(), self.log_text());
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        panic!(
            "gateway still running {secs} s after start:\n{}",
            self.log_text()
        );
    }

    pub fn wait_connected(&mut self) {
        let t0 = Instant::now();
        while t0.elapsed() < Duration::from_secs(30) {
            if self.log_text().contains("\"broker connected\"") {
                // let the subscription settle
                std::thread::sleep(Duration::from_millis(300));
                return;
            }
            if let Ok(Some(st)) = self.child.try_wait() {
                panic!(
                    "gateway exited ({st}) before connecting:\n{}",
                    self.log_text()
                );
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        panic!("gateway did not connect within 30 s:\n{}", self.log_text());
    }

    pub fn log_text(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }

    /// SIGTERM and wait for a clean exit (the drain includes one last
    /// grading of the nodes with new reports: as long as a `gateway status`
    /// of them, longer in this unoptimised test build).
    pub fn stop(mut self) -> String {
        sig(self.child.id(), "TERM");
        let t0 = Instant::now();
        loop {
            if let Ok(Some(st)) = self.child.try_wait() {
                println!(
                    "gateway exited {:.1} s after SIGTERM",
                    t0.elapsed().as_secs_f64()
                );
                let log = self.log_text();
                assert!(
                    st.success(),
                    "gateway exited with {st} after SIGTERM:\n{log}"
                );
                return log;
            }
            assert!(
                t0.elapsed() < Duration::from_secs(90),
                "gateway did not exit within 90 s of SIGTERM"
            );
            std::thread::sleep(Duration::from_millis(50));
        }
    }

    /// SIGKILL (no drain) and restart with the same config.
    pub fn kill_and_restart(&mut self, store: &str) {
        let _ = self.child.kill();
        let _ = self.child.wait();
        self.child = spawn_gw(&self.config, &self.log, store);
        self.wait_connected();
    }
}

fn spawn_gw(config: &Path, log: &Path, store: &str) -> Child {
    let logf = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(log)
        .unwrap();
    Command::new(BIN)
        .args(["gateway", "serve", "--config"])
        .arg(config)
        .env("ENVORD_TEST_GW_STORE", store)
        .stdout(Stdio::null())
        .stderr(logf)
        .spawn()
        .unwrap()
}

impl Drop for Gateway {
    fn drop(&mut self) {
        if let Some(keep) = std::env::var_os("ENVORD_TEST_KEEP_LOGS") {
            if let Some(name) = self.log.file_name() {
                let _ = std::fs::copy(&self.log, Path::new(&keep).join(name));
            }
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Every stored frame (reports, statuses) and the reject count, read through the project's store.
/// Stored frames: (node, seq, payload).
pub type Frames = Vec<(u16, u16, Vec<u8>)>;

pub fn stored(url: &str) -> (Frames, Frames, i64) {
    use host_sim::gateway::{db, store};
    let mut d = db::open(url).unwrap();
    let d = d.as_mut();
    let reports = store::arrivals(d).unwrap();
    let rows = d
        .query(
            "SELECT node_id, seq, payload FROM node_status ORDER BY id",
            &[],
        )
        .unwrap();
    let statuses = rows
        .iter()
        .map(|r| {
            (
                r[0].int("n").unwrap() as u16,
                r[1].int("s").unwrap() as u16,
                r[2].blob("p").unwrap(),
            )
        })
        .collect();
    let rejects = store::count(d, "rejects").unwrap();
    (reports, statuses, rejects)
}

/// Waits until the store holds `n` reports + statuses + rejects (bounded), then settles.
pub fn wait_stored(url: &str, want: usize, secs: u64) {
    use host_sim::gateway::{db, store};
    let t0 = Instant::now();
    let mut d = db::open(url).unwrap();
    let mut last = 0usize;
    loop {
        let n = ["reports", "node_status", "rejects"]
            .iter()
            .map(|t| store::count(d.as_mut(), t).unwrap_or(0) as usize)
            .sum::<usize>();
        if n >= want {
            std::thread::sleep(Duration::from_millis(500));
            return;
        }
        if t0.elapsed() > Duration::from_secs(secs) {
            panic!("store holds {n} of {want} rows after {secs} s (last {last})");
        }
        last = n;
        std::thread::sleep(Duration::from_millis(200));
    }
}

/// Checks the store against the published set: every valid frame exactly
/// once, every bad message one reject. Returns (reports, statuses, rejects).
pub fn check_exact(url: &str, s: &Stream) -> (usize, usize, i64) {
    let (reports, statuses, rejects) = stored(url);
    let rset: HashSet<_> = reports.iter().cloned().collect();
    assert_eq!(rset.len(), reports.len(), "a report is stored twice");
    let sset: HashSet<_> = statuses.iter().cloned().collect();
    assert_eq!(sset.len(), statuses.len(), "a status frame is stored twice");
    let want_r: HashSet<_> = s.reports.iter().cloned().collect();
    let want_s: HashSet<_> = s.statuses.iter().cloned().collect();
    let lost: Vec<_> = want_r.difference(&rset).take(3).collect();
    assert!(
        lost.is_empty(),
        "{} report(s) lost, e.g. {lost:?}",
        want_r.difference(&rset).count()
    );
    assert_eq!(rset, want_r, "stored reports differ from the published set");
    assert_eq!(
        sset, want_s,
        "stored status frames differ from the published set"
    );
    assert_eq!(rejects, s.bad as i64, "rejects: one per bad message");
    (reports.len(), statuses.len(), rejects)
}

/// Publishes at QoS 1 at `rate` messages/s (0: as fast as the broker takes
/// them), each JSON message's `"received"` set to the time it is handed to
/// the client (for publish-to-commit latency); waits for every PubAck.
/// Returns how many were published.
pub fn publish_paced(port: u16, msgs: &[(String, Vec<u8>)], rate: u32) -> usize {
    use rumqttc::{Client, Event, MqttOptions, Packet, QoS};
    let mut o = MqttOptions::new(format!("envord-bench-pub-{port}"), "127.0.0.1", port);
    o.set_keep_alive(Duration::from_secs(10))
        .set_clean_session(true)
        .set_inflight(1000);
    let (client, mut conn) = Client::new(o, 2000);
    let (tx, rx) = mpsc::channel::<bool>();
    std::thread::spawn(move || {
        for ev in conn.iter() {
            match ev {
                Ok(Event::Incoming(Packet::PubAck(_))) => {
                    if tx.send(true).is_err() {
                        break;
                    }
                }
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    if tx.send(false).is_err() {
                        break;
                    }
                }
                Ok(_) => {}
                Err(_) => break,
            }
        }
    });
    assert_eq!(
        rx.recv_timeout(Duration::from_secs(20)),
        Ok(false),
        "publisher: no connection"
    );
    let t0 = Instant::now();
    let mut acked = 0usize;
    for (i, (topic, body)) in msgs.iter().enumerate() {
        if rate > 0 {
            let due = t0 + Duration::from_secs_f64(i as f64 / f64::from(rate));
            let now = Instant::now();
            if due > now {
                std::thread::sleep(due - now);
            }
        }
        let text = String::from_utf8_lossy(body);
        let body = match text.find("\"received\":") {
            Some(i) => {
                let start = i + "\"received\":".len();
                let end = start + text[start..].find(',').unwrap_or(0);
                format!("{}{}{}", &text[..start], now_ms(), &text[end..]).into_bytes()
            }
            None => body.clone(),
        };
        client
            .publish(topic.as_str(), QoS::AtLeastOnce, false, body)
            .unwrap();
        while let Ok(a) = rx.try_recv() {
            acked += usize::from(a);
        }
    }
    while acked < msgs.len() {
        match rx.recv_timeout(Duration::from_secs(30)) {
            Ok(a) => acked += usize::from(a),
            Err(_) => panic!("bench publisher: no PubAck within 30 s"),
        }
    }
    let _ = client.disconnect();
    msgs.len()
}
