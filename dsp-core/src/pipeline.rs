//! One pipeline object: configure from a measuring point, push ADC blocks
//! and tach edges as they arrive, finish, get a [`Report`].
//!
//! ```text
//! push_i16 / push_f32 ─► FrontEnd ─► OrderTracker ─► OrderSpectrum (N points, averaged)
//! push_edge ─────────► TachTracker ─┘ (revolution marks)
//! finish ─► SpeedSummary + Overall + DefectSearch per bearing ─► Report
//! ```
//!
//! The raw record is never stored: each block is filtered, rectified and
//! decimated as it arrives, the envelope is resampled to shaft angle as soon
//! as the bracketing revolution marks are known, and the angle-domain samples
//! fill the spectrum's segment buffer, the only large buffer.
//!
//! # Choices made from the configuration
//! * Decimation: the largest factor (with prime factors <= 7, as the
//!   decimator needs) that keeps at least 1.25 x `samples_per_rev` envelope
//!   samples per revolution at `max_rpm` and half the angle-domain rate
//!   (S/2 orders) inside the decimator's pass band (0.4 x output rate).
//! * Search band: defects are searched up to S/4 orders. Between S/4 and S/2
//!   the angle-domain sampling can fold in envelope content that the
//!   decimator's transition band lets through (above 0.4 x its output rate,
//!   attenuated >= 60 dB only beyond 0.6 x), so that part of the spectrum is
//!   reported but never searched.
//! * Record: `revolutions` is rounded down to whole segments of N/S
//!   revolutions; the pipeline is [`complete`](Pipeline::complete) once they
//!   are averaged, and later samples only update the overall values.

use core::fmt;

use heapless::Vec;

use crate::config::{ConfigError, PointConfig, SpeedInput, MAX_BEARINGS, MAX_MESHES};
use crate::diagnosis::coverage::{Coverage, NotSearched};
use crate::diagnosis::defects::DefectSearch;
use crate::diagnosis::kinematics::{BearingOrders, ShaftRatio};
use crate::frontend::decimation_for;
use crate::frontend::{FrontEnd, FrontEndConfig, FrontEndPlan};
use crate::num::usize_to_f32;
use crate::overall::velocity::VelocityConfig;
use crate::report::{BearingReport, LineReport, PassReport, QualityFlags, Report};
use crate::spectrum::{OrderSpectrum, SpectrumConfig, SpectrumView};
use crate::speed::order_track::{OrderFlags, OrderTrackConfig, OrderTrackPlan, OrderTracker};
use crate::speed::tach::{SpeedSource, TachConfig, TachFlags, TachPlan, TachTracker};

/// Samples per ADC block on the node (one DMA half-buffer). The host
/// simulator feeds recordings in blocks of this size so its reports equal the
/// node's.
pub const ADC_BLOCK: usize = 256;

/// Ring of decimated envelope samples on the node (8 KiB): enough for three
/// revolutions at the slowest configured speed; see
/// [`crate::speed::order_track::ring_needed`].
pub const NODE_RING: usize = 2048;

/// Spectrum bins the node keeps: those up to `S/4` orders (`N/4 + 1` for
/// `N = 4096`), all that the defect search and the gear-mesh lines read (see
/// the module docs for why the band above is not searched). The host plots
/// the same range.
pub const NODE_BINS: usize = 4096 / 4 + 1;

/// The node's pipeline: 4096-point spectrum, [`NODE_BINS`] bins kept.
pub type NodePipeline = Pipeline<4096, NODE_BINS, NODE_RING>;

/// RMS below this many ADC counts means a flat (disconnected) channel.
const FLAT_RMS_COUNTS: f32 = 1.0;
/// More than this share of clipped samples means a saturated channel.
const SATURATED_SHARE: f32 = 0.01;

/// Why [`Pipeline::new`] refused a measuring point.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum PipelineError {
    /// The point itself is invalid.
    Config(ConfigError),
    /// The front end refused the band, rate or decimation.
    FrontEnd(crate::frontend::FrontEndError),
    /// The speed source was refused.
    Tach(crate::speed::tach::TachConfigError),
    /// The order tracker was refused: usually the speed range is too wide
    /// for the resampler ring at this decimation (narrow the range or lower
    /// `samples_per_rev`).
    OrderTrack(crate::speed::order_track::OrderTrackError),
    /// The spectrum refused `samples_per_rev` for this FFT size.
    Spectrum(crate::spectrum::SpectrumError),
}

