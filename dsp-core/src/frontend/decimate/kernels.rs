//! The filter kernels: symmetric FIR outputs (window-method stages), the
//! half-band kernels of compile-time length, and the history moves between
//! blocks. Operation order is fixed: outputs are bit-exact across block
//! splits (`any_split_and_the_fused_producer_give_the_same_bits`).

use super::design::{HalfBand, HB_R2, HB_R4, HB_R8};
use super::plan::Stage;
use super::SLACK;

/// One output of a symmetric FIR over window `w` (oldest first) with taps
/// `h` of the same length: one multiply per tap pair, centre tap first, then
/// the pairs from the outside in. Four pairs per step (same order of
/// operations as one at a time).
#[inline]
fn fir_output(w: &[f32], h: &[f32]) -> f32 {
    let n = w.len().min(h.len());
    let m = n / 2;
    let centre = if n % 2 == 1 {
        w.get(m).zip(h.get(m)).map_or(0.0, |(a, b)| a * b)
    } else {
        0.0
    };
    let (Some(wl), Some(wh), Some(hl)) = (w.get(..m), w.get(n - m..n), h.get(..m)) else {
        return 0.0;
    };
    wl.iter()
        .zip(wh.iter().rev())
        .zip(hl)
        .fold(centre, |acc, ((a, b), c)| acc + c * (a + b))
}

/// Half-band output over a window of N = 4k + 3 samples with K = k + 1
/// outer taps: centre first, then the nonzero tap pairs (even distance
/// from the ends) from the outside in, one multiply per pair; the zero taps
/// are skipped, not multiplied.
#[inline(always)]
fn halfband_output<const N: usize, const K: usize>(w: &[f32; N], outer: &[f32; K]) -> f32 {
    let centre = w.get(N / 2).map_or(0.0, |&c| c * 0.5);
    let lo = w.iter().step_by(2);
    let hi = w.iter().rev().step_by(2);
    lo.zip(hi)
        .zip(outer)
        .fold(centre, |acc, ((a, b), c)| acc + c * (a + b))
}

/// Two consecutive outputs (windows at samples 0 and 2) of a flat window
/// of F = 4Q >= N + 2 samples: both from the same loaded samples, stored
/// after both are computed.
#[inline(always)]
fn halfband_two<const N: usize, const K: usize, const F: usize>(
    flat: &[f32; F],
    outer: &[f32; K],
) -> (f32, f32) {
    let a = flat
        .first_chunk::<N>()
        .map_or(0.0, |w| halfband_output(w, outer));
    let b = flat
        .get(2..)
        .and_then(|s| s.first_chunk::<N>())
        .map_or(0.0, |w| halfband_output(w, outer));
    (a, b)
}

/// One half-band stage (length N = 4k + 3, K outer taps from its table,
/// Q = k + 2 blocks of four samples per output pair, F = 4Q, KEEP = N - 1;
/// all compile-time, so loops unroll and taps stay in registers). `h` holds
/// the KEEP history samples and the `l` new ones; windows start at
/// `h[first]`, `h[first + 2]`, ... Outputs go to `dst` or, when it is
/// `None`, to `emit`. Outputs are computed two at a time in a counted loop
/// (shared loads, no per-output checks). Afterwards the last KEEP samples
/// move to the front. Returns the number of outputs.
#[inline(always)]
fn halfband_stage<
    const N: usize,
    const K: usize,
    const Q: usize,
    const F: usize,
    const KEEP: usize,
