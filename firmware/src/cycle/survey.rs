//! The end of a commissioning band survey: the choice checked against the
//! capture's health and stored in the configuration.

use super::{Node, SurveyOutcome};
use crate::commission::CommissionError;
use crate::hal::{Board, MeasurementCore};
use crate::log::log_info;
use dsp_core::survey::SurveyError;
use dsp_core::QualityFlags;

impl<B: Board, C: MeasurementCore> Node<B, C> {
    /// The survey's choice, unless the capture was unhealthy.
    #[inline(never)] // keeps its buffers out of the frame of every step
    pub(super) fn survey_outcome(&mut self) -> SurveyOutcome {
        let choice = match self.core.finish_survey() {
            Ok(c) => c,
            Err(e) => return SurveyOutcome::Failed(e),
        };
        // a clipped, dead or gapped capture makes its kurtosis meaningless
        let mut bad = QualityFlags::empty();
        for f in [
            QualityFlags::CLIPPING,
            QualityFlags::SENSOR_FAULT,
            QualityFlags::OVERRUN,
        ] {
            if self.summary.flags.contains(f) {
                bad.insert(f);
            }
        }
        if !bad.is_empty() {
            return SurveyOutcome::SignalFault(bad);
        }
        match self
            .config
            .with_survey_band(choice.band_hz, choice.kurtosis)
        {
            Ok(rec) if self.store_config(self.counter, &rec) => {
                self.config = rec;
                SurveyOutcome::Stored(choice)
            }
            Ok(_) => SurveyOutcome::NotStored(choice),
            Err(_) => SurveyOutcome::Failed(CommissionError::Survey(SurveyError::NoBand)),
        }
    }

    pub(super) fn end_survey(&mut self, outcome: SurveyOutcome) {
        log_info!("survey {}", outcome);
        self.link.survey = outcome;
        self.link.survey_tried = true;
        self.link.status_pending = true;
    }
}
