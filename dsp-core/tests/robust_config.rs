//! Bad measuring points give a typed `ConfigError` (and `Pipeline::new`
//! passes it on), never a panic. Single-field cases that dsp-core's own unit
//! tests cover (config.rs `refuses_each_bad_field`) are not repeated; this
//! file adds every float field with NaN and both infinities, the band edge
//! at Nyquist, geometry edge cases, capacity, and a proptest over random
//! points. Rules: 0 < roller < pitch diameter is bearing geometry (Harris,
//! Rolling Bearing Analysis, ch. 2, from memory); band below Nyquist is the
//! sampling theorem.
#![allow(
    clippy::unwrap_used,
    clippy::indexing_slicing,
    clippy::expect_used,
    clippy::panic,
    clippy::cast_possible_truncation
)]

use dsp_core::config::{
    name_from, Bearing, BearingKinematics, ConfigError, PointConfig, Shaft, SpeedInput,
    MAX_BEARINGS, MAX_SHAFTS,
};
use dsp_core::pipeline::{Pipeline, PipelineError};
use proptest::prelude::*;

type Small = Pipeline<1024, 512, 2048>;

fn geometry(rollers: u16, roller: f32, pitch: f32, angle: f32) -> BearingKinematics {
    BearingKinematics::Geometry {
        rollers,
        roller_diameter: roller,
        pitch_diameter: pitch,
        contact_angle_deg: angle,
    }
}

fn with_bearing(k: BearingKinematics) -> PointConfig {
    let mut p = PointConfig::default();
    p.bearings
        .push(Bearing {
            name: name_from("b"),
            shaft: 0,
            kinematics: k,
        })
        .unwrap();
    p
}

/// Both the validator and the pipeline refuse with `want`.
fn refused(p: &PointConfig, want: ConfigError, what: &str) {
    assert_eq!(p.validate(), Err(want), "{what}");
    assert!(
        matches!(Small::new(p), Err(PipelineError::Config(e)) if e == want),
        "{what}"
    );
}

const BAD_FLOATS: [f32; 3] = [f32::NAN, f32::INFINITY, f32::NEG_INFINITY];

