//! Shared set-up of the simulate -> analyse round trips: an invented test
//! gearbox, the point file that watches it, and the rule that adapts the
//! point to the speed range of a record.
//!
//! Point rule (the same for every case, never tuned per case): for a record
//! whose tach-shaft speed spans `lo..=hi` rpm (lo = hi at constant speed)
//! * `speed.min_rpm = lo / 1.1`, `speed.max_rpm = 1.1 * hi` (10 % margin);
//! * `speed.max_change_pct = 100` so a 2:1 run-up (67 % of its mean speed)
//!   is not flagged as unstable;
//! * everything else fixed: 128 samples per revolution, 256 revolutions
//!   (8 segments of 32), band 5-10 kHz around the 7.2 kHz resonance, the
//!   search defaults of `host-sim/examples/point.toml`.
//!
//! The speed margin keeps the order tracker's resampler ring (4 revolutions
//! at `min_rpm`, decimated to about 1.25 x 128 samples per revolution at
//! `max_rpm`) inside the node's 2048 samples for ranges up to about 3:1.
#![allow(
    dead_code,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

use dsp_core::config::PointConfig;
use dsp_core::diagnosis::kinematics::DefectKind;
use dsp_core::report::Report;
use host_sim::analysis::{edges_from_channel, run, Accel, Analysis, Record};
use host_sim::cmd_demo::to_counts;
use host_sim::simulate::{
    simulate, BearingSpec, Fault, GearMeshSpec, MachineSpec, NoiseSpec, ShaftSpec, SimOutput,
    SpeedProfile, TachSpec,
};

/// Sample rate of the simulated records, Hz.
pub const FS_HZ: f64 = 51_200.0;
/// Revolutions in one report (8 segments of 4096 / 128 = 32).
pub const REVS: f64 = 256.0;
/// Structural resonance the impacts ring, Hz (inside the 5-10 kHz band).
pub const RESONANCE_HZ: f64 = 7_200.0;
/// Broadband noise of the standard cases, g RMS.
pub const NOISE_G: f64 = 0.2;
/// Impact amplitude of the asserted cases, g: 14 dB over the noise RMS,
/// 6 dB or more above the amplitude where every kind at every speed of
/// `cargo run --release --example detection_limits` was already found in
/// all seeds (0.5 g; see docs/host-sim.md).
pub const IMPACT_G: f64 = 1.0;

/// Name of the watched bearing that carries the fault.
pub const FAULTY: &str = "input-de";
/// Name of the healthy bearing on the output shaft.
pub const HEALTHY: &str = "output-de";

/// Output/input speed ratio of the single mesh, 25/104 teeth.
pub const OUTPUT_RATIO: f64 = 25.0 / 104.0;

/// Defect multiples of a 6205 deep-groove ball bearing as printed in the
/// Case Western Reserve University bearing data centre's specification
/// table (BPFI 5.4152, BPFO 3.5848, FTF 0.39828, BSF 4.7135 there, which is
/// 2 x the kinematic ball spin: the simulator wants 1 x, 2.3567). The point
/// file gives the bearing by its geometry instead (9 balls of 0.3126 in on
/// a 1.537 in pitch circle, same table), so the kinematics of the core are
/// checked against the published multiples by every round trip.
pub const CWRU_6205: [f64; 4] = [3.5848, 5.4152, 0.39828, 4.7135 / 2.0];

/// The point file for a record spanning `lo_rpm..=hi_rpm` (see the rule in
/// the module doc).
pub fn point_text(lo_rpm: f64, hi_rpm: f64) -> String {
    format!(
        r#"# Invented test gearbox (fictional): single helical stage 25/104.
[sensor]
sample_rate_hz = 51200.0
counts_to_g = 0.00152587890625
[envelope]
band_hz = [5000.0, 10000.0]
poles = 8
rectifier = "abs"
[speed]
source = "tach"
pulses_per_rev = 1
tick_hz = 1000000
min_rpm = {min:.3}
max_rpm = {max:.3}
max_change_pct = 100.0
[spectrum]
samples_per_rev = 128
revolutions = 256
window = "hann"
[search]
harmonics = 5
slip_tolerance = 0.02
prominence_db = 10.0
min_harmonics = 2
sideband_db = 8.0
[[shaft]]
name = "input"
[[shaft]]
name = "output"
driven_by = "input"
teeth = [25, 104]
[[bearing]]
name = "{FAULTY}"
shaft = "input"
rollers = 9
roller_diameter_in = 0.3126
pitch_diameter_in = 1.537
contact_angle_deg = 0.0
[[bearing]]
name = "{HEALTHY}"
shaft = "output"
rollers = 10
roller_diameter_mm = 16.0
pitch_diameter_mm = 72.0
contact_angle_deg = 0.0
"#,
        min = lo_rpm / 1.1,
        max = 1.1 * hi_rpm,
    )
}

