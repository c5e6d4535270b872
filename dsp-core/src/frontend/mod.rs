//! Fused streaming envelope front end: band-pass -> rectify -> decimate,
//! plus overall indicators and velocity RMS of the raw acceleration, all in
//! one pass over each input block.
//!
//! Input is processed in chunks of [`CHUNK`] samples held in a stack
//! buffer; per-sample arithmetic does not depend on where blocks or chunks
//! start, so the output is bit-identical for any split of the input
//! (checked by a proptest). Non-finite f32 samples are replaced by the last
//! finite sample in the filters, skipped by the statistics and counted in
//! [`Overall::non_finite`].
//!
//! Cost on the Cortex-M4F, measured by `boards/qemu-bench` (instruction
//! counts under QEMU, rustc 1.95; see docs/benchmarks.md): the 8-pole
//! band-pass with the rectifier, writing straight into the decimator by 8
//! (half-bands of 7, 11 and 39 taps), 41 instructions per input sample;
//! overall indicators 28; the whole `push_i16` path 88 with velocity off, 141
//! with the velocity path (53 of its own).
//!
//! RAM: one `FrontEnd` is 5.6 KB on the target (two decimators of 2.6 KB:
//! window-method tap pool plus history, half-band taps read from tables);
//! stack use per call about 1.5 KB (chunk buffers of [`CHUNK`] samples here
//! and in the velocity path). [`FrontEnd::reconfigure`] designs everything in
//! place, so a statically placed front end never needs a second copy.

pub mod biquad;
pub mod decimate;
pub mod design;
mod rate;
pub mod rectify;

pub use rate::decimation_for;

use crate::frontend::biquad::BiquadCascade;
use crate::frontend::decimate::{DecimateError, Decimator, DecimatorPlan};
use crate::frontend::design::{bandpass_centre_hz, butter_bandpass, DesignError, SosCascade};
use crate::frontend::rectify::Rectifier;
use crate::overall::velocity::{
    zone, MachineGroup, Support, VelocityConfig, VelocityError, VelocityMeter, VelocityPlan,
};
use crate::overall::{Overall, OverallAcc};

/// Samples processed per internal chunk (stack buffer of 512 bytes); the
/// decimator's block, so each chunk is one pass through its stages.
pub const CHUNK: usize = crate::frontend::decimate::BLOCK;

/// Configuration of the front end.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct FrontEndConfig {
    /// Input sample rate (Hz).
    pub sample_rate_hz: f32,
    /// Band-pass edges [lo, hi] (Hz) around the structural resonance.
    pub band_hz: [f32; 2],
    /// Band-pass poles: 2, 4, 6 or 8.
    pub poles: u8,
    /// Rectifier of the band-passed signal.
    pub rectifier: Rectifier,
    /// Decimation factor of the envelope, 1..=1024 with prime factors <= 7.
    pub decimation: u16,
    /// Scale of [`FrontEnd::push_i16`] input: g per ADC count.
    pub counts_to_g: f32,
    /// ADC full scale in counts; |count| >= this is counted as clipped.
    pub adc_full_scale: i16,
    /// Velocity RMS / ISO 20816 options.
    pub velocity: VelocityConfig,
}

impl Default for FrontEndConfig {
    /// 51.2 kHz, 6-12 kHz 8-pole band, squared envelope, decimate by 8,
    /// +-16 g over the i16 range, velocity 10-1000 Hz.
    fn default() -> Self {
        Self {
            sample_rate_hz: 51200.0,
            band_hz: [6000.0, 12000.0],
            poles: 8,
            rectifier: Rectifier::Square,
            decimation: 8,
            counts_to_g: 16.0 / 32768.0,
            adc_full_scale: i16::MAX,
            velocity: VelocityConfig::default(),
        }
    }
}

/// Why a front end could not be built.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum FrontEndError {
    /// Sample rate not finite or not positive.
    SampleRate,
    /// counts_to_g not finite or not positive.
    CountsToG,
    /// adc_full_scale not positive.
    FullScale,
    /// Band-pass design refused.
    Band(DesignError),
    /// Envelope decimator refused.
    Decimation(DecimateError),
    /// Velocity path refused.
    Velocity(VelocityError),
}

impl core::fmt::Display for FrontEndError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::SampleRate => f.write_str("sample rate must be finite and positive"),
            Self::CountsToG => f.write_str("counts_to_g must be finite and positive"),
            Self::FullScale => f.write_str("adc_full_scale must be positive"),
            Self::Band(e) => write!(f, "band-pass: {e}"),
            Self::Decimation(e) => write!(f, "decimation: {e}"),
            Self::Velocity(e) => write!(f, "{e}"),
        }
    }
}

