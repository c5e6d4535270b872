//! The envelope rate: how far the front end decimates, chosen from what the
//! order tracker downstream needs (its highest order at the highest speed
//! and its samples per revolution).

/// Picks a decimation factor for order tracking.
///
/// The decimated rate `fs / D` must keep `max_order` at `max_rpm` below
/// 0.4 · `fs / D` (room for the decimator's transition band) and give at
/// least 1.25 · `samples_per_rev` samples per revolution at `max_rpm`, so the
/// resampler never has to invent detail (its Nyquist, 0.625·S orders, stays
/// above the output's S/2). The result is the largest `D` meeting both,
/// clamped to `1..=1024`; invalid inputs give 1.
///
/// ```
/// use dsp_core::frontend::decimation_for;
/// // 51.2 kHz, up to 60 rpm, orders up to 20, 256 samples per revolution.
/// assert_eq!(decimation_for(51_200.0, 60.0, 20.0, 256), 160);
/// ```
pub fn decimation_for(
    sample_rate_hz: f32,
    max_rpm: f32,
    max_order: f32,
    samples_per_rev: u16,
) -> u16 {
    let ok = |x: f32| x.is_finite() && x > 0.0;
    if !(ok(sample_rate_hz) && ok(max_rpm) && ok(max_order)) || samples_per_rev == 0 {
        return 1;
    }
    let f_rev = max_rpm / 60.0;
    let by_alias = 0.4 * sample_rate_hz / (max_order * f_rev);
    let by_density = sample_rate_hz / (1.25 * f32::from(samples_per_rev) * f_rev);
    let d = libm::floorf(by_alias.min(by_density)).clamp(1.0, 1024.0);
    u16::try_from(crate::num::f32_to_u32_sat(d)).unwrap_or(1024)
}

/// The factor the envelope decimator runs at, given the largest one the
/// order tracker allows (`d_max`, from [`decimation_for`]).
///
/// Any factor up to `d_max` keeps both of [`decimation_for`]'s conditions
/// (a lower factor only raises the envelope rate), so the choice is the
/// cheapest on the node: the largest power of two up to `d_max`. Its stages
/// are all equiripple half-bands (every second tap zero, symmetric taps
/// folded, >= 68 dB), about half the instructions per input sample of the
/// window-method stages an odd factor needs (decimation by 25 = 5 x 5 with
/// 26 + 103 taps: 44.8 on the Cortex-M4F; by 16 = 2^4 half-bands: see
/// docs/benchmarks.md). The higher envelope rate costs little downstream:
/// the order tracker's work is per angle-domain output, which the rate does
/// not change.
///
/// A lower factor means more envelope samples per revolution, so the power
/// of two is taken only when `fits` accepts it (the pipeline passes its
/// resampler-ring check); otherwise the largest factor up to `d_max` with
/// prime factors <= 7 (the decimator's own limit), as before.
///
/// ```
/// use dsp_core::frontend::envelope_decimation;
/// assert_eq!(envelope_decimation(25, |_| true), 16);
/// assert_eq!(envelope_decimation(25, |d| d > 16), 25);
/// assert_eq!(envelope_decimation(143, |d| d > 128), 140);
/// assert_eq!(envelope_decimation(0, |_| true), 1);
/// ```
pub fn envelope_decimation(d_max: u16, fits: impl Fn(u16) -> bool) -> u16 {
    let d_max = d_max.max(1);
    let pow2 = 1u16 << (15 - d_max.leading_zeros());
    if fits(pow2) {
        pow2
    } else {
        smooth_at_most(d_max)
    }
}

/// Largest factor up to `d` whose prime factors are all <= 7 (1 for 0).
fn smooth_at_most(d: u16) -> u16 {
    let smooth = |mut x: u16| {
        for p in [2u16, 3, 5, 7] {
            while x % p == 0 {
                x /= p;
            }
        }
        x == 1
    };
    (1..=d.max(1)).rev().find(|&x| smooth(x)).unwrap_or(1)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn smooth_factors() {
        assert_eq!(smooth_at_most(143), 140);
        assert_eq!(smooth_at_most(1024), 1024);
        assert_eq!(smooth_at_most(11), 10);
        assert_eq!(smooth_at_most(0), 1);
    }

    #[test]
    fn powers_of_two_when_they_fit() {
        for d in 1..=1024u16 {
            let p = envelope_decimation(d, |_| true);
            assert!(p.is_power_of_two() && p <= d && 2 * p > d, "{d} -> {p}");
            assert_eq!(envelope_decimation(d, |_| false), smooth_at_most(d), "{d}");
        }
    }
}
