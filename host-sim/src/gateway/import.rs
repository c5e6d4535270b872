//! `envord gateway import`: frames into the store through the same path as
//! `gateway serve` ([`super::ingest`]), idempotent, in batched transactions.

use super::input::read_inputs;
use super::seq::SeqEvent;
use super::{db, decided_order, ingest, sql_err, store, ImportArgs};
use crate::error::CliError;

pub(super) fn run(a: ImportArgs) -> Result<(), CliError> {
    if a.batch_size == 0 {
        return Err(CliError::input("--batch-size", "must be at least 1"));
    }
    let items = read_inputs(&a.files, a.format)?;
    let mut conn = db::open(&a.db)?;
    // Seed the tracker with what is stored so events refer to the full history.
    let (mut tracker, _) = decided_order(conn.as_mut())?;
    let (mut new, mut known, mut rejected, mut new_rejects) = (0u64, 0u64, 0u64, 0u64);
    let mut events: Vec<String> = Vec::new();
    for batch in items.chunks(a.batch_size) {
        let uplinks: Vec<ingest::Uplink> = batch.iter().map(ingest::Uplink::from_item).collect();
        // The same path as `gateway serve`: one transaction per batch (on
        // SQLite BEGIN IMMEDIATE: the batch reads the band of the latest
        // status frame and writes; taking the write lock first lets a
        // concurrent importer wait instead of failing with "database is locked").
        let outcomes =
            ingest::store_batch(conn.as_mut(), &mut tracker, &uplinks).map_err(sql_err)?;
        for (o, item) in outcomes.iter().zip(batch) {
            match o {
                ingest::Outcome::New { frame, seq } => {
                    new += 1;
                    let (node, sq) = store::node_seq(frame);
                    if let Some(ev) = seq {
                        if !matches!(ev, SeqEvent::InOrder | SeqEvent::First) {
                            events.push(format!(
                                "{}:{}: node {node} seq {sq}: {}",
                                item.source,
                                item.line,
                                ev.describe()
                            ));
                        }
                    }
                }
                ingest::Outcome::Known { .. } => known += 1,
                ingest::Outcome::Rejected { reason, new } => {
                    rejected += 1;
                    if *new {
                        new_rejects += 1;
                    }
                    events.push(format!("{}:{}: rejected: {reason}", item.source, item.line));
                }
            }
        }
        if a.batch_pause_ms > 0 {
            std::thread::sleep(std::time::Duration::from_millis(a.batch_pause_ms));
        }
    }
    if a.verbose {
        for e in &events {
            println!("{e}");
        }
    }
    let gaps = events.iter().filter(|e| e.contains(": gap")).count();
    println!(
        "imported {new} new frame(s), {known} already stored, {rejected} rejected ({new_rejects} new in the reject table), {gaps} gap event(s); see `envord gateway status`"
    );
    Ok(())
}
