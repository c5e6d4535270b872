//! Cascade of second-order sections in direct form II transposed (f32).
//!
//! Processing is section-major over a block: each section runs over the whole
//! block with its two state words and five coefficients in locals (registers),
//! which is the cheapest order on the Cortex-M4F. The per-sample arithmetic is
//! the same whatever the block length, so results are bit-identical for any
//! split of the input.

use crate::frontend::design::{SosCascade, MAX_SECTIONS};

/// A section cascade with its filter state.
#[derive(Clone, Debug, Default)]
pub struct BiquadCascade {
    sos: SosCascade,
    state: [[f32; 2]; MAX_SECTIONS],
}

impl BiquadCascade {
    /// Wraps designed sections with zero state.
    pub const fn new(sos: SosCascade) -> Self {
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
    /// use dsp_core::frontend::{biquad::BiquadCascade, design::butter_bandpass};
    /// let mut f = BiquadCascade::new(butter_bandpass(100.0, 200.0, 1000.0, 4).unwrap());
    /// let mut x = [1.0f32, 0.0, 0.0, 0.0];
    /// f.process(&mut x);
    /// assert!(x[0] > 0.0);
    /// ```
    pub fn process(&mut self, buf: &mut [f32]) {
        self.process_map(buf, |v| v);
    }

    /// Filters `buf` in place and applies `map` to each output sample in the
    /// same pass (e.g. the envelope rectifier), saving a second pass.
    ///
    /// ```
    /// use dsp_core::frontend::{biquad::BiquadCascade, design::butter_bandpass};
    /// let sos = butter_bandpass(100.0, 200.0, 1000.0, 4).unwrap();
    /// let (mut a, mut b) = (BiquadCascade::new(sos), BiquadCascade::new(sos));
    /// let mut x = [1.0f32, 0.0, -0.5, 0.25];
    /// let mut y = x;
    /// a.process_map(&mut x, |v| v * v);
    /// b.process(&mut y);
    /// assert!(x.iter().zip(&y).all(|(s, v)| *s == v * v));
    /// ```
    pub fn process_map(&mut self, buf: &mut [f32], map: impl Fn(f32) -> f32) {
        if !self.run_bandpass(buf.iter_mut().map(|x| (*x, x)), &map) {
            self.run_general(buf);
            buf.iter_mut().for_each(|x| *x = map(*x));
        }
    }

    /// Filters `src` into `dst` (the shorter length) and applies `map` to
    /// each output in the same pass, e.g. the rectified envelope straight
    /// into the decimator's history ([`crate::frontend::decimate::Decimator::process_with`]).
    /// The same results as [`Self::process_map`] on a copy of `src`.
    ///
    /// ```
    /// use dsp_core::frontend::{biquad::BiquadCascade, design::butter_bandpass};
    /// let sos = butter_bandpass(100.0, 200.0, 1000.0, 4).unwrap();
    /// let (mut a, mut b) = (BiquadCascade::new(sos), BiquadCascade::new(sos));
    /// let x = [1.0f32, 0.0, -0.5, 0.25];
    /// let (mut y, mut z) = ([0f32; 4], x);
    /// a.process_map_into(&x, &mut y, |v| v * v);
    /// b.process_map(&mut z, |v| v * v);
    /// assert_eq!(y, z);
    /// ```
    pub fn process_map_into(&mut self, src: &[f32], dst: &mut [f32], map: impl Fn(f32) -> f32) {
        let n = src.len().min(dst.len());
        let (Some(src), Some(dst)) = (src.get(..n), dst.get_mut(..n)) else {
            return;
        };
        if !self.run_bandpass(src.iter().copied().zip(dst.iter_mut()), &map) {
            dst.copy_from_slice(src);
            self.run_general(dst);
            dst.iter_mut().for_each(|x| *x = map(*x));
        }
    }

    /// The band-pass form (b = g [1, 0, -1], as designed here, 1 to 4
    /// sections) sample-major with every coefficient and state in locals
    /// (registers), 7 flops per section; bit-identical to the general form
    /// (0 x and -b0 x are exact). Returns false, touching nothing, for other
    /// cascades.
    fn run_bandpass<'a>(
        &mut self,
        io: impl Iterator<Item = (f32, &'a mut f32)>,
        map: &impl Fn(f32) -> f32,
    ) -> bool {
        let bandpass = self
            .sos
            .sections()
            .iter()
            .all(|s| s.b[1] == 0.0 && s.b[2] == -s.b[0]);
        if !bandpass {
            return false;
        }
        match self.sos.len() {
            4 => self.run_sections::<4>(io, map),
            3 => self.run_sections::<3>(io, map),
            2 => self.run_sections::<2>(io, map),
            1 => self.run_sections::<1>(io, map),
            _ => return false,
        }
        true
    }

    fn run_sections<'a, const N: usize>(
        &mut self,
        io: impl Iterator<Item = (f32, &'a mut f32)>,
        map: &impl Fn(f32) -> f32,
    ) {
        let (mut b0, mut a1, mut a2) = ([0f32; N], [0f32; N], [0f32; N]);
        let (mut s1, mut s2) = ([0f32; N], [0f32; N]);
        let secs = self.sos.sections().iter().zip(self.state.iter());
        for (k, (sec, st)) in secs.enumerate().take(N) {
            if let (Some(b), Some(p), Some(q), Some(u), Some(v)) = (
                b0.get_mut(k),
                a1.get_mut(k),
                a2.get_mut(k),
                s1.get_mut(k),
                s2.get_mut(k),
            ) {
                (*b, *p, *q, *u, *v) = (sec.b[0], sec.a[1], sec.a[2], st[0], st[1]);
            }
        }
        for (x, out) in io {
            let mut v = x;
            let coefs = b0.iter().zip(a1.iter()).zip(a2.iter());
            for (((b, p), q), (u, w)) in coefs.zip(s1.iter_mut().zip(s2.iter_mut())) {
                let t = b * v;
                let y = t + *u;
                *u = *w - p * y;
                *w = -(t + q * y);
                v = y;
            }
            *out = map(v);
        }
        for (st, (u, w)) in self.state.iter_mut().zip(s1.iter().zip(s2.iter())) {
            *st = [*u, *w];
        }
    }

    fn run_general(&mut self, buf: &mut [f32]) {
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
    use crate::frontend::design::Sos;

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

    #[test]
    fn bandpass_path_is_bit_identical_to_general_form() {
        let sos = crate::frontend::design::butter_bandpass(2000.0, 5000.0, 12000.0, 8).unwrap();
        let mut fast = BiquadCascade::new(sos);
        let mut slow = BiquadCascade::new(sos);
        let mut x = [0f32; 300];
        for (i, v) in x.iter_mut().enumerate() {
            *v = libm::sinf(i as f32 * 0.37) + if i % 17 == 0 { 1.0 } else { -0.1 };
        }
        let mut y = x;
        fast.process(&mut x[..100]);
        fast.process(&mut x[100..]);
        slow.run_general(&mut y);
        assert!(x.iter().zip(&y).all(|(a, b)| a.to_bits() == b.to_bits()));
    }
}
