//! A seeded gearbox/bearing vibration simulator.
//!
//! From a [`MachineSpec`] it produces an acceleration channel (g) and a
//! once-per-rev tach pulse channel (V), plus the ground truth a check needs:
//! the true rev times, the pulse edges actually emitted, every bearing impact
//! and the speed at every sample.
//!
//! Model (physically motivated, after Randall & Antoni, "Rolling element
//! bearing diagnostics — a tutorial", MSSP 25 (2011) 485–520):
//! * the tach-shaft speed follows the profile; shaft angle is its
//!   trapezoidal integral (exact for piecewise-linear speed);
//! * a localised bearing defect gives impacts spaced 1/order of a shaft
//!   revolution in angle, each interval jittered by the random slip;
//!   inner-race impacts are amplitude modulated at the shaft rate and
//!   rolling-element impacts at the cage rate (FTF) by the load zone;
//! * each impact excites a damped structural resonance: the impulse
//!   response `A exp(-zeta wn t) sin(wd t)` is added starting at the impact's
//!   exact (fractional-sample) time;
//! * gear meshes are tones at teeth x shaft order with sidebands at +-1x,
//!   optionally driving a structural ringing (`carrier_g`) and modulated
//!   once per turn by a damaged tooth (`fault_shaft`, `fault_depth`);
//!   imbalance is a 1x sine; broadband Gaussian noise is added last.
//!
//! The tach channel is band-limited the simplest way: each sample holds the
//! pulse's mean level over +-1 sample, i.e. each edge is a linear rise over 2
//! samples centred on the edge time, so linear interpolation of the
//! mid-level crossing between the two samples around it recovers the edge
//! time exactly.
//!
//! ```
//! use host_sim::simulate::{simulate, MachineSpec};
//! let mut spec = MachineSpec::default();
//! spec.seconds = 0.5;
//! let out = simulate(&spec, 1).unwrap();
//! assert_eq!(out.accel.len(), 12_800);
//! assert_eq!(out.tach.len(), out.accel.len());
//! ```

pub mod rng;
pub mod spec;

pub use spec::{
    BearingSpec, Fault, GearMeshSpec, MachineSpec, NoiseSpec, ShaftSpec, SpecError, SpeedProfile,
    TachSpec, DEMO_MACHINE_TOML, MAX_SAMPLES,
};

use core::f64::consts::TAU;
use dsp_core::num::f64_to_f32;
use rng::Rng;

// RNG stream ids: one per part of the model.
const STREAM_SPEED: u64 = 1;
const STREAM_TACH: u64 = 2;
const STREAM_NOISE: u64 = 3;
const STREAM_BEARING: u64 = 100;

/// One bearing impact.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Impact {
    /// Index into `MachineSpec::bearings`.
    pub bearing: usize,
    /// Time of the impact, s.
    pub time_s: f64,
    /// Amplitude of its decaying sine after load-zone modulation, g.
    pub amplitude_g: f64,
}

/// Simulator output.
#[derive(Debug, Clone, PartialEq)]
pub struct SimOutput {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Acceleration, g.
    pub accel: Vec<f32>,
    /// Tach pulse channel, V.
    pub tach: Vec<f32>,
    /// True once-per-rev times of the tach shaft (at `tach.phase_rev`), s.
    pub true_edges_s: Vec<f64>,
    /// Rising edges actually in the tach channel (jittered, dropouts
    /// removed), s.
    pub pulse_edges_s: Vec<f64>,
    /// Number of revs whose pulse was dropped.
    pub dropped_pulses: usize,
    /// Every bearing impact, in time order per bearing.
    pub impacts: Vec<Impact>,
    /// Tach-shaft speed at each sample, Hz.
    pub speed_hz: Vec<f32>,
    /// RMS of the noise added, g.
    pub noise_rms_g: f64,
}

/// Saturating f64 -> usize (NaN and negatives give 0).
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
fn f64_to_usize_sat(x: f64) -> usize {
    // Float-to-int `as` saturates and maps NaN to 0 (Rust reference).
    x as usize
}