>(
    region: &mut [f32],
    len: usize,
    first: usize,
    outer: &[f32; K],
    dst: Option<&mut [f32]>,
    mut emit: impl FnMut(f32),
) -> usize {
    let taps = *outer;
    // Samples: `len`, then up to SLACK more that the last block of a pair
    // may span but no output reads (a pair reads N + 2 of its F samples).
    let ext = region
        .get(..len + SLACK)
        .or(region.get(..len))
        .unwrap_or(&[]);
    let w = ext.get(first..).unwrap_or(&[]);
    let w_len = len.saturating_sub(first);
    let total = if w_len >= N { (w_len - N) / 2 + 1 } else { 0 };
    let (quads, _) = w.as_chunks::<4>();
    // Pairs of outputs whose F-sample block lies inside `ext`.
    let pairs = (total / 2).min(quads.len().saturating_sub(Q - 1));
    // Slice windows and a slice iterator zip to a counted loop without
    // per-output checks (`map`, not `filter_map`, keeps it so; the
    // conversion cannot fail: Q blocks of four are F samples).
    let blocks = quads
        .windows(Q)
        .map(|q| <&[f32; F]>::try_from(q.as_flattened()).ok());
    let mut done = 0;
    let mut dst = match dst {
        Some(d) => {
            let (head, tail) = d
                .split_at_mut_checked(2 * pairs)
                .unwrap_or((&mut [], &mut []));
            for (flat, o) in blocks.zip(head.as_chunks_mut::<2>().0) {
                if let Some(flat) = flat {
                    (o[0], o[1]) = halfband_two::<N, K, F>(flat, &taps);
                    done += 2;
                }
            }
            Some(tail.iter_mut())
        }
        None => {
            for flat in blocks.take(pairs).flatten() {
                let (a, b) = halfband_two::<N, K, F>(flat, &taps);
                emit(a);
                emit(b);
                done += 2;
            }
            None
        }
    };
    // The last output (an odd count), or any the slack did not cover.
    while done < total {
        let Some(win) = w.get(2 * done..).and_then(|s| s.first_chunk::<N>()) else {
            break;
        };
        let v = halfband_output(win, &taps);
        match dst.as_mut() {
            Some(it) => {
                if let Some(o) = it.next() {
                    *o = v;
                }
            }
            None => emit(v),
        }
        done += 1;
    }
    let h = region.get_mut(..len).unwrap_or(&mut []);
    shift_history::<KEEP>(h);
    done
}

/// The 7-tap half-band stage ([`HB_R8`], the first stages of every
/// power-of-two plan) as a stream: the window's four even-phase samples and
/// the next two centres stay in locals, so each output loads only its two
/// new samples. Four outputs per step (the locals then take their roles
/// back with five moves). Each output has the arithmetic of
/// [`halfband_output`] in the same order (centre, outer pair, inner pair),
/// so the results are the bits of [`halfband_stage`]; the last outputs of a
/// block (fewer than four) go through [`halfband_output`]. Afterwards the
/// last six samples move to the front. Returns the number of outputs.
#[inline(always)]
fn halfband7_stage(
    region: &mut [f32],
    len: usize,
    first: usize,
    dst: Option<&mut [f32]>,
    mut emit: impl FnMut(f32),
) -> usize {
    let [h0, h1] = HB_R8;
    // As in `halfband_stage`: up to SLACK samples after `len` may be read
    // (the odd sample after the last output's window), never used.
    let ext = region
        .get(..len + SLACK)
        .or(region.get(..len))
        .unwrap_or(&[]);
    let w = ext.get(first..).unwrap_or(&[]);
    let w_len = len.saturating_sub(first);
    let total = if w_len >= 7 { (w_len - 7) / 2 + 1 } else { 0 };
    let mut done = 0;
    // Output k = 0.5 w[2k+3] + h0 (w[2k] + w[2k+6]) + h1 (w[2k+2] + w[2k+4]).
    let [mut e0, _, mut e1, mut o1, mut e2, mut o2] =
        w.first_chunk::<6>().copied().unwrap_or([0.0; 6]);
    let (chunks, _) = w.get(6..).unwrap_or(&[]).as_chunks::<8>();
    let steps = (total / 4).min(chunks.len());
    let mut four = |c: &[f32; 8]| {
        let [e3, o3, e4, o4, e5, o5, e6, o6] = *c;
        let y = [
            o1 * 0.5 + h0 * (e0 + e3) + h1 * (e1 + e2),
            o2 * 0.5 + h0 * (e1 + e4) + h1 * (e2 + e3),
            o3 * 0.5 + h0 * (e2 + e5) + h1 * (e3 + e4),
            o4 * 0.5 + h0 * (e3 + e6) + h1 * (e4 + e5),
        ];
        (e0, e1, e2, o1, o2) = (e4, e5, e6, o5, o6);
        y
    };
    let mut rest = match dst {
        Some(d) => {
            let (head, tail) = d
                .split_at_mut_checked(4 * steps)
                .unwrap_or((&mut [], &mut []));
            for (c, o) in chunks.iter().zip(head.as_chunks_mut::<4>().0) {
                *o = four(c);
                done += 4;
            }
            Some(tail.iter_mut())
        }
        None => {
            for c in chunks.iter().take(steps) {
                four(c).into_iter().for_each(&mut emit);
                done += 4;
            }
            None
        }
    };
    while done < total {
        let Some(win) = w.get(2 * done..).and_then(|s| s.first_chunk::<7>()) else {
            break;
        };
        let v = halfband_output(win, &HB_R8);
        match rest.as_mut() {
            Some(it) => {
                if let Some(o) = it.next() {
                    *o = v;
                }
            }
            None => emit(v),
        }
        done += 1;
    }
    let h = region.get_mut(..len).unwrap_or(&mut []);
    shift_history::<6>(h);
    done
}

