//! Commissioning on the node: the band survey ([`dsp_core::survey`]) over a
//! streaming capture, to choose the envelope band when the configuration has
//! none or the operator asks for it (an authenticated `0x04` downlink).
//!
//! Blocks go straight from the ADC into the survey's filter bank; no raw
//! record is kept. The survey settings come from the measuring point through
//! [`dsp_core::survey::band_choice`], the code `envord analyze` uses on the host, so
//! the node and the host choose the same band, bit for bit, from the same
//! samples (checked under QEMU by `boards/ci.sh`). The capture is as long
//! as a measurement record ([`crate::config::PointRecord::record_blocks`]).
//!
//! # Memory and time
//! [`Commissioning`] is a [`BandSurvey`] (48 bands of 160 bytes plus
//! bookkeeping: 7 728 bytes, `size_of` printed by
//! `firmware/tests/commission.rs`), kept inside the pipeline core beside the
//! pipeline and set up in place for each survey
//! ([`Commissioning::reconfigure`]); while a block is filtered the survey uses about 2 KiB of stack
//! (two 256-sample f32 scratch blocks), and its result about 0.8 KiB.
//! At 25.6 kS/s with the committed test point (min bandwidth 3 x BPFI at
//! 3600 rpm) the bank has 22 bands; under QEMU (`-icount`) a 256-sample
//! block costs 0.38 million instructions, 59 % of the 10 ms block at 64 MHz
//! if one instruction took one cycle: whether it keeps up on silicon is to be
//! measured on a kit (a gapped capture is discarded, not used). Figures:
//! docs/commissioning.md, `boards/size.sh`.

use dsp_core::survey::band_choice::survey_config;
use dsp_core::survey::{BandSurvey, SurveyError};

use crate::config::PointRecord;
use crate::point::{point_config, PointError};

/// The band a survey chose.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SurveyChoice {
    /// Band edges, Hz.
    pub band_hz: [f32; 2],
    /// Spectral kurtosis of the band.
    pub kurtosis: f32,
}

/// Why a survey could not run or choose.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum CommissionError {
    /// The measurement core has no band survey.
    Unsupported,
    /// `finish_survey` without `start_survey`.
    NotStarted,
    /// The record could not become a measuring point.
    Point(PointError),
    /// The survey refused its settings or found no band.
    Survey(SurveyError),
}

impl core::fmt::Display for CommissionError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Unsupported => f.write_str("this core has no band survey"),
            Self::NotStarted => f.write_str("band survey not started"),
            Self::Point(e) => write!(f, "{e}"),
            Self::Survey(e) => write!(f, "band survey: {e}"),
        }
    }
}

impl core::error::Error for CommissionError {}

/// A band survey for one measuring point, fed block by block.
#[derive(Clone, Debug)]
pub struct Commissioning {
    survey: BandSurvey,
}

impl Commissioning {
    /// The survey for `config`'s measuring point.
    pub fn new(config: &PointRecord) -> Result<Self, CommissionError> {
        let mut c = Self::unconfigured();
        c.reconfigure(config)?;
        Ok(c)
    }

    /// A survey without bands (a constant, for static placement); set it up
    /// with [`Commissioning::reconfigure`].
    pub const fn unconfigured() -> Self {
        Self {
            survey: BandSurvey::unconfigured(),
        }
    }

    /// Sets the survey up in place for `config`'s measuring point
    /// ([`BandSurvey::reconfigure`]: no copy of the 7.7 KiB bank on the
    /// stack) and clears its moments; on an error nothing changes.
    pub fn reconfigure(&mut self, config: &PointRecord) -> Result<(), CommissionError> {
        let point = point_config(config).map_err(CommissionError::Point)?;
        self.survey
            .reconfigure(point.sample_rate_hz, survey_config(&point))
            .map_err(CommissionError::Survey)
    }

    /// Bands in the bank.
    pub fn band_count(&self) -> usize {
        self.survey.band_count()
    }

    /// Feeds one block of ADC counts (the block is not kept).
    pub fn push_block(&mut self, samples: &[i16]) {
        self.survey.push_i16(samples);
    }

    /// Samples pushed so far.
    pub fn samples(&self) -> u64 {
        self.survey.samples()
    }

    /// The band of highest spectral kurtosis.
    pub fn finish(&self) -> Result<SurveyChoice, CommissionError> {
        let r = self.survey.finish().map_err(CommissionError::Survey)?;
        Ok(SurveyChoice {
            band_hz: r.band_hz,
            kurtosis: r.kurtosis,
        })
    }
}
