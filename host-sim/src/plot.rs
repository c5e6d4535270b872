//! Plots (SVG, or PNG when the file name ends in `.png`): the envelope order
//! spectrum with every watched defect's harmonics marked and labelled, the
//! speed per revolution beneath it, and bar charts of scores per file.

use std::path::Path;

use dsp_core::kinematics::DefectKind;
use plotters::coord::Shift;
use plotters::prelude::*;

use crate::analysis::Analysis;
use crate::error::CliError;

const FONT: &[u8] = include_bytes!("../assets/DejaVuSans.ttf");

fn register_font() {
    // Registering twice is harmless; the embedded font makes PNG text work on
    // machines without system fonts.
    let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, FONT);
}

fn kind_colour(k: DefectKind) -> RGBColor {
    match k {
        DefectKind::Bpfo => RGBColor(200, 40, 40),
        DefectKind::Bpfi => RGBColor(30, 100, 200),
        DefectKind::Ftf => RGBColor(40, 150, 60),
        DefectKind::Bsf => RGBColor(170, 90, 10),
    }
}

fn err(e: impl std::fmt::Display) -> CliError {
    CliError::Other(format!("plot: {e}"))
}

/// Writes the order-spectrum plot of an analysis.
pub fn order_spectrum(path: &Path, a: &Analysis, title: &str) -> Result<(), CliError> {
    register_font();
    let size = (1200, 800);
    if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("png"))
    {
        let root = BitMapBackend::new(path, size).into_drawing_area();
        draw_analysis(&root, a, title)?;
        root.present().map_err(err)
    } else {
        let root = SVGBackend::new(path, size).into_drawing_area();
        draw_analysis(&root, a, title)?;
        root.present().map_err(err)
    }
}

fn draw_analysis<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    a: &Analysis,
    title: &str,
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    root.fill(&WHITE).map_err(err)?;
    let (top, bottom) = root.split_vertically(560);
    let r = &a.report;
    let max_order = r.max_search_order.max(1.0);
    let opb = a.orders_per_bin;
    let pts: Vec<(f32, f32)> = a
        .spectrum
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            #[allow(clippy::cast_precision_loss)]
            let o = i as f32 * opb;
            (o, v)
        })
        .filter(|(o, _)| *o <= max_order)
        .collect();
    let y_max = pts
        .iter()
        .skip(2)
        .map(|p| p.1)
        .fold(0.0f32, f32::max)
        .max(1e-9)
        * 1.25;
    let unit = match r.rectifier {
        dsp_core::rectify::Rectifier::Abs => "g",
        dsp_core::rectify::Rectifier::Square => "g²",
    };
    let mut chart = ChartBuilder::on(&top)
        .caption(
            format!(
                "Envelope order spectrum: {title} ({:.0} rpm, {} segments)",
                r.speed.mean_rpm, r.segments
            ),
            ("sans-serif", 20),
        )
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(80)
        .build_cartesian_2d(0f32..max_order, 0f32..y_max)
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc("order of the tach shaft (cycles per revolution)")
        .y_desc(format!("envelope amplitude ({unit} peak)"))
        .label_style(("sans-serif", 14))
        .draw()
        .map_err(err)?;
    chart
        .draw_series(LineSeries::new(pts.iter().copied(), &BLACK))
        .map_err(err)?;

    // Markers: every watched harmonic, coloured by defect kind; detected
    // defects drawn solid and labelled with their harmonic number.
    for b in &r.bearings {
        for k in DefectKind::ALL {
            let line = b.orders.line(k);
            let detected = b
                .diagnosis
                .as_ref()
                .and_then(|d| d.get(k))
                .is_some_and(|d| d.detected);
            let colour = kind_colour(k);
            for h in 1..=10u8 {
                let o = line * f32::from(h);
                if o > max_order {
                    break;
                }
                // Every watched harmonic gets a tick at the top; a detected
                // defect's harmonics also get a full-height line and a label.
                let (from, style) = if detected {
                    (0.0, colour.mix(0.6).stroke_width(1))
                } else {
                    (y_max * 0.86, colour.mix(0.5).stroke_width(1))
                };
                chart
                    .draw_series(LineSeries::new([(o, from), (o, y_max * 0.9)], style))
                    .map_err(err)?;
                if detected || h == 1 {
                    let label = if detected {
                        format!("{} {}x{h}", b.name.as_str(), k.name())
                    } else {
                        k.name().to_string()
                    };
                    chart
                        .draw_series(std::iter::once(Text::new(
                            label,
                            (
                                o,
                                y_max * (0.91 + 0.02 * f32::from(u8::from(detected) * (h % 4))),
                            ),
                            ("sans-serif", 11).into_font().color(&colour),
                        )))
                        .map_err(err)?;
                }
            }
        }
    }
    draw_speed(&bottom, &a.speed_series)
}