impl core::error::Error for FrontEndError {}

/// The streaming front end.
#[derive(Clone, Debug)]
pub struct FrontEnd {
    cfg: FrontEndConfig,
    bp: BiquadCascade,
    dec: Decimator,
    acc: OverallAcc,
    /// The velocity path, in use when `cfg.velocity.enabled` (kept in place
    /// either way, so reconfiguring never builds one on the stack).
    vel: VelocityMeter,
    clip_g: f32,
    delay: f32,
}

/// A validated front-end design (small: sections and stage plans), applied
/// in place by [`FrontEnd::apply`].
#[derive(Clone, Copy, Debug)]
pub(crate) struct FrontEndPlan {
    cfg: FrontEndConfig,
    sos: SosCascade,
    dec: DecimatorPlan,
    vel: Option<VelocityPlan>,
    clip_g: f32,
    delay: f32,
}

impl FrontEndPlan {
    /// Validates the configuration and designs the filters.
    pub(crate) fn new(cfg: &FrontEndConfig) -> Result<Self, FrontEndError> {
        let fs = cfg.sample_rate_hz;
        if !(fs.is_finite() && fs > 0.0) {
            return Err(FrontEndError::SampleRate);
        }
        if !(cfg.counts_to_g.is_finite() && cfg.counts_to_g > 0.0) {
            return Err(FrontEndError::CountsToG);
        }
        if cfg.adc_full_scale <= 0 {
            return Err(FrontEndError::FullScale);
        }
        let [lo, hi] = cfg.band_hz;
        let sos = butter_bandpass(lo, hi, fs, cfg.poles).map_err(FrontEndError::Band)?;
        let dec = DecimatorPlan::new(cfg.decimation).map_err(FrontEndError::Decimation)?;
        let vel = if cfg.velocity.enabled {
            Some(VelocityPlan::new(fs, &cfg.velocity).map_err(FrontEndError::Velocity)?)
        } else {
            None
        };
        let centre = f64::from(bandpass_centre_hz(lo, hi, fs));
        let delay = crate::num::f64_to_f32(sos.group_delay(centre, f64::from(fs)))
            + dec.delay_input_samples();
        Ok(Self {
            cfg: *cfg,
            sos,
            dec,
            vel,
            clip_g: f32::from(cfg.adc_full_scale) * cfg.counts_to_g,
            delay,
        })
    }

    /// Envelope output rate (Hz).
    pub(crate) fn output_rate_hz(&self) -> f32 {
        self.cfg.sample_rate_hz / f32::from(self.cfg.decimation)
    }

    /// Envelope delay in input samples (see [`FrontEnd::delay_input_samples`]).
    pub(crate) fn delay_input_samples(&self) -> f32 {
        self.delay
    }
}

impl FrontEnd {
    /// Validates the configuration and designs all filters.
    ///
    /// ```
    /// use dsp_core::frontend::{FrontEnd, FrontEndConfig};
    /// let mut fe = FrontEnd::new(&FrontEndConfig::default()).unwrap();
    /// let mut n = 0;
    /// fe.push_f32(&[0.0; 80], |_| n += 1);
    /// assert_eq!(n, 10);
    /// assert_eq!(fe.output_rate_hz(), 6400.0);
    /// ```
    pub fn new(cfg: &FrontEndConfig) -> Result<FrontEnd, FrontEndError> {
        let plan = FrontEndPlan::new(cfg)?;
        let mut fe = Self::unconfigured();
        fe.apply(&plan);
        Ok(fe)
    }

    /// Validates `cfg`, designs every filter in place and clears all state
    /// and statistics; on error `self` is left unchanged. Needs no stack
    /// beyond a few hundred bytes of filter design, unlike building a new
    /// front end and moving it.
    pub fn reconfigure(&mut self, cfg: &FrontEndConfig) -> Result<(), FrontEndError> {
        let plan = FrontEndPlan::new(cfg)?;
        self.apply(&plan);
        Ok(())
    }