/// Moves the last KEEP samples of `h` to its front. When source and
/// destination do not overlap (a block at least KEEP long, the usual case)
/// this is a copy of known length, which the compiler inlines; otherwise a
/// library move.
#[inline(always)]
fn shift_history<const KEEP: usize>(h: &mut [f32]) {
    let l = h.len().saturating_sub(KEEP);
    if l >= KEEP {
        if let Some((front, back)) = h.split_at_mut_checked(l) {
            if let (Some(d), Some(s)) =
                (front.first_chunk_mut::<KEEP>(), back.first_chunk::<KEEP>())
            {
                d.copy_from_slice(s);
            }
        }
    } else {
        move_to_front(h, l);
    }
}

/// `h.copy_within(l.., 0)` for a block shorter than the history (source
/// and destination overlap), out of line so that the usual case above stays
/// an inlined copy of known length instead of being merged into this move.
#[inline(never)]
fn move_to_front(h: &mut [f32], l: usize) {
    if l <= h.len() {
        h.copy_within(l.., 0);
    }
}

/// Runs one stage over the `l` inputs already written behind its history
/// in `region` (which starts at the stage's history); writes the kept
/// outputs to `dst`, or calls `emit` for each when `dst` is `None`, and
/// returns their count.
pub(super) fn run_stage(
    st: &mut Stage,
    taps: &[f32],
    region: &mut [f32],
    l: usize,
    dst: Option<&mut [f32]>,
    emit: impl FnMut(f32),
) -> usize {
    let n = st.taps;
    let m = usize::from(st.factor.max(1));
    let keep = n.saturating_sub(1);
    if region.len() < keep + l {
        return 0;
    }
    // Output k of this block ends at block index first + k m, so its window
    // starts at h[first + k m].
    let first = m - 1 - st.phase.min(m - 1);
    st.phase = (st.phase + l) % m;
    match st.halfband {
        Some(HalfBand::R8) => halfband7_stage(region, keep + l, first, dst, emit),
        Some(HalfBand::R4) => {
            halfband_stage::<11, 3, 4, 16, 10>(region, keep + l, first, &HB_R4, dst, emit)
        }
        Some(HalfBand::R2) => {
            halfband_stage::<39, 10, 11, 44, 38>(region, keep + l, first, &HB_R2, dst, emit)
        }
        None => {
            let h = region.get_mut(..keep + l).unwrap_or(&mut []);
            let t = taps.get(st.offset..st.offset + n).unwrap_or(&[]);
            let count = window_stage(h, first, m, t, dst, emit);
            move_to_front(h, l);
            count
        }
    }
}

