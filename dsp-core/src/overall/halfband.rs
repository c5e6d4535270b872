//! The velocity path's decimator: a chain of factor-2 half-band FIR stages
//! that protects only the velocity band.
//!
//! The envelope decimator must keep 0.4 of its output rate; the velocity
//! path needs only its band, `[0, B]` with `B` = the upper band edge
//! (1 kHz for ISO 20816), at an output rate `fo` of at least 4 kHz with
//! `B <= fo / 4`. A stage with input rate `r` passes `[0, B]` and rejects
//! what folds into it, `[r/2 - B, r/2]`: a half-band specification with pass
//! edge `fp = B / r` of its input rate. Counted from the last stage, `r` is
//! `2 fo`, `4 fo`, `8 fo`, ..., so `fp <= 1/8, 1/16, 1/32, ...`; the tables
//! below are designed for those worst cases (the earlier stages share the
//! 1/32 design, their transitions are only wider). What folds into
//! `(B, fo/2)` is left to the velocity band-pass, as before.
//!
//! Tables: equiripple half-bands from `scipy.signal.remez` by the one-band
//! trick (Vaidyanathan & Nguyen, IEEE Trans. Circuits Syst. 34(3), 1987),
//! the shortest length with >= 66 dB rejection (60 dB required, the
//! envelope decimator's margin), checked by
//! `tests/reference/velocity_chain.py --check`. Length 4k + 3: the taps at
//! even distance from the centre are exactly 0 (skipped), the centre is
//! exactly 0.5; one multiply per symmetric tap pair.
//!
//! | stage (from the end) | fp | taps | multiplies / output | rejection |
//! | --- | --- | --- | --- | --- |
//! | last | 1/8 | 15 | 4 + centre | 72.4 dB |
//! | second last | 1/16 | 11 | 3 + centre | 94.0 dB |
//! | earlier | 1/32 | 7 | 2 + centre | 88.9 dB |
//!
//! At 51.2 kS/s (factor 8, 6.4 kHz) that is 7 + 11 + 15 taps, about 0.9
//! multiplies per input sample, against the 3 x 2 x 2 envelope-style chain
//! (Kaiser 3 + half-bands for 0.4 fo) it replaces.
//!
//! Processing is block-wise per stage over linear history buffers in one
//! pool, as in the envelope decimator: inputs sit behind the stage's N - 1
//! samples of history, every second window gives an output written behind
//! the next stage's history, then the last N - 1 samples move to the front.

/// Most factor-2 stages (factor 64: 256 kS/s down to 4 kHz).
pub const MAX_STAGES: usize = 6;
/// Inputs per stage block (the velocity path's chunk).
pub const CHUNK: usize = 128;

/// Last stage (pass edge 1/8 of its input rate): 15 taps, 72.4 dB. Outer
/// taps from the edge inwards (distances 7, 5, 3, 1 from the centre).
#[allow(clippy::excessive_precision)] // f64 design values, rounded to f32 here
pub const VHB_LAST: [f32; 4] = [
    -3.737655733e-03,
    2.056989487e-02,
    -7.232190471e-02,
    3.053704736e-01,
];
/// Second last stage (pass edge 1/16): 11 taps, 94.0 dB.
#[allow(clippy::excessive_precision)]
pub const VHB_MID: [f32; 3] = [7.113621940e-03, -5.230308056e-02, 2.951989647e-01];
/// Earlier stages (pass edge 1/32): 7 taps, 88.9 dB.
#[allow(clippy::excessive_precision)]
pub const VHB_FIRST: [f32; 2] = [-3.216907173e-02, 2.821517172e-01];

/// History (N - 1) of each kind of stage.
const KEEP_LAST: usize = 14;
const KEEP_MID: usize = 10;
const KEEP_FIRST: usize = 6;
/// Pool: for each stage its N - 1 history plus its input capacity
/// (`CHUNK`, then half of the previous plus one per stage), summed over a
/// full chain (`pool_fits_the_longest_chain`).
const POOL: usize = 305;

