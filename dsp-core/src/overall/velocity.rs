//! Velocity RMS over the ISO 20816 band (10-1000 Hz) from raw acceleration,
//! and the ISO 20816-3 evaluation zone.
//!
//! Chain: subtract the first finite sample (removes the gravity/DC offset so
//! the start transient is small) -> decimate by a power of two to 4-8 kHz
//! (a 10 Hz corner at 51.2 kHz would put poles within 1e-3 of z = 1, poor
//! in f32) with half-band stages that protect only the band
//! ([`super::halfband`]) -> 4-pole
//! Butterworth band-pass over the band with a trapezoidal integrator folded
//! into one section. The band-pass has two zeros at z = 1; the integrator
//! T/2 (1 + z^-1)/(1 - z^-1) cancels one of them exactly, so the section
//! numerator g(1 - z^-2) becomes g T/2 (1 + z^-1)^2: no pole at DC, no
//! drift, no leak. In-band gain error of the trapezoidal rule is
//! x/tan(x) - 1 with x = pi f / fs (-0.08 % at 100 Hz, -8 % at 1 kHz for
//! 6.4 kHz, the rate at 51.2 and 25.6 kS/s).
//! Samples during the settling time are not counted in the RMS.

use super::halfband::{HalfbandChain, CHUNK, MAX_STAGES};
use super::FLUSH_EVERY;
use crate::frontend::biquad::BiquadCascade;
use crate::frontend::design::{butter_bandpass, DesignError, SosCascade};

/// Standard gravity in mm/s^2 per g (CGPM 1901 conventional value 9.80665 m/s^2).
pub const G_MM_S2: f32 = 9806.65;
/// Target minimum rate of the velocity path (Hz).
pub const VELOCITY_MIN_RATE_HZ: f32 = 4000.0;
/// Poles of the velocity band-pass (2nd order at each edge).
pub const VELOCITY_POLES: u8 = 4;

/// ISO 20816-3 machine group.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum MachineGroup {
    /// Group 1: large machines.
    Large,
    /// Group 2: medium-size machines.
    #[default]
    Medium,
}

/// ISO 20816-3 support class.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Support {
    /// Rigid support.
    #[default]
    Rigid,
    /// Flexible support.
    Flexible,
}

/// ISO 20816 evaluation zone.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Zone {
    /// Newly commissioned machines.
    A,
    /// Acceptable for unrestricted long-term operation.
    B,
    /// Restricted operation.
    C,
    /// Damage may occur.
    D,
}

/// Zone boundaries A/B, B/C, C/D in mm/s RMS.
///
/// FROM MEMORY (ISO 10816-3 / 20816-3 tables as recalled; verify against
/// the standard before relying on them; listed to be verified in
/// docs/sources-to-verify.md): group 1 rigid 2.3/4.5/7.1,
/// flexible 3.5/7.1/11.0; group 2 rigid 1.4/2.8/4.5, flexible 2.3/4.5/7.1.
pub fn zone_limits(group: MachineGroup, support: Support) -> [f32; 3] {
    match (group, support) {
        (MachineGroup::Large, Support::Rigid) => [2.3, 4.5, 7.1],
        (MachineGroup::Large, Support::Flexible) => [3.5, 7.1, 11.0],
        (MachineGroup::Medium, Support::Rigid) => [1.4, 2.8, 4.5],
        (MachineGroup::Medium, Support::Flexible) => [2.3, 4.5, 7.1],
    }
}

/// Zone of a velocity RMS; a value on a boundary belongs to the lower zone.
/// NaN gives zone D (fail safe).
///
/// ```
/// use dsp_core::overall::velocity::{zone, MachineGroup, Support, Zone};
/// assert_eq!(zone(3.0, MachineGroup::Medium, Support::Rigid), Zone::C);
/// ```
pub fn zone(v_rms_mm_s: f32, group: MachineGroup, support: Support) -> Zone {
    let [ab, bc, cd] = zone_limits(group, support);
    if v_rms_mm_s <= ab {
        Zone::A
    } else if v_rms_mm_s <= bc {
        Zone::B
    } else if v_rms_mm_s <= cd {
        Zone::C
    } else {
        Zone::D
    }
}

/// Options of the velocity path.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct VelocityConfig {
    /// Compute velocity RMS at all.
    pub enabled: bool,
    /// Band edges in Hz (ISO 20816: 10-1000 Hz).
    pub band_hz: [f32; 2],
    /// Machine group for the zone.
    pub group: MachineGroup,
    /// Support class for the zone.
    pub support: Support,
    /// Start transient excluded from the RMS, in seconds.
    pub settle_s: f32,
}

