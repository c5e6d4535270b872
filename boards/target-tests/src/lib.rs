//! Support for the on-target tests: the defmt transport (semihosting under
//! QEMU, RTT on a kit) and a HardFault handler that fails the run.
//!
//! Panics exit through semihosting with status 101 (the `semihosting` crate's
//! panic handler); probe-rs reports semihosting exits as well.
#![no_std]

use cortex_m as _; // critical-section implementation (single core)

#[cfg(feature = "rtt")]
use defmt_rtt as _;
#[cfg(feature = "semihosting-log")]
use defmt_semihosting as _;

#[cortex_m_rt::exception]
unsafe fn HardFault(_ef: &cortex_m_rt::ExceptionFrame) -> ! {
    semihosting::process::exit(4)
}

/// Referenced by each test so that this crate (logger, fault handler) links.
pub fn init() {}
