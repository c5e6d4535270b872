//! Machine descriptions: TOML parsing, the example file, and validation
//! errors that name the field at fault.
#![allow(
    clippy::field_reassign_with_default,
    clippy::unwrap_used,
    clippy::indexing_slicing
)]

use host_sim::simulate::{simulate, Fault, MachineSpec, SpecError, SpeedProfile};

#[test]
fn example_spec_parses_validates_and_runs() {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/machine.toml");
    let s = MachineSpec::from_toml_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    assert_eq!(
        s.speed,
        SpeedProfile::Ramp {
            start_rpm: 900.0,
            end_rpm: 1800.0
        }
    );
    assert_eq!(s.bearings.len(), 2);
    assert_eq!(s.bearings[0].fault, Fault::Inner);
    // Unlisted keys take the defaults.
    assert_eq!(s.bearings[1].bpfo, 3.5848);
    s.validate().unwrap();
    let mut short = s.clone();
    short.seconds = 0.5;
    let out = simulate(&short, 1).unwrap();
    assert_eq!(out.accel.len(), 12_800);
}

#[test]
fn default_round_trips_through_toml() {
    let d = MachineSpec::default();
    let text = toml::to_string(&d).unwrap();
    assert_eq!(MachineSpec::from_toml_str(&text).unwrap(), d);
    d.validate().unwrap();
}

#[test]
fn unknown_keys_and_bad_types_are_parse_errors() {
    let e = MachineSpec::from_toml_str("[tach]\nduty_cycle = 0.1\n").unwrap_err();
    assert!(
        matches!(&e, SpecError::Parse(m) if m.contains("duty_cycle")),
        "{e}"
    );
    let e = MachineSpec::from_toml_str("seconds = \"ten\"\n").unwrap_err();
    assert!(matches!(e, SpecError::Parse(_)));
    let e = MachineSpec::from_toml_str("[speed]\nkind = \"sprint\"\nrpm = 3\n").unwrap_err();
    assert!(e.to_string().contains("sprint"), "{e}");
}

fn err_of(edit: impl FnOnce(&mut MachineSpec)) -> SpecError {
    let mut s = MachineSpec::default();
    edit(&mut s);
    let e = simulate(&s, 1).unwrap_err();
    assert_eq!(s.validate().unwrap_err().to_string(), e.to_string());
    e
}

fn field(e: &SpecError) -> String {
    match e {
        SpecError::OutOfRange { field, .. }
        | SpecError::UnknownShaft { field, .. }
        | SpecError::Aliasing { field, .. } => field.clone(),
        other => format!("{other}"),
    }
}

#[test]
fn bad_values_name_their_field() {
    type Edit = Box<dyn FnOnce(&mut MachineSpec)>;
    let cases: Vec<(&str, Edit)> = vec![
        (
            "speed.rpm",
            Box::new(|s| s.speed = SpeedProfile::Constant { rpm: f64::NAN }),
        ),
        (
            "speed.rpm",
            Box::new(|s| s.speed = SpeedProfile::Constant { rpm: -5.0 }),
        ),
        (
            "speed.end_rpm",
            Box::new(|s| {
                s.speed = SpeedProfile::Ramp {
                    start_rpm: 100.0,
                    end_rpm: f64::INFINITY,
                }
            }),
        ),
        (
            "speed.start_rpm",
            Box::new(|s| {
                s.speed = SpeedProfile::RandomWalk {
                    start_rpm: 50.0,
                    min_rpm: 100.0,
                    max_rpm: 200.0,
                    step_rpm_per_sqrt_s: 1.0,
                }
            }),
        ),
        ("fs_hz", Box::new(|s| s.fs_hz = 12_345.5)),
        ("fs_hz", Box::new(|s| s.fs_hz = 0.0)),
        ("seconds", Box::new(|s| s.seconds = 0.0)),
        ("bearing[0].slip", Box::new(|s| s.bearings[0].slip = 0.5)),
        (
            "bearing[0].damping_ratio",
            Box::new(|s| s.bearings[0].damping_ratio = 0.0),
        ),
        (
            "bearing[0].shaft",
            Box::new(|s| s.bearings[0].shaft = "camshaft".into()),
        ),
        (
            "bearing[0].resonance_hz",
            Box::new(|s| s.bearings[0].resonance_hz = 13_000.0),
        ),
        (
            "mesh[1].shaft",
            Box::new(|s| s.gears[1].shaft = "nowhere".into()),
        ),
        ("mesh[0]", Box::new(|s| s.gears[0].teeth = 600)), // 601 x 24.7 Hz > 12.8 kHz
        ("shaft[1].ratio", Box::new(|s| s.shafts[1].ratio = 0.0)),
        ("noise.rms_g", Box::new(|s| s.noise.rms_g = f64::NAN)),
        (
            "noise.snr_db",
            Box::new(|s| s.noise.snr_db = Some(f64::NAN)),
        ),
        ("tach.dropout_prob", Box::new(|s| s.tach.dropout_prob = 1.0)),
        ("tach.duty", Box::new(|s| s.tach.duty = 1e-4)), // 0.1 sample wide
        ("tach.phase_rev", Box::new(|s| s.tach.phase_rev = 1.0)),
    ];
    for (want, edit) in cases {
        let e = err_of(edit);
        assert_eq!(field(&e), want, "{e}");
        assert!(e.to_string().contains(want), "message names the field: {e}");
    }
    let e = err_of(|s| s.shafts[2].name = "input".into());
    assert!(matches!(e, SpecError::DuplicateShaft { .. }), "{e}");
    let e = err_of(|s| s.seconds = 3000.0); // 76.8 M samples
    assert!(matches!(e, SpecError::TooManySamples { .. }), "{e}");
}