impl fmt::Display for PipelineError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            PipelineError::Config(e) => write!(f, "measuring point: {e}"),
            PipelineError::FrontEnd(e) => write!(f, "front end: {e}"),
            PipelineError::Tach(e) => write!(f, "speed source: {e}"),
            PipelineError::OrderTrack(e) => write!(f, "order tracking: {e}"),
            PipelineError::Spectrum(e) => write!(f, "spectrum: {e}"),
        }
    }
}

impl core::error::Error for PipelineError {}

impl From<ConfigError> for PipelineError {
    fn from(e: ConfigError) -> Self {
        PipelineError::Config(e)
    }
}

/// The streaming diagnosis of one measuring point, with an `N`-point
/// spectrum of which the lowest `H` bins are averaged (`N/4 + 1 <= H <= N/2`:
/// at least the searched range, checked at compile time) and a `RING`-sample
/// resampler ring.
///
/// ```
/// use dsp_core::config::{PointConfig, SpeedInput};
/// use dsp_core::pipeline::Pipeline;
/// let mut point = PointConfig::default();
/// point.speed = SpeedInput::Constant { rpm: 1500.0 };
/// point.revolutions = 64;
/// let mut p = Pipeline::<1024, 512, 2048>::new(&point).unwrap();
/// let block = [0i16; 256];
/// while !p.complete() {
///     p.push_i16(&block);
/// }
/// let report = p.finish();
/// assert_eq!(report.segments, 4);
/// // An all-zero input is a flat channel: flagged, not diagnosed.
/// assert!(!report.analysed());
/// ```
pub struct Pipeline<const N: usize, const H: usize, const RING: usize> {
    /// The validated point and what follows from it; `None` until configured.
    setup: Option<Setup>,
    fe: FrontEnd,
    tach: TachTracker,
    ot: OrderTracker<RING>,
    spectrum: OrderSpectrum<N, H>,
    samples: u64,
    raised: QualityFlags,
}

/// The small, per-point part of a configured pipeline.
struct Setup {
    point: PointConfig,
    /// The passes and which one reports each bearing ([`crate::diagnosis::coverage`]).
    coverage: Coverage,
    /// The pass being recorded (index into `coverage.passes`).
    pass: u8,
    /// Input samples of the passes before this one (shifts the tach origin).
    samples_before: u64,
    /// This pass's samples per revolution.
    samples_per_rev: u16,
    search: DefectSearch,
    orders: Vec<BearingOrders, MAX_BEARINGS>,
    /// Gear-mesh orders of the tach shaft, in point order.
    mesh_orders: Vec<f32, MAX_MESHES>,
    /// Sideband spacings of each mesh: the carrying and the mate shaft's
    /// orders (0 without a mate).
    mesh_spacing: Vec<[f32; 2], MAX_MESHES>,
    segments_wanted: u32,
    max_search_order: f32,
}

/// Everything [`Pipeline::reconfigure`] validates before it changes anything.
struct Plan {
    setup: Setup,
    fe: FrontEndPlan,
    tach: TachPlan,
    ot: OrderTrackPlan,
    spectrum: SpectrumConfig,
}

impl<const N: usize, const H: usize, const RING: usize> Pipeline<N, H, RING> {
    /// Validates the point and sets every stage up.
    ///
    /// Returns the pipeline by value (tens of kilobytes at the node's sizes):
    /// on a small stack, place an [`unconfigured`](Self::unconfigured)
    /// pipeline statically instead and [`reconfigure`](Self::reconfigure) it.
    pub fn new(point: &PointConfig) -> Result<Self, PipelineError> {
        let plan = Self::plan(point)?;
        let mut p = Self::unconfigured();
        p.apply(plan);
        Ok(p)
    }

    /// A pipeline without a measuring point, for constant context (e.g. a
    /// `static` on the node, so that no copy of it is ever built on the
    /// stack). Until [`reconfigure`](Self::reconfigure) succeeds it ignores
    /// input, is never [`complete`](Self::complete), and
    /// [`finish`](Self::finish) reports nothing analysable.
    pub const fn unconfigured() -> Self {
        const {
            assert!(4 * H > N, "H must hold the searched bins (N/4 + 1)");
        }
        Self {
            setup: None,
            fe: FrontEnd::unconfigured(),
            tach: TachTracker::unconfigured(),
            ot: OrderTracker::unconfigured(),
            spectrum: OrderSpectrum::unconfigured(),
            samples: 0,
            raised: QualityFlags::empty(),
        }
    }

