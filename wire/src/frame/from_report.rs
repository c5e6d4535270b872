//! Filling a radio frame from the pipeline's [`Report`].
//!
//! The frame carries seven quality flags; the report has more. The mapping
//! folds each report flag into the frame flag a reader at the gateway acts
//! on:
//!
//! | frame flag | report flags |
//! |---|---|
//! | `tach_missing` | `TACH_MISSING` |
//! | `tach_irregular` | `TACH_IRREGULAR`, `SPEED_UNSTABLE`, `TOO_FEW_REVS`, `INCOMPLETE` |
//! | `speed_out_of_range` | `SPEED_OUT_OF_RANGE` |
//! | `clipping` | `CLIPPING` |
//! | `sensor_fault` | `SENSOR_FAULT`, `NON_FINITE` |
//! | `processing_overrun` | `OVERRUN`, `RESAMPLER` |
//! | `low_battery` | `LOW_BATTERY` |
//!
//! The frame is version 2 ([`super::v2`]): every line carries its state.
//! A line that was not searched (its bearing not covered, the record not
//! analysable, or no harmonic of it searchable) is state "not searched" with
//! the reason, never "not detected"; its score and amplitude decode as NaN.
//! A searched line carries its score, the summed amplitude of its counted
//! harmonics, harmonics counted of searched, sidebands and margin. The speed
//! is "invalid" when no revolution was measured or the tach is missing.
//! Meshes carry their line measurement; their sidebands are not measured by
//! the core yet (NaN, "not measured").

use super::v2::{LineDetail, LineLink, LineState, MeshResult, NotSearchedCode};
use super::{BearingResult, DefectResult, FrameFlags, FrameReport, IsoZone, OverallIndicators};
use dsp_core::diagnosis::coverage::NotSearched;
use dsp_core::diagnosis::defects::DefectResult as Found;
use dsp_core::report::{LineReport, QualityFlags as Q, Report};
use dsp_core::DefectKind as Kind;
use dsp_core::Zone;

fn reason(n: NotSearched) -> (NotSearchedCode, Option<u16>) {
    match n {
        NotSearched::AboveRange { needed } => (NotSearchedCode::AboveRange, Some(needed)),
        NotSearched::TooSlow => (NotSearchedCode::TooSlow, None),
        NotSearched::TooManyPasses { needed } => (NotSearchedCode::TooManyPasses, Some(needed)),
        NotSearched::NotAnalysed => (NotSearchedCode::NotAnalysed, None),
        NotSearched::PassMissing => (NotSearchedCode::PassMissing, None),
        // A reason added to the core later: not searched all the same,
        // reported as "not analysed" until the frame gets a code for it.
        _ => (NotSearchedCode::NotAnalysed, None),
    }
}

/// A line in state "not searched" for `code`.
fn not_searched(code: NotSearchedCode, needed: Option<u16>) -> DefectResult {
    DefectResult {
        score_db: f32::NAN,
        amplitude_1x_g: f32::NAN,
        harmonics: 0,
        detected: false,
        line: Some(LineDetail {
            state: LineState::NotSearched,
            reason: Some(code),
            // The frame carries 8..=2048; outside that the reason stands alone.
            needed_samples_per_rev: needed.filter(|s| (8..=2048).contains(s)),
            amplitude_g: f32::NAN,
            harmonics_searched: 0,
            sidebands: 0,
            margin_db: f32::NAN,
            shared_with: None,
        }),
    }
}

/// The other bearing's coinciding line of a shared finding (the diagnosis
/// names it when two watched lines share their evidence).
fn shared_link(d: &Found) -> Option<LineLink> {
    d.shared_finding.map(|l| LineLink {
        bearing: l.bearing,
        kind: l.kind,
    })
}

/// One searched line of a bearing (`None` diagnosis entries never reach here).
fn line(d: &Found) -> DefectResult {
    if !d.searched() {
        return not_searched(NotSearchedCode::NoHarmonic, None);
    }
    let searched = d.harmonics_searched.min(super::MAX_HARMONICS);
    let found = d.harmonics_found.min(searched);
    let link = shared_link(d).filter(|_| d.detected);
    let state = match (d.detected, link) {
        (true, Some(_)) => LineState::Shared,
        (true, None) => LineState::Detected,
        (false, _) => LineState::Searched,
    };
    DefectResult {
        score_db: d.score_db,
        amplitude_1x_g: d.fundamental_amplitude,
        harmonics: found,
        detected: d.detected,
        line: Some(LineDetail {
            state,
            reason: None,
            needed_samples_per_rev: None,
            amplitude_g: d.amplitude_sum(),
            harmonics_searched: searched,
            sidebands: d.sidebands.min(found.min(3)),
            margin_db: if found == 0 {
                f32::NAN
            } else {
                d.margin_db().unwrap_or(0.0)
            },
            shared_with: link,
        }),
    }
}

