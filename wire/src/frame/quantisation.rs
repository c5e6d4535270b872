//! Quantisation of physical values into frame codes and back.
//!
//! Rules shared by every field (documented in docs/frame-format.md):
//! * NaN encodes to the field's reserved *invalid* code and decodes to NaN.
//! * Values below the range (negative, -inf) saturate to code 0.
//! * Values above the range (including +inf) saturate to the largest valid code.
//! * Rounding is to the nearest code, so the error inside the range is at most
//!   half a step.

use dsp_core::num::f32_to_u32_sat;

/// A linear field: `value = code * step`, codes `0..=max_code`, `invalid` reserved.
#[derive(Clone, Copy, Debug)]
pub struct Linear {
    /// Physical value of one code step.
    pub step: f32,
    /// Largest valid code (saturation value).
    pub max_code: u32,
    /// Reserved code meaning "not available / NaN".
    pub invalid: u32,
}

impl Linear {
    /// Code of `x` under the saturation rules above.
    pub fn encode(&self, x: f32) -> u32 {
        if x.is_nan() {
            return self.invalid;
        }
        // `f32_to_u32_sat` maps negatives to 0 and +inf to u32::MAX.
        f32_to_u32_sat(libm::roundf(x / self.step)).min(self.max_code)
    }

    /// Physical value of `code`; the invalid code gives NaN. Codes above
    /// `max_code` other than `invalid` are rejected by the decoder first.
    pub fn decode(&self, code: u32) -> f32 {
        if code == self.invalid {
            f32::NAN
        } else {
            // Codes are at most 16 bits wide, exact in f32.
            f32::from(u16::try_from(code).unwrap_or(u16::MAX)) * self.step
        }
    }

    /// Largest representable value.
    pub fn max_value(&self) -> f32 {
        self.decode(self.max_code)
    }
}

/// Shaft speed: 0.25 rpm steps, 0..=16383.5 rpm, 0xFFFF invalid.
pub const SPEED_RPM: Linear = Linear {
    step: 0.25,
    max_code: 0xFFFE,
    invalid: 0xFFFF,
};
/// Acceleration RMS: 0.001 g steps, 0..=65.534 g, 0xFFFF invalid.
pub const ACCEL_RMS_G: Linear = Linear {
    step: 0.001,
    max_code: 0xFFFE,
    invalid: 0xFFFF,
};
/// Acceleration peak: 0.01 g steps, 0..=655.34 g, 0xFFFF invalid.
pub const PEAK_G: Linear = Linear {
    step: 0.01,
    max_code: 0xFFFE,
    invalid: 0xFFFF,
};
/// Crest factor: 0.1 steps, 0..=25.4, 0xFF invalid.
pub const CREST: Linear = Linear {
    step: 0.1,
    max_code: 0xFE,
    invalid: 0xFF,
};
/// Kurtosis (not excess; 3 for Gaussian noise): 0.25 steps, 0..=63.5, 0xFF invalid.
pub const KURTOSIS: Linear = Linear {
    step: 0.25,
    max_code: 0xFE,
    invalid: 0xFF,
};
/// Velocity RMS: 0.01 mm/s steps, 0..=655.34 mm/s, 0xFFFF invalid.
pub const VELOCITY_MM_S: Linear = Linear {
    step: 0.01,
    max_code: 0xFFFE,
    invalid: 0xFFFF,
};
/// Defect score: 1 dB steps in 6 bits, 0..=62 dB, 63 invalid.
pub const SCORE_DB: Linear = Linear {
    step: 1.0,
    max_code: 62,
    invalid: 63,
};

/// Smallest non-zero amplitude code value (code 1), in g.
pub const AMP_MIN_G: f32 = 1.0e-5;
/// Amplitude step in dB between successive codes.
pub const AMP_STEP_DB: f32 = 0.5;
/// Largest valid amplitude code.
pub const AMP_MAX_CODE: u32 = 254;
/// Reserved amplitude code meaning "not available / NaN".
pub const AMP_INVALID: u32 = 255;

/// 1x defect amplitude, log-quantised in 8 bits: code 0 is "zero / below
/// range", code `c` in 1..=254 is `AMP_MIN_G * 10^((c-1)*0.5/20)` g
/// (1e-5 g ..= 21.1 g in 0.5 dB steps), 255 is invalid.
pub fn amp_encode(a: f32) -> u32 {
    if a.is_nan() {
        return AMP_INVALID;
    }
    if a <= 0.0 {
        return 0;
    }
    let steps = 20.0 * libm::log10f(a / AMP_MIN_G) / AMP_STEP_DB;
    if steps < -0.5 {
        // Closer to zero (in log terms: below half a step under code 1).
        return 0;
    }
    // steps >= -0.5 so round() >= 0; +inf saturates.
    f32_to_u32_sat(libm::roundf(steps))
        .saturating_add(1)
        .min(AMP_MAX_CODE)
}

/// Amplitude in g of an amplitude code (see [`amp_encode`]).
pub fn amp_decode(code: u32) -> f32 {
    match code {
        0 => 0.0,
        AMP_INVALID => f32::NAN,
        c => {
            let steps = f32::from(u16::try_from(c.saturating_sub(1)).unwrap_or(0));
            AMP_MIN_G * libm::powf(10.0, steps * AMP_STEP_DB / 20.0)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn linear_saturation_rules() {
        assert_eq!(SCORE_DB.encode(f32::NAN), 63);
        assert_eq!(SCORE_DB.encode(-5.0), 0);
        assert_eq!(SCORE_DB.encode(f32::NEG_INFINITY), 0);
        assert_eq!(SCORE_DB.encode(f32::INFINITY), 62);
        assert_eq!(SCORE_DB.encode(200.0), 62);
        assert_eq!(SCORE_DB.encode(12.4), 12);
        assert_eq!(SCORE_DB.encode(12.6), 13);
        assert!(SCORE_DB.decode(63).is_nan());
        assert_eq!(SPEED_RPM.max_value(), 16383.5);
    }

    #[test]
    fn amplitude_codes() {
        assert_eq!(amp_encode(f32::NAN), AMP_INVALID);
        assert_eq!(amp_encode(0.0), 0);
        assert_eq!(amp_encode(-1.0), 0);
        assert_eq!(amp_encode(1.0e-9), 0);
        assert_eq!(amp_encode(1.0e-5), 1);
        assert_eq!(amp_encode(f32::INFINITY), AMP_MAX_CODE);
        // 0.1 g is 80 dB over 1e-5 g = 160 steps -> code 161.
        assert_eq!(amp_encode(0.1), 161);
        assert!((amp_decode(161) - 0.1).abs() < 1e-6);
        // Top of range: 1e-5 * 10^(253 * 0.5 / 20) = 21.13 g.
        assert!((amp_decode(AMP_MAX_CODE) - 21.13).abs() < 0.01);
    }
}