    /// Validates `point` and sets every stage up in place for a new
    /// measurement (filters designed, buffers cleared, counters zeroed),
    /// using a few kilobytes of stack at most. On error nothing changes: a
    /// configured pipeline keeps its point and state.
    ///
    /// ```
    /// use dsp_core::config::{PointConfig, SpeedInput};
    /// use dsp_core::pipeline::Pipeline;
    /// // e.g. `static` on the node; here on the heap.
    /// let mut p = Box::new(Pipeline::<1024, 512, 2048>::unconfigured());
    /// let mut point = PointConfig::default();
    /// point.speed = SpeedInput::Constant { rpm: 1500.0 };
    /// point.revolutions = 64;
    /// p.reconfigure(&point).unwrap();
    /// while !p.complete() {
    ///     p.push_i16(&[0i16; 256]);
    /// }
    /// assert_eq!(p.finish().segments, 4);
    /// point.samples_per_rev = 3; // refused: not a power of two
    /// assert!(p.reconfigure(&point).is_err());
    /// assert!(p.point().is_some_and(|q| q.samples_per_rev == 64));
    /// ```
    // Not inlined: once per measurement, and its temporaries then never add
    // to the frame of the caller's per-block loop (stack high-water).
    #[inline(never)]
    pub fn reconfigure(&mut self, point: &PointConfig) -> Result<(), PipelineError> {
        let plan = Self::plan(point)?;
        self.apply(plan);
        Ok(())
    }

    /// Checks `point` as [`new`](Self::new) would, without building a
    /// pipeline (for tools that search for a setting that fits).
    pub fn check(point: &PointConfig) -> Result<(), PipelineError> {
        Self::plan(point).map(|_| ())
    }

    fn apply(&mut self, plan: Plan) {
        self.fe.apply(&plan.fe);
        self.tach.apply(plan.tach);
        self.ot.apply(&plan.ot);
        self.spectrum.apply(plan.spectrum);
        self.setup = Some(plan.setup);
        self.samples = 0;
        self.raised = QualityFlags::empty();
    }

    /// Validates the point, plans its passes ([`crate::diagnosis::coverage`]), checks
    /// that every stage accepts every pass, and plans the first.
    fn plan(point: &PointConfig) -> Result<Plan, PipelineError> {
        point.validate()?;
        let coverage = crate::diagnosis::coverage::plan(point, N);
        for i in 1..coverage.passes.len() {
            // Checked up front: a later pass never fails mid-measurement.
            let _ = Self::plan_pass(point, &coverage, i, 0)?;
        }
        Self::plan_pass(point, &coverage, 0, 0)
    }