/// The parsed point for a record spanning `lo_rpm..=hi_rpm`.
pub fn point(lo_rpm: f64, hi_rpm: f64) -> PointConfig {
    host_sim::point::parse(&point_text(lo_rpm, hi_rpm)).expect("test point parses")
}

/// Defect multiples (shaft orders) of the healthy output bearing, from its
/// geometry by the kinematic formulas (10 rollers, 16 mm on 72 mm, 0 deg).
fn output_bearing() -> [f64; 4] {
    let (n, r) = (10.0, 16.0 / 72.0);
    [
        n / 2.0 * (1.0 - r),
        n / 2.0 * (1.0 + r),
        0.5 * (1.0 - r),
        (1.0 / r) / 2.0 * (1.0 - r * r),
    ]
}

/// Record length that gives the pipeline its two passes (256 revolutions at
/// 128 samples per revolution for the input bearing, then 256 at 32 for the
/// output-shaft bearing, dsp_core::diagnosis::coverage) plus a few revolutions for the
/// tach tracker's start-up and the pass switch, s.
pub fn seconds_for(profile: SpeedProfile) -> f64 {
    let (lo, hi) = profile.rpm_bounds();
    let mean_hz = 0.5 * (lo + hi) / 60.0;
    (2.0 * REVS + 16.0) / mean_hz
}

/// The invented test gearbox: tach on the input shaft, a 25/104 mesh, the
/// 6205 on the input shaft with `fault`, a healthy bearing on the output.
pub fn machine(profile: SpeedProfile, fault: Fault, impact_g: f64, noise_g: f64) -> MachineSpec {
    let [bpfo, bpfi, ftf, bsf] = CWRU_6205;
    let [obpfo, obpfi, oftf, obsf] = output_bearing();
    MachineSpec {
        name: "Harrowgate test rig (fictional) single-stage gearbox".into(),
        fs_hz: FS_HZ,
        seconds: seconds_for(profile),
        speed: profile,
        shafts: vec![
            ShaftSpec {
                name: "input".into(),
                ratio: 1.0,
                imbalance_g: 0.05,
                imbalance_phase_deg: 0.0,
            },
            ShaftSpec {
                name: "output".into(),
                ratio: OUTPUT_RATIO,
                imbalance_g: 0.02,
                imbalance_phase_deg: 60.0,
            },
        ],
        bearings: vec![
            BearingSpec {
                name: FAULTY.into(),
                shaft: "input".into(),
                fault,
                bpfo,
                bpfi,
                ftf,
                bsf,
                impact_g,
                slip: 0.015,
                resonance_hz: RESONANCE_HZ,
                damping_ratio: 0.04,
                load_zone_depth: 0.7,
            },
            BearingSpec {
                name: HEALTHY.into(),
                shaft: "output".into(),
                fault: Fault::None,
                bpfo: obpfo,
                bpfi: obpfi,
                ftf: oftf,
                bsf: obsf,
                impact_g: 0.0,
                ..BearingSpec::default()
            },
        ],
        gears: vec![GearMeshSpec {
            name: "stage".into(),
            shaft: "input".into(),
            teeth: 25,
            amplitude_g: 0.25,
            sideband_g: 0.04,
        }],
        noise: NoiseSpec {
            rms_g: noise_g,
            snr_db: None,
        },
        tach: TachSpec {
            jitter_s: 2e-6,
            ..TachSpec::default()
        },
    }
}