/// Which table a stage uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
enum Kind {
    #[default]
    First,
    Mid,
    Last,
}

impl Kind {
    const fn keep(self) -> usize {
        match self {
            Kind::First => KEEP_FIRST,
            Kind::Mid => KEEP_MID,
            Kind::Last => KEEP_LAST,
        }
    }
}

#[derive(Clone, Copy, Debug, Default)]
struct Stage {
    kind: Kind,
    /// Start of the stage's region in the pool.
    start: usize,
    /// Inputs since the last output (0 or 1).
    phase: usize,
}

/// A chain of factor-2 half-band decimators (factor `2^stages`).
#[derive(Clone, Debug)]
pub struct HalfbandChain {
    stages: [Stage; MAX_STAGES],
    n: usize,
    pool: [f32; POOL],
}

impl HalfbandChain {
    /// A chain of `stages` factor-2 stages (clamped to [`MAX_STAGES`]);
    /// 0 is a pass-through.
    pub const fn new(stages: usize) -> Self {
        let (stages, n) = layout(stages);
        Self {
            stages,
            n,
            pool: [0.0; POOL],
        }
    }

    /// Rebuilds the chain in place for `stages` stages (as [`Self::new`])
    /// and clears the history, without a second pool on the stack.
    pub fn reconfigure(&mut self, stages: usize) {
        (self.stages, self.n) = layout(stages);
        self.pool = [0.0; POOL];
    }

    /// Decimation factor.
    pub fn factor(&self) -> u16 {
        1u16 << self.n
    }

    /// Clears the history.
    pub fn reset(&mut self) {
        self.pool = [0.0; POOL];
        for s in &mut self.stages {
            s.phase = 0;
        }
    }

    /// Fills the first stage's history with `x` (as if the signal had
    /// been `x` forever): with `x` the first sample and the same `x` given
    /// to [`Self::process`] as `sub`, the chain starts without a step.
    pub fn prefill(&mut self, x: f32) {
        if let Some(first) = self.stages.get(..self.n).and_then(<[Stage]>::first) {
            let (start, keep) = (first.start, first.kind.keep());
            if let Some(h) = self.pool.get_mut(start..start + keep) {
                h.fill(x);
            }
        }
    }

    /// Decimates `input` (at most [`CHUNK`] samples are taken), subtracting
    /// `sub` from the first stage's outputs (from the input at factor 1),
    /// and writes the outputs to `out` from its start; returns (inputs
    /// taken, outputs written). Outputs come after inputs 1, 3, 5, ... of
    /// each stage, so results do not depend on how the input is split.
    /// `out` needs room for `CHUNK` (factor 1) or `CHUNK / 2 + 1` samples.
    pub fn process(&mut self, input: &[f32], sub: f32, out: &mut [f32]) -> (usize, usize) {
        let len = input.len().min(CHUNK);
        let input = input.get(..len).unwrap_or(&[]);
        let Self { stages, n, pool } = self;
        let stages = stages.get_mut(..*n).unwrap_or(&mut []);
        let Some(first) = stages.first() else {
            for (o, &x) in out.iter_mut().zip(input) {
                *o = x - sub;
            }
            return (len, len.min(out.len()));
        };
        let at = first.start + first.kind.keep();
        if let Some(slot) = pool.get_mut(at..at + len) {
            slot.copy_from_slice(input);
        }
        let mut count = len;
        let last = stages.len() - 1;
        for i in 0..stages.len() {
            let next = stages.get(i + 1).map(|s| s.start + s.kind.keep());
            let Some(st) = stages.get_mut(i) else { break };
            let keep = st.kind.keep();
            let end = st.start + keep + count;
            // This stage's region lies below the next stage's.
            let split = next.unwrap_or(POOL);
            let Some((cur, nxt)) = pool.split_at_mut_checked(split) else {
                break;
            };
            let Some(region) = cur.get_mut(st.start..end) else {
                break;
            };
            let dst: &mut [f32] = if i == last { &mut *out } else { nxt };
            let t0 = 1 - st.phase.min(1);
            let s = if i == 0 { sub } else { 0.0 };
            let made = match st.kind {
                Kind::First => run::<2, 7, 13>(&VHB_FIRST, region, t0, dst, s),
                Kind::Mid => run::<3, 11, 17>(&VHB_MID, region, t0, dst, s),
                Kind::Last => run::<4, 15, 21>(&VHB_LAST, region, t0, dst, s),
            };
            st.phase = (st.phase + count) % 2;
            // The last `keep` inputs start the next call's window (the region
            // is keep + count long); fixed-size copies have no panic path.
            match st.kind {
                Kind::First => keep_history::<KEEP_FIRST>(region),
                Kind::Mid => keep_history::<KEEP_MID>(region),
                Kind::Last => keep_history::<KEEP_LAST>(region),
            }
            count = made;
        }
        (len, count)
    }
}

