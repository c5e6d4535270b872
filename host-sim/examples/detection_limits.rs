//! Where detection stops: a sweep of impact amplitude against broadband
//! noise for each fault kind at several speeds, on the invented test gearbox
//! of the round-trip checks (host-sim/tests/roundtrip_common), analysed with
//! the same point rule. Prints a table of correct diagnoses per cell.
//!
//! ```text
//! cargo run --release --example detection_limits
//! ```
//!
//! Ratio = 20 log10(impact amplitude / noise RMS), the noise white over
//! 0 - 25.6 kHz (about 20 % of its power inside the 5 - 10 kHz band). A
//! cell counts a seed as correct when the fault's kind is detected on the
//! faulty bearing and is that bearing's highest score; `!` after a cell
//! marks seeds with a detection of a wrong kind (on either bearing) and is
//! followed by how many; `cN` (rolling-element columns) counts seeds whose
//! highest score was the cage line FTF (undetected, left out of the
//! comparison, see `companions` in roundtrip_common).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "../tests/roundtrip_common/mod.rs"]
mod roundtrip_common;

use dsp_core::diagnosis::kinematics::DefectKind;
use host_sim::simulate::{Fault, SpeedProfile};
use roundtrip_common::*;

/// Seeds per cell.
const SEEDS: u64 = 4;
/// Impact amplitudes, g, against NOISE_G = 0.2 g RMS.
const IMPACTS_G: [f64; 10] = [0.1, 0.15, 0.2, 0.25, 0.3, 0.35, 0.4, 0.5, 0.7, 1.0];

fn cell(fault: Fault, profile: SpeedProfile, impact_g: f64) -> (u64, u64, u64) {
    let want = kind_of(fault).unwrap();
    let mut ok = 0;
    let mut stray = 0;
    let mut cage_top = 0;
    for seed in 0..SEEDS {
        let spec = machine(profile, fault, impact_g, NOISE_G);
        let a = analyse(&spec, 500 + seed);
        let faulty = bearing_result(&a.report, FAULTY);
        let healthy = bearing_result(&a.report, HEALTHY);
        if faulty.iter().any(|&(k, d, _)| k == want && d)
            && top_kind(&faulty, companions(fault)) == want
        {
            ok += 1;
        }
        if fault == Fault::Ball && top_kind(&faulty, &[]) == DefectKind::Ftf {
            cage_top += 1;
        }
        let wrong = faulty
            .iter()
            .any(|&(k, d, _)| d && k != want && !(fault == Fault::Ball && k == DefectKind::Ftf))
            || healthy.iter().any(|x| x.1);
        if wrong {
            stray += 1;
        }
    }
    (ok, stray, cage_top)
}

fn main() {
    let faults = [Fault::Outer, Fault::Inner, Fault::Ball];
    let speeds = [
        SpeedProfile::Constant { rpm: 300.0 },
        SpeedProfile::Constant { rpm: 1000.0 },
        SpeedProfile::Constant { rpm: 3000.0 },
        SpeedProfile::Ramp {
            start_rpm: 1500.0,
            end_rpm: 3000.0,
        },
    ];
    let cols: Vec<(Fault, SpeedProfile)> = faults
        .iter()
        .flat_map(|&f| speeds.iter().map(move |&s| (f, s)))
        .collect();
    println!(
        "correct diagnoses out of {SEEDS} seeds; noise {NOISE_G} g RMS, resonance {RESONANCE_HZ} Hz, \
         {REVS} revolutions"
    );
    let mut header = format!("{:>8} {:>7}", "impact g", "ratio");
    for (f, s) in &cols {
        header.push_str(&format!(
            " | {:>5} {:<14}",
            kind_of(*f).unwrap().name(),
            profile_name(*s)
        ));
    }
    println!("{header}");
    for &imp in &IMPACTS_G {
        // Two workers, one per core.
        let results: Vec<(u64, u64, u64)> = std::thread::scope(|sc| {
            let hs: Vec<_> = (0..2usize)
                .map(|w| {
                    let cols = &cols;
                    sc.spawn(move || {
                        cols.iter()
                            .enumerate()
                            .filter(|(i, _)| i % 2 == w)
                            .map(|(i, &(f, s))| (i, cell(f, s, imp)))
                            .collect::<Vec<_>>()
                    })
                })
                .collect();
            let mut all: Vec<(usize, (u64, u64, u64))> =
                hs.into_iter().flat_map(|h| h.join().unwrap()).collect();
            all.sort_by_key(|x| x.0);
            all.into_iter().map(|x| x.1).collect()
        });
        let mut line = format!("{imp:>8.3} {:>5.1}dB", 20.0 * (imp / NOISE_G).log10());
        for (ok, stray, cage_top) in results {
            let mut mark = String::new();
            if stray > 0 {
                mark.push_str(&format!("!{stray}"));
            }
            if cage_top > 0 {
                mark.push_str(&format!(" c{cage_top}"));
            }
            line.push_str(&format!(" | {:>5}{:<15}", format!("{ok}/{SEEDS}"), mark));
        }
        println!("{line}");
    }
}
