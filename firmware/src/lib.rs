//! Chip-independent firmware of an envord node.
//!
//! * [`cycle`]: the measurement cycle as an explicit state machine over
//!   hardware traits, host-testable with mocks.
//! * [`hal`]: the small hardware traits boards implement, and the
//!   [`hal::MeasurementCore`] trait the DSP core is adapted to.
//! * [`config`], [`downlink`], [`downlink_auth`], [`identity`], [`crc`],
//!   [`point`]: re-exported from the `wire` crate, which owns every byte the
//!   node and the gateway share (records, frames, downlinks, CRCs).
//! * [`store`]: power-safe record storage on NOR flash (two pages per record,
//!   sequence number and CRC, newest valid copy wins).
//! * [`commission`]: the band survey that chooses the envelope band on the node.
//! * [`quality`]: quality flags and streamed signal-health checks.
//! * [`ring`]: the queue of ADC blocks between the sampling interrupt and the
//!   cycle, deep enough for the block that completes a spectrum segment.
//! * [`exception`]: reports by exception (a full frame when a finding
//!   changed, a flag is raised or every N cycles; else the reduced frame);
//!   the rule lives in `wire::exception`, which the gateway shares.
//! * [`pipeline_core`]: the adapter to the `dsp-core` pipeline and frame codec.
//! * [`overall_core`]: a minimal overall-level core, so board images run the
//!   whole cycle before the envelope pipeline is adapted.
//!
//! `no_std`, no heap, no `unsafe`. Logs go through defmt with the `defmt`
//! feature and compile to nothing without it.
#![no_std]
#![cfg_attr(
    test,
    allow(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::cast_possible_truncation
    )
)]

pub mod commission;
pub mod cycle;
pub use wire::exception;
pub mod hal;
mod log;
pub mod overall_core;
pub mod pipeline_core;
pub mod quality;
pub mod ring;
pub mod store;

// The byte formats live in the `wire` crate; these paths stay for the
// firmware's own modules and the board images.
pub use wire::{config, crc, downlink, downlink_auth, identity, point};