/// Tach-shaft speed and angle at every sample.
struct AngleTrack {
    fs: f64,
    /// Speed, Hz, per sample.
    speed: Vec<f64>,
    /// Angle, revolutions, per sample (theta[0] = 0).
    theta: Vec<f64>,
}

impl AngleTrack {
    fn new(spec: &MachineSpec, n: usize, seed: u64) -> Self {
        let fs = spec.fs_hz;
        let t_end = n as f64 / fs;
        let speed: Vec<f64> = match spec.speed {
            SpeedProfile::Constant { rpm } => vec![rpm / 60.0; n],
            SpeedProfile::Ramp { start_rpm, end_rpm } => {
                let (f0, f1) = (start_rpm / 60.0, end_rpm / 60.0);
                (0..n)
                    .map(|i| f0 + (f1 - f0) * (i as f64 / fs) / t_end)
                    .collect()
            }
            SpeedProfile::RandomWalk {
                start_rpm,
                min_rpm,
                max_rpm,
                step_rpm_per_sqrt_s,
            } => {
                let dtc = 0.01;
                let mut rng = Rng::new(seed, STREAM_SPEED);
                let steps = f64_to_usize_sat((t_end / dtc).ceil()) + 2;
                let (lo, hi) = (min_rpm / 60.0, max_rpm / 60.0);
                let sd = step_rpm_per_sqrt_s / 60.0 * dtc.sqrt();
                let mut knots = Vec::with_capacity(steps);
                let mut f = start_rpm / 60.0;
                for _ in 0..steps {
                    knots.push(f);
                    f += sd * rng.normal();
                    // Reflect at the bounds (repeat in case a step is larger
                    // than the band), then clamp for safety.
                    for _ in 0..4 {
                        if f > hi {
                            f = 2.0 * hi - f;
                        }
                        if f < lo {
                            f = 2.0 * lo - f;
                        }
                    }
                    f = f.clamp(lo, hi);
                }
                (0..n)
                    .map(|i| {
                        let u = i as f64 / fs / dtc;
                        let k = f64_to_usize_sat(u.floor());
                        let a = knots.get(k).copied().unwrap_or(f);
                        let b = knots.get(k + 1).copied().unwrap_or(a);
                        a + (b - a) * (u - u.floor())
                    })
                    .collect()
            }
        };
        let mut theta = Vec::with_capacity(n);
        let mut acc = 0.0;
        let mut prev: Option<f64> = None;
        for &f in &speed {
            if let Some(p) = prev {
                acc += 0.5 * (p + f) / fs;
            }
            theta.push(acc);
            prev = Some(f);
        }
        AngleTrack { fs, speed, theta }
    }

    /// Time (s) at which the tach-shaft angle reaches `rev`, or None if not
    /// within the record. Exact for linear speed between samples.
    fn time_at(&self, rev: f64) -> Option<f64> {
        if rev < 0.0 {
            return None;
        }
        // First sample with theta > rev; the crossing is in [k-1, k].
        let k = self.theta.partition_point(|&x| x <= rev);
        let i = k.checked_sub(1)?;
        let t0 = self.theta.get(i)?;
        let (f0, f1) = (self.speed.get(i)?, self.speed.get(k)?);
        let dt = 1.0 / self.fs;
        // theta(tau) = t0 + f0 tau dt + (f1 - f0) tau^2 dt / 2, tau in [0, 1].
        let d = rev - t0;
        let a = 0.5 * (f1 - f0) * dt;
        let b = f0 * dt;
        let tau = if a.abs() < 1e-15 * b.abs() {
            d / b
        } else {
            // Numerically stable root of a tau^2 + b tau - d = 0 (b > 0).
            2.0 * d / (b + (b * b + 4.0 * a * d).max(0.0).sqrt())
        };
        Some((i as f64 + tau.clamp(0.0, 1.0)) * dt)
    }

