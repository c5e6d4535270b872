//! Repeatability: the simulator is a pure function of (spec, seed).
#![allow(
    clippy::field_reassign_with_default,
    clippy::unwrap_used,
    clippy::indexing_slicing
)]

use host_sim::simulate::{simulate, Fault, MachineSpec};

fn spec() -> MachineSpec {
    let mut s = MachineSpec::default();
    s.seconds = 1.0;
    s.tach.jitter_s = 1e-5;
    s.tach.dropout_prob = 0.05;
    s.bearings[0].fault = Fault::Inner;
    s
}

#[test]
fn same_seed_gives_identical_output() {
    let a = simulate(&spec(), 42).unwrap();
    let b = simulate(&spec(), 42).unwrap();
    // Bit-for-bit, every field.
    assert_eq!(a, b);
    let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
    assert_eq!(bits(&a.accel), bits(&b.accel));
}

#[test]
fn different_seed_gives_different_output() {
    let a = simulate(&spec(), 42).unwrap();
    let b = simulate(&spec(), 43).unwrap();
    let differing = a.accel.iter().zip(&b.accel).filter(|(x, y)| x != y).count();
    assert!(
        differing > a.accel.len() * 9 / 10,
        "{differing} samples differ"
    );
    assert_ne!(a.impacts, b.impacts);
    assert_ne!(a.pulse_edges_s, b.pulse_edges_s);
    // The kinematic truth does not depend on the seed at constant speed.
    assert_eq!(a.true_edges_s, b.true_edges_s);
}

#[test]
fn noise_level_does_not_move_the_impacts() {
    // Separate random streams per model part.
    let a = simulate(&spec(), 7).unwrap();
    let mut s = spec();
    s.noise.rms_g = 0.5;
    let b = simulate(&s, 7).unwrap();
    assert_eq!(a.impacts, b.impacts);
    assert_eq!(a.tach, b.tach);
    assert_ne!(a.accel, b.accel);
}

#[test]
fn snr_sets_the_noise_relative_to_the_signal() {
    let mut s = spec();
    s.noise.rms_g = 0.0;
    let clean = simulate(&s, 8).unwrap();
    s.noise.snr_db = Some(10.0);
    let noisy = simulate(&s, 8).unwrap();
    let rms = |v: &[f64]| (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt();
    let sig: Vec<f64> = clean.accel.iter().map(|&x| f64::from(x)).collect();
    let noise: Vec<f64> = noisy
        .accel
        .iter()
        .zip(&clean.accel)
        .map(|(&n, &c)| f64::from(n) - f64::from(c))
        .collect();
    // SNR = 20 log10(rms signal / rms noise) (definition).
    let snr = 20.0 * (rms(&sig) / rms(&noise)).log10();
    assert!((snr - 10.0).abs() < 0.1, "measured SNR {snr} dB");
}