fn mesh(l: &LineReport) -> MeshResult {
    let m = &l.measurement;
    if !m.searched {
        return MeshResult::default();
    }
    MeshResult {
        searched: true,
        amplitude_g: m.amplitude,
        prominence_db: if m.amplitude > 0.0 {
            m.prominence_db
        } else {
            f32::NAN
        },
        sideband_gear_g: sideband_g(l, 0),
        sideband_mate_g: sideband_g(l, 1),
    }
}

/// The stronger of a mesh line's two first sidebands at shaft `i` (0 the
/// gear's own shaft, 1 the mate's), in g; NaN ("not measured") when neither
/// side was searched or the mesh has no mate in the point.
fn sideband_g(l: &LineReport, i: usize) -> f32 {
    l.sidebands
        .bands
        .get(2 * i..2 * i + 2)
        .and_then(|pair| {
            pair.iter()
                .filter(|b| b.searched)
                .map(|b| b.amplitude)
                .max_by(f32::total_cmp)
        })
        .unwrap_or(f32::NAN)
}

impl FrameFlags {
    /// The frame's flag field for the measurement's quality flags: a
    /// many-to-one fold of the core's finer set onto the field's seven bits
    /// (irregular speed, too few revolutions and an incomplete record show
    /// as `tach_irregular`; non-finite samples as `sensor_fault`; a
    /// resampler fault as `processing_overrun`).
    pub fn from_quality(q: Q) -> Self {
        Self {
            tach_missing: q.contains(Q::TACH_MISSING),
            tach_irregular: q.intersects(Q(Q::TACH_IRREGULAR.0
                | Q::SPEED_UNSTABLE.0
                | Q::TOO_FEW_REVS.0
                | Q::INCOMPLETE.0)),
            speed_out_of_range: q.contains(Q::SPEED_OUT_OF_RANGE),
            clipping: q.contains(Q::CLIPPING),
            sensor_fault: q.intersects(Q(Q::SENSOR_FAULT.0 | Q::NON_FINITE.0)),
            processing_overrun: q.intersects(Q(Q::OVERRUN.0 | Q::RESAMPLER.0)),
            low_battery: q.contains(Q::LOW_BATTERY),
        }
    }
}

fn zone(z: Zone) -> IsoZone {
    match z {
        Zone::A => IsoZone::A,
        Zone::B => IsoZone::B,
        Zone::C => IsoZone::C,
        Zone::D => IsoZone::D,
    }
}

impl FrameReport {
    /// The frame content of a report, for node `node_id`, sequence `seq`.
    ///
    /// ```
    /// use dsp_core::config::{PointConfig, SpeedInput};
    /// use wire::frame::{encode, FrameReport};
    /// use dsp_core::pipeline::Pipeline;
    /// let mut point = PointConfig::default();
    /// point.speed = SpeedInput::Constant { rpm: 1500.0 };
    /// point.revolutions = 64;
    /// let mut p = Pipeline::<1024, 512, 2048>::new(&point).unwrap();
    /// p.push_i16(&[0; 256]);
    /// let frame = FrameReport::from_report(&p.finish(), 7, 1);
    /// assert!(frame.flags.sensor_fault); // an all-zero channel is flat
    /// let mut buf = [0u8; 64];
    /// assert_eq!(encode(&frame, &mut buf), Ok(21)); // v2, no bearings: 21 bytes
    /// ```
    pub fn from_report(r: &Report, node_id: u16, seq: u16) -> FrameReport {
        let o = &r.overall;
        let analysed = r.analysed();
        let mut bearings = heapless::Vec::new();
        for b in &r.bearings {
            let why = b.not_searched(analysed).map(reason);
            let defects =
                Kind::ALL.map(
                    |k| match (why, b.diagnosis.as_ref().and_then(|d| d.get(k))) {
                        (None, Some(d)) => line(d),
                        (Some((code, needed)), _) => not_searched(code, needed),
                        (None, None) => not_searched(NotSearchedCode::NotAnalysed, None),
                    },
                );
            // Both lists hold at most MAX_BEARINGS (8) bearings.
            let _ = bearings.push(BearingResult { defects });
        }
        let mut meshes = heapless::Vec::new();
        for l in &r.lines {
            // Both lists hold at most MAX_MESHES (4) meshes.
            let _ = meshes.push(mesh(l));
        }
        let flags = FrameFlags::from_quality(r.flags);
        FrameReport {
            node_id,
            seq,
            flags,
            speed_rpm: if r.speed.revs > 0 && !flags.tach_missing {
                r.speed.mean_rpm
            } else {
                f32::NAN
            },
            overall: OverallIndicators {
                accel_rms_g: o.rms_ac,
                peak_g: o.peak,
                crest_factor: o.crest_factor,
                kurtosis: o.kurtosis,
                velocity_rms_mm_s: o.velocity_rms_mm_s,
                iso_zone: o.zone.map(zone),
            },
            bearings,
            meshes,
            version: super::layout::FORMAT_VERSION_2,
        }
    }
}