    /// A front end with no filters yet (it would pass samples through), for
    /// constant context, e.g. inside a statically placed pipeline that is
    /// configured later with [`Self::reconfigure`].
    pub(crate) const fn unconfigured() -> Self {
        let cfg = FrontEndConfig {
            sample_rate_hz: 1.0,
            band_hz: [0.0, 0.0],
            poles: 0,
            rectifier: Rectifier::Square,
            decimation: 1,
            counts_to_g: 1.0,
            adc_full_scale: i16::MAX,
            velocity: VelocityConfig {
                enabled: false,
                band_hz: [0.0, 0.0],
                group: MachineGroup::Medium,
                support: Support::Rigid,
                settle_s: 0.0,
            },
        };
        FrontEnd {
            cfg,
            bp: BiquadCascade::new(SosCascade::EMPTY),
            dec: Decimator::pass_through(),
            acc: OverallAcc::new(),
            vel: VelocityMeter::unconfigured(),
            clip_g: f32::INFINITY,
            delay: 0.0,
        }
    }

    /// Designs the planned filters in place and clears the state.
    pub(crate) fn apply(&mut self, plan: &FrontEndPlan) {
        self.cfg = plan.cfg;
        self.bp = BiquadCascade::new(plan.sos);
        self.dec.apply(&plan.dec);
        self.acc = OverallAcc::new();
        if let Some(v) = &plan.vel {
            self.vel.apply(v);
        }
        self.clip_g = plan.clip_g;
        self.delay = plan.delay;
    }

    /// The configuration in use.
    pub fn config(&self) -> &FrontEndConfig {
        &self.cfg
    }

    /// The band-pass filter (designed sections).
    pub fn bandpass(&self) -> &BiquadCascade {
        &self.bp
    }

    /// The envelope decimator.
    pub fn decimator(&self) -> &Decimator {
        &self.dec
    }

    /// Pushes acceleration in g; calls `out` for each decimated envelope sample.
    /// Samples with |x| >= adc_full_scale x counts_to_g count as clipped.
    pub fn push_f32(&mut self, block: &[f32], mut out: impl FnMut(f32)) {
        let mut buf = [0f32; CHUNK];
        for chunk in block.chunks(CHUNK) {
            let n = chunk.len();
            for (b, &x) in buf.iter_mut().zip(chunk) {
                if x.is_finite() && x.abs() >= self.clip_g {
                    self.acc.add_clipped();
                }
                *b = x;
            }
            let buf = buf.get_mut(..n).unwrap_or(&mut []);
            self.acc.add_block(buf);
            self.run(buf, &mut out);
        }
    }

    /// Pushes ADC counts (scaled by counts_to_g); |count| >= adc_full_scale is clipped.
    pub fn push_i16(&mut self, block: &[i16], mut out: impl FnMut(f32)) {
        let mut buf = [0f32; CHUNK];
        let fsc = self.cfg.adc_full_scale;
        let k = self.cfg.counts_to_g;
        for chunk in block.chunks(CHUNK) {
            // Scaling, clip count and statistics in one pass.
            let n = self.acc.add_block_i16(chunk, k, fsc, &mut buf);
            let buf = buf.get_mut(..n).unwrap_or(&mut []);
            self.run(buf, &mut out);
        }
    }

    fn run(&mut self, buf: &mut [f32], out: &mut impl FnMut(f32)) {
        if self.cfg.velocity.enabled {
            self.vel.process(buf);
        }
        // Band-pass and rectifier write straight into the decimator's first
        // stage (one piece: the chunk is the decimator's block).
        let (bp, dec) = (&mut self.bp, &mut self.dec);
        for c in buf.chunks(crate::frontend::decimate::BLOCK) {
            match self.cfg.rectifier {
                Rectifier::Abs => {
                    dec.process_with(c.len(), |h| bp.process_map_into(c, h, f32::abs), &mut *out)
                }
                Rectifier::Square => {
                    dec.process_with(c.len(), |h| bp.process_map_into(c, h, |v| v * v), &mut *out)
                }
            };
        }
    }

    /// Rate of the envelope output (Hz).
    pub fn output_rate_hz(&self) -> f32 {
        self.cfg.sample_rate_hz / f32::from(self.cfg.decimation)
    }

    /// Delay of the envelope path in input samples: band-pass group delay at
    /// the band centre plus the decimator's linear-phase delay. Envelope
    /// output j (0-based) is emitted at input index (j + 1) x decimation - 1
    /// and describes the signal at that index minus this delay.
    pub fn delay_input_samples(&self) -> f32 {
        self.delay
    }