fn draw_speed<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    series: &[f32],
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    let lo = series.iter().copied().fold(f32::INFINITY, f32::min);
    let hi = series.iter().copied().fold(f32::NEG_INFINITY, f32::max);
    let (lo, hi) = if lo.is_finite() && hi.is_finite() && hi > lo {
        (lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo))
    } else if lo.is_finite() {
        (lo * 0.95, lo * 1.05 + 1.0)
    } else {
        (0.0, 1.0)
    };
    #[allow(clippy::cast_precision_loss)]
    let n = series.len().max(1) as f32;
    let mut chart = ChartBuilder::on(area)
        .caption("Tach-shaft speed per revolution", ("sans-serif", 16))
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(80)
        .build_cartesian_2d(0f32..n, lo..hi)
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc("revolution")
        .y_desc("speed (rpm)")
        .label_style(("sans-serif", 13))
        .draw()
        .map_err(err)?;
    chart
        .draw_series(LineSeries::new(
            series.iter().enumerate().map(|(i, &v)| {
                #[allow(clippy::cast_precision_loss)]
                let x = i as f32;
                (x, v)
            }),
            &BLUE,
        ))
        .map_err(err)?;
    Ok(())
}

/// One bar group of [`scores`]: a label and the scores of each defect kind.
pub struct ScoreRow {
    /// Label (file name).
    pub label: String,
    /// Highest score per kind over the watched bearings, dB (BPFO, BPFI, FTF, BSF).
    pub scores: [f32; 4],
}

/// Writes a bar chart of defect scores per file (SVG or PNG).
pub fn scores(path: &Path, rows: &[ScoreRow], title: &str) -> Result<(), CliError> {
    register_font();
    let width = u32::try_from(200 + rows.len() * 60)
        .unwrap_or(4000)
        .min(4000);
    let size = (width.max(800), 600);
    if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("png"))
    {
        let root = BitMapBackend::new(path, size).into_drawing_area();
        draw_scores(&root, rows, title)?;
        root.present().map_err(err)
    } else {
        let root = SVGBackend::new(path, size).into_drawing_area();
        draw_scores(&root, rows, title)?;
        root.present().map_err(err)
    }
}

fn draw_scores<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    rows: &[ScoreRow],
    title: &str,
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    root.fill(&WHITE).map_err(err)?;
    let y_max = rows.iter().flat_map(|r| r.scores).fold(10.0f32, f32::max) * 1.1;
    #[allow(clippy::cast_precision_loss)]
    let n = rows.len().max(1) as f32;
    let mut chart = ChartBuilder::on(root)
        .caption(title, ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(120)
        .y_label_area_size(60)
        .build_cartesian_2d(0f32..n, 0f32..y_max)
        .map_err(err)?;
    chart
        .configure_mesh()
        .disable_x_mesh()
        .x_labels(0)
        .y_desc("defect score (dB over local floor)")
        .label_style(("sans-serif", 13))
        .draw()
        .map_err(err)?;
    for (i, r) in rows.iter().enumerate() {
        #[allow(clippy::cast_precision_loss)]
        let x0 = i as f32;
        for (j, k) in DefectKind::ALL.iter().enumerate() {
            #[allow(clippy::cast_precision_loss)]
            let a = x0 + 0.1 + 0.2 * j as f32;
            let v = r.scores.get(j).copied().unwrap_or(0.0).max(0.0);
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(a, 0.0), (a + 0.18, v)],
                    kind_colour(*k).filled(),
                )))
                .map_err(err)?;
        }
        chart
            .draw_series(std::iter::once(Text::new(
                r.label.clone(),
                (x0 + 0.05, -y_max * 0.02),
                ("sans-serif", 11)
                    .into_font()
                    .transform(FontTransform::Rotate90),
            )))
            .map_err(err)?;
    }
    for (j, k) in DefectKind::ALL.iter().enumerate() {
        #[allow(clippy::cast_precision_loss)]
        let y = y_max * (0.97 - 0.05 * j as f32);
        chart
            .draw_series(std::iter::once(Text::new(
                k.name(),
                (n * 0.9, y),
                ("sans-serif", 13).into_font().color(&kind_colour(*k)),
            )))
            .map_err(err)?;
    }
    Ok(())
}
