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
