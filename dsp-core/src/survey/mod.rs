//! Band survey: picks the envelope band from a streaming capture, without
//! storing the raw record.
//!
//! A bank of Butterworth band-pass filters (octave and 1/3-octave wide, lower
//! edges on a 1/6-octave grid from [`SurveyConfig::min_hz`] up to an upper
//! edge of [`SurveyConfig::max_nyquist_fraction`] x Nyquist; where that grid
//! would exceed [`MAX_BANDS`], as above about 55 kS/s, a 1/3-octave grid or
//! coarser, so the whole range is always surveyed) runs over every block. Each band keeps running moments of its output `y`, and its
//! spectral kurtosis is the kurtosis of the band-passed signal,
//! `K = E[y^4] / E[y^2]^2 - 3` (the real-signal form: 0 for Gaussian noise,
//! negative for steady tones, large for repetitive impulses such as a
//! bearing defect ringing a resonance). The band of highest `K` among those
//! at least [`SurveyConfig::min_bandwidth_hz`] wide is the envelope band.
//! This is a filter-bank estimate of the kurtogram: J. Antoni, "The spectral
//! kurtosis: a useful tool for characterising non-stationary signals", MSSP
//! 20 (2006) 282-307; J. Antoni, "Fast computation of the kurtogram for the
//! detection of transient faults", MSSP 21 (2007) 108-124 (the complex
//! envelope form there subtracts 2 instead of 3; the real form is used here
//! because the bank filters real samples without a Hilbert transform).
//!
//! # Memory and cost
//! Fixed capacity [`MAX_BANDS`] = 48 bands, no heap. One band is its
//! cascade (sized for 8 poles: 4 sections of 6 coefficients, 8 state words)
//! plus band edges and two f64 moments, 160 bytes, so a [`BandSurvey`] is
//! about 7.7 KiB (`size_of` is printed by the survey test), plus 2 KiB of
//! stack scratch ([`SURVEY_BLOCK`] samples in and out) while a block is
//! filtered. A 51.2 kS/s bank has 46 bands (21 octave, 25 1/3-octave), a
//! 12 kS/s one 20. Per input sample and band: 2 band-pass sections (7 flops
//! each in the fused path of [`crate::frontend::biquad`]), square, fourth power and
//! two sums (4 flops), copy and loads: about 25-30 Cortex-M4F instructions,
//! so about 1200-1400 per sample for 46 bands (about 65 MHz at 51.2 kS/s),
//! 500-600 for 20 bands at 12 kS/s. A survey is therefore a one-off
//! (commissioning) mode run block by block on a capture, slower than real
//! time, not part of each measurement. Moments are summed per block in f32
//! and added into f64 once per block.

use core::fmt;

pub mod band_choice;

use crate::frontend::biquad::BiquadCascade;
use crate::frontend::design::butter_bandpass;
use crate::num::f64_to_f32;

/// Most bands in the bank.
pub const MAX_BANDS: usize = 48;

/// Samples filtered per inner step (stack scratch).
pub const SURVEY_BLOCK: usize = 256;

/// Coarsest grid step, in sixths of an octave, tried to fit the bank.
const MAX_GRID_STEP: u8 = 6;

/// Calls `f(lo, hi)` for each band of the bank: octave (ratio 2) then
/// 1/3-octave (2^(1/3)) bands, lower edges on a grid of `step` sixths of an
/// octave from `min_hz`, upper edge at most `top`, width at least
/// `min_bandwidth_hz`.
fn for_each_band(c: &SurveyConfig, top: f32, step: u8, mut f: impl FnMut(f32, f32)) {
    for ratio in [2.0f32, libm::powf(2.0, 1.0 / 3.0)] {
        for k in (0..96u8).step_by(usize::from(step.max(1))) {
            let lo = c.min_hz * libm::powf(2.0, f32::from(k) / 6.0);
            let hi = lo * ratio;
            if hi > top {
                break;
            }
            if hi - lo >= c.min_bandwidth_hz {
                f(lo, hi);
            }
        }
    }
}