    /// Tach-shaft speed (Hz) at time t (linear between samples).
    fn speed_at(&self, t: f64) -> f64 {
        let u = t * self.fs;
        let k = f64_to_usize_sat(u.floor());
        let a = self
            .speed
            .get(k)
            .or(self.speed.last())
            .copied()
            .unwrap_or(1.0);
        let b = self.speed.get(k + 1).copied().unwrap_or(a);
        a + (b - a) * (u - u.floor()).clamp(0.0, 1.0)
    }
}

/// Adds `A exp(-zeta wn tau) sin(wd tau)`, tau = t - t0, to `out` for t >= t0.
fn add_impulse_response(out: &mut [f64], fs: f64, t0: f64, amp: f64, fn_hz: f64, zeta: f64) {
    let wn = TAU * fn_hz;
    let sigma = zeta * wn;
    let wd = wn * (1.0 - zeta * zeta).sqrt();
    // Until the envelope is 1e-5 of its start (ln 1e5 = 11.5).
    let dur = 11.513 / sigma;
    let first = f64_to_usize_sat((t0 * fs).ceil());
    let last = f64_to_usize_sat(((t0 + dur) * fs).floor()).min(out.len());
    if let Some(seg) = out.get_mut(first..last.max(first)) {
        for (j, y) in seg.iter_mut().enumerate() {
            let tau = (first + j) as f64 / fs - t0;
            *y += amp * (-sigma * tau).exp() * (wd * tau).sin();
        }
    }
}

/// Load-zone modulation factor in [1 - depth, 1] for a part at angle `rev`
/// (revolutions) relative to the load zone centre.
fn load_zone(depth: f64, rev: f64) -> f64 {
    (1.0 - depth) + depth * 0.5 * (1.0 + (TAU * rev).cos())
}

