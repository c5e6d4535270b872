//! Chip-independent firmware of an envord node (being written).
#![no_std]
