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
    /// use dsp_core::{biquad::BiquadCascade, design::butter_bandpass};
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
    /// use dsp_core::{biquad::BiquadCascade, design::butter_bandpass};
    /// let sos = butter_bandpass(100.0, 200.0, 1000.0, 4).unwrap();
    /// let (mut a, mut b) = (BiquadCascade::new(sos), BiquadCascade::new(sos));
    /// let mut x = [1.0f32, 0.0, -0.5, 0.25];
    /// let mut y = x;
    /// a.process_map(&mut x, |v| v * v);
    /// b.process(&mut y);
    /// assert!(x.iter().zip(&y).all(|(s, v)| *s == v * v));
    /// ```
    pub fn process_map(&mut self, buf: &mut [f32], map: impl Fn(f32) -> f32) {
        let job = InPlace { buf, map };
        if let Err(InPlace { buf, map }) = self.with_stepper(job) {
            self.run_general(buf);
            buf.iter_mut().for_each(|x| *x = map(*x));
        }
    }

    /// Runs `job` with the cascade as a per-sample function (state and
    /// coefficients in locals, so a loop around it keeps them in registers)
    /// when all sections have the band-pass form `b = g [1, 0, -1]` that
    /// [`crate::design::butter_bandpass`] produces (1 to 4 sections): 7 flops
    /// per section, bit-identical to the general form (0 x and -b0 x are
    /// exact). Other cascades hand the job back (`Err`); filter those with
    /// [`Self::process_map`].
    pub fn with_stepper<J: FilterJob>(&mut self, job: J) -> Result<J::Output, J> {
        let bandpass = self
            .sos
            .sections()
            .iter()
            .all(|s| s.b[1] == 0.0 && s.b[2] == -s.b[0]);
        if !bandpass {
            return Err(job);
        }
        match self.sos.len() {
            4 => Ok(self.run_stepper::<4, J>(job)),
            3 => Ok(self.run_stepper::<3, J>(job)),
            2 => Ok(self.run_stepper::<2, J>(job)),
            1 => Ok(self.run_stepper::<1, J>(job)),
            _ => Err(job),
        }
    }

    fn run_stepper<const N: usize, J: FilterJob>(&mut self, job: J) -> J::Output {
        let mut st = BandpassStepper::<N> {
            b0: [0.0; N],
            a1: [0.0; N],
            a2: [0.0; N],
            s1: [0.0; N],
            s2: [0.0; N],
        };
        let secs = self.sos.sections().iter().zip(self.state.iter());
        for (k, (sec, state)) in secs.enumerate().take(N) {
            if let (Some(b), Some(p), Some(q), Some(u), Some(v)) = (
                st.b0.get_mut(k),
                st.a1.get_mut(k),
                st.a2.get_mut(k),
                st.s1.get_mut(k),
                st.s2.get_mut(k),
            ) {
                (*b, *p, *q, *u, *v) = (sec.b[0], sec.a[1], sec.a[2], state[0], state[1]);
            }
        }
        let r = job.run(|x| st.step(x));
        for (state, (u, w)) in self.state.iter_mut().zip(st.s1.iter().zip(st.s2.iter())) {
            *state = [*u, *w];
        }
        r
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

/// Work that consumes a per-sample filter function (see
/// [`BiquadCascade::with_stepper`]); generic so the filter inlines into the
/// job's loop.
pub trait FilterJob {
    /// What the job returns.
    type Output;
    /// Runs the job; `filter` maps each input sample to the filter output
    /// and must be called once per sample, in order.
    fn run(self, filter: impl FnMut(f32) -> f32) -> Self::Output;
}

/// Filters a buffer in place and maps each output (the in-place form of
/// [`BiquadCascade::process_map`]).
struct InPlace<'a, M> {
    buf: &'a mut [f32],
    map: M,
}

impl<M: Fn(f32) -> f32> FilterJob for InPlace<'_, M> {
    type Output = ();
    fn run(self, mut filter: impl FnMut(f32) -> f32) {
        for x in self.buf.iter_mut() {
            *x = (self.map)(filter(*x));
        }
    }
}

/// Band-pass sections with coefficients and state by value.
struct BandpassStepper<const N: usize> {
    b0: [f32; N],
    a1: [f32; N],
    a2: [f32; N],
    s1: [f32; N],
    s2: [f32; N],
}

impl<const N: usize> BandpassStepper<N> {
    /// One sample through all sections (direct form II transposed with
    /// b1 = 0 and b2 = -b0).
    #[inline(always)]
    fn step(&mut self, x: f32) -> f32 {
        let mut v = x;
        let coefs = self.b0.iter().zip(self.a1.iter()).zip(self.a2.iter());
        for (((b, p), q), (u, w)) in coefs.zip(self.s1.iter_mut().zip(self.s2.iter_mut())) {
            let t = b * v;
            let y = t + *u;
            *u = *w - p * y;
            *w = -(t + q * y);
            v = y;
        }
        v
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

    #[test]
    fn bandpass_path_is_bit_identical_to_general_form() {
        let sos = crate::design::butter_bandpass(2000.0, 5000.0, 12000.0, 8).unwrap();
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
