//! `envord gateway serve` against real servers (Mosquitto, PostgreSQL),
//! started by .ci/services.sh. Every test counts what it published against
//! what the store holds: each valid frame exactly once, each bad message one
//! reject. Bounded: at most 500 nodes x one day (72,000 slots) per test, every
//! wait has a limit; only 127.0.0.1.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "serve_common/mod.rs"]
mod common;

use common::*;
use std::process::Command;
use std::time::{Duration, Instant};

fn sqlite_url(dir: &std::path::Path, name: &str) -> String {
    dir.join(format!("{name}.db")).display().to_string()
}

fn summary(name: &str, s: &Stream, got: (usize, usize, i64), secs: f64) {
    println!(
        "{name}: published {} messages ({} full, {} reduced, {} status, {} duplicates, {} bad, {} gaps); stored {} reports + {} status, {} rejects; {secs:.1} s",
        s.messages.len(),
        s.full,
        s.reduced,
        s.statuses.len(),
        s.duplicates,
        s.bad,
        s.gaps,
        got.0,
        got.1,
        got.2
    );
}

fn want_rows(s: &Stream) -> usize {
    s.reports.len() + s.statuses.len() + s.bad
}

fn alarm_listener(port: u16, topic: &str) -> std::sync::mpsc::Receiver<serde_json::Value> {
    use rumqttc::{Client, Event, MqttOptions, Packet, QoS};
    let mut o = MqttOptions::new(format!("envord-test-alarms-{port}"), "127.0.0.1", port);
    o.set_keep_alive(Duration::from_secs(10));
    let (client, mut conn) = Client::new(o, 100);
    client.subscribe(topic, QoS::AtLeastOnce).unwrap();
    let (tx, rx) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        let _c = client;
        for ev in conn.iter() {
            match ev {
                Ok(Event::Incoming(Packet::Publish(p))) => {
                    if let Ok(v) = serde_json::from_slice(&p.payload) {
                        if tx.send(v).is_err() {
                            break;
                        }
                    }
                }
                Ok(_) => {}
                Err(_) => std::thread::sleep(Duration::from_millis(200)),
            }
        }
    });
    std::thread::sleep(Duration::from_millis(300));
    rx
}

