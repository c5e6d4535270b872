//! Running the node's pipeline on a recording, exactly as the firmware does:
//! the same [`NodePipeline`] type, ADC-sized blocks of
//! [`ADC_BLOCK`](dsp_core::pipeline::ADC_BLOCK) samples, tach edges as
//! capture-timer ticks pushed before the block in which they occurred, and
//! acquisition stopped once the configured revolutions are in.

use dsp_core::config::{PointConfig, SpeedInput};
use dsp_core::pipeline::{NodePipeline, PipelineError, ADC_BLOCK};
use dsp_core::report::Report;
use dsp_core::speed::order_track::OrderTrackError;
use dsp_core::speed::tach::EdgeDetector;
use dsp_core::survey::{SurveyError, SurveyResult};

use crate::error::CliError;

/// The acceleration channel of a recording.
#[derive(Debug, Clone)]
pub enum Accel {
    /// ADC counts (int16 files): the node's `push_i16` path, scaled by the
    /// point's `counts_to_g`.
    Counts(Vec<i16>),
    /// Samples in g (float or 24/32-bit files): the `push_f32` path.
    G(Vec<f32>),
}

impl Accel {
    /// Number of samples.
    pub fn len(&self) -> usize {
        match self {
            Accel::Counts(v) => v.len(),
            Accel::G(v) => v.len(),
        }
    }

    /// True when there are no samples.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A record to analyse.
#[derive(Debug, Clone)]
pub struct Record {
    /// Sample rate, Hz.
    pub sample_rate_hz: f32,
    /// Acceleration.
    pub accel: Accel,
    /// Tach edge times in seconds from the first sample, if any.
    pub edges_s: Option<Vec<f64>>,
}

/// A report plus what the host shows beside it.
#[derive(Debug, Clone)]
pub struct Analysis {
    /// The node's report.
    pub report: Report,
    /// The averaged envelope order spectrum (peak amplitude per bin).
    pub spectrum: Vec<f32>,
    /// Orders per spectrum bin.
    pub orders_per_bin: f32,
    /// Speed per revolution, rpm.
    pub speed_series: Vec<f32>,
    /// Input samples the node consumed before its record was complete.
    pub samples_used: u64,
}

/// Converts edge times to capture-timer ticks (wrapping u32), as the node's
/// capture timer would have stamped them.
pub fn edges_to_ticks(edges_s: &[f64], tick_hz: u32, tick_at_sample0: u32) -> Vec<u32> {
    edges_s
        .iter()
        .map(|&t| {
            let ticks = (t * f64::from(tick_hz)).round();
            // Wrap like the 32-bit hardware counter.
            let wrapped = ticks.rem_euclid(4_294_967_296.0);
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
            let w = wrapped as u32;
            w.wrapping_add(tick_at_sample0)
        })
        .collect()
}

/// A digitised tach channel whose edges cannot be found.
#[derive(Debug)]
pub struct TachChannelError(dsp_core::speed::tach::EdgeDetectorError);

impl std::fmt::Display for TachChannelError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "tach channel: {}", self.0)
    }
}

impl std::error::Error for TachChannelError {}

/// Finds rising edges in a digitised tach channel: hysteresis at 30 % and
/// 70 % of the channel's range, sub-sample interpolation. Times in seconds.
pub fn edges_from_channel(tach: &[f32], sample_rate_hz: f32) -> Result<Vec<f64>, TachChannelError> {
    let finite = tach.iter().copied().filter(|x| x.is_finite());
    let lo = finite.clone().fold(f32::INFINITY, f32::min);
    let hi = finite.fold(f32::NEG_INFINITY, f32::max);
    if !(lo.is_finite() && hi.is_finite()) || hi - lo <= 0.0 {
        return Ok(Vec::new()); // a flat channel has no edges: the core flags it
    }
    let span = hi - lo;
    let mut det = EdgeDetector::new(lo + 0.3 * span, lo + 0.7 * span).map_err(TachChannelError)?;
    let mut out = Vec::new();
    det.process(tach, |t| out.push(t / f64::from(sample_rate_hz)));
    Ok(out)
}

