//! Bearing kinematics against published defect multiples and the identities
//! that follow from the classical formulas.
#![allow(
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::panic,
    clippy::cast_possible_truncation
)]

use dsp_core::diagnosis::kinematics::{
    BearingGeometry, DefectKind, DefectMultiples, Drivetrain, GeometryError, ShaftId, ShaftRatio,
};
use proptest::prelude::*;

fn rel(a: f32, b: f32) -> f32 {
    ((a - b) / b).abs()
}

/// CWRU drive-end bearing (6205-2RS JEM SKF): 9 balls, d = 0.3126 in,
/// D = 1.537 in, 0 deg. Published multiples from the CWRU Bearing Data
/// Center bearing specification page and Smith & Randall 2015 (MSSP 64-65),
/// Table 2: BPFI 5.4152, BPFO 3.5848, FTF 0.39828, rolling element 4.7135
/// (= 2 x BSF).
#[test]
fn cwru_drive_end_matches_published_multiples() {
    let g = BearingGeometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    };
    let m = g.multiples().unwrap();
    assert!(rel(m.bpfi(), 5.4152) < 5e-4, "BPFI {}", m.bpfi());
    assert!(rel(m.bpfo(), 3.5848) < 5e-4, "BPFO {}", m.bpfo());
    assert!(rel(m.ftf(), 0.39828) < 5e-4, "FTF {}", m.ftf());
    assert!(
        rel(m.watched(DefectKind::Bsf), 4.7135) < 5e-4,
        "2xBSF {}",
        m.watched(DefectKind::Bsf)
    );
}

/// CWRU fan-end bearing (6203-2RS JEM SKF): 8 balls, d = 0.2656 in,
/// D = 1.122 in. Same sources: BPFI 4.9469, BPFO 3.0530, FTF 0.3817,
/// rolling element 3.9874 (= 2 x BSF).
#[test]
fn cwru_fan_end_matches_published_multiples() {
    let g = BearingGeometry {
        rollers: 8,
        roller_diameter: 0.2656,
        pitch_diameter: 1.122,
        contact_angle_deg: 0.0,
    };
    let m = g.multiples().unwrap();
    assert!(rel(m.bpfi(), 4.9469) < 5e-4, "BPFI {}", m.bpfi());
    assert!(rel(m.bpfo(), 3.0530) < 5e-4, "BPFO {}", m.bpfo());
    assert!(rel(m.ftf(), 0.3817) < 5e-4, "FTF {}", m.ftf());
    assert!(
        rel(m.watched(DefectKind::Bsf), 3.9874) < 5e-4,
        "2xBSF {}",
        m.watched(DefectKind::Bsf)
    );
}

/// Published multiples given directly (CWRU lists 2 x BSF; halved on entry)
/// land on the same watched lines as the geometry.
#[test]
fn direct_multiples_equal_geometry() {
    let direct = DefectMultiples::new(3.5848, 5.4152, 0.39828, 4.7135 / 2.0).unwrap();
    let g = BearingGeometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    };
    let m = g.multiples().unwrap();
    for k in DefectKind::ALL {
        assert!(rel(direct.watched(k), m.watched(k)) < 5e-4, "{k}");
    }
    assert_eq!(
        DefectMultiples::new(3.0, f32::NAN, 0.4, 2.0),
        Err(GeometryError::NonFinite)
    );
    assert_eq!(
        DefectMultiples::new(3.0, -1.0, 0.4, 2.0),
        Err(GeometryError::NonPositiveMultiple)
    );
}

/// Chained gear ratios: driven speed = driver speed x z_driver / z_driven per
/// mesh, and mesh order = teeth x shaft order (common practice). The bearing
/// on the output shaft has its lines scaled by the output ratio.
#[test]
fn bearing_on_geared_shaft() {
    let mut t: Drivetrain<4> = Drivetrain::new();
    let mid = t.add_mesh(ShaftId(0), 23, 67).unwrap();
    let out = t.add_mesh(mid, 19, 71).unwrap();
    let r_out = 23.0 / 67.0 * 19.0 / 71.0;
    assert!(rel(t.ratio(out).unwrap().get(), r_out) < 1e-6);
    let meshes = t.meshes();
    assert!(rel(meshes[0].mesh_order, 23.0) < 1e-6);
    // The second mesh seen from its driven gear: 71 teeth x output ratio.
    assert!(rel(meshes[1].mesh_order, 71.0 * r_out) < 1e-5);
    let m = DefectMultiples::new(3.5848, 5.4152, 0.39828, 2.35675).unwrap();
    let o = t.bearing_orders(out, &m).unwrap();
    assert!(rel(o.line(DefectKind::Bpfo), 3.5848 * r_out) < 1e-6);
    assert!(rel(o.shaft_order(), r_out) < 1e-6);
    assert!(rel(o.ftf_order(), 0.39828 * r_out) < 1e-6);
    assert!(t.add_mesh(ShaftId(9), 10, 10).is_err());
    assert!(t.add_mesh(out, 0, 10).is_err());
}

