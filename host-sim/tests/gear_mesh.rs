//! Gear meshes in the report (issue 15): each watched mesh gets its line at
//! the mesh order and its first sidebands at both meshing shafts' orders.
//! A simulated gear with a damaged tooth (the mesh modulated once per turn of
//! its shaft) shows sidebands at `mesh ± that shaft's order`; a healthy
//! mesh's sidebands stay low.
//!
//! Expected orders are computed from the tooth counts: mesh order = teeth x
//! order of the gear's shaft, and a driven shaft turns at driver teeth /
//! driven teeth of its driver (common practice). The simulated mesh drives a
//! structural ringing at 7.2 kHz whose amplitude follows the tooth meshing,
//! so the mesh shows in the 5-10 kHz envelope (the simulator's model, see
//! `GearMeshSpec::carrier_g`).
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::panic,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

use dsp_core::config::{name_from, Mesh, PointConfig, Shaft, SpeedInput};
use dsp_core::report::Report;
use host_sim::analysis::{edges_from_channel, run, Accel, Record};
use host_sim::cmd_demo::to_counts;
use host_sim::simulate::{
    simulate, GearMeshSpec, MachineSpec, NoiseSpec, ShaftSpec, SpeedProfile, TachSpec,
};

const FS_HZ: f64 = 25_600.0;
const RPM: f64 = 1480.0;
/// Stage 1: 23 teeth on the input, 74 on the intermediate shaft.
const Z1: [u16; 2] = [23, 74];
/// Stage 2: 20 teeth on the intermediate, 82 on the output shaft.
const Z2: [u16; 2] = [20, 82];

fn ratios() -> [f64; 3] {
    let r1 = f64::from(Z1[0]) / f64::from(Z1[1]);
    [1.0, r1, r1 * f64::from(Z2[0]) / f64::from(Z2[1])]
}

/// The gearbox with `fault` = the shaft index of a gear with a damaged tooth
/// in stage 1 (None: healthy).
fn machine(fault: Option<usize>) -> MachineSpec {
    let r = ratios();
    let mesh = |name: &str, shaft: usize, teeth: u16, fault: Option<usize>| GearMeshSpec {
        name: name.into(),
        shaft: format!("s{shaft}"),
        teeth: u32::from(teeth),
        amplitude_g: 0.2,
        sideband_g: 0.0,
        carrier_g: 0.4,
        carrier_hz: 7_200.0,
        fault_shaft: fault.map(|f| format!("s{f}")).unwrap_or_default(),
        fault_depth: if fault.is_some() { 0.5 } else { 0.0 },
    };
    MachineSpec {
        name: "Quorvalith quarry (fictional) test reducer".into(),
        fs_hz: FS_HZ,
        seconds: 300.0 / (RPM / 60.0),
        speed: SpeedProfile::Constant { rpm: RPM },
        shafts: r
            .iter()
            .enumerate()
            .map(|(i, &ratio)| ShaftSpec {
                name: format!("s{i}"),
                ratio,
                imbalance_g: 0.03,
                imbalance_phase_deg: 0.0,
            })
            .collect(),
        bearings: Vec::new(),
        gears: vec![
            mesh("stage1", 0, Z1[0], fault),
            mesh("stage2", 1, Z2[0], None),
        ],
        noise: NoiseSpec {
            rms_g: 0.1,
            snr_db: None,
        },
        tach: TachSpec {
            jitter_s: 2e-5,
            ..TachSpec::default()
        },
    }
}

