//! The result of one measurement: speed, quality flags, overall values and
//! each watched bearing's defect results.

use core::fmt;

use heapless::Vec;

use crate::config::{Name, MAX_BEARINGS, MAX_MESHES};
use crate::diagnosis::coverage::{NotSearched, MAX_PASSES};
use crate::diagnosis::defects::{BearingDiagnosis, DefectSearchConfig, LineMeasurement};
use crate::diagnosis::kinematics::{BearingOrders, DefectKind};
use crate::overall::Overall;
use crate::speed::tach::SpeedSummary;

/// Quality flags of a report: what went wrong or is doubtful. A report with
/// any of [`QualityFlags::NOT_ANALYSABLE`] carries no defect results.
///
/// The one set of quality conditions of a measurement: the pipeline raises
/// most of them, the node raises its own ([`Self::OVERRUN`],
/// [`Self::LOW_BATTERY`], and its input check's [`Self::SENSOR_FAULT`],
/// [`Self::CLIPPING`], [`Self::TACH_MISSING`]) in the same type. The bytes
/// on the air are the `wire` crate's: its frame flag field
/// (`wire::frame::FrameFlags`, 7 bits) and the overall frame's flag byte
/// are fixed layouts that these flags are mapped onto.
///
/// Hand-written rather than with the `bitflags` crate: the node logs it
/// with `defmt::Format`, which bitflags' generated type does not derive,
/// and the frame fold and tests read its bits through the public field; it
/// is a handful of const bit operations.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct QualityFlags(pub u16);

impl QualityFlags {
    /// No tach pulses at all.
    pub const TACH_MISSING: Self = Self(1 << 0);
    /// Missing, extra or out-of-order pulses, or a stop during the record.
    pub const TACH_IRREGULAR: Self = Self(1 << 1);
    /// Speed outside the configured range.
    pub const SPEED_OUT_OF_RANGE: Self = Self(1 << 2);
    /// Speed changed more than the configured limit over the record.
    pub const SPEED_UNSTABLE: Self = Self(1 << 3);
    /// Too few good revolutions for a spectrum.
    pub const TOO_FEW_REVS: Self = Self(1 << 4);
    /// Samples at ADC full scale.
    pub const CLIPPING: Self = Self(1 << 5);
    /// Sensor fault: a flat (disconnected) or saturated channel.
    pub const SENSOR_FAULT: Self = Self(1 << 6);
    /// Non-finite input samples were replaced.
    pub const NON_FINITE: Self = Self(1 << 7);
    /// Processing could not keep up (set by the firmware on DMA overrun).
    pub const OVERRUN: Self = Self(1 << 8);
    /// Battery low (set by the firmware).
    pub const LOW_BATTERY: Self = Self(1 << 9);
    /// Fewer spectrum segments than configured were completed.
    pub const INCOMPLETE: Self = Self(1 << 10);
    /// The order tracker lost samples (ring overflow, bad marks).
    pub const RESAMPLER: Self = Self(1 << 11);

    /// Conditions under which no defect is evaluated.
    pub const NOT_ANALYSABLE: Self =
        Self(Self::TACH_MISSING.0 | Self::TOO_FEW_REVS.0 | Self::SENSOR_FAULT.0);

    /// No flag set.
    pub const fn empty() -> Self {
        Self(0)
    }

    /// All of `other`'s flags are set.
    pub const fn contains(self, other: Self) -> bool {
        self.0 & other.0 == other.0
    }

    /// Any of `other`'s flags is set.
    pub const fn intersects(self, other: Self) -> bool {
        self.0 & other.0 != 0
    }

    /// Sets `other`'s flags.
    pub fn insert(&mut self, other: Self) {
        self.0 |= other.0;
    }

    /// No flag is set.
    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }

    /// The raw bits.
    pub const fn bits(self) -> u16 {
        self.0
    }

    /// Names of the set flags, in bit order.
    pub fn names(self) -> impl Iterator<Item = &'static str> {
        FLAG_NAMES
            .iter()
            .filter(move |(f, _)| self.contains(*f))
            .map(|(_, n)| *n)
    }
}

