//! Every byte an envord node and its gateway share.
//!
//! * [`frame`]: the radio frames: full report, reduced report, node status
//!   ([`frame::status`]), with their layout and quantisation;
//!   docs/frame-format.md describes every bit.
//! * [`overall`]: the 12-byte `0x4F` overall-level frame of the firmware's
//!   fallback core (the computation stays in `firmware::overall_core`).
//! * [`config`]: the measuring-point configuration record the node stores
//!   and a downlink carries; [`point`]: that record as `dsp-core`'s
//!   measuring point and back.
//! * [`identity`]: the identity record written at provisioning.
//! * [`downlink`]: downlink commands, accepted only when [`downlink_auth`]
//!   verifies them under the node's key.
//! * [`crc`]: the one CRC module (CRC-16 for frames, CRC-32 for records).
//! * [`exception`]: the rule that decides between a full and a reduced
//!   report frame. The node applies it and the gateway reads a reduced frame
//!   ("as before") by it, so it lives with the frames both sides share.
//!
//! The model is a network stack's wire layer: bytes are checked once
//! (`decode` / `parse` / `verify` return a typed error naming what is
//! wrong), and what comes out of a check is a plain typed value whose
//! accessors cannot fail; every format has an encode/decode (emit/parse)
//! pair, tested as a round trip in `wire/tests/`.
//!
//! # No-panic contract
//!
//! Nothing in this crate panics on any input, of any length or content: no
//! `unwrap`, `expect`, `panic!`, slice indexing or truncating cast in library
//! code (the workspace clippy lints deny them with `-D warnings`), and the
//! `boards/nopanic` image links every decoder with a panic handler that
//! does not exist, so a reachable panic path fails the link
//! (`.ci/robust.sh`). The fuzz targets in `fuzz/` feed arbitrary bytes to
//! the decoders. `no_std`, no heap, no `unsafe`.
//!
//! A format change goes here, with a version bump of the format and an
//! entry in CHANGELOG.md at the repository root.
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

pub mod band;
pub mod config;
pub mod crc;
pub mod downlink;
pub mod downlink_auth;
pub mod exception;
pub mod frame;
pub mod identity;
pub mod overall;
pub mod point;

/// Most bearings a report frame (version 2) carries; defined once in
/// [`frame::layout`], equal to a `dsp-core` measuring point's capacity
/// (`dsp_core::config::MAX_BEARINGS`). Version 1 frames and configuration
/// records up to version 2 carry 4 ([`frame::layout::V1_MAX_BEARINGS`]).
pub use frame::layout::MAX_BEARINGS;

pub use band::BandSource;
pub use frame::FrameFlags;
