//! Logging that compiles to nothing without the `defmt` feature.

macro_rules! log_info {
    ($($t:tt)*) => {{
        #[cfg(feature = "defmt")]
        defmt::info!($($t)*);
    }};
}

macro_rules! log_warn {
    ($($t:tt)*) => {{
        #[cfg(feature = "defmt")]
        defmt::warn!($($t)*);
    }};
}

pub(crate) use log_info;
pub(crate) use log_warn;
