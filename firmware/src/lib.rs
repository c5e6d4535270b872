//! Chip-independent firmware of an envord node (being written).
#![no_std]

pub mod downlink_auth;
