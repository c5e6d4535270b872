//! # dsp-core
//!
//! The diagnosis core of an envord vibration node: everything between ADC
//! counts plus once-per-revolution pulses and a compact bearing report.
//!
//! * `no_std`, no heap, no `unsafe`; state lives in fixed-size structs.
//! * Free of I/O and hardware: the firmware and the host simulator feed the
//!   same [`Pipeline`] with blocks of samples and tach edges.
//! * No panics reachable from the public API (checked for the target by the
//!   no-panic link test, see DEVELOPERS.md). Library code uses `get`,
//!   iterators and saturating conversions instead of indexing and `as`.
//!
//! # The signal chain, one folder per stage
//!
//! ```text
//! ADC block ─► frontend/   band-pass (design, biquad) ─► rectify ─► decimate
//!          └─► overall/    RMS, peak, crest factor, kurtosis, clipping; velocity (ISO 20816)
//!                          (computed in the same pass, fed by the front end)
//! tach edges ─► speed/     tach (speed, pulse faults) ─► order_track (angle-domain resampling)
//!          ─► spectrum/    window, rfft, power averaging (order spectrum)
//!          ─► diagnosis/   kinematics (BPFO, BPFI, FTF, BSF as tach orders), coverage
//!                          (which pass searches which bearing), defects (harmonics, floor,
//!                          attribution, decision)
//! survey/      commissioning only: the band survey (spectral kurtosis bank) and the
//!              one band-choice rule shared by node and host
//! pipeline     drives the stages over a record and yields a report (report.rs);
//! config       the measuring point and the settings of every stage
//! ```
//!
//! The `wire` crate turns a report into bytes for the radio; dsp-core knows no bytes.
//!
//! A stage imports only earlier stages, [`num`] and [`config`]; the main
//! types of every stage are re-exported here at the root, so users write
//! `dsp_core::Pipeline`, `dsp_core::TachTracker`, `dsp_core::DefectKind`.
#![no_std]
#![cfg_attr(
    test,
    allow(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::cast_possible_truncation
    )
)]

pub mod config;
pub mod diagnosis;
pub mod frontend;
pub mod num;
pub mod overall;
pub mod pipeline;
pub mod report;
pub mod spectrum;
pub mod speed;
pub mod survey;

pub use config::{
    name_from, Bearing, BearingKinematics, ConfigError, LineCoincidence, Mesh, Name, PointConfig,
    Shaft, SpeedInput, MAX_BEARINGS, MAX_COINCIDENCES, MAX_MESHES, MAX_SHAFTS, NAME_LEN,
};
pub use diagnosis::{
    BearingDiagnosis, BearingGeometry, BearingOrders, Coverage, DefectKind, DefectMultiples,
    DefectSearch, DefectSearchConfig, Drivetrain, LineMeasurement, NotSearched, ShaftRatio,
};
pub use frontend::rectify::Rectifier;
pub use frontend::{decimation_for, FrontEnd, FrontEndConfig, FrontEndError};
pub use overall::{MachineGroup, Overall, Support, VelocityConfig, Zone};
pub use pipeline::{NodePipeline, Pipeline, PipelineError, ADC_BLOCK, NODE_BINS, NODE_RING};
pub use report::{BearingReport, LineReport, PassReport, QualityFlags, Report};
pub use spectrum::{OrderSpectrum, SpectrumConfig, SpectrumError, SpectrumView, Window};
pub use speed::{
    EdgeDetector, OrderTrackConfig, OrderTracker, RevMark, SpeedSource, SpeedSummary, TachConfig,
    TachConfigError, TachFlags, TachTracker,
};
pub use survey::{BandSurvey, SurveyConfig, SurveyError, SurveyResult};