/// The stages of a chain of `stages` (clamped) and their pool regions.
// `i < n <= MAX_STAGES`; slice `get_mut` is not callable in a const fn.
#[allow(clippy::indexing_slicing)]
const fn layout(stages: usize) -> ([Stage; MAX_STAGES], usize) {
    let n = if stages > MAX_STAGES {
        MAX_STAGES
    } else {
        stages
    };
    let mut st = [Stage {
        kind: Kind::First,
        start: 0,
        phase: 0,
    }; MAX_STAGES];
    let (mut i, mut start, mut cap) = (0usize, 0usize, CHUNK);
    while i < n {
        let kind = match n - 1 - i {
            0 => Kind::Last,
            1 => Kind::Mid,
            _ => Kind::First,
        };
        st[i] = Stage {
            kind,
            start,
            phase: 0,
        };
        start += kind.keep() + cap;
        cap = cap / 2 + 1;
        i += 1;
    }
    (st, n)
}

/// Outputs of one stage over `region` (history then inputs): windows of
/// `N` starting at `t0`, `t0 + 2`, ..., each minus `sub`; returns how many
/// were written. Four outputs per step from one span of `W = N + 6`
/// samples, so the loads the four windows share are made once; then one
/// at a time. The same arithmetic per output either way.
#[inline(always)]
fn run<const K: usize, const N: usize, const W: usize>(
    h: &[f32; K],
    region: &[f32],
    t0: usize,
    dst: &mut [f32],
    sub: f32,
) -> usize {
    let mut made = 0usize;
    let mut rest = region.get(t0..).unwrap_or(&[]);
    let mut dst = dst;
    while dst.len() >= 4 {
        let Some(w) = rest.first_chunk::<W>() else {
            break;
        };
        let Some((o4, tail)) = core::mem::take(&mut dst).split_first_chunk_mut::<4>() else {
            break;
        };
        for (k, o) in o4.iter_mut().enumerate() {
            let win = w.get(2 * k..).and_then(<[f32]>::first_chunk::<N>);
            *o = win.map_or(0.0, |v| output(h, v)) - sub;
        }
        made += 4;
        rest = rest.get(8..).unwrap_or(&[]);
        dst = tail;
    }
    for o in dst.iter_mut() {
        let Some(w) = rest.first_chunk::<N>() else {
            break;
        };
        *o = output(h, w) - sub;
        made += 1;
        rest = rest.get(2..).unwrap_or(&[]);
    }
    made
}

/// Moves the region's last `KEEP` samples to its start: the history a
/// stage carries into its next call.
#[inline(always)]
fn keep_history<const KEEP: usize>(region: &mut [f32]) {
    if let Some(&tail) = region.last_chunk::<KEEP>() {
        if let Some(head) = region.first_chunk_mut::<KEEP>() {
            *head = tail;
        }
    }
}