impl Default for VelocityConfig {
    fn default() -> Self {
        Self {
            enabled: true,
            band_hz: [10.0, 1000.0],
            group: MachineGroup::Medium,
            support: Support::Rigid,
            settle_s: 0.25,
        }
    }
}

/// Why the velocity path could not be built.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum VelocityError {
    /// Band-pass design refused the band at the decimated rate.
    Design(DesignError),
    /// The upper band edge is above a quarter of the decimated rate (the
    /// half-band stages protect no more); the value is that rate in Hz
    /// (rounded down).
    BandAboveQuarterRate(u32),
    /// Settling time negative or not finite.
    Settle,
}

impl core::fmt::Display for VelocityError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Design(e) => write!(f, "velocity band: {e}"),
            Self::BandAboveQuarterRate(r) => write!(
                f,
                "velocity band upper edge must be <= {} Hz (a quarter of the {r} Hz velocity rate)",
                r / 4
            ),
            Self::Settle => f.write_str("velocity settling time must be finite and >= 0"),
        }
    }
}

impl core::error::Error for VelocityError {}

/// Largest power-of-two decimation factor (at most 2^6) keeping the rate
/// >= 4 kHz.
pub fn velocity_decimation(fs_hz: f32) -> u16 {
    1u16 << velocity_stages(fs_hz)
}

/// Number of factor-2 stages of [`velocity_decimation`].
fn velocity_stages(fs_hz: f32) -> usize {
    let max = crate::num::f32_to_u32_sat(fs_hz / VELOCITY_MIN_RATE_HZ).max(1);
    let stages = usize::try_from(max.ilog2()).unwrap_or(0);
    stages.min(MAX_STAGES)
}

/// Streaming velocity RMS meter.
#[derive(Clone, Debug)]
pub struct VelocityMeter {
    shift: Option<f32>,
    dec: HalfbandChain,
    filt: BiquadCascade,
    rate_hz: f32,
    settle: u32,
    seen: u32,
    sumsq: f64,
    /// Squares not yet added to `sumsq`, and how many.
    part: f32,
    pending: u32,
    count: u32,
}

/// A validated velocity path (small), applied in place by
/// [`VelocityMeter::apply`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct VelocityPlan {
    stages: usize,
    sos: SosCascade,
    rate_hz: f32,
    settle: u32,
}

impl VelocityPlan {
    /// Validates the options and designs the filters for input rate `fs_hz`.
    pub(crate) fn new(fs_hz: f32, cfg: &VelocityConfig) -> Result<Self, VelocityError> {
        if !(cfg.settle_s.is_finite() && cfg.settle_s >= 0.0) {
            return Err(VelocityError::Settle);
        }
        let stages = velocity_stages(fs_hz);
        let rate = fs_hz / f32::from(1u16 << stages);
        // NaN edges are refused by the band-pass design below.
        if stages > 0 && cfg.band_hz[1] > rate / 4.0 {
            let r = crate::num::f32_to_u32_sat(rate);
            return Err(VelocityError::BandAboveQuarterRate(r));
        }
        let mut sos = butter_bandpass(cfg.band_hz[0], cfg.band_hz[1], rate, VELOCITY_POLES)
            .map_err(VelocityError::Design)?;
        // Fold the trapezoidal integrator and the g -> mm/s^2 scale into section 0.
        if let Some(s) = sos.sections_mut().first_mut() {
            let g = f64::from(s.b[0]) * f64::from(G_MM_S2) * 0.5 / f64::from(rate);
            let g = crate::num::f64_to_f32(g);
            s.b = [g, 2.0 * g, g];
        }
        Ok(Self {
            stages,
            sos,
            rate_hz: rate,
            settle: crate::num::f32_to_u32_sat(cfg.settle_s * rate),
        })
    }
}

impl VelocityMeter {
    /// Builds the meter for input rate `fs_hz` (acceleration in g).
    pub fn new(fs_hz: f32, cfg: &VelocityConfig) -> Result<Self, VelocityError> {
        let plan = VelocityPlan::new(fs_hz, cfg)?;
        let mut v = Self::unconfigured();
        v.apply(&plan);
        Ok(v)
    }

    /// A meter without filters, for constant context; configured in place
    /// by [`Self::apply`].
    pub(crate) const fn unconfigured() -> Self {
        Self {
            shift: None,
            dec: HalfbandChain::new(0),
            filt: BiquadCascade::new(SosCascade::EMPTY),
            rate_hz: 0.0,
            settle: 0,
            seen: 0,
            sumsq: 0.0,
            part: 0.0,
            pending: 0,
            count: 0,
        }
    }

