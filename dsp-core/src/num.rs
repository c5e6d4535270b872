//! Small numeric helpers shared by the modules: saturating float-to-integer
//! conversions (so library code needs no `as` truncation) and accurate math
//! re-exported from `libm` (micromath's fast approximations are too coarse for
//! anything a check compares).

/// Converts to `usize`, saturating: NaN and negatives give 0.
#[inline]
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
pub fn f32_to_usize_sat(x: f32) -> usize {
    // `as` from float to int saturates and maps NaN to 0 (Rust reference).
    x as usize
}

/// Converts to `u32`, saturating: NaN and negatives give 0.
#[inline]
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
pub fn f32_to_u32_sat(x: f32) -> u32 {
    x as u32
}

/// Converts to `i32`, saturating; NaN gives 0.
#[inline]
#[allow(clippy::cast_possible_truncation)]
pub fn f32_to_i32_sat(x: f32) -> i32 {
    x as i32
}

/// Converts an `f64` to `f32` (rounding to nearest; out-of-range becomes infinite).
#[inline]
#[allow(clippy::cast_possible_truncation)]
pub fn f64_to_f32(x: f64) -> f32 {
    x as f32
}

/// Converts an `f64` to `u64`, saturating: NaN and negatives give 0.
#[inline]
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
pub(crate) fn f64_to_u64_sat(x: f64) -> u64 {
    x as u64
}

/// Converts an `f64` to `u32`, saturating: NaN and negatives give 0.
#[inline]
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
pub(crate) fn f64_to_u32_sat(x: f64) -> u32 {
    x as u32
}

/// Converts an `f64` to `i64`, saturating; NaN gives 0.
#[inline]
#[allow(clippy::cast_possible_truncation)]
pub(crate) fn f64_to_i64_sat(x: f64) -> i64 {
    x as i64
}

/// The low 32 bits of a `u64` (intentional truncation, e.g. a wrapping counter).
#[inline]
#[allow(clippy::cast_possible_truncation)]
pub(crate) fn u64_low_u32(x: u64) -> u32 {
    x as u32
}

/// Converts a `usize` to `f32` (exact below 2^24).
#[inline]
#[allow(clippy::cast_precision_loss)]
pub(crate) fn usize_to_f32(x: usize) -> f32 {
    x as f32
}

/// Correctly rounded square root (IEEE 754), for magnitudes and RMS: the
/// FPU's `vsqrt.f32` on the Cortex-M4F, libm elsewhere ([`crsqrt`]), so the
/// node and the host get the same bits. A spectrum magnitude costs about
/// 8 instructions per bin on the node with it, against 30 with the earlier
/// Newton root (within 1 ulp, not correctly rounded) and 61 with libm's
/// software root.
#[inline]
pub fn sqrtf(x: f32) -> f32 {
    crsqrt::sqrtf(x)
}

/// Accurate base-10 logarithm (libm), for dB values.
#[inline]
pub fn log10f(x: f32) -> f32 {
    libm::log10f(x)
}

/// 20·log10 of an amplitude ratio in dB; non-positive ratios give -200 dB
/// instead of -inf or NaN so reports stay finite.
#[inline]
pub fn amplitude_db(ratio: f32) -> f32 {
    if ratio > 0.0 && ratio.is_finite() {
        20.0 * libm::log10f(ratio)
    } else if ratio.is_infinite() && ratio > 0.0 {
        200.0
    } else {
        -200.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn saturating_conversions() {
        assert_eq!(f32_to_usize_sat(f32::NAN), 0);
        assert_eq!(f32_to_usize_sat(-3.0), 0);
        assert_eq!(f32_to_u32_sat(1e20), u32::MAX);
        assert_eq!(f32_to_i32_sat(-1e20), i32::MIN);
        assert_eq!(f32_to_usize_sat(7.9), 7);
    }

    #[test]
    fn db_is_finite() {
        assert_eq!(amplitude_db(0.0), -200.0);
        assert_eq!(amplitude_db(f32::NAN), -200.0);
        assert!((amplitude_db(10.0) - 20.0).abs() < 1e-5);
    }
}
