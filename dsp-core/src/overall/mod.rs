//! Overall stage: indicators of the raw acceleration, computed in the same
//! pass as the envelope path (the front end feeds every block here too).
//!
//! * [`stats`]: mean, AC RMS, peak, crest factor, kurtosis, clipped and
//!   non-finite sample counts.
//! * [`velocity`]: velocity RMS over the ISO 20816 band and its evaluation
//!   zone (ISO 20816-3); [`halfband`]: its decimator.
//!
//! Both accumulate in f32 and move their partial sums to f64 every
//! [`FLUSH_EVERY`] counted samples, so results do not depend on where blocks
//! start. The constant lives here so that neither file imports the other.

pub mod halfband;
pub mod stats;
pub mod velocity;

pub use stats::{Overall, OverallAcc};
pub use velocity::{
    zone, zone_limits, MachineGroup, Support, VelocityConfig, VelocityError, VelocityMeter, Zone,
};

/// Partial sums are moved to f64 after this many samples.
pub const FLUSH_EVERY: u32 = 256;
