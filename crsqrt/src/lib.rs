//! Correctly rounded `f32` square root in `no_std`.
//!
//! `f32::sqrt` lives in `std`, and `core`'s version is unstable, so a
//! `no_std` crate on stable Rust has no portable way to reach a hardware
//! square root. This crate gives one function, [`sqrtf`]:
//!
//! * on ARM hard-float targets (`target_abi = "eabihf"`, e.g.
//!   `thumbv7em-none-eabihf`: the ABI passes floats in FPU registers, so the
//!   FPU is there; the `vfp2` target feature itself is not a stable `cfg`),
//!   the FPU's `vsqrt.f32` (14 cycles on a Cortex-M4F; see `imp` for the
//!   register moves around it);
//! * elsewhere, `libm::sqrtf`.
//!
//! Both are the IEEE 754 square root, correctly rounded to nearest-even
//! (ARMv7-M Architecture Reference Manual, VSQRT; IEEE 754-2008 §5.4.1
//! requires `squareRoot` to be correctly rounded; libm's `sqrtf` is the
//! correctly rounded musl/FreeBSD algorithm), so the node and the host get
//! the same bits for every non-NaN input. NaN results may differ in their
//! payload bits between the two; callers that compare bits pass no NaN.
//! The FPU's flush-to-zero mode must be off (the reset default of FPSCR;
//! nothing in envord sets it), else subnormal inputs would give 0.
//!
//! The workspace forbids `unsafe`; this crate exists so that the one
//! `asm!` needed sits outside `dsp-core` with a narrow, documented allow.
#![no_std]

/// Correctly rounded square root of `x` (IEEE 754 `squareRoot`).
///
/// ```
/// assert_eq!(crsqrt::sqrtf(2.0), libm::sqrtf(2.0));
/// assert_eq!(crsqrt::sqrtf(0.0), 0.0);
/// assert!(crsqrt::sqrtf(-1.0).is_nan());
/// ```
#[inline]
pub fn sqrtf(x: f32) -> f32 {
    imp::sqrtf(x)
}

#[cfg(all(target_arch = "arm", target_abi = "eabihf"))]
mod imp {
    /// `vsqrt.f32` on the FPU.
    ///
    /// rustc 1.95 refuses S registers as `asm!` operands on
    /// `thumbv7em-none-eabihf` ("register class `sreg` requires the `vfp2`
    /// target feature", rust-lang/rust#159976, fixed upstream after 1.95),
    /// and `vfp2` cannot be enabled on stable. So the operands travel in
    /// core registers and the instruction borrows s14, saving and restoring
    /// it in a third core register: 7 instructions (4 `vmov` + the root +
    /// the compiler's 2 `vmov`) instead of 1, still about a quarter of the
    /// Newton root's cost. Once the pinned toolchain has the fix this becomes
    /// `inout(sreg) x`.
    #[inline(always)]
    #[allow(unsafe_code)]
    pub(super) fn sqrtf(x: f32) -> f32 {
        let y: u32;
        // SAFETY: the instructions read and write only the three core
        // registers given as operands and s14, whose value is restored
        // before the block ends, so no register the compiler knows of
        // changes; they touch no memory and no stack. `vsqrt.f32` changes no
        // condition flags, only FPSCR's cumulative exception bits (invalid,
        // inexact), which Rust does not model and nothing here reads. The
        // cfg (hard-float ABI) guarantees the FPU is there.
        unsafe {
            core::arch::asm!(
                "vmov {t}, s14",
                "vmov s14, {x}",
                "vsqrt.f32 s14, s14",
                "vmov {y}, s14",
                "vmov s14, {t}",
                x = in(reg) x.to_bits(),
                y = lateout(reg) y,
                t = out(reg) _,
                options(pure, nomem, nostack, preserves_flags),
            );
        }
        f32::from_bits(y)
    }
}

#[cfg(not(all(target_arch = "arm", target_abi = "eabihf")))]
mod imp {
    /// IEEE square root in software or the host's instruction (libm).
    #[inline(always)]
    pub(super) fn sqrtf(x: f32) -> f32 {
        libm::sqrtf(x)
    }
}

#[cfg(test)]
mod tests {
    use super::sqrtf;

    /// Correct rounding checked directly: r = sqrtf(x) is correctly rounded
    /// iff (r - ulp/2)^2 <= x <= (r + ulp/2)^2, evaluated exactly in f64
    /// (a 24-bit r squared fits 53 bits).
    #[test]
    fn correctly_rounded_on_a_sweep() {
        let mut b = 0x0000_0001u32;
        while b < 0x7f80_0000 {
            let x = f32::from_bits(b);
            let r = sqrtf(x);
            let lo = f64::from(f32::from_bits(r.to_bits() - 1));
            let hi = f64::from(f32::from_bits(r.to_bits() + 1));
            let (r, x) = (f64::from(r), f64::from(x));
            let (m_lo, m_hi) = ((lo + r) / 2.0, (r + hi) / 2.0);
            assert!(m_lo * m_lo <= x && x <= m_hi * m_hi, "x = {x:e}");
            b += 0x1357;
        }
        assert_eq!(sqrtf(0.0), 0.0);
        assert_eq!(sqrtf(-0.0).to_bits(), (-0.0f32).to_bits());
        assert_eq!(sqrtf(f32::INFINITY), f32::INFINITY);
        assert!(sqrtf(-1.0).is_nan() && sqrtf(f32::NAN).is_nan());
    }
}
