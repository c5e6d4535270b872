//! The simulated gearbox matrix (issue 15): two- and three-stage gearboxes
//! (stage ratios 2.0 to 5.6),
//! every bearing in turn with an outer-race, inner-race and rolling-element
//! fault, at constant speed and over a 2:1 run-down, at two severities, each
//! gearbox watched by one measuring point that knows all its bearings (so
//! that cross-bearing attribution can give every peak to the right one).
//!
//! Bearings (sources): the 6205 drive-end bearing of the CWRU bearing data
//! centre's specification table (BPFI 5.4152, BPFO 3.5848, FTF 0.39828,
//! rolling element 4.7135 = 2 x BSF) and the 6203 fan-end bearing of the
//! same table (BPFI 4.9469, BPFO 3.0530, FTF 0.3817, rolling element
//! 3.9874; these four quoted from memory of that table).
//!
//! Point rule (the same for every case): 64 samples per revolution of the
//! input (tach) shaft, two segments per pass (the passes for the slower
//! shafts are planned by `dsp_core::diagnosis::coverage`), speed range 10 % beyond the
//! record's, search defaults.
#![allow(
    dead_code,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation,
    clippy::cast_precision_loss,
    clippy::cast_sign_loss
)]

use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, Shaft, SpeedInput};
use dsp_core::diagnosis::kinematics::DefectKind;
use dsp_core::report::Report;
use host_sim::analysis::{edges_from_channel, run, Accel, Record};
use host_sim::cmd_demo::to_counts;
use host_sim::simulate::{
    simulate, BearingSpec, Fault, GearMeshSpec, MachineSpec, NoiseSpec, ShaftSpec, SpeedProfile,
    TachSpec,
};

/// CWRU 6205 (drive end): BPFO, BPFI, FTF, BSF (1 x spin).
pub const B6205: [f64; 4] = [3.5848, 5.4152, 0.39828, 4.7135 / 2.0];
/// CWRU 6203 (fan end), from memory of the same table.
pub const B6203: [f64; 4] = [3.0530, 4.9469, 0.3817, 3.9874 / 2.0];

/// Sample rate, Hz (the node's default).
pub const FS_HZ: f64 = 25_600.0;
/// Input speed, rpm.
pub const RPM: f64 = 1480.0;
/// Broadband noise, g RMS.
pub const NOISE_G: f64 = 0.1;
/// The two severities: impact amplitude, g.
pub const SEVERITIES: [f64; 2] = [0.5, 1.0];
/// Structural resonance the impacts ring, Hz.
pub const RESONANCE_HZ: f64 = 7_200.0;

