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
//! A bearing that was not analysed is sent with every defect's score and
//! amplitude "invalid" (NaN), no harmonics and not detected, so a reader
//! never takes it for a healthy 0 dB; the flags say why. The speed is
//! "invalid" when no revolution was measured or the tach is missing.

use super::{BearingResult, DefectResult, FrameReport, IsoZone, OverallIndicators, QualityFlags};
use dsp_core::kinematics::DefectKind as Kind;
use dsp_core::report::{QualityFlags as Q, Report};
use dsp_core::velocity::Zone;

fn flags(q: Q) -> QualityFlags {
    QualityFlags {
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
    /// assert_eq!(encode(&frame, &mut buf), Ok(20)); // no bearings: 20 bytes
    /// ```
    pub fn from_report(r: &Report, node_id: u16, seq: u16) -> FrameReport {
        let o = &r.overall;
        let mut bearings = heapless::Vec::new();
        for b in &r.bearings {
            let defects = Kind::ALL.map(|k| match b.diagnosis.as_ref().and_then(|d| d.get(k)) {
                Some(d) => DefectResult {
                    score_db: d.score_db,
                    amplitude_1x_g: d.fundamental_amplitude,
                    harmonics: d.harmonics_found,
                    detected: d.detected,
                },
                None => DefectResult {
                    score_db: f32::NAN,
                    amplitude_1x_g: f32::NAN,
                    harmonics: 0,
                    detected: false,
                },
            });
            // Both lists hold at most MAX_BEARINGS (4) bearings.
            let _ = bearings.push(BearingResult { defects });
        }
        let flags = flags(r.flags);
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
            ..FrameReport::default()
        }
    }
}