/// The defect kind a simulated fault should be reported as.
pub fn kind_of(fault: Fault) -> Option<DefectKind> {
    match fault {
        Fault::Outer => Some(DefectKind::Bpfo),
        Fault::Inner => Some(DefectKind::Bpfi),
        Fault::Ball => Some(DefectKind::Bsf),
        Fault::None => None,
    }
}

/// Digitises a simulated record as the node's 16-bit ADC (counts, 50 g full
/// scale) and finds its tach edges in the pulse channel.
pub fn record(sim: &SimOutput, point: &PointConfig) -> Record {
    let fs = sim.fs as f32;
    Record {
        sample_rate_hz: fs,
        accel: Accel::Counts(to_counts(&sim.accel, point.counts_to_g)),
        edges_s: Some(edges_from_channel(&sim.tach, fs).unwrap()),
    }
}

/// Simulates and analyses one case through the library API.
pub fn analyse(spec: &MachineSpec, seed: u64) -> Analysis {
    let (lo, hi) = spec.speed.rpm_bounds();
    let p = point(lo, hi);
    let sim = simulate(spec, seed).unwrap();
    run(&p, &record(&sim, &p)).unwrap()
}

/// Detected kinds and scores of the bearing named `name`.
pub fn bearing_result(report: &Report, name: &str) -> Vec<(DefectKind, bool, f32)> {
    let b = report
        .bearings
        .iter()
        .find(|b| b.name.as_str() == name)
        .expect("bearing in report");
    let d = b.diagnosis.as_ref().expect("record analysed");
    DefectKind::ALL
        .iter()
        .map(|&k| {
            let r = d.get(k).unwrap();
            (k, r.detected, r.score_db)
        })
        .collect()
}

/// The kind with the highest score on a bearing (first on ties), leaving
/// out the kinds in `skip`.
pub fn top_kind(res: &[(DefectKind, bool, f32)], skip: &[DefectKind]) -> DefectKind {
    let mut kept = res.iter().filter(|r| !skip.contains(&r.0));
    let mut best = *kept.next().expect("a kind left");
    for &r in kept {
        if r.2 > best.2 {
            best = r;
        }
    }
    best.0
}

/// Kinds a fault legitimately raises besides its own, left out of the
/// "detected as its own kind and highest score" check: a rolling-element
/// fault is carried through the load zone by the cage, so its envelope
/// also holds the cage rate (FTF) itself (Randall & Antoni, "Rolling
/// element bearing diagnostics - a tutorial", MSSP 25 (2011), section 2.1,
/// from memory). Measured: with strong ball faults at high speed that one
/// FTF line (not detected: one harmonic) can outscore the 2 x BSF family.
pub fn companions(fault: Fault) -> &'static [DefectKind] {
    match fault {
        Fault::Ball => &[DefectKind::Ftf],
        _ => &[],
    }
}

/// The speed profiles of the round trips: constant 300, 1000 and 3000 rpm,
/// and 2:1 ramps up and down inside 300-3000 rpm.
pub fn profiles() -> Vec<SpeedProfile> {
    vec![
        SpeedProfile::Constant { rpm: 300.0 },
        SpeedProfile::Constant { rpm: 1000.0 },
        SpeedProfile::Constant { rpm: 3000.0 },
        SpeedProfile::Ramp {
            start_rpm: 300.0,
            end_rpm: 600.0,
        },
        SpeedProfile::Ramp {
            start_rpm: 750.0,
            end_rpm: 1500.0,
        },
        SpeedProfile::Ramp {
            start_rpm: 3000.0,
            end_rpm: 1500.0,
        },
    ]
}

/// Short text for a profile.
pub fn profile_name(p: SpeedProfile) -> String {
    match p {
        SpeedProfile::Constant { rpm } => format!("{rpm:.0} rpm"),
        SpeedProfile::Ramp { start_rpm, end_rpm } => format!("{start_rpm:.0}->{end_rpm:.0} rpm"),
        SpeedProfile::RandomWalk {
            min_rpm, max_rpm, ..
        } => format!("walk {min_rpm:.0}-{max_rpm:.0} rpm"),
    }
}
