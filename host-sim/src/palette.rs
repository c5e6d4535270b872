//! Colours shared by the plots: one colour per defect kind, the same in the
//! spectrum plot and the gateway trend plot. The kind colours are the
//! spectrum plot's (`crate::plot`); none of them is used for an alarm level
//! (levels are drawn in black and grey, told apart by line pattern and text).

use dsp_core::diagnosis::kinematics::DefectKind;
use plotters::style::RGBColor;

/// Colour of a defect kind.
pub fn kind_colour(k: DefectKind) -> RGBColor {
    match k {
        DefectKind::Bpfo => RGBColor(200, 40, 40),
        DefectKind::Bpfi => RGBColor(30, 100, 200),
        DefectKind::Ftf => RGBColor(40, 150, 60),
        DefectKind::Bsf => RGBColor(170, 90, 10),
    }
}

/// Colour of a defect kind by its frame name (`BPFO`, ...); grey if unknown.
pub fn kind_colour_by_name(name: &str) -> RGBColor {
    DefectKind::ALL
        .iter()
        .find(|k| k.name().eq_ignore_ascii_case(name))
        .map_or(RGBColor(110, 110, 110), |k| kind_colour(*k))
}

/// Colour of the danger level lines (black: no kind uses it).
pub const DANGER_LINE: RGBColor = RGBColor(0, 0, 0);
/// Colour of the alert level lines.
pub const ALERT_LINE: RGBColor = RGBColor(85, 85, 85);
/// Colour of the baseline.
pub const BASELINE_LINE: RGBColor = RGBColor(150, 150, 150);