    /// Plans pass `pass` of `point`, starting `samples_before` input samples
    /// after the first pass began.
    fn plan_pass(
        point_in: &PointConfig,
        coverage: &Coverage,
        pass: usize,
        samples_before: u64,
    ) -> Result<Plan, PipelineError> {
        let this = coverage
            .passes
            .get(pass)
            .copied()
            .ok_or(ConfigError::SamplesPerRev)?;
        let mut point = point_in.clone();
        point.samples_per_rev = this.samples_per_rev;
        point.revolutions = this.revolutions;
        if let SpeedInput::Tach {
            tick_hz,
            tick_at_sample0,
            ..
        } = &mut point.speed
        {
            // The capture timer's value at this pass's first sample.
            #[allow(clippy::cast_precision_loss)]
            let ticks =
                samples_before as f64 * f64::from(*tick_hz) / f64::from(point_in.sample_rate_hz);
            let ticks = crate::num::f64_to_u64_sat(libm::round(ticks));
            *tick_at_sample0 = tick_at_sample0.wrapping_add(crate::num::u64_low_u32(ticks));
        }
        let point = &point;
        let s = point.samples_per_rev;
        let s_f = f32::from(s);
        let (min_rpm, max_rpm) = match point.speed {
            SpeedInput::Constant { rpm } => (rpm, rpm),
            SpeedInput::Tach { .. } => (point.min_rpm, point.max_rpm),
        };

        let decimation =
            smooth_at_most(decimation_for(point.sample_rate_hz, max_rpm, 0.5 * s_f, s));
        let velocity = VelocityConfig {
            group: point.machine_group,
            support: point.support,
            ..VelocityConfig::default()
        };
        let fe = FrontEndPlan::new(&FrontEndConfig {
            sample_rate_hz: point.sample_rate_hz,
            band_hz: point.band(),
            poles: point.poles,
            rectifier: point.rectifier,
            decimation,
            counts_to_g: point.counts_to_g,
            adc_full_scale: point.adc_full_scale,
            velocity,
        })
        .map_err(PipelineError::FrontEnd)?;

        let seg_revs = N / usize::from(s).max(1);
        let seg_revs_u32 = u32::try_from(seg_revs).unwrap_or(u32::MAX).max(1);
        let segments_wanted = u32::from(point.revolutions) / seg_revs_u32;
        if segments_wanted == 0 {
            return Err(ConfigError::Revolutions.into());
        }

        let source = match point.speed {
            SpeedInput::Tach {
                pulses_per_rev,
                tick_hz,
                tick_at_sample0,
            } => SpeedSource::Tach(TachConfig {
                tick_hz,
                tick_at_sample0,
                sample_rate_hz: point.sample_rate_hz,
                pulses_per_rev,
                min_rpm: point.min_rpm,
                max_rpm: point.max_rpm,
                max_speed_change_pct: point.max_speed_change_pct,
                min_good_revs: u16::try_from(seg_revs).unwrap_or(u16::MAX),
            }),
            SpeedInput::Constant { rpm } => SpeedSource::Constant {
                rpm,
                sample_rate_hz: point.sample_rate_hz,
            },
        };
        let tach = TachPlan::new(&source).map_err(PipelineError::Tach)?;

        let ot = OrderTrackPlan::new(
            &OrderTrackConfig {
                samples_per_rev: s,
                decimation,
                input_rate_hz: fe.output_rate_hz(),
                delay_input_samples: fe.delay_input_samples(),
                min_rpm,
                ..OrderTrackConfig::default()
            },
            RING,
        )
        .map_err(PipelineError::OrderTrack)?;

        let spectrum = SpectrumConfig {
            samples_per_rev: u32::from(s),
            window: point.window,
            ..SpectrumConfig::default()
        };
        OrderSpectrum::<N, H>::check(&spectrum).map_err(PipelineError::Spectrum)?;

        let search = DefectSearch::new(point.search).map_err(|_| ConfigError::Search)?;

        let max_search_order = 0.25 * s_f;
        let mut orders = Vec::new();
        for b in &point.bearings {
            let multiples = b.multiples()?;
            let ratio = point
                .shafts
                .get(usize::from(b.shaft))
                .map(|sh| sh.ratio)
                .ok_or(ConfigError::BearingShaft)?;
            let ratio = ShaftRatio::new(ratio).map_err(|_| ConfigError::ShaftRatio)?;
            // Lines above this pass's range are simply not searched in it;
            // the coverage plan gives each bearing a pass that reaches them.
            let o = multiples.orders(ratio);
            // Capacity equals the config's bearing capacity.
            orders
                .push(o)
                .map_err(|_| PipelineError::Config(ConfigError::BearingShaft))?;
        }
        let mut mesh_orders = Vec::new();
        let mut mesh_spacing = Vec::new();
        for m in &point.meshes {
            let ratio_of = |i: u8| point.shafts.get(usize::from(i)).map(|sh| sh.ratio);
            let ratio = ratio_of(m.shaft).ok_or(ConfigError::Mesh)?;
            let mate = match m.mate {
                Some(x) => ratio_of(x).ok_or(ConfigError::Mesh)?,
                None => 0.0,
            };
            // Same capacity as the point's mesh list.
            let _ = mesh_orders.push(f32::from(m.teeth) * ratio);
            let _ = mesh_spacing.push([ratio, mate]);
        }

        Ok(Plan {
            setup: Setup {
                point: point_in.clone(),
                coverage: coverage.clone(),
                pass: u8::try_from(pass).unwrap_or(0),
                samples_before,
                samples_per_rev: s,
                search,
                orders,
                mesh_orders,
                mesh_spacing,
                segments_wanted,
                max_search_order,
            },
            fe,
            tach,
            ot,
            spectrum,
        })
    }

    /// The validated measuring point; `None` until configured.
    pub fn point(&self) -> Option<&PointConfig> {
        self.setup.as_ref().map(|s| &s.point)
    }

    /// Decimation factor chosen for the envelope.
    pub fn decimation(&self) -> u16 {
        self.fe.config().decimation
    }

    /// Spectrum segments still missing; 0 once [`complete`](Self::complete)
    /// (and when unconfigured).
    pub fn segments_missing(&self) -> u32 {
        self.segments_wanted()
            .saturating_sub(self.spectrum.segments_in())
    }

    fn segments_wanted(&self) -> u32 {
        self.setup.as_ref().map_or(0, |s| s.segments_wanted)
    }

    /// All configured revolutions are in the spectrum: the firmware may stop
    /// acquiring and call [`finish`](Self::finish). Never true unconfigured.
    pub fn complete(&self) -> bool {
        self.setup.is_some() && self.segments_missing() == 0
    }

    /// Input samples pushed so far.
    pub fn samples(&self) -> u64 {
        self.samples
    }

