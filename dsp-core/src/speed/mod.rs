//! Speed stage: shaft speed from the tach pulses (or a constant speed), and
//! computed order tracking, which resamples the decimated envelope to a
//! constant number of samples per shaft revolution.
//!
//! * [`tach`]: capture ticks in, validated once-per-revolution marks and a
//!   speed summary out (extra, missing and stopped pulses flagged).
//! * [`order_track`]: marks plus the decimated envelope in, whole
//!   revolutions of angle-domain samples out, for [`crate::spectrum`].
//!
//! The envelope decimation the tracker needs is chosen with the front end
//! ([`crate::frontend::decimation_for`]).

pub mod order_track;
pub mod tach;

pub use order_track::{
    ring_needed, Interpolation, OrderFlags, OrderTrackConfig, OrderTrackError, OrderTracker,
};
pub use tach::{
    EdgeDetector, EdgeDetectorError, RevMark, SpeedSource, SpeedSummary, TachConfig,
    TachConfigError, TachFlags, TachTracker, SERIES_CAP,
};
