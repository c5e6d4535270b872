//! host-sim: the envord node's core on a PC.
//!
//! The `envord` binary (src/main.rs) is a thin dispatcher over these modules;
//! each subcommand lives in its own module with a clap `Args` struct and a
//! `run` function returning [`CliError`] on failure.
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

pub mod analysis;
pub mod bearing_len;
pub mod closed_stdout;
pub mod cmd_analyze;
pub mod cmd_batch;
pub mod cmd_compare;
pub mod cmd_demo;
pub mod cmd_simulate;
pub mod edges_csv;
pub mod energy;
pub mod error;
pub mod gateway;
pub mod output;
pub mod palette;
pub mod plot;
pub mod point;
pub mod report_json;
pub mod report_policy;
pub mod simulate;
pub mod validate;
pub mod wav;
