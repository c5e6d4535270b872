//! Where a cycle is, and what made it abort.

use crate::hal::WakeReason;

/// Where the cycle is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum State {
    /// Waiting for the alarm or a command, sensor off.
    Sleep,
    /// Woken; per-cycle state is reset here.
    Wake(WakeReason),
    /// Switching the sensor supply on.
    PowerSensor,
    /// Waiting for the sensor to settle, then starting the drivers.
    Settle,
    /// Streaming blocks and edges into the core.
    Acquire,
    /// The core computes its report.
    Finish,
    /// The report becomes a frame.
    Encode,
    /// The frame goes to the radio.
    Transmit,
    /// Receive window for a downlink; then the watchdog is fed if healthy.
    Listen,
}

/// What failed in a cycle.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Fault {
    /// The sensor power pin could not be driven.
    PowerPin,
    /// The block source (ADC/DMA) failed.
    Source,
    /// The pulse capture failed.
    Capture,
    /// The core refused the configuration or failed to finish or encode.
    Core,
    /// The radio failed to send or receive.
    Radio,
    /// The status frame could not be encoded.
    Status,
}

/// A cycle aborted in `state` because of `fault`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CycleError {
    /// State in which it happened.
    pub state: State,
    /// What failed.
    pub fault: Fault,
}

impl core::fmt::Display for CycleError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(
            f,
            "cycle aborted in {:?}: {:?} fault",
            self.state, self.fault
        )
    }
}

impl core::error::Error for CycleError {}