/// Survey settings.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct SurveyConfig {
    /// Lowest lower band edge, Hz (> 0). Default 1000 Hz: below it shaft
    /// and gear-mesh harmonics dominate (common practice).
    pub min_hz: f32,
    /// Highest upper band edge as a fraction of Nyquist, (0, 0.9]. Default 0.8
    /// (anti-alias filter roll-off above it).
    pub max_nyquist_fraction: f32,
    /// Narrowest band considered, Hz (>= 0). The band must pass the defect
    /// harmonics as sidebands of the carrier: set it to a few times the
    /// highest defect frequency of interest (common practice). Default 0.
    pub min_bandwidth_hz: f32,
    /// Poles of each band-pass: 2, 4, 6 or 8. Default 4.
    pub poles: u8,
    /// Input samples skipped at the start while the filters settle. Default 512.
    pub settle_samples: u32,
}

impl SurveyConfig {
    /// The defaults (a constant, for [`BandSurvey::unconfigured`]).
    pub const DEFAULT: Self = Self {
        min_hz: 1000.0,
        max_nyquist_fraction: 0.8,
        min_bandwidth_hz: 0.0,
        poles: 4,
        settle_samples: 512,
    };
}

impl Default for SurveyConfig {
    fn default() -> Self {
        Self::DEFAULT
    }
}

/// Why a survey could not be set up or finished.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SurveyError {
    /// Sample rate not finite and positive.
    SampleRate,
    /// A configuration field out of range.
    Config,
    /// No band fits between `min_hz` and the upper limit with the minimum bandwidth.
    NoBand,
    /// Too few samples after settling (fewer than 16 per band).
    TooFewSamples,
    /// Every band's output was zero (flat channel).
    Flat,
}

impl fmt::Display for SurveyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            SurveyError::SampleRate => "sample rate must be finite and positive",
            SurveyError::Config => "survey configuration out of range",
            SurveyError::NoBand => "no survey band fits the sample rate and minimum bandwidth",
            SurveyError::TooFewSamples => "too few samples for a band survey",
            SurveyError::Flat => "flat channel: no band carries signal",
        })
    }
}

impl core::error::Error for SurveyError {}

/// One band's statistics.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BandStat {
    /// Band edges, Hz.
    pub band_hz: [f32; 2],
    /// Spectral kurtosis `E[y^4]/E[y^2]^2 - 3`.
    pub kurtosis: f32,
    /// RMS of the band output (input unit).
    pub rms: f32,
}

/// The survey's choice and the whole table.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SurveyResult {
    /// Chosen band, Hz.
    pub band_hz: [f32; 2],
    /// Its spectral kurtosis.
    pub kurtosis: f32,
    /// Every band, in bank order (octave bands first, then 1/3-octave).
    pub bands: heapless::Vec<BandStat, MAX_BANDS>,
    /// Non-finite input samples (replaced by 0 before filtering).
    pub non_finite: u32,
    /// Samples used after settling.
    pub samples: u64,
}

#[derive(Clone, Debug)]
struct Band {
    edges: [f32; 2],
    filter: BiquadCascade,
    s2: f64,
    s4: f64,
}

/// The band-pass bank with its running moments.
///
/// ```
/// use dsp_core::survey::BandSurvey;
/// // Invented record: white-ish noise plus a decaying 3 kHz ring every 10 ms.
/// let fs = 12_000.0f32;
/// let mut s = BandSurvey::new(fs).unwrap();
/// let mut seed = 1u32;
/// let mut block = [0.0f32; 256];
/// for b in 0..200 {
///     for (i, x) in block.iter_mut().enumerate() {
///         seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
///         let noise = (seed >> 8) as f32 / 16_777_216.0 - 0.5;
///         let n = (b * 256 + i) % 120;
///         let t = n as f32 / fs;
///         let ring = 4.0 * (-t * 800.0).exp() * (2.0 * 3.14159 * 3000.0 * t).sin();
///         *x = noise + ring;
///     }
///     s.push_f32(&block);
/// }
/// let r = s.finish().unwrap();
/// assert!(r.band_hz[0] < 3000.0 && r.band_hz[1] > 3000.0);
/// ```
#[derive(Clone, Debug)]
pub struct BandSurvey {
    bands: heapless::Vec<Band, MAX_BANDS>,
    config: SurveyConfig,
    seen: u64,
    used: u64,
    non_finite: u32,
}