/// Runs the simulation. Same spec and seed give bit-identical output.
pub fn simulate(spec: &MachineSpec, seed: u64) -> Result<SimOutput, SpecError> {
    spec.validate()?;
    let fs = spec.fs_hz;
    let n = f64_to_usize_sat((spec.seconds * fs).round()).max(2);
    let t_end = n as f64 / fs;
    let track = AngleTrack::new(spec, n, seed);
    let theta_end = track.theta.last().copied().unwrap_or(0.0);

    let mut accel = vec![0.0f64; n];

    // Shaft tones: imbalance and gear meshes (revolutions of each shaft =
    // ratio x tach-shaft revolutions).
    for s in &spec.shafts {
        if s.imbalance_g > 0.0 {
            let ph = s.imbalance_phase_deg.to_radians();
            for (y, th) in accel.iter_mut().zip(&track.theta) {
                *y += s.imbalance_g * (TAU * s.ratio * th + ph).sin();
            }
        }
    }
    for g in &spec.gears {
        let ratio = spec
            .shaft_index(&g.shaft)
            .and_then(|i| spec.shafts.get(i))
            .map_or(1.0, |s| s.ratio);
        let z = f64::from(g.teeth);
        let fault_ratio = spec
            .shaft_index(&g.fault_shaft)
            .and_then(|i| spec.shafts.get(i))
            .map(|s| s.ratio);
        for (i, (y, th)) in accel.iter_mut().zip(&track.theta).enumerate() {
            let a = TAU * ratio * th;
            // A damaged tooth: once per turn of its shaft.
            let m = fault_ratio.map_or(1.0, |r| 1.0 + g.fault_depth * (TAU * r * th).cos());
            *y += m * g.amplitude_g * (z * a).sin()
                + g.sideband_g * (((z + 1.0) * a).sin() + ((z - 1.0) * a).sin());
            if g.carrier_g > 0.0 {
                let t = i as f64 / fs;
                *y +=
                    m * g.carrier_g * 0.5 * (1.0 + (z * a).cos()) * (TAU * g.carrier_hz * t).sin();
            }
        }
    }

    // Bearing impacts.
    let mut impacts = Vec::new();
    for (bi, b) in spec.bearings.iter().enumerate() {
        let order = spec.impact_order(b);
        if order <= 0.0 || b.impact_g <= 0.0 {
            continue;
        }
        let ratio = spec
            .shaft_index(&b.shaft)
            .and_then(|i| spec.shafts.get(i))
            .map_or(1.0, |s| s.ratio);
        let mut rng = Rng::new(seed, STREAM_BEARING + bi as u64);
        // Mean spacing in tach-shaft revolutions.
        let spacing = 1.0 / (order * ratio);
        let cage_phase = rng.uniform();
        let mut at = rng.uniform() * spacing;
        while at < theta_end {
            let Some(t) = track.time_at(at) else { break };
            let shaft_rev = ratio * at;
            let m = match b.fault {
                Fault::Inner => load_zone(b.load_zone_depth, shaft_rev),
                Fault::Ball => load_zone(b.load_zone_depth, b.ftf * shaft_rev + cage_phase),
                Fault::Outer | Fault::None => 1.0,
            };
            let amp = b.impact_g * m;
            add_impulse_response(&mut accel, fs, t, amp, b.resonance_hz, b.damping_ratio);
            impacts.push(Impact {
                bearing: bi,
                time_s: t,
                amplitude_g: amp,
            });
            // Random slip: each interval varies by `slip` (s.d.), clipped at
            // 3 s.d. so intervals stay positive.
            let jitter = (b.slip * rng.normal()).clamp(-3.0 * b.slip, 3.0 * b.slip);
            at += spacing * (1.0 + jitter);
        }
    }

    // Noise.
    let noise_rms_g = match spec.noise.snr_db {
        Some(snr) => {
            let p = accel.iter().map(|x| x * x).sum::<f64>() / n as f64;
            p.sqrt() / 10f64.powf(snr / 20.0)
        }
        None => spec.noise.rms_g,
    };
    if noise_rms_g > 0.0 {
        let mut rng = Rng::new(seed, STREAM_NOISE);
        for y in &mut accel {
            *y += noise_rms_g * rng.normal();
        }
    }

    // Tach.
    let ts = &spec.tach;
    let mut rng = Rng::new(seed, STREAM_TACH);
    let mut true_edges_s = Vec::new();
    let mut pulse_edges_s = Vec::new();
    let mut dropped_pulses = 0usize;
    let mut tach = vec![0.0f64; n];
    let mut k = 0.0f64;
    loop {
        let rev = k + ts.phase_rev;
        k += 1.0;
        if rev <= 0.0 {
            continue;
        }
        if rev >= theta_end {
            break;
        }
        let Some(t) = track.time_at(rev) else { break };
        true_edges_s.push(t);
        // Draw both numbers every rev so dropouts do not shift the jitter.
        let drop = rng.uniform() < ts.dropout_prob;
        let te = t + ts.jitter_s * rng.normal();
        if drop {
            dropped_pulses += 1;
            continue;
        }
        let width = ts.duty / track.speed_at(t);
        // Pulse averaged over a 2-sample box: sample i holds the mean level
        // over [i - 1, i + 1] / fs, a linear 2-sample rise centred on te.
        let lo = f64_to_usize_sat((te * fs - 1.0).floor());
        let hi = f64_to_usize_sat(((te + width) * fs + 2.0).ceil()).min(n);
        if let Some(seg) = tach.get_mut(lo..hi.max(lo)) {
            for (j, y) in seg.iter_mut().enumerate() {
                let c = (lo + j) as f64 / fs;
                let a = (c - 1.0 / fs).max(te);
                let bnd = (c + 1.0 / fs).min(te + width);
                if bnd > a {
                    *y += 0.5 * (bnd - a) * fs;
                }
            }
        }
        if te > 0.0 && te < t_end {
            pulse_edges_s.push(te);
        }
    }

    // Large jitter could reorder neighbouring edges.
    pulse_edges_s.sort_by(f64::total_cmp);

    Ok(SimOutput {
        fs,
        accel: accel.into_iter().map(f64_to_f32).collect(),
        tach: tach
            .into_iter()
            .map(|v| f64_to_f32(v.clamp(0.0, 1.0) * ts.high_v))
            .collect(),
        true_edges_s,
        pulse_edges_s,
        dropped_pulses,
        impacts,
        speed_hz: track.speed.into_iter().map(f64_to_f32).collect(),
        noise_rms_g,
    })
}