/// One half-band output: centre times 0.5, plus each outer tap times its
/// symmetric pair, from the edge inwards.
#[inline(always)]
fn output<const K: usize, const N: usize>(h: &[f32; K], w: &[f32; N]) -> f32 {
    let mut acc = 0.5 * w.get(N / 2).copied().unwrap_or(0.0);
    let pairs = w.iter().step_by(2).zip(w.iter().rev().step_by(2));
    for ((a, b), c) in pairs.zip(h) {
        acc += c * (a + b);
    }
    acc
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use std::{vec, vec::Vec};

    #[test]
    fn pool_fits_the_longest_chain() {
        let (mut need, mut cap) = (0usize, CHUNK);
        for i in 0..MAX_STAGES {
            let keep = match MAX_STAGES - 1 - i {
                0 => KEEP_LAST,
                1 => KEEP_MID,
                _ => KEEP_FIRST,
            };
            need += keep + cap;
            cap = cap / 2 + 1;
        }
        assert_eq!(need, POOL);
    }

    /// Tap sums: the centre 0.5 plus twice the outer taps is 1 within the
    /// design ripple (DC gain).
    #[test]
    fn dc_gain_is_one_within_the_ripple() {
        let sum = |h: &[f32]| 0.5 + 2.0 * h.iter().sum::<f32>();
        assert!((sum(&VHB_LAST) - 1.0).abs() < 1e-3);
        assert!((sum(&VHB_MID) - 1.0).abs() < 1e-4);
        assert!((sum(&VHB_FIRST) - 1.0).abs() < 1e-4);
    }

    /// Against a direct convolution with the full tap vectors (zeros
    /// included), on inputs split unevenly: same outputs, bit for bit up to
    /// the summation order, so within 1e-6.
    #[test]
    fn equals_direct_convolution_and_does_not_depend_on_the_split() {
        let x: Vec<f32> = (0..1000)
            .map(|i| libm::sinf(i as f32 * 0.07) + if i % 13 == 0 { 0.5 } else { -0.04 })
            .collect();
        for stages in 0..=4usize {
            let mut c = HalfbandChain::new(stages);
            let mut got = Vec::new();
            let mut o = [0f32; CHUNK];
            let mut i = 0;
            for (k, step) in [1usize, 7, 128, 300, 2, 129].iter().cycle().enumerate() {
                if i >= x.len() || k > 1000 {
                    break;
                }
                let end = (i + step).min(x.len());
                let mut part = &x[i..end];
                while !part.is_empty() {
                    let (took, made) = c.process(part, 0.0, &mut o);
                    got.extend_from_slice(&o[..made]);
                    part = &part[took..];
                }
                i = end;
            }
            // Direct: stage by stage, output after inputs 1, 3, 5, ...
            let mut sig = x.clone();
            for s in 0..stages {
                let h: Vec<f32> = match stages - 1 - s {
                    0 => VHB_LAST.to_vec(),
                    1 => VHB_MID.to_vec(),
                    _ => VHB_FIRST.to_vec(),
                };
                let n = 4 * (h.len() - 1) + 3;
                let mut full = vec![0f32; n];
                for (j, &c) in h.iter().enumerate() {
                    full[2 * j] = c;
                    full[n - 1 - 2 * j] = c;
                }
                full[n / 2] = 0.5;
                let at = |t: isize| if t < 0 { 0.0 } else { sig[t as usize] };
                sig = (0..sig.len())
                    .skip(1)
                    .step_by(2)
                    .map(|t| {
                        (0..n)
                            .map(|j| full[j] * at(t as isize - (n - 1 - j) as isize))
                            .sum()
                    })
                    .collect();
            }
            assert_eq!(got.len(), sig.len(), "stages {stages}");
            for (a, b) in got.iter().zip(&sig) {
                assert!((a - b).abs() < 1e-6, "stages {stages}: {a} vs {b}");
            }
        }
    }
}