/// Chooses the envelope band when `point` has none: the band survey with
/// the node's commissioning rule ([`dsp_core::survey::band_choice`]) over the whole
/// record, in ADC-sized blocks, ADC counts through `push_i16` as on the
/// node, so the node and the host choose the same band bit for bit from the
/// same samples. Sets `point.band_hz` and the recording's sample rate and
/// returns the survey's result; `Ok(None)` when the point has a band.
pub fn choose_band(
    point: &mut PointConfig,
    rec: &Record,
) -> Result<Option<SurveyResult>, SurveyError> {
    if point.band_hz.is_some() {
        return Ok(None);
    }
    point.sample_rate_hz = rec.sample_rate_hz;
    let mut s = dsp_core::survey::band_choice::new_survey(point)?;
    match &rec.accel {
        Accel::Counts(v) => v.chunks(ADC_BLOCK).for_each(|b| s.push_i16(b)),
        Accel::G(v) => v.chunks(ADC_BLOCK).for_each(|b| s.push_f32(b)),
    }
    let r = s.finish()?;
    point.band_hz = Some(r.band_hz);
    Ok(Some(r))
}

/// Sample rates the host analysis accepts, Hz (the simulator's range).
pub const SAMPLE_RATE_RANGE_HZ: [f32; 2] = [1000.0, 400_000.0];

/// Refuses a sample rate outside [`SAMPLE_RATE_RANGE_HZ`] with the fix in
/// words, before any stage turns it into jargon about rings or Nyquist.
pub fn check_sample_rate(fs: f32) -> Result<(), SampleRateError> {
    let [lo, hi] = SAMPLE_RATE_RANGE_HZ;
    if fs.is_finite() && (lo..=hi).contains(&fs) {
        Ok(())
    } else {
        Err(SampleRateError { fs })
    }
}

/// A recording's sample rate outside [`SAMPLE_RATE_RANGE_HZ`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SampleRateError {
    /// The rate given, Hz.
    pub fs: f32,
}

impl std::fmt::Display for SampleRateError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let [lo, hi] = SAMPLE_RATE_RANGE_HZ;
        write!(
            f,
            "sample rate {} Hz (from the WAV header) is outside the {lo:.0} to {hi:.0} Hz \
             the analysis supports: check that the header's rate is the rate the samples were \
             taken at, or resample the recording",
            self.fs
        )
    }
}

impl std::error::Error for SampleRateError {}

/// A pipeline refusal in words a user can act on: which point-file key to
/// change, and to what, where that can be worked out.
pub fn explain_pipeline_error(point: &PointConfig, e: PipelineError) -> String {
    match e {
        PipelineError::Config(c) => format!("{e} (point file: {})", crate::point::config_key(c)),
        PipelineError::OrderTrack(OrderTrackError::RingTooSmall { .. }) => {
            let (lo, hi) = (point.min_rpm, point.max_rpm);
            // The narrowest change that fits: the lowest min_rpm the
            // resampler accepts with this max_rpm (bisection over plans).
            let fits = |min_rpm: f32| {
                let mut q = point.clone();
                q.min_rpm = min_rpm;
                NodePipeline::check(&q).is_ok()
            };
            // (the tach tracker needs min_rpm < max_rpm)
            let (mut bad, mut good) = (lo, 0.95 * hi);
            let hint = if fits(good) {
                for _ in 0..24 {
                    let mid = 0.5 * (bad + good);
                    if fits(mid) {
                        good = mid;
                    } else {
                        bad = mid;
                    }
                }
                format!(
                    "raise [speed] min_rpm to at least {:.0} rpm, or lower [speed] max_rpm",
                    good.ceil()
                )
            } else {
                "lower [spectrum] samples_per_rev".to_string()
            };
            format!(
                "the speed range [speed] min_rpm {lo} to max_rpm {hi} rpm is too wide for the \
                 node's resampler at {} samples per revolution: {hint}, to the speeds this \
                 machine really runs at",
                point.samples_per_rev
            )
        }
        other => other.to_string(),
    }
}