impl BandSurvey {
    /// A bank with the default configuration.
    pub fn new(sample_rate_hz: f32) -> Result<Self, SurveyError> {
        Self::with_config(sample_rate_hz, SurveyConfig::default())
    }

    /// A bank with `config`.
    pub fn with_config(sample_rate_hz: f32, config: SurveyConfig) -> Result<Self, SurveyError> {
        let mut s = Self::unconfigured();
        s.reconfigure(sample_rate_hz, config)?;
        Ok(s)
    }

    /// A survey without bands, as a constant, so that it can be placed
    /// statically and set up in place by [`BandSurvey::reconfigure`]
    /// (`finish` refuses it: too few samples).
    pub const fn unconfigured() -> Self {
        Self {
            bands: heapless::Vec::new(),
            config: SurveyConfig::DEFAULT,
            seen: 0,
            used: 0,
            non_finite: 0,
        }
    }

    /// Sets the bank up in place for `sample_rate_hz` and `config` and
    /// clears the moments, so that no copy of the ~7.7 KiB survey is built
    /// on the stack. Every setting is checked and the bank counted first: on
    /// an error nothing changes.
    // Not inlined: once per survey, and its temporaries then stay out of
    // the caller's frame.
    #[inline(never)]
    pub fn reconfigure(
        &mut self,
        sample_rate_hz: f32,
        config: SurveyConfig,
    ) -> Result<(), SurveyError> {
        if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
            return Err(SurveyError::SampleRate);
        }
        let c = &config;
        if !(c.min_hz.is_finite()
            && c.min_hz > 0.0
            && c.max_nyquist_fraction > 0.0
            && c.max_nyquist_fraction <= 0.9
            && c.min_bandwidth_hz.is_finite()
            && c.min_bandwidth_hz >= 0.0
            && matches!(c.poles, 2 | 4 | 6 | 8))
        {
            return Err(SurveyError::Config);
        }
        let top = c.max_nyquist_fraction * 0.5 * sample_rate_hz;
        let count = |step| {
            let mut n = 0usize;
            for_each_band(c, top, step, |_, _| n += 1);
            n
        };
        // The finest grid whose bank fits the capacity: at high sample rates
        // (about 55 kS/s and up) the 1/6-octave grid would need more than
        // MAX_BANDS bands, and dropping the highest ones would leave the upper
        // resonances unsurveyed, so the grid coarsens instead.
        let step = (1..=MAX_GRID_STEP)
            .find(|&s| count(s) <= MAX_BANDS)
            .unwrap_or(MAX_GRID_STEP);
        if count(step) == 0 {
            return Err(SurveyError::NoBand);
        }
        self.bands.clear();
        let bands = &mut self.bands;
        for_each_band(c, top, step, |lo, hi| {
            // Edges below Nyquist and above 0 by construction, poles checked.
            let Ok(sos) = butter_bandpass(lo, hi, sample_rate_hz, c.poles) else {
                return;
            };
            // Cannot fail: `step` was chosen so that the bank fits.
            let _ = bands.push(Band {
                edges: [lo, hi],
                filter: BiquadCascade::new(sos),
                s2: 0.0,
                s4: 0.0,
            });
        });
        self.config = config;
        self.seen = 0;
        self.used = 0;
        self.non_finite = 0;
        if self.bands.is_empty() {
            return Err(SurveyError::NoBand);
        }
        Ok(())
    }

    /// Number of bands in the bank.
    pub fn band_count(&self) -> usize {
        self.bands.len()
    }

    /// Pushes samples (any unit, any block length). Non-finite samples are
    /// counted and replaced by 0.
    pub fn push_f32(&mut self, block: &[f32]) {
        for chunk in block.chunks(SURVEY_BLOCK) {
            let mut clean = [0.0f32; SURVEY_BLOCK];
            for (d, &x) in clean.iter_mut().zip(chunk) {
                if x.is_finite() {
                    *d = x;
                } else {
                    self.non_finite = self.non_finite.saturating_add(1);
                }
            }
            if let Some(c) = clean.get(..chunk.len()) {
                self.run(c);
            }
        }
    }

    /// Pushes ADC counts (kurtosis is scale-free, so no scale is needed).
    pub fn push_i16(&mut self, block: &[i16]) {
        for chunk in block.chunks(SURVEY_BLOCK) {
            let mut buf = [0.0f32; SURVEY_BLOCK];
            for (d, &x) in buf.iter_mut().zip(chunk) {
                *d = f32::from(x);
            }
            if let Some(c) = buf.get(..chunk.len()) {
                self.run(c);
            }
        }
    }

    fn run(&mut self, x: &[f32]) {
        let n = u64::try_from(x.len()).unwrap_or(u64::MAX);
        let start = self.seen;
        self.seen = self.seen.saturating_add(n);
        // Samples of this block that lie past the settling time.
        let settle = u64::from(self.config.settle_samples);
        let skip = usize::try_from(settle.saturating_sub(start).min(n)).unwrap_or(x.len());
        self.used = self
            .used
            .saturating_add(n.saturating_sub(u64::try_from(skip).unwrap_or(n)));
        for band in self.bands.iter_mut() {
            let mut y = [0.0f32; SURVEY_BLOCK];
            let Some(y) = y.get_mut(..x.len()) else {
                continue;
            };
            y.copy_from_slice(x);
            band.filter.process(y);
            let (mut s2, mut s4) = (0.0f32, 0.0f32);
            for &v in y.iter().skip(skip) {
                let p = v * v;
                s2 += p;
                s4 += p * p;
            }
            band.s2 += f64::from(s2);
            band.s4 += f64::from(s4);
        }
    }

    /// Samples pushed so far (settling included).
    pub fn samples(&self) -> u64 {
        self.seen
    }

    /// Per-band statistics and the band of highest spectral kurtosis.
    pub fn finish(&self) -> Result<SurveyResult, SurveyError> {
        if self.used < 16 {
            return Err(SurveyError::TooFewSamples);
        }
        #[allow(clippy::cast_precision_loss)]
        let n = self.used as f64;
        let mut bands: heapless::Vec<BandStat, MAX_BANDS> = heapless::Vec::new();
        let mut best: Option<BandStat> = None;
        for b in &self.bands {
            let m2 = b.s2 / n;
            let (k, rms) = if m2 > 0.0 && m2.is_finite() {
                (b.s4 / n / (m2 * m2) - 3.0, libm::sqrt(m2))
            } else {
                (f64::NAN, 0.0)
            };
            let stat = BandStat {
                band_hz: b.edges,
                kurtosis: f64_to_f32(k),
                rms: f64_to_f32(rms),
            };
            // Capacity equals the bank's.
            let _ = bands.push(stat);
            if stat.kurtosis.is_finite() && best.is_none_or(|bs| stat.kurtosis > bs.kurtosis) {
                best = Some(stat);
            }
        }
        let best = best.ok_or(SurveyError::Flat)?;
        Ok(SurveyResult {
            band_hz: best.band_hz,
            kurtosis: best.kurtosis,
            bands,
            non_finite: self.non_finite,
            samples: self.used,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Invented noisy signal with a 3 kHz ring every 10 ms (as in the
    /// struct's doc example), blocks of 256 samples.
    fn blocks(fs: f32, n: usize) -> impl Iterator<Item = [f32; 256]> {
        let mut seed = 7u32;
        (0..n).map(move |b| {
            let mut block = [0.0f32; 256];
            for (i, x) in block.iter_mut().enumerate() {
                seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
                #[allow(clippy::cast_precision_loss)]
                let noise = (seed >> 8) as f32 / 16_777_216.0 - 0.5;
                #[allow(clippy::cast_precision_loss)]
                let t = ((b * 256 + i) % 120) as f32 / fs;
                *x = noise
                    + 4.0
                        * libm::expf(-t * 800.0)
                        * libm::sinf(2.0 * core::f32::consts::PI * 3000.0 * t);
            }
            block
        })
    }

    #[test]
    fn reconfigure_in_place_equals_a_new_survey_bit_for_bit_and_errors_change_nothing() {
        let c = SurveyConfig {
            min_bandwidth_hz: 300.0,
            ..SurveyConfig::default()
        };
        let mut fresh = BandSurvey::with_config(12_000.0, c).unwrap();
        for b in blocks(12_000.0, 80) {
            fresh.push_f32(&b);
        }
        let want = fresh.finish().unwrap();

        // one survey reused: first another rate and config with samples in
        // it, then in place for the same settings as `fresh`
        let mut s = BandSurvey::unconfigured();
        assert_eq!(s.band_count(), 0);
        assert_eq!(s.finish().err(), Some(SurveyError::TooFewSamples));
        s.reconfigure(51_200.0, SurveyConfig::default()).unwrap();
        assert_eq!(s.band_count(), 46);
        for b in blocks(51_200.0, 10) {
            s.push_f32(&b);
        }
        s.reconfigure(12_000.0, c).unwrap();
        assert_eq!(s.samples(), 0);
        for b in blocks(12_000.0, 80) {
            s.push_f32(&b);
        }
        assert_eq!(s.finish().unwrap(), want);

        // refused settings leave the bank and its moments as they were
        let bad = SurveyConfig {
            min_bandwidth_hz: 1e6,
            ..SurveyConfig::default()
        };
        assert_eq!(s.reconfigure(12_000.0, bad), Err(SurveyError::NoBand));
        assert_eq!(
            s.reconfigure(f32::INFINITY, c),
            Err(SurveyError::SampleRate)
        );
        let odd = SurveyConfig {
            poles: 3,
            ..SurveyConfig::default()
        };
        assert_eq!(s.reconfigure(12_000.0, odd), Err(SurveyError::Config));
        assert_eq!(s.finish().unwrap(), want);
    }

    #[test]
    fn bank_layout() {
        let s = BandSurvey::new(12_000.0).unwrap();
        // Upper edge <= 4.8 kHz, lower edges 1 kHz x 2^(k/6): octaves k = 0..=7
        // (2^(k/6) <= 2.4), thirds k = 0..=11 (2^(k/6) <= 4.8 / 2^(1/3) = 3.81).
        assert_eq!(s.band_count(), 20);
        // 51.2 kS/s: 21 octaves + 25 thirds fit the capacity.
        assert_eq!(BandSurvey::new(51_200.0).unwrap().band_count(), 46);
        // 97,656 S/s (a rate of the MFPT recordings): the 1/6-octave grid
        // would need 56 bands; the 1/3-octave grid (13 octaves + 15 thirds)
        // fits and still reaches the top edge, 0.8 x Nyquist = 39,062 Hz.
        let hi_rate = BandSurvey::new(97_656.0).unwrap();
        assert_eq!(hi_rate.band_count(), 28);
        let top = hi_rate.bands.iter().map(|b| b.edges[1]).fold(0.0, f32::max);
        assert!(top > 39_062.0 / libm::powf(2.0, 1.0 / 3.0), "{top}");
        assert!(top <= 39_062.5, "{top}");
        // RAM stated in the module doc: 48 bands x 160 bytes plus bookkeeping.
        let size = core::mem::size_of::<BandSurvey>();
        assert!(size <= 48 * 160 + 64, "{size}");
        assert_eq!(
            BandSurvey::new(f32::NAN).err(),
            Some(SurveyError::SampleRate)
        );
        let c = SurveyConfig {
            min_bandwidth_hz: 1e6,
            ..SurveyConfig::default()
        };
        assert_eq!(
            BandSurvey::with_config(12_000.0, c).err(),
            Some(SurveyError::NoBand)
        );
        let s = BandSurvey::new(12_000.0).unwrap();
        assert_eq!(s.finish().err(), Some(SurveyError::TooFewSamples));
    }
}