fn point() -> PointConfig {
    let mut p = PointConfig::default();
    p.sample_rate_hz = FS_HZ as f32;
    p.band_hz = Some([5000.0, 10_000.0]);
    p.speed = SpeedInput::Tach {
        pulses_per_rev: 1,
        tick_hz: 1_000_000,
        tick_at_sample0: 0,
    };
    p.min_rpm = (RPM / 1.1) as f32;
    p.max_rpm = (RPM * 1.1) as f32;
    p.samples_per_rev = 128;
    p.revolutions = 8 * 32;
    p.shafts.clear();
    for (i, r) in ratios().iter().enumerate() {
        p.shafts
            .push(Shaft {
                name: name_from(&format!("s{i}")),
                ratio: *r as f32,
            })
            .unwrap();
    }
    for (name, shaft, teeth) in [("stage1", 0u8, Z1[0]), ("stage2", 1, Z2[0])] {
        p.meshes
            .push(Mesh {
                name: name_from(name),
                shaft,
                teeth,
                mate: Some(shaft + 1),
            })
            .unwrap();
    }
    p.validate().unwrap();
    p
}

fn analyse(spec: &MachineSpec, seed: u64) -> Report {
    let sim = simulate(spec, seed).unwrap();
    let fs = sim.fs as f32;
    let rec = Record {
        sample_rate_hz: fs,
        accel: Accel::Counts(to_counts(&sim.accel, PointConfig::default().counts_to_g)),
        edges_s: Some(edges_from_channel(&sim.tach, fs).unwrap()),
    };
    run(&point(), &rec).unwrap().report
}

#[test]
fn a_damaged_tooth_shows_sidebands_at_its_shaft_and_a_healthy_mesh_does_not() {
    let r = ratios();
    let mesh1 = f64::from(Z1[0]) * r[0]; // 23 orders
    let mesh2 = f64::from(Z2[0]) * r[1]; // 20 x 23/74 = 6.216 orders
    for seed in 0..3u64 {
        let healthy = analyse(&machine(None), 10 + seed);
        // Fault on the intermediate shaft's gear of stage 1 (the mate).
        let faulty = analyse(&machine(Some(1)), 20 + seed);
        for rep in [&healthy, &faulty] {
            let l = &rep.lines[0];
            assert!(l.measurement.searched, "{:?}", l.measurement);
            assert!(
                (f64::from(l.measurement.found_order) - mesh1).abs() < 0.05,
                "mesh 1 at {} (expected {mesh1})",
                l.measurement.found_order
            );
            assert!(l.measurement.prominence_db > 20.0, "{:?}", l.measurement);
            let l2 = &rep.lines[1];
            assert!(
                (f64::from(l2.measurement.found_order) - mesh2).abs() < 0.05,
                "mesh 2 at {} (expected {mesh2})",
                l2.measurement.found_order
            );
            assert!((f64::from(l.sidebands.spacing[1]) - r[1]).abs() < 1e-4);
            assert!((f64::from(l.sidebands.bands[3].order) - (mesh1 + r[1])).abs() < 1e-3);
        }
        let sb = |rep: &Report, mesh: usize, shaft: usize| {
            rep.lines[mesh].sidebands.best_db(shaft).unwrap()
        };
        println!(
            "seed {seed}: healthy stage1 sidebands {:.1} / {:.1} dB, faulty {:.1} / {:.1} dB; stage2 {:.1} dB",
            sb(&healthy, 0, 0),
            sb(&healthy, 0, 1),
            sb(&faulty, 0, 0),
            sb(&faulty, 0, 1),
            sb(&faulty, 1, 0)
        );
        // Damaged tooth on the intermediate gear: sidebands at its order.
        assert!(sb(&faulty, 0, 1) >= 12.0, "faulty mate sideband");
        // Healthy: all sidebands low (under the 8 dB sideband threshold).
        assert!(sb(&healthy, 0, 0) < 8.0 && sb(&healthy, 0, 1) < 8.0);
        assert!(
            sb(&faulty, 0, 0) < 8.0,
            "input sideband of a fault on the mate"
        );
        assert!(sb(&faulty, 1, 0) < 8.0, "stage 2 is healthy");
        // Stage 2's mate (output shaft, 0.076 orders = 2.4 bins here) is too
        // close to its line to be searched at 128 samples per revolution.
        assert!(faulty.lines[1].sidebands.best_db(1).is_none());
    }
}