/// 500 nodes x one day into SQLite over MQTT 5: exactly once, rejects,
/// alarm changes in the table and on the alarm topic, clean SIGTERM exit.
#[test]
fn day_replay_500_nodes_sqlite_mqtt5() {
    let dir = tempfile::tempdir().unwrap();
    let broker = Broker::start(dir.path());
    let store = sqlite_url(dir.path(), "day");
    let alarms = alarm_listener(broker.port, "plant/alarms");
    let gw = Gateway::start(
        dir.path(),
        "gw",
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-day",
            topics: &["plant/+/up"],
            store: &store,
            raw: false,
            alarm_topic: Some("plant/alarms"),
            extra: "",
            alarms_extra: "",
        },
    );
    let s = day_stream(500, 144, false, "plant");
    assert_eq!(s.messages.len(), 72_000 - s.gaps + s.duplicates);
    let t0 = Instant::now();
    publish(broker.port, &s.messages, 2000, |_| {});
    wait_stored(&store, want_rows(&s), 180);
    let got = check_exact(&store, &s);
    summary(
        "day replay, SQLite, MQTT 5",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    let log = gw.stop(); // evaluates the alarms of what was committed last
    let bytes = std::fs::metadata(&store).map(|m| m.len()).unwrap_or(0);
    println!(
        "SQLite store after the day: {bytes} bytes ({:.0} bytes per stored frame)",
        bytes as f64 / (got.0 + got.1) as f64
    );
    assert!(log.contains("\"gateway serve stopped\""), "{log}");
    // Alarm changes: the ramping nodes 0..4 reach danger on bearing 0, node 7's sensor fault comes and goes.
    let mut d = host_sim::gateway::db::open(&store).unwrap();
    let rows = d
        .query(
            "SELECT node_id, bearing, event, state_to FROM alarm_events ORDER BY id",
            &[],
        )
        .unwrap();
    let has = |node: i64, ev: &str, to: &str| {
        rows.iter().any(|r| {
            r[0].int("n").unwrap() == node
                && r[2].text("e").unwrap() == ev
                && r[3].text("t").unwrap() == to
        })
    };
    for n in 0..5 {
        assert!(
            has(n, "enter", "danger"),
            "node {n} did not reach danger: {rows:?}"
        );
    }
    // The alarms agree with `gateway status`: every line it shows in
    // ALERT/DANGER has that state as its last recorded change, and no other
    // line's last recorded change is into an alarm state.
    let status: serde_json::Value =
        serde_json::from_str(&envord(&["gateway", "status", "--json"], &store)).unwrap();
    let ev = d
        .query(
            "SELECT node_id, bearing, kind, state_to FROM alarm_events WHERE report_id IS NOT NULL ORDER BY id",
            &[],
        )
        .unwrap();
    let mut last: std::collections::HashMap<(i64, String, String), String> = Default::default();
    for r in &ev {
        last.insert(
            (
                r[0].int("n").unwrap(),
                r[1].text("b").unwrap(),
                r[2].text("k").unwrap(),
            ),
            r[3].text("t").unwrap(),
        );
    }
    let mut in_alarm = 0;
    for d in status["defects"].as_array().unwrap() {
        let key = (
            d["node"].as_i64().unwrap(),
            format!("node {} bearing {}", d["node"], d["bearing"]),
            d["kind"].as_str().unwrap().to_string(),
        );
        let st = d["state"].as_str().unwrap();
        let rec = last.get(&key).map(String::as_str);
        if st == "alert" || st == "danger" {
            in_alarm += 1;
            assert_eq!(
                rec,
                Some(st),
                "line {key:?}: status {st}, last alarm event {rec:?}"
            );
        } else {
            assert!(
                !matches!(rec, Some("alert" | "danger")),
                "line {key:?}: status {st}, last alarm event {rec:?}"
            );
        }
    }
    assert!(in_alarm >= 5, "{in_alarm} lines in alarm");
    println!("status and alarm events agree on {in_alarm} line(s) in ALERT/DANGER");
    assert!(
        has(7, "sensor_fault", "on") && has(7, "sensor_fault", "off"),
        "{rows:?}"
    );
    assert!(!has(8, "sensor_fault", "on"));
    std::thread::sleep(Duration::from_millis(500)); // the last ones in flight
    let published: Vec<serde_json::Value> = alarms.try_iter().collect();
    assert_eq!(
        published.len(),
        rows.len(),
        "every recorded alarm change published once"
    );
    println!(
        "alarm events: {} recorded, {} received on plant/alarms",
        rows.len(),
        published.len()
    );
}

