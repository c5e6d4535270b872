//! `envord gateway baseline`: set or clear the hand-set amplitude baseline
//! of one defect (stored as a limit row, see [`super::limits`]).

use super::{db, limits, limits_cmd, BaselineArgs};
use crate::error::CliError;
use wire::frame::DefectKind;

fn parse_kind(s: &str) -> Result<DefectKind, CliError> {
    DefectKind::ALL
        .iter()
        .copied()
        .find(|k| k.name().eq_ignore_ascii_case(s))
        .ok_or_else(|| {
            CliError::input(
                "--defect",
                format!("{s:?} is not one of bpfo, bpfi, ftf, bsf"),
            )
        })
}

pub(super) fn run(a: BaselineArgs) -> Result<(), CliError> {
    // a write to an existing store: a mistyped path is refused, not created
    drop(db::open_mode(&a.db, db::Mode::Existing)?);
    let kind = parse_kind(&a.defect)?;
    if a.bearing > 3 {
        return Err(CliError::input("--bearing", "bearing index must be 0..=3"));
    }
    if let Some(v) = a.amplitude_g {
        if !v.is_finite() || v <= 0.0 {
            return Err(CliError::input(
                "--amplitude-g",
                "must be a positive amplitude in g",
            ));
        }
    }
    let row = limits::LimitRow {
        node: Some(a.node),
        bearing: Some(a.bearing),
        kind: Some(kind.name().to_string()),
        // 0 clears the hand-set baseline: back to learning
        baseline_g: Some(a.amplitude_g.unwrap_or(0.0)),
        origin: "command".into(),
        ..limits::LimitRow::default()
    };
    limits_cmd::store_row(&a.db, &row)?;
    match a.amplitude_g {
        Some(x) => println!(
            "baseline of node {} bearing {} {} set to {x} g",
            a.node,
            a.bearing,
            kind.name()
        ),
        None => println!(
            "baseline of node {} bearing {} {} cleared (learned from quiet reports again)",
            a.node,
            a.bearing,
            kind.name()
        ),
    }
    Ok(())
}