/// Kept outputs of a window-method stage (runtime length and factor m):
/// windows start at `h[first]`, `h[first + m]`, ...; two outputs per step
/// share the tap loads and the loop, each with the arithmetic of
/// [`fir_output`]. Outputs go to `dst` or, when it is `None`, to `emit`.
fn window_stage(
    h: &[f32],
    first: usize,
    m: usize,
    t: &[f32],
    dst: Option<&mut [f32]>,
    emit: impl FnMut(f32),
) -> usize {
    let n = t.len();
    let w = h.get(first..).unwrap_or(&[]);
    if n == 0 || m == 0 || w.len() < n {
        return 0;
    }
    let total = (w.len() - n) / m + 1;
    let mut dst = dst.map(|d| d.iter_mut());
    let mut emit = emit;
    let mut put = |v: f32| match dst.as_mut() {
        Some(it) => {
            if let Some(o) = it.next() {
                *o = v;
            }
        }
        None => emit(v),
    };
    let mut done = 0;
    while done + 2 <= total {
        let s = done * m;
        let (Some(a), Some(b)) = (w.get(s..s + n), w.get(s + m..s + m + n)) else {
            break;
        };
        let (ya, yb) = fir_two(a, b, t);
        put(ya);
        put(yb);
        done += 2;
    }
    if done < total {
        if let Some(a) = w.get(done * m..done * m + n) {
            put(fir_output(a, t));
            done += 1;
        }
    }
    done
}

/// [`fir_output`] over two windows of the length of `h` at once (taps
/// loaded once for both).
#[inline]
fn fir_two(a: &[f32], b: &[f32], h: &[f32]) -> (f32, f32) {
    let n = h.len();
    let m = n / 2;
    let centre = |w: &[f32]| {
        if n % 2 == 1 {
            w.get(m).zip(h.get(m)).map_or(0.0, |(x, c)| x * c)
        } else {
            0.0
        }
    };
    let (Some(al), Some(ah), Some(bl), Some(bh), Some(hl)) = (
        a.get(..m),
        a.get(n - m..n),
        b.get(..m),
        b.get(n - m..n),
        h.get(..m),
    ) else {
        return (0.0, 0.0);
    };
    hl.iter()
        .zip(al.iter().zip(ah.iter().rev()))
        .zip(bl.iter().zip(bh.iter().rev()))
        .fold(
            (centre(a), centre(b)),
            |(ya, yb), ((c, (a0, a1)), (b0, b1))| (ya + c * (a0 + a1), yb + c * (b0 + b1)),
        )
}

#[cfg(test)]
mod tests {
    use super::*;
    extern crate std;
    use std::vec::Vec;

    #[test]
    fn streamed_seven_tap_stage_gives_the_bits_of_the_generic_one() {
        // Every block length and phase offset the decimator can produce, to
        // a destination and to the callback.
        for len in 6..(6 + 128 + SLACK) {
            for first in 0..2 {
                let x: Vec<f32> = (0..len + SLACK)
                    .map(|i| libm::sinf(i as f32 * 0.61 + len as f32) * (1.0 + (i % 7) as f32))
                    .collect();
                let (mut a, mut b) = (x.clone(), x.clone());
                let (mut da, mut db) = ([0f32; 80], [0f32; 80]);
                let na = halfband7_stage(&mut a, len, first, Some(&mut da), |_| {});
                let nb = halfband_stage::<7, 2, 3, 12, 6>(
                    &mut b,
                    len,
                    first,
                    &HB_R8,
                    Some(&mut db),
                    |_| {},
                );
                assert_eq!(na, nb, "len {len} first {first}");
                let bits = |v: &[f32]| v.iter().map(|f| f.to_bits()).collect::<Vec<_>>();
                assert_eq!(bits(&da), bits(&db), "len {len} first {first}");
                assert_eq!(bits(&a), bits(&b), "history, len {len} first {first}");
                let (mut ea, mut eb) = (Vec::new(), Vec::new());
                let (mut a, mut b) = (x.clone(), x);
                halfband7_stage(&mut a, len, first, None, |v| ea.push(v.to_bits()));
                halfband_stage::<7, 2, 3, 12, 6>(&mut b, len, first, &HB_R8, None, |v| {
                    eb.push(v.to_bits())
                });
                assert_eq!(
                    (ea, bits(&a)),
                    (eb, bits(&b)),
                    "emit, len {len} first {first}"
                );
            }
        }
    }
}
