//! Chip-independent firmware of an envord node.
//!
//! * [`cycle`]: the measurement cycle as an explicit state machine over
//!   hardware traits, host-testable with mocks.
//! * [`hal`]: the small hardware traits boards implement, and the
//!   [`hal::MeasurementCore`] trait the DSP core is adapted to.
//! * [`config`]: the measuring-point configuration as a versioned, CRC-checked
//!   binary record; [`downlink`]: commands that replace it, accepted only
//!   when [`downlink_auth`] verifies them under the node's key
//!   ([`identity`], written at provisioning).
//! * [`store`]: power-safe record storage on NOR flash (two pages per record,
//!   sequence number and CRC, newest valid copy wins).
//! * [`commission`]: the band survey that chooses the envelope band on the node.
//! * [`quality`]: quality flags and streamed signal-health checks.
//! * [`ring`]: the queue of ADC blocks between the sampling interrupt and the
//!   cycle, deep enough for the block that completes a spectrum segment.
//! * [`exception`]: reports by exception (a full frame when a finding
//!   changed, a flag is raised or every N cycles; else the reduced frame).
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

pub mod commission;
pub mod config;
pub mod crc;
pub mod cycle;
pub mod downlink;
pub mod downlink_auth;
pub mod exception;
pub mod hal;
pub mod identity;
mod log;
pub mod overall_core;
pub mod pipeline_core;
pub mod point;
pub mod quality;
pub mod ring;
pub mod store;