    /// Adds flags that only the caller can know (DMA overrun, low battery)
    /// to the next report.
    pub fn raise(&mut self, flags: QualityFlags) {
        self.raised.insert(flags);
    }

    /// Pushes one tach edge (capture-timer ticks, see [`crate::speed::tach`]).
    /// Push the edges captured during a block before the block itself.
    pub fn push_edge(&mut self, tick: u32) {
        let wanted = self.segments_wanted();
        if self.setup.is_none() {
            return;
        }
        let Self {
            tach, ot, spectrum, ..
        } = self;
        tach.push_edge(tick, |m| {
            ot.push_mark(m, |a| feed(spectrum, wanted, a));
        });
    }

    /// Pushes a block of ADC counts (any length).
    pub fn push_i16(&mut self, block: &[i16]) {
        let wanted = self.segments_wanted();
        if self.setup.is_none() {
            return;
        }
        let Self {
            fe, ot, spectrum, ..
        } = self;
        fe.push_i16(block, |e| {
            ot.push_sample(e, |a| feed(spectrum, wanted, a));
        });
        self.advance(block.len());
        // One part of a completed segment's work per block (spectrum::QUEUE).
        self.spectrum.step();
    }

    /// Pushes a block of samples in g (any length).
    pub fn push_f32(&mut self, block: &[f32]) {
        let wanted = self.segments_wanted();
        if self.setup.is_none() {
            return;
        }
        let Self {
            fe, ot, spectrum, ..
        } = self;
        fe.push_f32(block, |e| {
            ot.push_sample(e, |a| feed(spectrum, wanted, a));
        });
        self.advance(block.len());
        self.spectrum.step();
    }

    fn advance(&mut self, n: usize) {
        let wanted = self.segments_wanted();
        self.samples = self
            .samples
            .saturating_add(u64::try_from(n).unwrap_or(u64::MAX));
        let Self {
            tach,
            ot,
            spectrum,
            samples,
            ..
        } = self;
        tach.advance_to(*samples, |m| {
            ot.push_mark(m, |a| feed(spectrum, wanted, a));
        });
    }

    /// The averaged envelope order spectrum so far (peak amplitude per bin,
    /// in g for `abs` rectification, g² for `square`): the lowest `H` bins,
    /// at least up to the search limit `S/4` orders. A segment completed in
    /// the last two blocks may still be pending (its work is spread over
    /// the following blocks); after [`Self::finish`] every segment is in.
    pub fn spectrum(&self) -> &[f32] {
        self.spectrum.amplitudes()
    }

    /// Orders per spectrum bin.
    pub fn orders_per_bin(&self) -> f32 {
        self.spectrum.orders_per_bin()
    }

    /// Per-revolution speed series of the record so far, rpm.
    pub fn speed_series(&self) -> &[f32] {
        self.tach.speed_series()
    }