#[test]
fn non_finite_values_in_every_float_field() {
    for x in BAD_FLOATS {
        type Case = (&'static str, fn(&mut PointConfig, f32), ConfigError);
        let cases: [Case; 12] = [
            (
                "sample rate",
                |p, x| p.sample_rate_hz = x,
                ConfigError::SampleRate,
            ),
            ("scale", |p, x| p.counts_to_g = x, ConfigError::Scale),
            (
                "band lo",
                |p, x| p.band_hz = Some([x, 8000.0]),
                ConfigError::Band,
            ),
            (
                "band hi",
                |p, x| p.band_hz = Some([4000.0, x]),
                ConfigError::Band,
            ),
            ("min rpm", |p, x| p.min_rpm = x, ConfigError::SpeedRange),
            ("max rpm", |p, x| p.max_rpm = x, ConfigError::SpeedRange),
            (
                "speed change",
                |p, x| p.max_speed_change_pct = x,
                ConfigError::SpeedChange,
            ),
            (
                "constant rpm",
                |p, x| p.speed = SpeedInput::Constant { rpm: x },
                ConfigError::ConstantSpeed,
            ),
            (
                "shaft ratio",
                |p, x| p.shafts[0].ratio = x,
                ConfigError::ShaftRatio,
            ),
            (
                "roller diameter",
                |p, x| *p = with_bearing(geometry(9, x, 40.0, 0.0)),
                ConfigError::BearingGeometry,
            ),
            (
                "contact angle",
                |p, x| *p = with_bearing(geometry(9, 8.0, 40.0, x)),
                ConfigError::BearingGeometry,
            ),
            (
                "defect multiple",
                |p, x| {
                    *p = with_bearing(BearingKinematics::Multiples {
                        bpfo_x: 3.5,
                        bpfi_x: x,
                        ftf_x: 0.4,
                        bsf_x: 2.3,
                    })
                },
                ConfigError::BearingMultiples,
            ),
        ];
        for (what, set, want) in cases {
            let mut p = PointConfig::default();
            set(&mut p, x);
            refused(&p, want, &format!("{what} = {x}"));
        }
    }
}

#[test]
fn band_at_or_above_nyquist() {
    // 51.2 kHz sampling: Nyquist 25.6 kHz; the validator keeps a 5 % margin.
    for hi in [25_600.0, 30_000.0, 0.95 * 25_600.0] {
        let mut p = PointConfig::default();
        p.band_hz = Some([5000.0, hi]);
        refused(&p, ConfigError::Band, &format!("band hi {hi}"));
    }
    // A band that fits is accepted (the contrast).
    let mut p = PointConfig::default();
    p.band_hz = Some([5000.0, 0.9 * 25_600.0]);
    assert_eq!(p.validate(), Ok(()));
}

#[test]
fn bearing_geometry_edge_cases() {
    refused(
        &with_bearing(geometry(0, 8.0, 40.0, 0.0)),
        ConfigError::BearingGeometry,
        "zero rollers",
    );
    refused(
        &with_bearing(geometry(9, 40.0, 40.0, 0.0)),
        ConfigError::BearingGeometry,
        "pitch = roller",
    );
    refused(
        &with_bearing(geometry(9, 41.0, 40.0, 0.0)),
        ConfigError::BearingGeometry,
        "pitch < roller",
    );
    refused(
        &with_bearing(geometry(9, 0.0, 40.0, 0.0)),
        ConfigError::BearingGeometry,
        "zero roller",
    );
    refused(
        &with_bearing(geometry(9, 8.0, 40.0, 90.0)),
        ConfigError::BearingGeometry,
        "90 degrees",
    );
    refused(
        &with_bearing(geometry(9, 8.0, 40.0, -1.0)),
        ConfigError::BearingGeometry,
        "negative angle",
    );
    // Contrast: a plausible deep-groove bearing is accepted.
    assert_eq!(
        with_bearing(geometry(9, 7.94, 39.04, 0.0)).validate(),
        Ok(())
    );
}

#[test]
fn duplicate_names_and_dangling_shaft() {
    let mut p = PointConfig::default();
    p.shafts
        .push(Shaft {
            name: name_from("input"),
            ratio: 0.5,
        })
        .unwrap();
    refused(&p, ConfigError::DuplicateName, "two shafts named input");

    let mut p = with_bearing(geometry(9, 8.0, 40.0, 0.0));
    p.bearings[0].shaft = 1;
    refused(&p, ConfigError::BearingShaft, "bearing on shaft 1 of 1");
}

#[test]
fn capacities_refuse_instead_of_growing() {
    // heapless::Vec hands the item back: a fifth bearing or shaft cannot be
    // added silently (the point-file parser reports it: point.rs tests).
    let mut p = PointConfig::default();
    for i in 0..MAX_BEARINGS {
        let b = Bearing {
            name: name_from(&format!("b{i}")),
            shaft: 0,
            kinematics: geometry(9, 8.0, 40.0, 0.0),
        };
        assert!(p.bearings.push(b).is_ok());
    }
    let extra = Bearing {
        name: name_from("b-extra"),
        shaft: 0,
        kinematics: geometry(9, 8.0, 40.0, 0.0),
    };
    assert!(p.bearings.push(extra).is_err());
    assert_eq!(p.bearings.len(), MAX_BEARINGS);
    for i in p.shafts.len()..MAX_SHAFTS {
        let s = Shaft {
            name: name_from(&format!("s{i}")),
            ratio: 1.0,
        };
        assert!(p.shafts.push(s).is_ok());
    }
    let s = Shaft {
        name: name_from("s-extra"),
        ratio: 1.0,
    };
    assert!(p.shafts.push(s).is_err());
    assert_eq!(p.validate(), Ok(()));
}

fn any_f32() -> impl Strategy<Value = f32> {
    prop_oneof![
        Just(f32::NAN),
        Just(f32::INFINITY),
        Just(f32::NEG_INFINITY),
        Just(0.0f32),
        Just(-1.0f32),
        -1.0e6f32..1.0e6,
        0.1f32..60_000.0,
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(3000))]

    /// Random points: the validator and the pipeline constructor never
    /// panic, agree on config errors, and a pipeline exists only for a
    /// point the validator accepts.
    #[test]
    fn random_points_never_panic(
        fs in any_f32(), scale in any_f32(), lo in any_f32(), hi in any_f32(),
        band in any::<bool>(), poles in 0u8..10, min_rpm in any_f32(), max_rpm in any_f32(),
        change in any_f32(), spr in prop_oneof![Just(16u16), Just(64), Just(1024), any::<u16>()],
        revs in prop_oneof![Just(16u16), Just(32), any::<u16>()],
        constant in prop::option::of(any_f32()), ppr in any::<u8>(), tick in any::<u32>(),
        rollers in any::<u16>(), rd in any_f32(), pd in any_f32(), angle in any_f32(),
        ratio in any_f32(), full_scale in any::<i16>(),
    ) {
        let mut p = PointConfig::default();
        p.sample_rate_hz = fs;
        p.counts_to_g = scale;
        p.adc_full_scale = full_scale;
        p.band_hz = band.then_some([lo, hi]);
        p.poles = poles;
        p.min_rpm = min_rpm;
        p.max_rpm = max_rpm;
        p.max_speed_change_pct = change;
        p.samples_per_rev = spr;
        p.revolutions = revs;
        p.speed = match constant {
            Some(rpm) => SpeedInput::Constant { rpm },
            None => SpeedInput::Tach { pulses_per_rev: ppr, tick_hz: tick, tick_at_sample0: 0 },
        };
        p.shafts[0].ratio = ratio;
        let _ = p.bearings.push(Bearing {
            name: name_from("b"),
            shaft: 0,
            kinematics: geometry(rollers, rd, pd, angle),
        });
        let v = p.validate();
        match Small::new(&p) {
            Ok(_) => prop_assert_eq!(v, Ok(())),
            Err(PipelineError::Config(e)) => prop_assert_eq!(v, Err(e)),
            Err(_) => prop_assert_eq!(v, Ok(())),
        }
    }
}
