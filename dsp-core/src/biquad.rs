//! Cascade of second-order sections in direct form II transposed (f32).
//!
//! Processing is section-major over a block: each section runs over the whole
//! block with its two state words and five coefficients in locals (registers),
//! which is the cheapest order on the Cortex-M4F. The per-sample arithmetic is
//! the same whatever the block length, so results are bit-identical for any
//! split of the input.

use crate::design::{SosCascade, MAX_SECTIONS};

/// A section cascade with its filter state.
#[derive(Clone, Debug, Default)]
pub struct BiquadCascade {
    sos: SosCascade,
    state: [[f32; 2]; MAX_SECTIONS],
}

impl BiquadCascade {
    /// Wraps designed sections with zero state.
    pub fn new(sos: SosCascade) -> Self {
        Self {
            sos,
            state: [[0.0; 2]; MAX_SECTIONS],
        }
    }

    /// The sections in use.
    pub fn sos(&self) -> &SosCascade {
        &self.sos
    }

    /// Clears the state.
    pub fn reset(&mut self) {
        self.state = [[0.0; 2]; MAX_SECTIONS];
    }

    /// Filters `buf` in place.
    ///
    /// ```
    /// use dsp_core::{biquad::BiquadCascade, design::butter_bandpass};
    /// let mut f = BiquadCascade::new(butter_bandpass(100.0, 200.0, 1000.0, 4).unwrap());
    /// let mut x = [1.0f32, 0.0, 0.0, 0.0];
    /// f.process(&mut x);
    /// assert!(x[0] > 0.0);
    /// ```
    pub fn process(&mut self, buf: &mut [f32]) {
        for (sec, st) in self.sos.sections().iter().zip(self.state.iter_mut()) {
            let [b0, b1, b2] = sec.b;
            let [_, a1, a2] = sec.a;
            let [mut s1, mut s2] = *st;
            for x in buf.iter_mut() {
                let xi = *x;
                let y = b0 * xi + s1;
                s1 = b1 * xi - a1 * y + s2;
                s2 = b2 * xi - a2 * y;
                *x = y;
            }
            *st = [s1, s2];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::design::Sos;

    #[test]
    fn matches_direct_difference_equation() {
        // y[n] = 0.5 x[n] + 0.2 x[n-1] + 0.1 y[n-1] - 0.05 y[n-2], computed by hand below.
        let s = Sos {
            b: [0.5, 0.2, 0.0],
            a: [1.0, -0.1, 0.05],
        };
        let mut f = BiquadCascade::new(SosCascade::from_sections(&[s]).unwrap());
        let x = [1.0f32, 2.0, -1.0, 0.5, 0.0];
        let mut y = x;
        f.process(&mut y);
        let mut r = [0.0f64; 5];
        for n in 0..5 {
            let xm1 = if n > 0 { f64::from(x[n - 1]) } else { 0.0 };
            let ym1 = if n > 0 { r[n - 1] } else { 0.0 };
            let ym2 = if n > 1 { r[n - 2] } else { 0.0 };
            r[n] = 0.5 * f64::from(x[n]) + 0.2 * xm1 + 0.1 * ym1 - 0.05 * ym2;
        }
        for (a, b) in y.iter().zip(r) {
            assert!((f64::from(*a) - b).abs() < 1e-6);
        }
    }
}
