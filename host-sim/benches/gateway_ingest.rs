//! Gateway ingest benchmark (figures only, nothing asserted): a fleet of 500
//! nodes, one frame per node per 10 minutes, two simulated days published
//! through a real Mosquitto as fast as it takes them, into `gateway serve`
//! with SQLite and with PostgreSQL. Prints sustained frames/s (broker to
//! committed rows), publish-to-commit latency p50/p99 (the gateway's own
//! figures: commit time minus the receive time stamped at publishing), and
//! the service's RSS after each day. Run through `.ci/services.sh bench`.

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
use std::time::Instant;

fn rss_kib(pid: u32) -> u64 {
    std::fs::read_to_string(format!("/proc/{pid}/status"))
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmRSS:"))
                .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse().ok()))
        })
        .unwrap_or(0)
}

/// Reports + status frames + rejects stored (counted by the store).
fn rows_now(url: &str) -> usize {
    use host_sim::gateway::{db, store};
    let mut d = db::open(url).unwrap();
    ["reports", "node_status", "rejects"]
        .iter()
        .map(|t| store::count(d.as_mut(), t).unwrap_or(0) as usize)
        .sum()
}

fn last_stop_line(log: &str) -> serde_json::Value {
    log.lines()
        .rev()
        .find(|l| l.contains("\"gateway serve stopped\""))
        .and_then(|l| serde_json::from_str(l).ok())
        .unwrap_or_default()
}

fn run(backend: &str, store: &str, dir: &std::path::Path, days: u16) {
    let broker = Broker::start(dir);
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
            extra: "",
            // alarm evaluation as shipped (every 10 s, its own thread)
            alarms_extra: "",
        },
    );
    let pid = gw.child.id();
    let s = day_stream(500, 144 * days, false, "plant");
    let per_day = s.messages.len() / usize::from(days);
    let rss0 = rss_kib(pid);
    let mut rss = Vec::new();
    let mut total_rows = 0usize;
    let mut total_secs = 0.0;
    for d in 0..usize::from(days) {
        let part = &s.messages[d * per_day..if d + 1 == usize::from(days) {
            s.messages.len()
        } else {
            (d + 1) * per_day
        }];
        let before = rows_now(store);
        // rows this part adds: count distinct valid frames + bad in it (approximation-free: poll until still)
        let t0 = Instant::now();
        let stamped: Vec<(String, Vec<u8>)> = part.to_vec();
        publish_stamped(broker.port, &stamped, 2000);
        let pub_secs = t0.elapsed().as_secs_f64();
        // wait until the row count stops moving
        let mut last = 0usize;
        let mut still = 0;
        loop {
            let n = rows_now(store);
            if n == last {
                still += 1;
                if still >= 3 {
                    break;
                }
            } else {
                still = 0;
                last = n;
            }
            std::thread::sleep(std::time::Duration::from_millis(100));
        }
        let secs = t0.elapsed().as_secs_f64() - 0.3; // the three still polls
        let rows = last - before;
        total_rows += rows;
        total_secs += secs;
        rss.push(rss_kib(pid));
        println!(
            "{backend:<10} day {}: {} messages published in {pub_secs:.1} s ({:.0}/s), {rows} rows committed in {secs:.1} s = {:.0} frames/s; RSS {} KiB",
            d + 1,
            part.len(),
            part.len() as f64 / pub_secs,
            rows as f64 / secs,
            rss.last().copied().unwrap_or(0)
        );
    }
    let log = gw.stop();
    let h = last_stop_line(&log);
    println!(
        "{backend:<10} sustained {:.0} frames/s over {total_rows} rows; publish-to-commit latency p50 {} ms, p99 {} ms, max {} ms (last {} frames); RSS at start {rss0} KiB, after each day {:?} KiB",
        total_rows as f64 / total_secs,
        h["lag_p50_ms"],
        h["lag_p99_ms"],
        h["lag_max_ms"],
        65_536.min(total_rows),
        rss
    );
}

fn main() {
    let days: u16 = std::env::var("ENVORD_BENCH_DAYS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2);
    let dir = tempfile::tempdir().unwrap();
    println!("gateway ingest: 500 nodes, {days} simulated day(s) each, JSON uplinks over MQTT 5, batch_max 500, batch_ms 20");
    let lite = dir.path().join("bench.db").display().to_string();
    run("sqlite", &lite, dir.path(), days);
    let pg = pg_database("envord_bench");
    run("postgresql", &pg, dir.path(), days);
}
