//! Gateway ingest benchmark (figures only, nothing asserted): a fleet of 500
//! nodes, one frame per node per 10 minutes, published through a real
//! Mosquitto into `gateway serve` with SQLite and with PostgreSQL, one
//! simulated day per phase:
//!
//! * rate 0: as fast as the broker takes them. Frames/s = rows committed
//!   over the time from the first publish until the store holds the day's
//!   rows (the capacity; its latency is the backlog's, not the gateway's);
//! * rate R (e.g. 2000, 5000): the publisher paced at R messages/s, each
//!   message stamped with its publish time, so publish-to-commit latency
//!   p50/p99 (the gateway's health figures: commit time minus that stamp,
//!   over the phase's last 65,536 frames) is the gateway's own.
//!
//! Every phase ends when the store holds the rows its messages must give
//! (distinct valid frames + distinct bad messages so far), never on a
//! pause; a phase that does not get there within its limit says so. The
//! service's RSS is printed after each phase, with its high-water mark.
//! `ENVORD_BENCH_RATES` (default "0,2000,5000") sets the phases.
//! Run through `.ci/services.sh bench`.

#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    missing_docs
)] // a benchmark program, not library code

#[path = "../tests/serve_common/mod.rs"]
mod common;

use common::*;
use std::collections::HashSet;
use std::time::{Duration, Instant};

/// The machine's load beside every figure (other work shares the cores).
fn load() -> String {
    let l = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    let f: Vec<&str> = l.split_whitespace().take(3).collect();
    let cores = std::thread::available_parallelism().map_or(0, usize::from);
    format!("load {} on {cores} cores", f.join("/"))
}

/// (VmRSS, VmHWM) of a process, KiB.
fn rss_kib(pid: u32) -> (u64, u64) {
    let s = std::fs::read_to_string(format!("/proc/{pid}/status")).unwrap_or_default();
    let field = |name: &str| {
        s.lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse().ok()))
            .unwrap_or(0)
    };
    (field("VmRSS:"), field("VmHWM:"))
}

/// Reports + status frames + rejects stored (counted by the store).
fn rows_now(d: &mut dyn host_sim::gateway::db::Db) -> usize {
    use host_sim::gateway::store;
    ["reports", "node_status", "rejects"]
        .iter()
        .map(|t| store::count(d, t).unwrap_or(0) as usize)
        .sum()
}

/// The gateway's health JSON from its loopback endpoint.
fn health(addr: &str) -> serde_json::Value {
    use std::io::{Read, Write};
    let Ok(mut s) = std::net::TcpStream::connect(addr) else {
        return serde_json::Value::Null;
    };
    let _ = s.set_read_timeout(Some(Duration::from_secs(5)));
    let _ = s.write_all(b"GET / HTTP/1.1\r\nHost: x\r\n\r\n");
    let mut text = String::new();
    let _ = s.read_to_string(&mut text);
    text.split("\r\n\r\n")
        .nth(1)
        .and_then(|b| serde_json::from_str(b).ok())
        .unwrap_or_default()
}