    /// Snapshot of the overall indicators, velocity RMS and zone.
    pub fn overall(&self) -> Overall {
        let mut o = self.acc.snapshot();
        if self.cfg.velocity.enabled {
            let (rms, n) = self.vel.rms_mm_s();
            o.velocity_rms_mm_s = rms;
            o.velocity_count = n;
            // No finite sample, no zone: a dead or broken sensor is not "zone A".
            if n > 0 && o.count > 0 {
                o.zone = Some(zone(
                    rms,
                    self.cfg.velocity.group,
                    self.cfg.velocity.support,
                ));
            }
        }
        o
    }

    /// Clears all state and statistics (designs are kept).
    pub fn reset(&mut self) {
        self.bp.reset();
        self.dec.reset();
        self.acc.reset();
        self.vel.reset();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    extern crate std;
    use std::format;

    #[test]
    fn a_reconfigured_front_end_equals_a_new_one() {
        let mut fe = FrontEnd::new(&FrontEndConfig::default()).unwrap();
        let x: [i16; 1000] = core::array::from_fn(|i| i16::try_from(i % 97).unwrap() * 50);
        fe.push_i16(&x, |_| {});
        let mut cfg = FrontEndConfig {
            decimation: 25,
            band_hz: [3000.0, 9000.0],
            ..FrontEndConfig::default()
        };
        fe.reconfigure(&cfg).unwrap();
        assert_eq!(
            format!("{fe:?}"),
            format!("{:?}", FrontEnd::new(&cfg).unwrap())
        );
        let before = format!("{fe:?}");
        cfg.decimation = 11;
        assert!(fe.reconfigure(&cfg).is_err());
        assert_eq!(format!("{fe:?}"), before);
    }

    #[test]
    fn rejects_bad_config() {
        let with = |f: &dyn Fn(&mut FrontEndConfig)| {
            let mut c = FrontEndConfig::default();
            f(&mut c);
            FrontEnd::new(&c).err()
        };
        assert_eq!(
            with(&|c| c.sample_rate_hz = f32::NAN),
            Some(FrontEndError::SampleRate)
        );
        assert_eq!(
            with(&|c| c.counts_to_g = 0.0),
            Some(FrontEndError::CountsToG)
        );
        assert_eq!(
            with(&|c| c.adc_full_scale = 0),
            Some(FrontEndError::FullScale)
        );
        assert_eq!(
            with(&|c| c.poles = 5),
            Some(FrontEndError::Band(DesignError::Poles))
        );
        assert_eq!(
            with(&|c| c.decimation = 11),
            Some(FrontEndError::Decimation(DecimateError::FactorPrime))
        );
        assert_eq!(
            with(&|c| c.velocity.settle_s = -1.0),
            Some(FrontEndError::Velocity(VelocityError::Settle))
        );
    }

    #[test]
    fn clipping_and_non_finite_are_flagged() {
        let mut fe = FrontEnd::new(&FrontEndConfig::default()).unwrap();
        let mut outs = 0;
        fe.push_i16(&[0, 32767, -32768, -32767, 100, 32766], |_| outs += 1);
        fe.push_f32(&[f32::NAN, 16.0, 0.0, f32::NEG_INFINITY], |y| {
            assert!(y.is_finite());
            outs += 1;
        });
        let o = fe.overall();
        assert_eq!(o.clipped, 4); // 32767, -32768, -32767, 16.0 g
        assert_eq!(o.non_finite, 2);
        assert_eq!(o.count, 8);
        assert_eq!(outs, 1);
    }

    #[test]
    fn dropout_does_not_inject_an_impact() {
        // 1 g offset + 0.01 g tone in band; one NaN. Substituting 0 would be a
        // 1 g impulse (envelope ~1e4 x larger); holding the last sample is not.
        let run = |drop: bool| {
            let mut fe = FrontEnd::new(&FrontEndConfig::default()).unwrap();
            let mut x = [0f32; 4096];
            for (i, v) in x.iter_mut().enumerate() {
                *v = 1.0
                    + 0.01 * libm::sinf(i as f32 * 2.0 * core::f32::consts::PI * 7000.0 / 51200.0);
            }
            if drop {
                x[3000] = f32::NAN;
            }
            let mut peak = 0f32;
            fe.push_f32(&x[..2048], |_| {});
            fe.push_f32(&x[2048..], |y| peak = peak.max(y));
            peak
        };
        let (clean, dropped) = (run(false), run(true));
        assert!(
            dropped.is_finite() && dropped < 10.0 * clean,
            "{dropped} vs {clean}"
        );
    }
}
