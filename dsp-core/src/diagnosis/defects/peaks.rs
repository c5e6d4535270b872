//! Peak taking in a search window: window geometry, the window-kernel
//! correction, shaft masking, the local median floor (steps 1 to 3 of the
//! module doc).

use crate::num::{f32_to_usize_sat, usize_to_f32};
use crate::spectrum::Window;

use super::*;

/// Geometry of one harmonic's search.
#[derive(Clone, Copy)]
pub(super) struct Window1 {
    pub(super) expected: f32,
    pub(super) half: f32,
}

/// A peak taken in a window.
#[derive(Clone, Copy)]
pub(super) struct Peak {
    pub(super) order: f32,
    pub(super) amplitude: f32,
}

pub(super) struct Ctx<'a> {
    pub(super) amps: &'a [f32],
    pub(super) opb: f32,
    pub(super) lobe_bins: f32,
    pub(super) window: Window,
    pub(super) shaft_order: f32,
    pub(super) ftf_order: f32,
    pub(super) mask: bool,
}

impl Ctx<'_> {
    pub(super) fn amp(&self, k: usize) -> f32 {
        self.amps.get(k).copied().unwrap_or(0.0)
    }

    /// Scalloping correction at `delta` bins off-bin (|delta| <= 0.5).
    pub(super) fn kernel(&self, delta: f32) -> f32 {
        self.window.kernel_gain(delta).max(0.1)
    }

    /// Whether bin `k` is masked: within one main-lobe half-width of a
    /// harmonic `j` of the bearing's shaft where a running-speed line is
    /// present, i.e. the bin nearest `j` x shaft is a local maximum. A
    /// defect line a bin or more beside `j` x shaft, whose own peak makes
    /// that bin its flank, is kept (at 16-20 bins per shaft order the fixed
    /// mask deleted such lines, e.g. a 6203's BPFI 4.947 x shaft).
    pub(super) fn masked(&self, k: usize) -> bool {
        if !self.mask {
            return false;
        }
        let o = usize_to_f32(k) * self.opb;
        let j = libm::roundf(o / self.shaft_order);
        if !(j >= 1.0 && libm::fabsf(o - j * self.shaft_order) <= self.lobe_bins * self.opb) {
            return false;
        }
        let c = f32_to_usize_sat(libm::roundf(j * self.shaft_order / self.opb));
        let v = self.amp(c);
        c >= 1 && v > 0.0 && v >= self.amp(c - 1) && v >= self.amp(c + 1)
    }

    /// Bin range `[lo, hi]` covering orders `[a, b]`, clipped to the spectrum.
    pub(super) fn bins(&self, a: f32, b: f32) -> Option<(usize, usize)> {
        let lo = f32_to_usize_sat(libm::ceilf(a / self.opb));
        let hi =
            f32_to_usize_sat(libm::floorf(b / self.opb)).min(self.amps.len().saturating_sub(1));
        (b >= 0.0 && lo <= hi).then_some((lo, hi))
    }

    /// Whether a window (plus main lobe on both sides) lies within bins 1..len-1.
    pub(super) fn fits(&self, w: Window1) -> bool {
        let guard = self.lobe_bins * self.opb;
        let lowest = w.expected - w.half - guard;
        let highest = w.expected + w.half + guard;
        lowest >= self.opb && highest <= usize_to_f32(self.amps.len().saturating_sub(1)) * self.opb
    }

    /// Largest unmasked local maximum in the orders `[a, b]`, interpolated.
    pub(super) fn peak(&self, a: f32, b: f32) -> Option<Peak> {
        let (lo, hi) = self.bins(a, b)?;
        let mut best: Option<(usize, f32)> = None;
        for k in lo..=hi {
            let v = self.amp(k);
            let left = if k == 0 { 0.0 } else { self.amp(k - 1) };
            let right = self.amp(k + 1);
            if self.masked(k) || v <= 0.0 || v < left || v < right {
                continue;
            }
            if best.is_none_or(|(_, bv)| v > bv) {
                best = Some((k, v));
            }
        }
        let (k, v) = best?;
        let (l, r) = (self.amp(k.saturating_sub(1)), self.amp(k + 1));
        // Parabola through the log magnitudes (exact for a Gaussian kernel,
        // close for Hann); offset clamped to half a bin.
        let delta = if l > 0.0 && r > 0.0 {
            let (ll, lc, lr) = (libm::logf(l), libm::logf(v), libm::logf(r));
            let den = ll - 2.0 * lc + lr;
            if den < 0.0 {
                (0.5 * (ll - lr) / den).clamp(-0.5, 0.5)
            } else {
                0.0
            }
        } else {
            0.0
        };
        Some(Peak {
            order: (usize_to_f32(k) + delta) * self.opb,
            amplitude: v,
        })
    }

    /// Median of the bins around `w`, excluding `w` widened by the main lobe.
    pub(super) fn floor(&self, w: Window1, band_orders: f32) -> Option<f32> {
        let excl = w.half + self.lobe_bins * self.opb;
        let extra = band_orders.max(usize_to_f32(MIN_FLOOR_BINS) * self.opb);
        let (lo, hi) = self.bins(
            (w.expected - excl - extra).max(self.opb),
            w.expected + excl + extra,
        )?;
        let (xlo, xhi) = (w.expected - excl, w.expected + excl);
        let candidates = |k: &usize| {
            let o = usize_to_f32(*k) * self.opb;
            (o < xlo || o > xhi) && !self.masked(*k)
        };
        let count = (lo..=hi).filter(candidates).count();
        if count < MIN_FLOOR_BINS {
            return None;
        }
        let stride = count.div_ceil(FLOOR_SCRATCH).max(1);
        let mut scratch = [0.0f32; FLOOR_SCRATCH];
        let mut n = 0usize;
        for (slot, k) in scratch
            .iter_mut()
            .zip((lo..=hi).filter(candidates).step_by(stride))
        {
            *slot = self.amp(k);
            n += 1;
        }
        let used = scratch.get_mut(..n)?;
        // Not `select_nth_unstable_by`: core's selection keeps bounds-check
        // panics that the optimiser cannot remove (no-panic link check).
        heap_sort_total(used);
        used.get(n / 2).copied()
    }
}