    /// Ends the record and diagnoses it. Afterwards the pipeline holds the
    /// finished state (spectrum, speed series) for inspection; reconfigure
    /// it (or build a new one) for the next measurement. Unconfigured, the
    /// report is flagged incomplete with too few revolutions.
    // Not inlined, for the same reason as `reconfigure`.
    #[inline(never)]
    pub fn finish(&mut self) -> Report {
        let wanted = self.segments_wanted();
        let Self {
            tach, ot, spectrum, ..
        } = self;
        let speed = tach.finish(|m| {
            ot.push_mark(m, |a| feed(spectrum, wanted, a));
        });
        ot.finish(|a| feed(spectrum, wanted, a));
        spectrum.flush();

        let overall = self.fe.overall();
        let mut flags = self.raised;
        flags.insert(tach_flags(speed.flags));
        let of = self.ot.flags();
        if of.contains(OrderFlags::RING_OVERFLOW)
            || of.contains(OrderFlags::JOB_OVERFLOW)
            || of.contains(OrderFlags::BAD_MARK)
        {
            flags.insert(QualityFlags::RESAMPLER);
        }
        if overall.non_finite > 0
            || of.contains(OrderFlags::NON_FINITE_INPUT)
            || self.spectrum.rejected_segments() > 0
        {
            flags.insert(QualityFlags::NON_FINITE);
        }
        if overall.clipped > 0 {
            flags.insert(QualityFlags::CLIPPING);
        }
        let counts_to_g = self.fe.config().counts_to_g;
        let count = usize_to_f32(usize::try_from(overall.count).unwrap_or(usize::MAX));
        let clipped = usize_to_f32(usize::try_from(overall.clipped).unwrap_or(usize::MAX));
        if overall.count == 0
            || overall.rms_ac < FLAT_RMS_COUNTS * counts_to_g
            || clipped > SATURATED_SHARE * count
        {
            flags.insert(QualityFlags::SENSOR_FAULT);
        }
        let segments = self.spectrum.segments();
        if segments < wanted || self.setup.is_none() {
            flags.insert(QualityFlags::INCOMPLETE);
        }
        if segments == 0 {
            flags.insert(QualityFlags::TOO_FEW_REVS);
        }

        let analysable = !flags.intersects(QualityFlags::NOT_ANALYSABLE);
        let amps = self.spectrum.amplitudes();
        let opb = self.spectrum.orders_per_bin();
        let max_search_order = self.setup.as_ref().map_or(0.0, |s| s.max_search_order);
        let window = self.spectrum.config().window;
        // Bins strictly below the search limit (see the module docs).
        let search_bins = crate::num::f32_to_usize_sat(max_search_order / opb)
            .saturating_add(1)
            .min(amps.len());
        let view = amps
            .get(..search_bins)
            .and_then(|a| SpectrumView::new(a, opb, window).ok());

        let mut bearings = Vec::new();
        let mut lines = Vec::new();
        if let Some(setup) = &self.setup {
            let point = &setup.point;
            for (b, orders) in point.bearings.iter().zip(setup.orders.iter()) {
                let diagnosis = match (&view, analysable) {
                    (Some(v), true) => setup.search.search(v, orders).ok(),
                    _ => None,
                };
                // Same capacity as the point's bearing list.
                let _ = bearings.push(BearingReport {
                    name: b.name.clone(),
                    orders: *orders,
                    diagnosis,
                    coverage: setup
                        .coverage
                        .bearings
                        .get(bearings.len())
                        .copied()
                        .unwrap_or(Err(NotSearched::TooSlow)),
                });
            }
            if let (Some(v), true) = (&view, analysable) {
                // Peaks explained by a stronger family of another bearing on
                // this point do not count for the weaker one.
                // Filled by push, not collect: heapless' collect panics on
                // overflow (both lists hold at most MAX_BEARINGS).
                let mut diagnoses: Vec<
                    &mut Option<crate::diagnosis::defects::BearingDiagnosis>,
                    MAX_BEARINGS,
                > = Vec::new();
                for b in bearings.iter_mut() {
                    let _ = diagnoses.push(&mut b.diagnosis);
                }
                setup
                    .search
                    .attribute_bearings(v, &setup.orders, &mut diagnoses);
            }
            // Every bearing took part in attribution; each is reported only
            // by its own pass.
            for b in bearings.iter_mut() {
                if b.coverage != Ok(setup.pass) {
                    b.diagnosis = None;
                }
            }
            for ((m, &order), &spacing) in point
                .meshes
                .iter()
                .zip(setup.mesh_orders.iter())
                .zip(setup.mesh_spacing.iter())
            {
                let (measurement, sidebands) = match (&view, analysable) {
                    (Some(v), true) => {
                        crate::diagnosis::mesh::measure_mesh(&setup.search, v, order, spacing)
                    }
                    _ => (
                        crate::diagnosis::defects::LineMeasurement::not_searched(order),
                        crate::diagnosis::mesh::MeshSidebands::NONE,
                    ),
                };
                // Same capacity as the point's mesh list.
                let _ = lines.push(LineReport {
                    name: m.name.clone(),
                    measurement,
                    sidebands,
                });
            }
        }

        let samples_per_rev = self.setup.as_ref().map_or(0, |s| s.samples_per_rev);
        let revs_per_segment = N / usize::from(samples_per_rev).max(1);
        let revolutions =
            segments.saturating_mul(u32::try_from(revs_per_segment).unwrap_or(u32::MAX));
        let mut passes = Vec::new();
        let _ = passes.push(PassReport {
            pass: self.setup.as_ref().map_or(0, |s| s.pass),
            flags,
            samples_per_rev,
            segments,
            revolutions,
            orders_per_bin: opb,
            max_search_order,
            decimation: self.decimation(),
            mean_rpm: speed.mean_rpm,
            search: self
                .setup
                .as_ref()
                .map_or_else(Default::default, |s| *s.search.config()),
        });
        Report {
            flags,
            speed,
            overall,
            band_hz: self.fe.config().band_hz,
            rectifier: self.fe.config().rectifier,
            decimation: self.decimation(),
            samples_per_rev,
            segments,
            revolutions,
            orders_per_bin: opb,
            max_search_order,
            bearings,
            lines,
            passes,
        }
    }

    /// Passes of the configured point ([`crate::diagnosis::coverage`]); 0 unconfigured.
    pub fn pass_count(&self) -> usize {
        self.setup.as_ref().map_or(0, |s| s.coverage.passes.len())
    }