    /// Designs the planned filters in place and clears the state.
    pub(crate) fn apply(&mut self, plan: &VelocityPlan) {
        self.dec.reconfigure(plan.stages);
        self.filt = BiquadCascade::new(plan.sos);
        self.rate_hz = plan.rate_hz;
        self.settle = plan.settle;
        self.shift = None;
        self.seen = 0;
        self.sumsq = 0.0;
        self.part = 0.0;
        self.pending = 0;
        self.count = 0;
    }

    /// Rate of the velocity signal (Hz).
    pub fn rate_hz(&self) -> f32 {
        self.rate_hz
    }

    /// Feeds raw acceleration (g, finite).
    pub fn process(&mut self, block: &[f32]) {
        let Some(&x0) = block.first() else { return };
        let k = match self.shift {
            Some(k) => k,
            None => {
                // The first stage sees x0 before the start and subtracts
                // it from its outputs: no step at the start.
                self.dec.prefill(x0);
                *self.shift.insert(x0)
            }
        };
        // Decimated samples of one chunk (at most CHUNK, at factor 1), band-
        // passed together: section by section over the chunk, the same
        // arithmetic per sample as one at a time.
        let mut buf = [0f32; CHUNK];
        let mut rest = block;
        while !rest.is_empty() {
            let (took, n) = self.dec.process(rest, k, &mut buf);
            rest = rest.get(took..).unwrap_or(&[]);
            let v = buf.get_mut(..n).unwrap_or(&mut []);
            self.filt.process(v);
            let skip = usize::try_from(self.settle - self.seen.min(self.settle))
                .unwrap_or(usize::MAX)
                .min(v.len());
            self.seen += u32::try_from(skip).unwrap_or(0);
            // Squares summed in f32 and added to the f64 total every
            // FLUSH_EVERY counted samples (f64 arithmetic is in software on
            // the Cortex-M4F); the flush points do not depend on how the
            // input is split. Locals, so the loop keeps them in registers.
            let (mut part, mut pending) = (self.part, self.pending);
            for &v in v.get(skip..).unwrap_or(&[]) {
                part += v * v;
                pending += 1;
                if pending >= FLUSH_EVERY {
                    self.sumsq += f64::from(part);
                    (part, pending) = (0.0, 0);
                }
            }
            let counted = u32::try_from(n - skip).unwrap_or(u32::MAX);
            self.count = self.count.saturating_add(counted);
            (self.part, self.pending) = (part, pending);
        }
    }

    /// Velocity RMS in mm/s and the number of samples in it.
    pub fn rms_mm_s(&self) -> (f32, u32) {
        if self.count == 0 {
            return (0.0, 0);
        }
        let ms = (self.sumsq + f64::from(self.part)) / f64::from(self.count);
        (crate::num::f64_to_f32(libm::sqrt(ms)), self.count)
    }

    /// Clears the state.
    pub fn reset(&mut self) {
        self.shift = None;
        self.dec.reset();
        self.filt.reset();
        self.seen = 0;
        self.sumsq = 0.0;
        self.part = 0.0;
        self.pending = 0;
        self.count = 0;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zones_from_recalled_table() {
        // Recalled ISO 10816-3 group 2 rigid: 1.4 / 2.8 / 4.5 mm/s (from memory).
        let z = |v| zone(v, MachineGroup::Medium, Support::Rigid);
        assert_eq!(z(1.0), Zone::A);
        assert_eq!(z(1.4), Zone::A);
        assert_eq!(z(2.0), Zone::B);
        assert_eq!(z(4.0), Zone::C);
        assert_eq!(z(9.0), Zone::D);
        assert_eq!(z(f32::NAN), Zone::D);
        assert_eq!(zone(10.0, MachineGroup::Large, Support::Flexible), Zone::C);
    }

    #[test]
    fn decimation_choice() {
        assert_eq!(velocity_decimation(51200.0), 8);
        assert_eq!(velocity_decimation(25600.0), 4);
        assert_eq!(velocity_decimation(12000.0), 2);
        assert_eq!(velocity_decimation(102400.0), 16);
        assert_eq!(velocity_decimation(44100.0), 8);
        assert_eq!(velocity_decimation(7999.0), 1);
        assert_eq!(velocity_decimation(3000.0), 1);
        assert_eq!(velocity_decimation(1e9), 64);
        assert_eq!(velocity_decimation(f32::NAN), 1);
        // a band the half-bands do not protect is refused with the rate
        let cfg = VelocityConfig {
            band_hz: [10.0, 1700.0],
            ..VelocityConfig::default()
        };
        assert_eq!(
            VelocityPlan::new(51200.0, &cfg).err(),
            Some(VelocityError::BandAboveQuarterRate(6400))
        );
    }
}