/// One gearbox of the matrix.
pub struct Gearbox {
    /// Name in the table.
    pub name: &'static str,
    /// Shaft speed ratios to the input (tach) shaft.
    pub ratios: Vec<f64>,
    /// Bearings: name, shaft index, multiples.
    pub bearings: Vec<(&'static str, usize, [f64; 4])>,
    /// Points: samples per revolution and bearing indices.
    pub points: Vec<(u16, Vec<usize>)>,
    /// Gear meshes: shaft index, teeth.
    pub gears: Vec<(usize, u32)>,
}

/// The three gearboxes.
pub fn gearboxes() -> Vec<Gearbox> {
    // Two stages, 3.2 and 4.1 (the example): 23/74, 20/82 teeth.
    let a = Gearbox {
        name: "2-stage 3.2x4.1",
        ratios: vec![1.0, 1.0 / 3.2, 1.0 / (3.2 * 4.1)],
        bearings: vec![
            ("in-de", 0, B6205),
            ("in-nde", 0, B6203),
            ("int-de", 1, B6205),
            ("int-nde", 1, B6203),
            ("out-de", 2, B6205),
            ("out-nde", 2, B6203),
        ],
        points: vec![(64, (0..6).collect())],
        gears: vec![(0, 23), (1, 20)],
    };
    // Three stages, 2.9, 2.4 and 2.9 (20.2 overall; among the ratios of
    // 2-3.5 per stage the one with the fewest coinciding lines for these
    // bearings).
    let b = Gearbox {
        name: "3-stage 2.9x2.4x2.9",
        ratios: vec![1.0, 1.0 / 2.9, 1.0 / (2.9 * 2.4), 1.0 / (2.9 * 2.4 * 2.9)],
        bearings: vec![
            ("in-de", 0, B6205),
            ("in-nde", 0, B6203),
            ("i1-de", 1, B6205),
            ("i1-nde", 1, B6203),
            ("i2-de", 2, B6205),
            ("i2-nde", 2, B6203),
            ("out-de", 3, B6205),
            ("out-nde", 3, B6203),
        ],
        points: vec![(64, (0..8).collect())],
        gears: vec![(0, 20), (1, 19), (2, 22)],
    };
    // Two stages at the ends of the 2-6 range per stage, 2.0 and
    // 5.6 (25/50 and 17/95 teeth): a slow output (11.2:1) and an
    // intermediate shaft at half the input speed.
    let c = Gearbox {
        name: "2-stage 2.0x5.6",
        ratios: vec![1.0, 1.0 / 2.0, 1.0 / (2.0 * 95.0 / 17.0)],
        bearings: vec![
            ("in-de", 0, B6205),
            ("in-nde", 0, B6203),
            ("int-de", 1, B6205),
            ("int-nde", 1, B6203),
            ("out-de", 2, B6205),
            ("out-nde", 2, B6203),
        ],
        points: vec![(64, (0..6).collect())],
        gears: vec![(0, 25), (1, 17)],
    };
    vec![a, b, c]
}

/// Speed profiles: constant input speed, and a 2:1 run-down.
pub fn profiles() -> [(&'static str, SpeedProfile); 2] {
    [
        ("const", SpeedProfile::Constant { rpm: RPM }),
        (
            "ramp 2:1",
            SpeedProfile::Ramp {
                start_rpm: RPM,
                end_rpm: RPM / 2.0,
            },
        ),
    ]
}

/// The measuring points of a gearbox for a record spanning `lo..=hi` rpm.
pub fn points(g: &Gearbox, lo: f64, hi: f64) -> Vec<PointConfig> {
    g.points
        .iter()
        .map(|(spr, idx)| {
            let mut p = PointConfig::default();
            p.sample_rate_hz = FS_HZ as f32;
            p.band_hz = Some([5000.0, 10_000.0]);
            p.speed = SpeedInput::Tach {
                pulses_per_rev: 1,
                tick_hz: 1_000_000,
                tick_at_sample0: 0,
            };
            p.min_rpm = (lo / 1.1) as f32;
            p.max_rpm = (hi * 1.1) as f32;
            p.max_speed_change_pct = 100.0;
            p.samples_per_rev = *spr;
            p.revolutions = 2 * (4096 / spr);
            p.shafts.clear();
            for (i, r) in g.ratios.iter().enumerate() {
                p.shafts
                    .push(Shaft {
                        name: name_from(&format!("s{i}")),
                        ratio: *r as f32,
                    })
                    .unwrap();
            }
            for &bi in idx {
                let (name, shaft, m) = g.bearings[bi];
                p.bearings
                    .push(Bearing {
                        name: name_from(name),
                        shaft: shaft as u8,
                        kinematics: BearingKinematics::Multiples {
                            bpfo_x: m[0] as f32,
                            bpfi_x: m[1] as f32,
                            ftf_x: m[2] as f32,
                            bsf_x: m[3] as f32,
                        },
                    })
                    .unwrap();
            }
            p.validate().unwrap();
            p
        })
        .collect()
}

/// Tach revolutions the longest point of `g` needs, all passes.
pub fn revs_needed(g: &Gearbox) -> f64 {
    points(g, RPM / 2.0, RPM)
        .iter()
        .map(|p| {
            dsp_core::diagnosis::coverage::plan(p, 4096)
                .passes
                .iter()
                .map(|q| f64::from(q.revolutions))
                .sum::<f64>()
        })
        .fold(0.0, f64::max)
}

/// The simulated machine: `fault` on bearing `faulty` (if any).
pub fn machine(
    g: &Gearbox,
    profile: SpeedProfile,
    faulty: Option<(usize, Fault)>,
    impact_g: f64,
) -> MachineSpec {
    let (lo, hi) = profile.rpm_bounds();
    let mean_hz = 0.5 * (lo + hi) / 60.0;
    MachineSpec {
        name: "Tarnwick works (fictional) test gearbox".into(),
        fs_hz: FS_HZ,
        // The passes run one after the other, plus tach start-up per pass.
        seconds: (revs_needed(g) + 24.0) / mean_hz,
        speed: profile,
        shafts: g
            .ratios
            .iter()
            .enumerate()
            .map(|(i, r)| ShaftSpec {
                name: format!("s{i}"),
                ratio: *r,
                imbalance_g: 0.03,
                imbalance_phase_deg: 37.0 * i as f64,
            })
            .collect(),
        bearings: g
            .bearings
            .iter()
            .enumerate()
            .map(|(i, (name, shaft, m))| {
                let fault = match faulty {
                    Some((f, kind)) if f == i => kind,
                    _ => Fault::None,
                };
                BearingSpec {
                    name: (*name).into(),
                    shaft: format!("s{shaft}"),
                    fault,
                    bpfo: m[0],
                    bpfi: m[1],
                    ftf: m[2],
                    bsf: m[3],
                    impact_g: if fault == Fault::None { 0.0 } else { impact_g },
                    slip: 0.015,
                    resonance_hz: RESONANCE_HZ,
                    damping_ratio: 0.04,
                    load_zone_depth: 0.7,
                }
            })
            .collect(),
        gears: g
            .gears
            .iter()
            .map(|(s, teeth)| GearMeshSpec {
                name: format!("mesh s{s}"),
                shaft: format!("s{s}"),
                teeth: *teeth,
                amplitude_g: 0.2,
                sideband_g: 0.03,
                ..GearMeshSpec::default()
            })
            .collect(),
        noise: NoiseSpec {
            rms_g: NOISE_G,
            snr_db: None,
        },
        tach: TachSpec {
            jitter_s: 2e-5,
            ..TachSpec::default()
        },
    }
}

/// Every point's report for one simulated record.
pub fn analyse(g: &Gearbox, spec: &MachineSpec, seed: u64) -> Vec<Report> {
    let sim = simulate(spec, seed).expect("simulates");
    let fs = sim.fs as f32;
    let edges = edges_from_channel(&sim.tach, fs).unwrap();
    let (lo, hi) = spec.speed.rpm_bounds();
    let counts_to_g = PointConfig::default().counts_to_g;
    let rec = Record {
        sample_rate_hz: fs,
        accel: Accel::Counts(to_counts(&sim.accel, counts_to_g)),
        edges_s: Some(edges),
    };
    points(g, lo, hi)
        .iter()
        .map(|p| run(p, &rec).expect("analyses").report)
        .collect()
}

/// The kind a simulated fault shows as.
pub fn kind_of(f: Fault) -> DefectKind {
    match f {
        Fault::Outer => DefectKind::Bpfo,
        Fault::Inner => DefectKind::Bpfi,
        Fault::Ball | Fault::None => DefectKind::Bsf,
    }
}

/// Whether a watched line (1st or 2nd harmonic of BPFO, BPFI or 2 x BSF) of
/// bearing `b` lies within 2 % (the slip window) of one of another bearing
/// of the gearbox (the rule of `PointConfig::line_coincidences`, over all
/// bearings of the gearbox, not only one point's).
pub fn coincides(g: &Gearbox, b: usize, kind: DefectKind) -> bool {
    let line = |i: usize, k: DefectKind| {
        let (_, s, m) = g.bearings[i];
        let x = match k {
            DefectKind::Bpfo => m[0],
            DefectKind::Bpfi => m[1],
            DefectKind::Bsf => 2.0 * m[3],
            DefectKind::Ftf => m[2],
        };
        x * g.ratios[s]
    };
    let la = line(b, kind);
    // On a running-speed harmonic of its own shaft (within 0.5 %): the
    // shaft-harmonic mask hides it (the 6203's 2 x BSF is 3.987 x shaft).
    let own = {
        let x = la / g.ratios[g.bearings[b].1];
        (x - x.round()).abs() <= 0.005 * x
    };
    own || (0..g.bearings.len()).filter(|&j| j != b).any(|j| {
        [DefectKind::Bpfo, DefectKind::Bpfi, DefectKind::Bsf]
            .iter()
            .any(|&k| {
                let lb = line(j, k);
                [(1.0, 1.0), (1.0, 2.0), (2.0, 1.0)]
                    .iter()
                    .any(|(h, q)| ((h * la) - (q * lb)).abs() <= 0.02 * (h * la).max(q * lb))
            })
    })
}

/// Outcome of one faulted case.
#[derive(Debug, Clone, Default)]
pub struct Outcome {
    /// The faulted bearing and kind were named.
    pub named: bool,
    /// Detections on other bearings (any point), as "bearing KIND".
    pub others: Vec<String>,
    /// Other kinds detected on the faulted bearing.
    pub wrong_kind: Vec<String>,
    /// Watched lines not searched (bearing KIND reason), any point.
    pub not_searched: Vec<String>,
    /// Findings shared by two bearings (coinciding lines), "A KIND shared by B".
    pub shared: Vec<String>,
}

/// Scores the reports of one record against the faulted bearing.
pub fn score(g: &Gearbox, reports: &[Report], faulty: Option<(usize, Fault)>) -> Outcome {
    let mut out = Outcome::default();
    for (r, (_, idx)) in reports.iter().zip(&g.points) {
        for (b, &bi) in r.bearings.iter().zip(idx) {
            if let Some(reason) = b.not_searched(r.analysed()) {
                out.not_searched
                    .push(format!("{} {reason} (flags {})", b.name, r.flags));
                continue;
            }
            let d = b.diagnosis.as_ref().unwrap();
            for res in &d.results {
                if res.harmonics_searched == 0 {
                    out.not_searched.push(format!(
                        "{} {} no harmonic searched",
                        b.name,
                        res.kind.name()
                    ));
                }
            }
            for res in d.results.iter().filter(|r| r.detected) {
                let k = res.kind;
                // A finding shared by two bearings (coinciding lines) names both.
                let shared = res
                    .shared_finding
                    .map(|l| (idx[usize::from(l.bearing)], l.kind));
                let is = |(f, kind): (usize, Fault), (b2, k2): (usize, DefectKind)| {
                    f == b2 && k2 == kind_of(kind)
                };
                if let Some((sb, sk)) = shared {
                    out.shared.push(format!(
                        "{} {} shared by {}",
                        b.name,
                        k.name(),
                        g.bearings[sb].0
                    ));
                    match faulty {
                        Some(f) if is(f, (bi, k)) || is(f, (sb, sk)) => out.named = true,
                        Some((f, _)) if f == bi || f == sb => {
                            out.wrong_kind.push(format!("{} {}", b.name, k.name()));
                        }
                        _ => out.others.push(format!(
                            "{} {} (shared by {})",
                            b.name,
                            k.name(),
                            g.bearings[sb].0
                        )),
                    }
                    continue;
                }
                match faulty {
                    Some(f) if is(f, (bi, k)) => out.named = true,
                    Some((f, _)) if f == bi => {
                        out.wrong_kind.push(format!("{} {}", b.name, k.name()));
                    }
                    _ => out.others.push(format!("{} {}", b.name, k.name())),
                }
            }
        }
    }
    out
}
