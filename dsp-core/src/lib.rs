//! # dsp-core
//!
//! The diagnosis core of an envord vibration node: everything between ADC
//! counts plus once-per-revolution pulses and a compact bearing report.
//!
//! * `no_std`, no heap, no `unsafe`; state lives in fixed-size structs.
//! * Free of I/O and hardware: the firmware and the host simulator feed the
//!   same [`pipeline::Pipeline`] with blocks of samples and tach edges.
//! * No panics reachable from the public API (checked for the target by the
//!   no-panic link test, see DEVELOPERS.md). Library code uses `get`,
//!   iterators and saturating conversions instead of indexing and `as`.
//!
//! Signal chain (one concept per module):
//!
//! ```text
//! ADC block ─► frontend (design + biquad band-pass ─► rectify ─► decimate)
//!            └► overall (RMS, peak, crest factor, kurtosis, clipping) + velocity (ISO 20816)
//! tach edges ─► tach (speed, faults) ─► order_track (angle-domain resampling)
//!            ─► spectrum (window, rfft, averaging) ─► defects (harmonics, floor, score)
//!            with kinematics (BPFO, BPFI, FTF, BSF as orders of the tach shaft)
//! pipeline ties them together and yields a report; frame encodes it for the radio.
//! ```
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

pub mod band_choice;
pub mod biquad;
pub mod config;
pub mod coverage;
pub mod decimate;
pub mod defects;
pub mod design;
pub mod frame;
pub mod frontend;
pub mod kinematics;
pub mod mesh;
pub mod num;
pub mod order_track;
pub mod overall;
pub mod pipeline;
pub mod rectify;
pub mod report;
pub mod spectrum;
pub mod survey;
pub mod tach;
pub mod velocity;
