//! `envord`: the host simulator and gateway command (being written).
fn main() {}
