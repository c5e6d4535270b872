//! Where the envelope band comes from: one enum for the configuration
//! record (byte 61, [`crate::config`]) and the status frame (bits 0..=1 of
//! its state byte, [`crate::frame::status`]); both carry the same codes.
//! The survey's spectral kurtosis travels beside it in either format
//! (`PointRecord::band_kurtosis`, `StatusReport::band_kurtosis`).

use serde::{Deserialize, Serialize};

/// Where the envelope band in use came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[serde(rename_all = "snake_case")]
pub enum BandSource {
    /// Set by the operator in the configuration (code 0).
    Configured,
    /// Chosen by the node's band survey (commissioning) (code 1).
    Survey,
    /// None configured and no survey stored yet: the node runs a band survey
    /// and until one is stored measures with the default band of
    /// `PointConfig::default_band_hz`; a record's band fields are 0 (code 2).
    Unset,
}
