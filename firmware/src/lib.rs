//! Chip-independent firmware of an envord node.
//!
//! * [`cycle`]: the measurement cycle as an explicit state machine over
//!   hardware traits, host-testable with mocks.
//! * [`hal`]: the small hardware traits boards implement, and the
//!   [`hal::MeasurementCore`] trait the DSP core is adapted to.
//! * [`config`]: the measuring-point configuration as a versioned, CRC-checked
//!   binary record; [`downlink`]: commands that replace it.
//! * [`quality`]: quality flags and streamed signal-health checks.
//! * [`crc`]: CRC-32 for stored records.
//! * [`pipeline_core`]: the adapter to the `dsp-core` pipeline and frame codec.
//! * [`point`]: the record as `dsp-core`'s measuring point, for the pipeline adapter.
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

pub mod config;
pub mod crc;
pub mod cycle;
pub mod downlink;
pub mod downlink_auth;
pub mod hal;
mod log;
pub mod overall_core;
pub mod pipeline_core;
pub mod point;
pub mod quality;