/// Every flag with its report name.
pub const FLAG_NAMES: [(QualityFlags, &str); 12] = [
    (QualityFlags::TACH_MISSING, "tach_missing"),
    (QualityFlags::TACH_IRREGULAR, "tach_irregular"),
    (QualityFlags::SPEED_OUT_OF_RANGE, "speed_out_of_range"),
    (QualityFlags::SPEED_UNSTABLE, "speed_unstable"),
    (QualityFlags::TOO_FEW_REVS, "too_few_revolutions"),
    (QualityFlags::CLIPPING, "clipping"),
    (QualityFlags::SENSOR_FAULT, "sensor_fault"),
    (QualityFlags::NON_FINITE, "non_finite_samples"),
    (QualityFlags::OVERRUN, "processing_overrun"),
    (QualityFlags::LOW_BATTERY, "low_battery"),
    (QualityFlags::INCOMPLETE, "incomplete_record"),
    (QualityFlags::RESAMPLER, "resampler_fault"),
];

impl core::ops::BitOr for QualityFlags {
    type Output = Self;
    fn bitor(self, rhs: Self) -> Self {
        Self(self.0 | rhs.0)
    }
}

impl fmt::Display for QualityFlags {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut first = true;
        for n in self.names() {
            if !first {
                f.write_str(",")?;
            }
            f.write_str(n)?;
            first = false;
        }
        if first {
            f.write_str("ok")?;
        }
        Ok(())
    }
}

/// One watched bearing in a report.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingReport {
    /// Name from the measuring point.
    pub name: Name,
    /// Its watched lines as orders of the tach shaft.
    pub orders: BearingOrders,
    /// Defect results; `None` when not searched (see [`Self::not_searched`]).
    pub diagnosis: Option<BearingDiagnosis>,
    /// The pass that reports this bearing, or why no pass can search it
    /// ([`crate::diagnosis::coverage`]).
    pub coverage: Result<u8, NotSearched>,
}

impl BearingReport {
    /// Why this bearing's lines were not searched; `None` when they were
    /// (then [`Self::diagnosis`] holds the results). `analysed` is the
    /// report's [`Report::analysed`].
    pub fn not_searched(&self, analysed: bool) -> Option<NotSearched> {
        if self.diagnosis.is_some() {
            return None;
        }
        Some(match self.coverage {
            Err(r) => r,
            Ok(_) if !analysed => NotSearched::NotAnalysed,
            Ok(_) => NotSearched::PassMissing,
        })
    }

    /// Kinds detected on this bearing (none when not analysed).
    pub fn detected(&self) -> impl Iterator<Item = DefectKind> + '_ {
        self.diagnosis.iter().flat_map(|d| d.detected())
    }
}

/// One watched gear-mesh line in a report.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LineReport {
    /// Mesh name from the measuring point.
    pub name: Name,
    /// The measurement (`searched` false when the record was not analysable
    /// or the order lies beyond the search range).
    pub measurement: LineMeasurement,
    /// Its first sidebands at the carrying and the mate shaft's orders
    /// ([`crate::diagnosis::mesh`]).
    pub sidebands: crate::diagnosis::mesh::MeshSidebands,
}

/// The diagnosis of one measurement.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Report {
    /// Quality flags.
    pub flags: QualityFlags,
    /// Speed of the tach shaft over the record.
    pub speed: SpeedSummary,
    /// Overall values of the raw acceleration (g, mm/s) and the ISO zone.
    pub overall: Overall,
    /// Envelope band used, Hz.
    pub band_hz: [f32; 2],
    /// Rectifier: spectrum amplitudes are in g (`Abs`) or g² (`Square`).
    pub rectifier: crate::frontend::rectify::Rectifier,
    /// Decimation factor of the envelope.
    pub decimation: u16,
    /// Angle-domain samples per revolution.
    pub samples_per_rev: u16,
    /// Averaged spectrum segments.
    pub segments: u32,
    /// Revolutions that went into the spectrum.
    pub revolutions: u32,
    /// Order resolution of the spectrum (orders per bin).
    pub orders_per_bin: f32,
    /// Highest order searched for defects.
    pub max_search_order: f32,
    /// Watched bearings in point order.
    pub bearings: Vec<BearingReport, MAX_BEARINGS>,
    /// Watched gear-mesh lines in point order.
    pub lines: Vec<LineReport, MAX_MESHES>,
    /// Every pass merged into this report, in the order they ran (the
    /// fields above `bearings` describe the first).
    pub passes: Vec<PassReport, MAX_PASSES>,
}