/// Sorts by `f32::total_cmp` (heapsort: O(n log n), no panic path).
fn heap_sort_total(v: &mut [f32]) {
    let n = v.len();
    for start in (0..n / 2).rev() {
        sift_down(v, start, n);
    }
    for end in (1..n).rev() {
        if end < v.len() {
            v.swap(0, end);
        }
        sift_down(v, 0, end);
    }
}

/// Restores the max-heap property below `root` within `v[..end]`.
fn sift_down(v: &mut [f32], mut root: usize, end: usize) {
    let end = end.min(v.len());
    let greater = |v: &[f32], a: usize, b: usize| match (v.get(a), v.get(b)) {
        (Some(x), Some(y)) => x.total_cmp(y).is_gt(),
        _ => false,
    };
    loop {
        let mut child = root.saturating_mul(2).saturating_add(1);
        if child >= end {
            return;
        }
        let right = child.saturating_add(1);
        if right < end && greater(v, right, child) {
            child = right;
        }
        if !greater(v, child, root) {
            return;
        }
        if root < end {
            v.swap(root, child);
        }
        root = child;
    }
}

pub(super) fn not_searched(h: u8, expected: f32) -> HarmonicResult {
    HarmonicResult {
        harmonic: h,
        expected_order: expected,
        found_order: 0.0,
        amplitude: 0.0,
        floor: 0.0,
        prominence_db: -200.0,
        searched: false,
        found: false,
        counted: false,
        shared_with: None,
        shared_bearing: None,
    }
}