/// Runs the node pipeline over a record.
pub fn run(point: &PointConfig, rec: &Record) -> Result<Analysis, CliError> {
    let mut point = point.clone();
    point.sample_rate_hz = rec.sample_rate_hz;
    check_sample_rate(rec.sample_rate_hz).map_err(|e| CliError::Input(e.to_string()))?;
    let mut p = Box::new(NodePipeline::new(&point).map_err(|e| {
        CliError::input(
            format!(
                "measuring point at the recording's {} Hz sample rate",
                rec.sample_rate_hz
            ),
            explain_pipeline_error(&point, e),
        )
    })?);
    let ticks = match (&point.speed, &rec.edges_s) {
        (
            SpeedInput::Tach {
                tick_hz,
                tick_at_sample0,
                ..
            },
            Some(e),
        ) => Some((edges_to_ticks(e, *tick_hz, *tick_at_sample0), e.as_slice())),
        _ => None,
    };
    let fs = f64::from(rec.sample_rate_hz);
    let mut next_edge = 0usize;
    let n = rec.accel.len();
    let mut start = 0usize;
    // The passes of the point run one after the other on consecutive
    // samples, switching at a block boundary, as on the node.
    let mut merged: Option<Report> = None;
    let mut first_pass: Option<(Vec<f32>, f32, Vec<f32>)> = None;
    loop {
        push_pass(
            &mut p,
            rec,
            ticks.as_ref(),
            fs,
            &mut next_edge,
            &mut start,
            n,
        );
        let report = p.finish();
        match &mut merged {
            None => {
                first_pass = Some((
                    p.spectrum().to_vec(),
                    p.orders_per_bin(),
                    p.speed_series().to_vec(),
                ));
                merged = Some(report);
            }
            Some(m) => m.merge_pass(report),
        }
        // The node starts a pass only on a block after the previous pass
        // completed: a record that ends first has no later pass.
        if start >= n || !p.complete() || !p.next_pass() {
            break;
        }
    }
    let (spectrum, orders_per_bin, speed_series) = first_pass.unwrap_or_default();
    Ok(Analysis {
        spectrum,
        orders_per_bin,
        speed_series,
        samples_used: u64::try_from(start).unwrap_or(u64::MAX),
        report: merged.unwrap_or_else(|| p.finish()),
    })
}

/// Pushes blocks (and their tach edges) until the pass is complete or the
/// record ends.
fn push_pass(
    p: &mut NodePipeline,
    rec: &Record,
    ticks: Option<&(Vec<u32>, &[f64])>,
    fs: f64,
    next_edge: &mut usize,
    start: &mut usize,
    n: usize,
) {
    while *start < n && !p.complete() {
        let end = (*start + ADC_BLOCK).min(n);
        if let Some((ticks, times)) = ticks {
            // Edges that occurred before the end of this block.
            #[allow(clippy::cast_precision_loss)]
            let block_end_s = end as f64 / fs;
            while let (Some(&t), Some(&tick)) = (times.get(*next_edge), ticks.get(*next_edge)) {
                if t >= block_end_s {
                    break;
                }
                p.push_edge(tick);
                *next_edge += 1;
            }
        }
        match &rec.accel {
            Accel::Counts(v) => p.push_i16(v.get(*start..end).unwrap_or(&[])),
            Accel::G(v) => p.push_f32(v.get(*start..end).unwrap_or(&[])),
        }
        *start = end;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The host survey of ADC counts equals the node's (`push_i16` in
    /// ADC-sized blocks) bit for bit; float samples take `push_f32`.
    #[test]
    fn choose_band_sets_the_band_only_when_missing() {
        let x: Vec<i16> = (0..40_000u32)
            .map(|k| {
                let n = (k.wrapping_mul(2_654_435_761) >> 20) as i16 - 2048;
                if k % 300 < 6 {
                    n.saturating_mul(8)
                } else {
                    n / 8
                }
            })
            .collect();
        let rec = Record {
            sample_rate_hz: 25_600.0,
            accel: Accel::Counts(x.clone()),
            edges_s: None,
        };
        let mut p = PointConfig::default();
        let r = choose_band(&mut p, &rec).unwrap().unwrap();
        assert_eq!(p.band_hz, Some(r.band_hz));
        assert_eq!(p.sample_rate_hz, 25_600.0);
        let mut node = dsp_core::survey::band_choice::new_survey(&p).unwrap();
        for b in x.chunks(ADC_BLOCK) {
            node.push_i16(b);
        }
        assert_eq!(node.finish().unwrap().band_hz, r.band_hz);
        // a band already set is kept
        assert!(choose_band(&mut p, &rec).unwrap().is_none());
    }
}