proptest! {
    /// BPFO + BPFI = number of rollers, for any valid geometry: an algebraic
    /// consequence of the classical kinematic formulas (per revolution of the
    /// inner ring, outer race fixed), BPFO = n/2 (1 - (d/D) cos a) and
    /// BPFI = n/2 (1 + (d/D) cos a): the (d/D) cos a terms cancel in the sum.
    /// The formulas and their derivation from the rolling kinematics (no
    /// slip): T. A. Harris, M. N. Kotzalas, "Rolling Bearing Analysis",
    /// 5th ed. (2007), vol. 1, ch. 8 (kinematic speeds); also Randall &
    /// Antoni, MSSP 25 (2011), eqs. (1)-(4). Both from memory (chapter and
    /// equation numbers not re-checked).
    #[test]
    fn bpfo_plus_bpfi_is_roller_count(
        n in 1u16..40,
        d in 1.0f32..50.0,
        ratio in 1.05f32..20.0,
        angle in 0.0f32..89.0,
    ) {
        let g = BearingGeometry { rollers: n, roller_diameter: d, pitch_diameter: d * ratio, contact_angle_deg: angle };
        let m = g.multiples().unwrap();
        prop_assert!((m.bpfo() + m.bpfi() - f32::from(n)).abs() < 1e-4 * f32::from(n));
        // BPFO = n x FTF, also from the formulas.
        prop_assert!((m.bpfo() - f32::from(n) * m.ftf()).abs() < 1e-4 * f32::from(n));
    }

    /// Doubling the speed doubles every defect frequency in Hz and leaves its
    /// order unchanged (orders are speed-normalised by definition).
    #[test]
    fn doubling_speed_doubles_hz(tach_hz in 0.5f32..200.0, ratio in 0.05f32..20.0) {
        let g = BearingGeometry { rollers: 9, roller_diameter: 0.3126, pitch_diameter: 1.537, contact_angle_deg: 0.0 };
        let o = g.multiples().unwrap().orders(ShaftRatio::new(ratio).unwrap());
        let f1 = o.frequencies_hz(tach_hz);
        let f2 = o.frequencies_hz(2.0 * tach_hz);
        for (i, k) in DefectKind::ALL.iter().enumerate() {
            prop_assert!((f2[i] - 2.0 * f1[i]).abs() <= 1e-5 * f2[i]);
            prop_assert!((f1[i] / tach_hz - o.line(*k)).abs() <= 1e-5 * o.line(*k));
            prop_assert!((f2[i] / (2.0 * tach_hz) - o.line(*k)).abs() <= 1e-5 * o.line(*k));
        }
    }
}

/// Invalid geometry gives typed errors, never a panic.
#[test]
fn invalid_geometry_errors() {
    let base = BearingGeometry {
        rollers: 9,
        roller_diameter: 0.3126,
        pitch_diameter: 1.537,
        contact_angle_deg: 0.0,
    };
    let cases = [
        (
            BearingGeometry { rollers: 0, ..base },
            GeometryError::NoRollers,
        ),
        (
            BearingGeometry {
                roller_diameter: 0.0,
                ..base
            },
            GeometryError::RollerDiameter,
        ),
        (
            BearingGeometry {
                roller_diameter: 1.537,
                ..base
            },
            GeometryError::RollerDiameter,
        ),
        (
            BearingGeometry {
                contact_angle_deg: -1.0,
                ..base
            },
            GeometryError::ContactAngle,
        ),
        (
            BearingGeometry {
                contact_angle_deg: 90.0,
                ..base
            },
            GeometryError::ContactAngle,
        ),
        (
            BearingGeometry {
                pitch_diameter: f32::INFINITY,
                ..base
            },
            GeometryError::NonFinite,
        ),
    ];
    for (g, e) in cases {
        assert_eq!(g.multiples(), Err(e));
    }
    assert!(ShaftRatio::new(0.0).is_err());
    assert!(ShaftRatio::new(f32::NAN).is_err());
}
