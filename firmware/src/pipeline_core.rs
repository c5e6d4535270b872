//! The adapter from [`MeasurementCore`] to `dsp-core`'s envelope pipeline
//! and frame codec: the core the node runs once configured.
//!
//! * `start` converts the stored record ([`crate::point::point_config`]) and
//!   reconfigures the pipeline in place ([`Pipeline::reconfigure`]: no copy
//!   of the ~40 KB pipeline is built on the stack, so the core can live in a
//!   `static`); a point dsp-core refuses aborts the cycle.
//! * Blocks and edges go straight to the pipeline (nothing is buffered here).
//! * `finish` raises the firmware's flags in the pipeline, then keeps its
//!   [`Report`]; `encode` fills a [`FrameReport`] and packs the full frame
//!   (`wire::frame::encode`, version 2: 93 bytes for 4 bearings).
//!
//! * `start_survey` sets the pipeline aside (unstarted) for a band survey
//!   ([`crate::commission::Commissioning`], kept beside the pipeline and set
//!   up in place like it) that takes the blocks instead, until
//!   `finish_survey`.
//!
//! Report flags without a frame bit: SPEED_UNSTABLE is sent as
//! `tach_irregular` and NON_FINITE as `sensor_fault`; INCOMPLETE,
//! TOO_FEW_REVS and RESAMPLER make the report unanalysable, which the frame
//! shows as invalid (NaN) defect scores.

use crate::commission::{CommissionError, Commissioning, SurveyChoice};
use crate::config::PointRecord;
use crate::hal::MeasurementCore;
use crate::point::{point_config, PointError};
use dsp_core::pipeline::{Pipeline, PipelineError, NODE_BINS, NODE_RING};
use dsp_core::report::{QualityFlags, Report};
use wire::frame::{self, EncodeError, FrameReport};

/// The node's core: 4096-point spectrum, node-sized resampler ring.
pub type NodeCore = PipelineCore<4096, NODE_BINS, NODE_RING>;

/// Why the pipeline core failed.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum PipelineCoreError {
    /// The record could not become a measuring point.
    Point(PointError),
    /// dsp-core refused the point for its pipeline.
    Pipeline(PipelineError),
    /// `finish` before `start`, or `encode` before `finish`.
    OutOfOrder,
    /// The frame codec refused the report or the buffer.
    Encode(EncodeError),
    /// The pipeline takes no baseline yet; the downlink is refused.
    BaselineUnsupported,
}

impl core::fmt::Display for PipelineCoreError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Point(e) => write!(f, "{e}"),
            Self::Pipeline(e) => write!(f, "pipeline: {e}"),
            Self::OutOfOrder => f.write_str("core called out of order"),
            Self::Encode(e) => write!(f, "frame: {e}"),
            Self::BaselineUnsupported => f.write_str("baseline not supported by the pipeline"),
        }
    }
}

impl core::error::Error for PipelineCoreError {}

/// [`MeasurementCore`] over an `N`-point pipeline.
pub struct PipelineCore<const N: usize, const H: usize, const RING: usize> {
    node_id: u16,
    seq: u16,
    /// Configured in place by each `start`.
    pipeline: Pipeline<N, H, RING>,
    /// A measurement was started (its point accepted) and not yet encoded.
    started: bool,
    report: Option<Report>,
    /// The band survey, made (unconfigured) by the first `start_survey` and
    /// set up in place by each; `None` until then, so that the constant
    /// core's boot-time initialisation does not build it on the stack.
    survey: Option<Commissioning>,
    /// A survey was started and not yet finished: blocks go to it.
    surveying: bool,
}

impl<const N: usize, const H: usize, const RING: usize> PipelineCore<N, H, RING> {
    /// A core for node `node_id`; frame sequence numbers start at 0. A
    /// constant, so the core (and its pipeline) can be placed statically.
    pub const fn new(node_id: u16) -> Self {
        Self {
            node_id,
            seq: 0,
            pipeline: Pipeline::unconfigured(),
            started: false,
            report: None,
            survey: None,
            surveying: false,
        }
    }