    /// The pass being recorded (0 for the first).
    pub fn pass(&self) -> usize {
        self.setup.as_ref().map_or(0, |s| usize::from(s.pass))
    }

    /// After [`finish`](Self::finish): sets the pipeline up in place for
    /// the next pass of the point, whose record starts with the next input
    /// sample (tach edges keep their capture-timer ticks: the pass's timer
    /// origin is moved by the samples pushed so far). Returns false, and
    /// changes nothing, when the point has no further pass. The caller
    /// merges each pass's report into the first
    /// ([`Report::merge_pass`]).
    ///
    /// ```
    /// use dsp_core::config::{name_from, Bearing, BearingKinematics, PointConfig, Shaft, SpeedInput};
    /// use dsp_core::pipeline::Pipeline;
    /// let mut point = PointConfig::default();
    /// point.speed = SpeedInput::Constant { rpm: 1500.0 };
    /// point.revolutions = 64;
    /// point.shafts.push(Shaft { name: name_from("out"), ratio: 0.1 }).unwrap();
    /// let k = BearingKinematics::Multiples { bpfo_x: 3.58, bpfi_x: 5.42, ftf_x: 0.40, bsf_x: 2.36 };
    /// point.bearings.push(Bearing { name: name_from("out-de"), shaft: 1, kinematics: k }).unwrap();
    /// // 64 samples/rev give 6.4 bins per output-shaft order: a second pass at 16.
    /// let mut p = Box::new(Pipeline::<4096, 1025, 2048>::new(&point).unwrap());
    /// assert_eq!(p.pass_count(), 2);
    /// let mut report = None;
    /// loop {
    ///     while !p.complete() {
    ///         p.push_f32(&[0.0f32; 256]);
    ///     }
    ///     let r = p.finish();
    ///     match &mut report {
    ///         None => report = Some(r),
    ///         Some(first) => first.merge_pass(r),
    ///     }
    ///     if !p.next_pass() {
    ///         break;
    ///     }
    /// }
    /// let report = report.unwrap();
    /// assert_eq!(report.passes.len(), 2);
    /// assert_eq!(report.passes[1].samples_per_rev, 16);
    /// assert_eq!(report.bearings[0].coverage, Ok(1));
    /// ```
    pub fn next_pass(&mut self) -> bool {
        let Some(setup) = &self.setup else {
            return false;
        };
        let next = usize::from(setup.pass) + 1;
        if next >= setup.coverage.passes.len() {
            return false;
        }
        let before = setup.samples_before.saturating_add(self.samples);
        let point = setup.point.clone();
        let coverage = setup.coverage.clone();
        match Self::plan_pass(&point, &coverage, next, before) {
            Ok(plan) => {
                self.apply(plan);
                true
            }
            Err(_) => false,
        }
    }
}

/// Feeds one angle-domain sample to the spectrum until enough segments are in.
fn feed<const N: usize, const H: usize>(s: &mut OrderSpectrum<N, H>, wanted: u32, a: f32) {
    if s.segments_in() < wanted {
        let _ = s.push_deferred(a);
    }
}

fn tach_flags(t: TachFlags) -> QualityFlags {
    let mut q = QualityFlags::empty();
    let map = [
        (TachFlags::NO_PULSES, QualityFlags::TACH_MISSING),
        (TachFlags::MISSING_PULSE, QualityFlags::TACH_IRREGULAR),
        (TachFlags::EXTRA_PULSE, QualityFlags::TACH_IRREGULAR),
        (TachFlags::STOP, QualityFlags::TACH_IRREGULAR),
        (TachFlags::OUT_OF_ORDER, QualityFlags::TACH_IRREGULAR),
        (TachFlags::BELOW_MIN_RPM, QualityFlags::SPEED_OUT_OF_RANGE),
        (TachFlags::ABOVE_MAX_RPM, QualityFlags::SPEED_OUT_OF_RANGE),
        (TachFlags::SPEED_CHANGE, QualityFlags::SPEED_UNSTABLE),
        (TachFlags::TOO_FEW_REVS, QualityFlags::TOO_FEW_REVS),
    ];
    for (tf, qf) in map {
        if t.contains(tf) {
            q.insert(qf);
        }
    }
    q
}