/// The broker restarted twice mid-stream (MQTT 3.1.1, PostgreSQL store).
#[test]
fn broker_restart_mid_stream_postgres_mqtt311() {
    let dir = tempfile::tempdir().unwrap();
    let mut broker = Broker::start(dir.path());
    let store = pg_database("envord_broker_restart");
    let gw = Gateway::start(
        dir.path(),
        "gw",
        &GwSpec {
            port: broker.port,
            protocol: "3.1.1",
            client_id: "gw-broker-restart",
            topics: &["plant/+/up"],
            store: &store,
            raw: false,
            alarm_topic: None,
            extra: "",
            alarms_extra: "",
        },
    );
    let s = day_stream(100, 144, false, "plant");
    let t0 = Instant::now();
    let chunks = s.messages.len().div_ceil(1000);
    publish(broker.port, &s.messages, 1000, |i| {
        if i == chunks / 3 || i == 2 * chunks / 3 {
            // each restart seen by the gateway: wait for its reconnect
            let before = gw.log_text().matches("\"broker connected\"").count();
            broker.restart();
            let t = Instant::now();
            while gw.log_text().matches("\"broker connected\"").count() <= before {
                assert!(
                    t.elapsed() < Duration::from_secs(30),
                    "gateway did not reconnect within 30 s"
                );
                std::thread::sleep(Duration::from_millis(50));
            }
        }
    });
    wait_stored(&store, want_rows(&s), 180);
    let got = check_exact(&store, &s);
    summary(
        "broker restarted twice, PostgreSQL, MQTT 3.1.1",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    let log = gw.stop();
    assert!(
        log.matches("\"broker connected\"").count() >= 3,
        "reconnects not logged:\n{log}"
    );
}

/// The database restarted mid-stream: batches stay unacknowledged until
/// the store is back, nothing lost or doubled.
#[test]
fn database_restart_mid_stream() {
    let dir = tempfile::tempdir().unwrap();
    let broker = Broker::start(dir.path());
    let store = pg_database("envord_db_restart");
    let gw = Gateway::start(
        dir.path(),
        "gw",
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-db-restart",
            topics: &["plant/+/up"],
            store: &store,
            raw: false,
            alarm_topic: None,
            extra: "",
            alarms_extra: "",
        },
    );
    let s = day_stream(100, 144, false, "plant");
    let t0 = Instant::now();
    let chunks = s.messages.len().div_ceil(1000);
    publish(broker.port, &s.messages, 1000, |i| {
        if i == chunks / 2 {
            pg_restart();
        }
    });
    wait_stored(&store, want_rows(&s), 180);
    let got = check_exact(&store, &s);
    summary(
        "database restarted, PostgreSQL, MQTT 5",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    let log = gw.stop();
    assert!(
        log.contains("store write failed")
            || log.contains("store reconnected")
            || log.contains("alarm"),
        "the restart was not seen by the gateway (restart too early or late?):\n{}",
        &log[log.len().saturating_sub(3000)..]
    );
}

/// A gateway killed with SIGKILL mid-stream and started again (SQLite).
#[test]
fn sigkill_mid_stream_and_restart() {
    let dir = tempfile::tempdir().unwrap();
    let broker = Broker::start(dir.path());
    let store = sqlite_url(dir.path(), "kill");
    let mut gw = Gateway::start(
        dir.path(),
        "gw",
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-kill",
            topics: &["plant/+/raw"],
            store: &store,
            raw: true,
            alarm_topic: None,
            extra: "",
            alarms_extra: "",
        },
    );
    let s = day_stream(100, 144, true, "plant");
    let t0 = Instant::now();
    let chunks = s.messages.len().div_ceil(1000);
    publish(broker.port, &s.messages, 1000, |i| {
        if i == chunks / 3 || i == 2 * chunks / 3 {
            gw.kill_and_restart(&store);
        }
    });
    wait_stored(&store, want_rows(&s), 180);
    let got = check_exact(&store, &s);
    summary(
        "gateway SIGKILLed twice, SQLite, MQTT 5",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    gw.stop();
}

/// Two instances on one MQTT 5 shared subscription and one PostgreSQL;
/// one of them SIGKILLed and restarted mid-stream.
#[test]
fn two_instances_shared_subscription() {
    let dir = tempfile::tempdir().unwrap();
    let broker = Broker::start(dir.path());
    let store = pg_database("envord_shared");
    let spec = |id: &'static str| GwSpec {
        port: broker.port,
        protocol: "5",
        client_id: id,
        topics: &["$share/envord/plant/+/up"],
        store: "",
        raw: false,
        alarm_topic: None,
        extra: "",
        alarms_extra: "",
    };
    let mut a = spec("gw-a");
    a.store = &store;
    let mut b = spec("gw-b");
    b.store = &store;
    let mut ga = Gateway::start(dir.path(), "gw-a", &a);
    let gb = Gateway::start(dir.path(), "gw-b", &b);
    let s = day_stream(100, 144, false, "plant");
    let t0 = Instant::now();
    let chunks = s.messages.len().div_ceil(1000);
    publish(broker.port, &s.messages, 1000, |i| {
        if i == chunks / 2 {
            ga.kill_and_restart(&store);
        }
    });
    wait_stored(&store, want_rows(&s), 180);
    let got = check_exact(&store, &s);
    summary(
        "two instances, $share, PostgreSQL",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    let la = ga.stop();
    let lb = gb.stop();
    let stored_by = |log: &str| {
        log.lines()
            .filter(|l| l.contains("\"gateway serve stopped\""))
            .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
            .filter_map(|v| v["stored"].as_u64())
            .sum::<u64>()
    };
    let (sa, sb) = (stored_by(&la), stored_by(&lb));
    println!("instance a stored {sa} (after its restart), instance b stored {sb}");
    assert!(
        sb > 0 && sa > 0,
        "both instances must take part: a {sa}, b {sb}"
    );
}

fn envord(args: &[&str], db: &str) -> String {
    let out = Command::new(BIN)
        .args(args)
        .env("ENVORD_DB", db)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

/// The same stream into SQLite and PostgreSQL (two instances, each its own
/// subscription): identical `status` and `trend` output (JSON shape: the
/// receive times are the messages', not each subscriber's clock).
#[test]
fn same_stream_sqlite_and_postgres_same_views() {
    let dir = tempfile::tempdir().unwrap();
    let broker = Broker::start(dir.path());
    let lite = sqlite_url(dir.path(), "same");
    let pg = pg_database("envord_same");
    let spec = |id: &'static str, store: &'static str| GwSpec {
        port: broker.port,
        protocol: "5",
        client_id: id,
        topics: &["plant/+/up"],
        store,
        raw: false,
        alarm_topic: None,
        extra: "",
        alarms_extra: "",
    };
    let lite: &'static str = Box::leak(lite.into_boxed_str());
    let pg: &'static str = Box::leak(pg.into_boxed_str());
    let g1 = Gateway::start(dir.path(), "gw-lite", &spec("gw-lite", lite));
    let g2 = Gateway::start(dir.path(), "gw-pg", &spec("gw-pg", pg));
    let s = day_stream(100, 144, false, "plant");
    let t0 = Instant::now();
    publish(broker.port, &s.messages, 2000, |_| {});
    wait_stored(lite, want_rows(&s), 180);
    wait_stored(pg, want_rows(&s), 180);
    let got = check_exact(lite, &s);
    check_exact(pg, &s);
    summary(
        "raw shape into SQLite and PostgreSQL",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    g1.stop();
    g2.stop();
    {
        let mut c = postgres::Client::connect(pg, postgres::NoTls).unwrap();
        let size: i64 = c
            .query_one("SELECT pg_database_size(current_database())", &[])
            .unwrap()
            .get(0);
        let lbytes = std::fs::metadata(lite).map(|m| m.len()).unwrap_or(0);
        println!("store size after {} frames: SQLite {lbytes} bytes, PostgreSQL database {size} bytes (incl. its catalog)", got.0 + got.1);
    }
    // Views (arrival order is the broker's, the same for both subscribers).
    let st_l = envord(&["gateway", "status"], lite);
    let st_p = envord(&["gateway", "status"], pg);
    assert_eq!(st_l, st_p, "status differs between SQLite and PostgreSQL");
    assert!(st_l.contains("DANGER"), "{st_l}");
    let js_l = envord(&["gateway", "status", "--json"], lite);
    let js_p = envord(&["gateway", "status", "--json"], pg);
    assert_eq!(js_l, js_p);
    for node in ["0", "3", "7", "99"] {
        let a = envord(
            &["gateway", "trend", "--node", node, "--bearing", "0"],
            lite,
        );
        let b = envord(&["gateway", "trend", "--node", node, "--bearing", "0"], pg);
        assert_eq!(a, b, "trend of node {node} differs");
    }
    // baseline works on both
    for db in [lite, pg] {
        envord(
            &[
                "gateway",
                "baseline",
                "--node",
                "0",
                "--bearing",
                "0",
                "--defect",
                "bpfo",
                "--amplitude-g",
                "0.02",
            ],
            db,
        );
    }
    assert_eq!(
        envord(&["gateway", "status"], lite),
        envord(&["gateway", "status"], pg)
    );
    println!(
        "status ({} lines) and trend of 4 nodes identical on both backends",
        st_l.lines().count()
    );
}

/// `gateway import` into PostgreSQL takes the same path as the service.
#[test]
fn import_into_postgres_matches_sqlite() {
    let dir = tempfile::tempdir().unwrap();
    let s = day_stream(20, 144, true, "plant");
    let lines: String = s
        .messages
        .iter()
        .map(|(_, b)| b.iter().map(|x| format!("{x:02x}")).collect::<String>() + "\n")
        .collect();
    let f = dir.path().join("day.txt");
    std::fs::write(&f, lines).unwrap();
    let lite = sqlite_url(dir.path(), "imp");
    let pg = pg_database("envord_import");
    let fp = f.display().to_string();
    let a = envord(&["gateway", "import", &fp], &lite);
    let b = envord(&["gateway", "import", &fp], &pg);
    assert_eq!(a, b);
    let again = envord(&["gateway", "import", &fp], &pg);
    assert!(again.starts_with("imported 0 new frame(s)"), "{again}");
    assert_eq!(
        envord(&["gateway", "status"], &lite),
        envord(&["gateway", "status"], &pg)
    );
}

/// Config refused when others can read it; no credentials in the logs.
#[test]
fn config_permissions_and_no_credentials_in_logs() {
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    let cfg = dir.path().join("open.toml");
    std::fs::write(
        &cfg,
        "[broker]\nhost = \"127.0.0.1\"\nclient_id = \"x\"\n[uplink]\ntopics = [\"a\"]\n",
    )
    .unwrap();
    std::fs::set_permissions(&cfg, std::fs::Permissions::from_mode(0o644)).unwrap();
    let out = Command::new(BIN)
        .args(["gateway", "serve", "--config"])
        .arg(&cfg)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("chmod 600") && err.contains("open.toml"),
        "{err}"
    );

    let broker = Broker::start(dir.path());
    let pg = pg_database("envord_secret").replace("envord@", "envord:sekrit-db-pw@");
    let gw = Gateway::start(
        dir.path(),
        "gw",
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-secret",
            topics: &["plant/+/up"],
            store: &pg,
            raw: false,
            alarm_topic: None,
            extra: "",
            alarms_extra: "",
        },
    );
    let s = day_stream(5, 12, false, "plant");
    publish(broker.port, &s.messages, 100, |_| {});
    wait_stored(&pg, want_rows(&s), 30);
    let log = gw.stop();
    assert!(
        !log.contains("sekrit"),
        "a credential reached the log:\n{log}"
    );
    assert!(log.contains("envord:***@"), "{log}");
}

/// The broker over TLS with a login: a CA and a server certificate made
/// for the test (openssl), Mosquitto's TLS listener on 127.0.0.1 taking
/// only our user and password. The frames are stored exactly; a CA that
/// did not sign the broker's certificate, and a wrong password, each stop
/// the gateway at start with exit 2 and a message naming the key to fix.
#[test]
fn tls_broker_with_login() {
    let dir = tempfile::tempdir().unwrap();
    let (broker, tls) = Broker::start_tls(dir.path(), "envord-gw", "s3cret-test-pass");
    let store = sqlite_url(dir.path(), "tls");
    let spec = GwSpec {
        port: tls.port,
        protocol: "5",
        client_id: "gw-tls",
        topics: &["plant/+/up"],
        store: &store,
        raw: false,
        alarm_topic: None,
        extra: "",
        alarms_extra: "",
    };
    // the broker's keys come first in the common config, then [uplink]
    let config = |ca: &std::path::Path, password: &str| {
        config_text(&spec).replacen(
            "\n\n[uplink]",
            &format!(
                "\nusername = \"envord-gw\"\npassword = {password:?}\n\n[broker.tls]\nca_file = {:?}\n\n[uplink]",
                ca.display().to_string()
            ),
            1,
        )
    };
    let mut gw = Gateway::spawn(
        dir.path(),
        "gw-tls",
        &config(&tls.ca, "s3cret-test-pass"),
        &store,
    );
    gw.wait_connected();
    let s = day_stream(20, 144, false, "plant");
    let t0 = Instant::now();
    publish(broker.port, &s.messages, 2000, |_| {});
    wait_stored(&store, want_rows(&s), 120);
    let got = check_exact(&store, &s);
    summary(
        "TLS broker with login, SQLite, MQTT 5",
        &s,
        got,
        t0.elapsed().as_secs_f64(),
    );
    let log = gw.stop();
    assert!(log.contains("\"tls\":true"), "{log}");
    assert!(
        !log.contains("s3cret-test-pass"),
        "the broker password is in the log"
    );

    // a CA that did not sign the broker's certificate
    let wrong_ca = Gateway::spawn(
        dir.path(),
        "gw-wrong-ca",
        &config(&tls.other_ca, "s3cret-test-pass"),
        &sqlite_url(dir.path(), "wrong-ca"),
    );
    let (code, log) = wrong_ca.wait_exit(30);
    println!(
        "wrong CA: exit {code:?}: {}",
        log.lines().last().unwrap_or("")
    );
    assert_eq!(code, Some(2), "{log}");
    assert!(
        log.contains("broker.tls.ca_file") && log.contains("TLS connection to the broker"),
        "{log}"
    );
    // a wrong password
    let wrong_pw = Gateway::spawn(
        dir.path(),
        "gw-wrong-pw",
        &config(&tls.ca, "not-the-password"),
        &sqlite_url(dir.path(), "wrong-pw"),
    );
    let (code, log) = wrong_pw.wait_exit(30);
    println!(
        "wrong password: exit {code:?}: {}",
        log.lines().last().unwrap_or("")
    );
    assert_eq!(code, Some(2), "{log}");
    assert!(
        log.contains("refused the login") && log.contains("broker.password"),
        "{log}"
    );
    assert!(
        !log.contains("not-the-password"),
        "the password is in the log"
    );
}
