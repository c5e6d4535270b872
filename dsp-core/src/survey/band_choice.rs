//! The band survey ([`crate::survey`]) set up for a measuring point: one
//! rule shared by the node's commissioning cycle and the host tools, so both
//! choose the same band, bit for bit, from the same samples.
//!
//! The rule: the default [`SurveyConfig`] (octave and 1/3-octave bands from
//! 1 kHz to 0.8 x Nyquist, 4 poles, 512 settling samples) with the narrowest
//! band set by [`min_bandwidth_hz`], so the chosen band passes the defect
//! harmonics a detection needs as sidebands of the resonance. Samples go in blocks of
//! [`crate::pipeline::ADC_BLOCK`], as the node's DMA delivers them: the
//! survey's running sums depend on the block boundaries, so the host feeds
//! the same block length.
//!
//! ```
//! use dsp_core::survey::band_choice::{min_bandwidth_hz, new_survey};
//! use dsp_core::config::PointConfig;
//! // The default point watches no bearing: any band width is allowed.
//! let point = PointConfig::default();
//! assert_eq!(min_bandwidth_hz(&point), 0.0);
//! assert!(new_survey(&point).unwrap().band_count() > 0);
//! ```

use crate::config::{PointConfig, SpeedInput};
use crate::diagnosis::kinematics::ShaftRatio;
use crate::survey::{BandSurvey, SurveyConfig, SurveyError};

/// Narrowest band the survey may choose for `point`: wide enough to pass
/// both modulation sidebands (carrier +- f) of the highest harmonic a
/// detection needs (`search.min_harmonics`, default 2) of the fastest watched
/// defect line (BPFO, BPFI, FTF, BSF of every bearing on its shaft) at the
/// constant speed, or at `max_rpm` with a tach: `2 x min_harmonics x f_max`,
/// so 4 x f_max by default. An envelope detector passes a modulation
/// frequency f at full depth only when the band holds both sidebands of the
/// carrier (common practice). 0 without bearings.
pub fn min_bandwidth_hz(point: &PointConfig) -> f32 {
    let rpm = match point.speed {
        SpeedInput::Constant { rpm } => rpm,
        SpeedInput::Tach { .. } => point.max_rpm,
    };
    let mut top = 0.0f32;
    for b in &point.bearings {
        let m = b.multiples().ok();
        let ratio = point
            .shafts
            .get(usize::from(b.shaft))
            .and_then(|s| ShaftRatio::new(s.ratio).ok());
        if let (Some(m), Some(r)) = (m, ratio) {
            for l in m.orders(r).lines() {
                top = top.max(l * rpm / 60.0);
            }
        }
    }
    2.0 * f32::from(point.search.min_harmonics) * top
}

/// The survey settings for `point` (see the module docs).
pub fn survey_config(point: &PointConfig) -> SurveyConfig {
    SurveyConfig {
        min_bandwidth_hz: min_bandwidth_hz(point),
        ..SurveyConfig::default()
    }
}

/// A band survey for `point` at its sample rate, ready for blocks.
pub fn new_survey(point: &PointConfig) -> Result<BandSurvey, SurveyError> {
    BandSurvey::with_config(point.sample_rate_hz, survey_config(point))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::{name_from, Bearing, BearingKinematics};

    #[test]
    fn min_bandwidth_passes_the_second_harmonic_sidebands() {
        let mut p = PointConfig::default();
        p.bearings.clear();
        assert_eq!(min_bandwidth_hz(&p), 0.0);
        let _ = p.bearings.push(Bearing {
            name: name_from("b"),
            shaft: 0,
            kinematics: BearingKinematics::Multiples {
                bpfo_x: 3.0,
                bpfi_x: 5.0,
                ftf_x: 0.4,
                bsf_x: 2.0,
            },
        });
        p.speed = SpeedInput::Constant { rpm: 1200.0 };
        // BPFI 5 orders at 20 Hz shaft speed: 100 Hz; both sidebands of its
        // 2nd harmonic (the default min_harmonics): 4 x 100 Hz.
        assert_eq!(p.search.min_harmonics, 2);
        assert!((min_bandwidth_hz(&p) - 400.0).abs() < 1e-3);
        p.search.min_harmonics = 3;
        assert!((min_bandwidth_hz(&p) - 600.0).abs() < 1e-3);
        assert_eq!(survey_config(&p).min_bandwidth_hz, min_bandwidth_hz(&p));
    }
}