    /// Finishes the pass being recorded and merges its report into the
    /// measurement's (the first pass's report is the measurement's).
    // The two cases in separate frames, neither inlined: a report is
    // several kilobytes (eight bearings), and the merge's temporaries
    // should not add to the first pass's frame, which every measurement
    // has (stack high-water).
    fn end_pass(&mut self) {
        if self.report.is_some() {
            self.end_later_pass();
        } else {
            self.end_first_pass();
        }
    }

    /// The first pass's report is the measurement's.
    #[inline(never)]
    fn end_first_pass(&mut self) {
        self.report = Some(self.pipeline.finish());
    }

    /// A later pass's report merges into the first's.
    #[inline(never)]
    fn end_later_pass(&mut self) {
        let r = self.pipeline.finish();
        if let Some(first) = &mut self.report {
            first.merge_pass(r);
        }
    }

    /// The last finished report.
    pub fn report(&self) -> Option<&Report> {
        self.report.as_ref()
    }
}

/// A pipeline report as the frame codec's input (the mapping is
/// [`FrameReport::from_report`], shared with the host simulator).
pub fn frame_report(r: &Report, node_id: u16, seq: u16) -> FrameReport {
    FrameReport::from_report(r, node_id, seq)
}

impl<const N: usize, const H: usize, const RING: usize> MeasurementCore
    for PipelineCore<N, H, RING>
{
    type Error = PipelineCoreError;

    fn load_baseline(&mut self, _data: &[u8]) -> Result<(), PipelineCoreError> {
        Err(PipelineCoreError::BaselineUnsupported)
    }

    fn start(&mut self, config: &PointRecord) -> Result<(), PipelineCoreError> {
        self.report = None;
        self.surveying = false;
        self.started = false;
        let point = point_config(config).map_err(PipelineCoreError::Point)?;
        self.pipeline
            .reconfigure(&point)
            .map_err(PipelineCoreError::Pipeline)?;
        self.started = true;
        Ok(())
    }

    fn push_block(&mut self, samples: &[i16]) {
        if let Some(s) = self.survey.as_mut().filter(|_| self.surveying) {
            s.push_block(samples);
        } else if self.started {
            self.pipeline.push_i16(samples);
            // A pass done and another to come: keep its report, go on with
            // the next pass on the next block (dsp_core::diagnosis::coverage).
            if self.pipeline.complete() && self.pipeline.pass() + 1 < self.pipeline.pass_count() {
                self.end_pass();
                let _ = self.pipeline.next_pass();
            }
        }
    }

    fn push_edge(&mut self, tick: u32) {
        if self.started {
            self.pipeline.push_edge(tick);
        }
    }

    fn complete(&self) -> bool {
        self.started && self.pipeline.complete()
    }

    fn finish(&mut self, flags: QualityFlags) -> Result<(), PipelineCoreError> {
        if !self.started {
            return Err(PipelineCoreError::OutOfOrder);
        }
        self.pipeline.raise(flags);
        self.end_pass();
        Ok(())
    }

    fn encode(&mut self, out: &mut [u8]) -> Result<usize, PipelineCoreError> {
        let r = self.report.as_ref().ok_or(PipelineCoreError::OutOfOrder)?;
        let fr = frame_report(r, self.node_id, self.seq);
        let n = frame::encode(&fr, out).map_err(PipelineCoreError::Encode)?;
        self.seq = self.seq.wrapping_add(1);
        Ok(n)
    }

    fn set_node_id(&mut self, node_id: u16) {
        self.node_id = node_id;
    }

    // Its own frame (the point conversion's temporaries); the survey itself
    // is set up in place, never built by value.
    #[inline(never)]
    fn start_survey(&mut self, config: &PointRecord) -> Result<(), CommissionError> {
        self.report = None;
        self.started = false;
        self.surveying = false;
        self.survey
            .get_or_insert_with(Commissioning::unconfigured)
            .reconfigure(config)?;
        self.surveying = true;
        Ok(())
    }

    #[inline(never)]
    fn finish_survey(&mut self) -> Result<SurveyChoice, CommissionError> {
        if !core::mem::take(&mut self.surveying) {
            return Err(CommissionError::NotStarted);
        }
        self.survey
            .as_ref()
            .ok_or(CommissionError::NotStarted)?
            .finish()
    }
}