/// What one pass of a measurement recorded ([`crate::diagnosis::coverage`]).
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PassReport {
    /// Index of the pass in the point's plan.
    pub pass: u8,
    /// Quality flags of this pass's record.
    pub flags: QualityFlags,
    /// Angle-domain samples per tach revolution.
    pub samples_per_rev: u16,
    /// Averaged spectrum segments.
    pub segments: u32,
    /// Revolutions in the spectrum.
    pub revolutions: u32,
    /// Orders per bin.
    pub orders_per_bin: f32,
    /// Highest order searched.
    pub max_search_order: f32,
    /// Decimation factor of the envelope.
    pub decimation: u16,
    /// Mean tach-shaft speed over the pass, rpm.
    pub mean_rpm: f32,
    /// The defect search settings of the pass (for the cross-pass
    /// attribution of [`Report::merge_pass`]).
    pub search: DefectSearchConfig,
}

impl Report {
    /// Whether defects were evaluated.
    pub fn analysed(&self) -> bool {
        !self.flags.intersects(QualityFlags::NOT_ANALYSABLE) && self.segments > 0
    }

    /// Merges the report of a later pass of the same measurement (the
    /// pipeline's [`next_pass`](crate::pipeline::Pipeline::next_pass)): its
    /// bearings' results where that pass reports them, its mesh lines where
    /// they were not searched before, its pass summary, and its quality
    /// flags (a doubtful later pass makes the measurement doubtful), except
    /// too few revolutions and an incomplete record, which only mark its
    /// own bearings not searched.
    pub fn merge_pass(&mut self, later: Report) {
        let Some(pass) = later.passes.first().map(|p| p.pass) else {
            return;
        };
        // A later pass too short for a spectrum does not make the first
        // one unanalysable: its bearings are then reported not searched
        // (`PassMissing`), and its flags stay in its pass summary.
        let own = QualityFlags(QualityFlags::TOO_FEW_REVS.0 | QualityFlags::INCOMPLETE.0);
        self.flags.insert(QualityFlags(later.flags.0 & !own.0));
        for (b, l) in self.bearings.iter_mut().zip(later.bearings) {
            if l.coverage == Ok(pass) {
                b.diagnosis = l.diagnosis;
            }
        }
        for (m, l) in self.lines.iter_mut().zip(later.lines) {
            if !m.measurement.searched && l.measurement.searched {
                *m = l;
            }
        }
        for p in later.passes {
            // Capacity MAX_PASSES: one entry per pass of the plan.
            let _ = self.passes.push(p);
        }
        self.attribute_across_passes();
    }

    /// Cross-pass attribution between the bearings merged so far
    /// ([`crate::diagnosis::defects::attribute_across_passes`]).
    #[inline(never)]
    fn attribute_across_passes(&mut self) {
        let Some(cfg) = self.passes.first().map(|p| p.search) else {
            return;
        };
        let mut orders: Vec<BearingOrders, MAX_BEARINGS> = Vec::new();
        let mut pass_opb: Vec<Option<(u8, f32)>, MAX_BEARINGS> = Vec::new();
        for b in &self.bearings {
            let _ = orders.push(b.orders);
            let opb = b.coverage.ok().and_then(|k| {
                self.passes
                    .iter()
                    .find(|p| p.pass == k)
                    .map(|p| (k, p.orders_per_bin))
            });
            let _ = pass_opb.push(opb);
        }
        let mut diagnoses: Vec<&mut Option<BearingDiagnosis>, MAX_BEARINGS> = Vec::new();
        for b in self.bearings.iter_mut() {
            let _ = diagnoses.push(&mut b.diagnosis);
        }
        crate::diagnosis::defects::attribute_across_passes(
            &cfg,
            &orders,
            &pass_opb,
            &mut diagnoses,
        );
    }
}