/// The largest factor <= `d` whose prime factors are all <= 7 (at least 1).
fn smooth_at_most(d: u16) -> u16 {
    let smooth = |mut x: u16| {
        for p in [2u16, 3, 5, 7] {
            while x % p == 0 {
                x /= p;
            }
        }
        x == 1
    };
    (1..=d.max(1)).rev().find(|&x| smooth(x)).unwrap_or(1)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gear_mesh_lines_are_measured_and_out_of_range_ones_marked() {
        use crate::config::{name_from, Mesh};
        let mut point = PointConfig {
            speed: SpeedInput::Constant { rpm: 1500.0 },
            revolutions: 64,
            ..PointConfig::default()
        };
        for (name, teeth) in [("mesh7", 7u16), ("mesh40", 40)] {
            let _ = point.meshes.push(Mesh {
                mate: None,
                name: name_from(name),
                shaft: 0,
                teeth,
            });
        }
        let mut p = Pipeline::<4096, 2048, 2048>::new(&point).unwrap();
        // A 7 kHz resonance amplitude-modulated at 7 x 25 Hz: its envelope
        // has a line at order 7 (common practice: mesh modulation).
        let fs = 51_200.0f64;
        let mut n = 0u64;
        let mut block = [0f32; 256];
        while !p.complete() {
            for x in block.iter_mut() {
                #[allow(clippy::cast_precision_loss)]
                let t = n as f64 / fs;
                let env = 1.0 + 0.5 * libm::cos(2.0 * core::f64::consts::PI * 175.0 * t);
                *x = crate::num::f64_to_f32(
                    env * libm::sin(2.0 * core::f64::consts::PI * 7000.0 * t),
                );
                n += 1;
            }
            p.push_f32(&block);
        }
        let r = p.finish();
        let near = &r.lines[0].measurement;
        assert!(near.searched, "{near:?}");
        assert!((near.found_order - 7.0).abs() < 0.05, "{near:?}");
        assert!(near.prominence_db > 20.0, "{near:?}");
        // Order 40 lies beyond the search range (S/4 = 16 orders).
        assert!(!r.lines[1].measurement.searched);
    }

    #[test]
    fn a_reconfigured_pipeline_reports_as_a_new_one() {
        extern crate std;
        use std::boxed::Box;
        let tone = |p: &mut Pipeline<1024, 512, 2048>, f_hz: f64| {
            let mut n = 0u64;
            let mut block = [0f32; 256];
            while !p.complete() {
                for x in block.iter_mut() {
                    #[allow(clippy::cast_precision_loss)]
                    let t = n as f64 / 51_200.0;
                    let env = 1.0 + 0.5 * libm::cos(2.0 * core::f64::consts::PI * f_hz * t);
                    *x = crate::num::f64_to_f32(
                        env * libm::sin(2.0 * core::f64::consts::PI * 7000.0 * t),
                    );
                    n += 1;
                }
                p.push_f32(&block);
            }
        };
        let a = PointConfig {
            speed: SpeedInput::Constant { rpm: 1500.0 },
            revolutions: 64,
            ..PointConfig::default()
        };
        let b = PointConfig {
            speed: SpeedInput::Constant { rpm: 1200.0 },
            revolutions: 128,
            samples_per_rev: 32,
            band_hz: Some([4000.0, 9000.0]),
            ..PointConfig::default()
        };
        let mut reused = Box::new(Pipeline::<1024, 512, 2048>::unconfigured());
        // Unconfigured: input ignored, never complete, nothing analysable.
        reused.push_f32(&[1.0; 256]);
        assert_eq!(reused.samples(), 0);
        assert!(!reused.complete());
        let r0 = reused.finish();
        assert!(r0.flags.contains(QualityFlags::INCOMPLETE) && !r0.analysed());
        reused.reconfigure(&a).unwrap();
        tone(&mut reused, 175.0);
        let _ = reused.finish();
        reused.reconfigure(&b).unwrap();
        tone(&mut reused, 100.0);
        let r1 = reused.finish();
        let mut fresh = Box::new(Pipeline::<1024, 512, 2048>::new(&b).unwrap());
        tone(&mut fresh, 100.0);
        let r2 = fresh.finish();
        assert_eq!(r1, r2);
        assert_eq!(r1.segments, 4);
        let bits = |p: &Pipeline<1024, 512, 2048>| -> std::vec::Vec<u32> {
            p.spectrum().iter().map(|v| v.to_bits()).collect()
        };
        assert_eq!(bits(&reused), bits(&fresh));
        assert_eq!(reused.speed_series(), fresh.speed_series());
    }

    #[test]
    fn smooth_factors() {
        assert_eq!(smooth_at_most(143), 140);
        assert_eq!(smooth_at_most(1024), 1024);
        assert_eq!(smooth_at_most(11), 10);
        assert_eq!(smooth_at_most(0), 1);
    }
}
