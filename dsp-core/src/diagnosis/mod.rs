//! Diagnosis stage: from an order spectrum to findings per bearing.
//!
//! * [`kinematics`]: bearing defect lines (BPFO, BPFI, FTF, BSF) as orders
//!   of the tach shaft, through the drivetrain's shaft ratios.
//! * [`coverage`]: which pass (samples per revolution) searches which
//!   bearing, so that each line is searched at a resolution that fits its
//!   shaft; lines no pass serves are reported as not searched.
//! * [`defects`]: harmonics, noise floor, attribution between coinciding
//!   lines, sidebands, score and decision on a [`crate::spectrum`] view.

pub mod coverage;
pub mod defects;
pub mod kinematics;

pub use coverage::{Coverage, NotSearched, Pass, MAX_PASSES};
pub use defects::{
    BearingDiagnosis, DefectConfigError, DefectResult, DefectSearch, DefectSearchConfig,
    HarmonicResult, LineMeasurement, SearchError,
};
pub use kinematics::{
    BearingGeometry, BearingOrders, DefectKind, DefectMultiples, Drivetrain, DrivetrainError,
    GearMesh, GeometryError, ShaftId, ShaftRatio,
};