fn run(backend: &str, store: &str, dir: &std::path::Path, rates: &[u32]) {
    let broker = Broker::start(dir);
    let health_addr = format!("127.0.0.1:{}", free_port());
    let mut extra = format!("health_http = {health_addr:?}\n");
    // ENVORD_BENCH_MAX_UNACKED: another receive window (65535 = the
    // protocol's default, i.e. none asked for: how the memory grew before)
    if let Ok(m) = std::env::var("ENVORD_BENCH_MAX_UNACKED") {
        extra.push_str(&format!("\n[ingest]\nmax_unacked = {m}\n"));
    }
    let eval = std::env::var("ENVORD_BENCH_EVAL_MS")
        .map(|ms| format!("eval_ms = {ms}\n"))
        .unwrap_or_default();
    let gw = Gateway::start(
        dir,
        &format!("bench-{backend}"),
        &GwSpec {
            port: broker.port,
            protocol: "5",
            client_id: "gw-bench",
            topics: &["plant/+/up"],
            store,
            raw: false,
            alarm_topic: None,
            extra: &extra,
            // alarm evaluation as shipped (every 10 s, its own thread), or
            // ENVORD_BENCH_EVAL_MS (e.g. 3600000: none during the run)
            alarms_extra: &eval,
        },
    );
    let pid = gw.child.id();
    let days = rates.len() as u16;
    let s = day_stream(500, 144 * days, false, "plant");
    let per_day = s.messages.len() / usize::from(days);
    let mut d = host_sim::gateway::db::open(store).unwrap();
    let (rss0, _) = rss_kib(pid);
    let mut seen: HashSet<&(String, Vec<u8>)> = HashSet::new();
    let mut capacity = Vec::new();
    for (day, &rate) in rates.iter().enumerate() {
        let end = if day + 1 == rates.len() {
            s.messages.len()
        } else {
            (day + 1) * per_day
        };
        let part = &s.messages[day * per_day..end];
        let before = rows_now(d.as_mut());
        // each distinct message is one row (a valid frame or a reject)
        seen.extend(part.iter());
        let target = seen.len();
        let t0 = Instant::now();
        let published = publish_paced(broker.port, part, rate);
        let pub_secs = t0.elapsed().as_secs_f64();
        let limit = Duration::from_secs(300);
        let mut rows = rows_now(d.as_mut());
        while rows < target && t0.elapsed() < limit {
            std::thread::sleep(Duration::from_millis(20));
            rows = rows_now(d.as_mut());
        }
        let secs = t0.elapsed().as_secs_f64();
        let (rss, hwm) = rss_kib(pid);
        let h = health(&health_addr);
        let pace = if rate == 0 {
            "as fast as taken".to_string()
        } else {
            format!("paced at {rate}/s")
        };
        let reached = if rows >= target {
            String::new()
        } else {
            format!(
                " NOT REACHED within {} s ({rows} of {target})",
                limit.as_secs()
            )
        };
        println!(
            "{backend:<10} day {} ({pace}): {} messages published in {pub_secs:.1} s ({:.0}/s), {} rows committed in {secs:.1} s = {:.0} frames/s{reached}; publish-to-commit p50 {} ms, p99 {} ms, max {} ms; queued max {}; RSS {rss} KiB (high-water {hwm} KiB); {}",
            day + 1,
            part.len(),
            published as f64 / pub_secs,
            rows - before,
            (rows - before) as f64 / secs,
            h["lag_p50_ms"],
            h["lag_p99_ms"],
            h["lag_max_ms"],
            h["queued_max"],
            load(),
        );
        if rate == 0 {
            capacity.push((rows - before) as f64 / secs);
        }
    }
    let t = Instant::now();
    let log = gw.stop();
    let stop = log
        .lines()
        .rev()
        .find(|l| l.contains("\"gateway serve stopped\""))
        .and_then(|l| serde_json::from_str::<serde_json::Value>(l).ok())
        .unwrap_or_default();
    println!(
        "{backend:<10} RSS at start {rss0} KiB; stopped {:.1} s after SIGTERM; stored {} new, {} known, {} rejected, {} alarm events; capacity (as fast as taken) {:?} frames/s; {}",
        t.elapsed().as_secs_f64(),
        stop["stored"],
        stop["known"],
        stop["rejected"],
        stop["alarm_events"],
        capacity.iter().map(|c| c.round()).collect::<Vec<_>>(),
        load()
    );
}

fn main() {
    let rates: Vec<u32> = std::env::var("ENVORD_BENCH_RATES")
        .unwrap_or_else(|_| "0,2000,5000".into())
        .split(',')
        .map(|r| {
            r.trim()
                .parse()
                .expect("ENVORD_BENCH_RATES: comma-separated messages/s, 0 = unpaced")
        })
        .collect();
    let only =
        std::env::var("ENVORD_BENCH_BACKENDS").unwrap_or_else(|_| "sqlite,postgresql".into());
    let dir = tempfile::tempdir().unwrap();
    println!(
        "gateway ingest: 500 nodes, one simulated day per phase at rates {rates:?} (0 = as fast as taken), profile {}, JSON uplinks over MQTT 5, batch_max 500, batch_ms 20, receive maximum {}, alarms every {} ms",
        if cfg!(debug_assertions) { "with debug assertions" } else { "optimised" },
        std::env::var("ENVORD_BENCH_MAX_UNACKED").unwrap_or_else(|_| "1000 (default)".into()),
        std::env::var("ENVORD_BENCH_EVAL_MS").unwrap_or_else(|_| "10000 (default)".into())
    );
    if only.contains("sqlite") {
        let lite = dir.path().join("bench.db").display().to_string();
        run("sqlite", &lite, dir.path(), &rates);
    }
    if only.contains("postgresql") {
        let pg = pg_database("envord_bench");
        run("postgresql", &pg, dir.path(), &rates);
    }
}
