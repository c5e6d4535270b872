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

/// Accurate square root (libm), for magnitudes and RMS.
#[inline]
pub fn sqrtf(x: f32) -> f32 {
    libm::sqrtf(x)
}

/// Square root for per-bin spectrum magnitudes: reciprocal square root by
/// Newton's iteration from the classic bit-level first guess, then one
/// Newton correction of the root. Within 1 ulp of `libm::sqrtf` for every
/// positive normal input (tested exhaustively over three pairs of binades,
/// which holds every mantissa with both exponent parities, plus a log
/// sweep); zero, subnormal, infinite, NaN and negative inputs go to libm.
/// A magnitude `sqrtf_fast(re * re + im * im)` costs 30 instructions per
/// bin on the Cortex-M4F against 61 with libm's software square root (no
/// hardware square root is reachable from safe, stable `no_std` Rust:
/// `f32::sqrt` is not in `core`, libm has no ARM path, and inline assembly
/// needs `unsafe`).
#[inline]
pub fn sqrtf_fast(x: f32) -> f32 {
    let b = x.to_bits();
    // Positive normal numbers have bits in [0x0080_0000, 0x7f7f_ffff]: one
    // unsigned compare instead of classifying the float.
    if b.wrapping_sub(0x0080_0000) >= 0x7f00_0000 {
        return libm::sqrtf(x);
    }
    let h = 0.5 * x;
    let mut r = f32::from_bits(0x5f37_59df - (b >> 1));
    // First guess within 3.5 %; the error is squared by each step (1.8e-3,
    // 4.6e-6) and by the final correction of the root (3e-11), below f32
    // rounding. Left to right, `h * r * r` and `0.5 * y * y` neither
    // underflow nor overflow at the ends of the normal range.
    r *= 1.5 - h * r * r;
    r *= 1.5 - h * r * r;
    let y = x * r;
    y + r * (h - 0.5 * y * y)
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
    fn sqrtf_fast_within_one_ulp_of_libm() {
        // Reference: libm::sqrtf (correctly rounded). Every input of three
        // pairs of binades (each pair holds every mantissa with both exponent
        // parities; the method scales exactly by powers of 4 in between):
        // the lowest normals, [1, 4) and the highest, then a log sweep over
        // the whole normal range and the special values.
        let mut worst = 0u32;
        let lo = f32::MIN_POSITIVE.to_bits();
        let one = 1.0f32.to_bits();
        let top = f32::MAX.to_bits();
        let ranges = [
            lo..lo + (2 << 23),
            one..one + (2 << 23),
            top + 1 - (2 << 23)..top + 1,
        ];
        for bits in ranges.into_iter().flatten() {
            let x = f32::from_bits(bits);
            let (a, b) = (sqrtf_fast(x), libm::sqrtf(x));
            worst = worst.max(a.to_bits().abs_diff(b.to_bits()));
        }
        let mut x = f32::MIN_POSITIVE;
        while x < f32::MAX / 1.0001 {
            let (a, b) = (sqrtf_fast(x), libm::sqrtf(x));
            worst = worst.max(a.to_bits().abs_diff(b.to_bits()));
            x *= 1.000_37;
        }
        assert!(worst <= 1, "worst {worst} ulp");
        assert_eq!(sqrtf_fast(0.0), 0.0);
        assert_eq!(sqrtf_fast(4.0), 2.0);
        assert_eq!(sqrtf_fast(f32::MAX), libm::sqrtf(f32::MAX));
        assert!(sqrtf_fast(-1.0).is_nan() && sqrtf_fast(f32::NAN).is_nan());
        assert_eq!(sqrtf_fast(f32::INFINITY), f32::INFINITY);
        assert_eq!(sqrtf_fast(1e-40), libm::sqrtf(1e-40)); // subnormal: libm
    }

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
