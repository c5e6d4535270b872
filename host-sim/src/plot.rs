//! Plots (SVG, or PNG when the file name ends in `.png`): the envelope order
//! spectrum with every watched defect's harmonics marked and labelled, the
//! speed per revolution beneath it, and bar charts of scores per file.

use std::path::Path;

use dsp_core::diagnosis::kinematics::DefectKind;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

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

/// Refuses an output path whose folder does not exist, naming the path
/// (the plotting library would only say "No such file or directory").
fn check_out(path: &Path) -> Result<(), CliError> {
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => Path::new("."),
    };
    if dir.is_dir() {
        Ok(())
    } else {
        Err(CliError::Other(format!(
            "cannot write the plot {}: the folder {} does not exist; create it or give another path",
            path.display(),
            dir.display()
        )))
    }
}

/// An error while writing the plot file, naming it.
fn write_err(path: &Path) -> impl Fn(DrawingAreaErrorKind<std::io::Error>) -> CliError + '_ {
    move |e| {
        CliError::Other(format!(
            "cannot write the plot {}: {e}; check that its folder is writable",
            path.display()
        ))
    }
}

/// Writes the order-spectrum plot of an analysis.
pub fn order_spectrum(path: &Path, a: &Analysis, title: &str) -> Result<(), CliError> {
    register_font();
    check_out(path)?;
    let size = (1200, 800);
    if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("png"))
    {
        let root = BitMapBackend::new(path, size).into_drawing_area();
        draw_analysis(&root, a, title)?;
        root.present()
            .map_err(|e| err(format!("cannot write {}: {e}", path.display())))
    } else {
        let root = SVGBackend::new(path, size).into_drawing_area();
        draw_analysis(&root, a, title)?;
        root.present().map_err(write_err(path))
    }
}

/// A cursor label of the spectrum plot: where its line is and what it says.
struct Cursor {
    /// Pixel x of the marked line.
    x: i32,
    text: String,
    colour: RGBColor,
    /// Labels of detected defects are placed first.
    detected: bool,
}

/// Places cursor labels in rows under the top of the plot so that no two
/// overlap and none runs past `right`. Labels are placed in the order
/// given (most important first); each takes the first row where it fits
/// beside the labels already there, and a label that would cross the right
/// edge ends at its line instead of starting there. A label with no room
/// left is not drawn (`None`): its mark stays, and the legend names the
/// colours. Input per label: (pixel x of its line, text width); output:
/// (x of the text's left end, row).
fn layout_labels(labels: &[(i32, i32)], right: i32, rows: usize) -> Vec<Option<(i32, usize)>> {
    const GAP: i32 = 4;
    let mut taken: Vec<Vec<(i32, i32)>> = vec![Vec::new(); rows];
    labels
        .iter()
        .map(|&(x, w)| {
            let left = if x + 2 + w > right { x - 2 - w } else { x + 2 };
            let (a, b) = (left - GAP, left + w + GAP);
            let row = taken
                .iter()
                .position(|r| r.iter().all(|&(l, e)| b <= l || a >= e))?;
            taken.get_mut(row)?.push((left, left + w));
            Some((left, row))
        })
        .collect()
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
    let (top, rest) = root.split_vertically(540);
    let (legend, bottom) = rest.split_vertically(44);
    let r = &a.report;
    let mut cursors: Vec<Cursor> = Vec::new();
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
        dsp_core::frontend::rectify::Rectifier::Abs => "g",
        dsp_core::frontend::rectify::Rectifier::Square => "g²",
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
                    (y_max * 0.8, colour.mix(0.5).stroke_width(1))
                };
                chart
                    .draw_series(LineSeries::new([(o, from), (o, y_max * 0.86)], style))
                    .map_err(err)?;
                if detected || h == 1 {
                    let text = if detected {
                        format!("{} {}x{h}", b.name.as_str(), k.name())
                    } else {
                        format!("{} {}", b.name.as_str(), k.name())
                    };
                    cursors.push(Cursor {
                        x: chart.backend_coord(&(o, 0.0)).0,
                        text,
                        colour,
                        detected,
                    });
                }
            }
        }
    }
    // Labels in rows over the markers (the top 14 % of the plot is kept
    // free for them), placed left to right so none overlaps another.
    cursors.sort_by_key(|c| (!c.detected, c.x));
    let font = ("sans-serif", 11).into_font();
    let (x_range, y_range) = chart.plotting_area().get_pixel_range();
    let widths: Vec<(i32, i32)> = cursors
        .iter()
        .map(|c| {
            // The measured width, but at least 0.6 em per character of the
            // size an SVG viewer renders (plotters writes size / 1.24).
            let floor = c.text.len() * 11 * 6 / 124 + 1;
            let w = top
                .estimate_text_size(&c.text, &TextStyle::from(font.clone()))
                .map_or(floor, |(w, _)| (w as usize).max(floor));
            (c.x, i32::try_from(w).unwrap_or(i32::MAX))
        })
        .collect();
    const ROW_PX: i32 = 13;
    let rows = usize::try_from(((y_range.end - y_range.start) * 14 / 100) / ROW_PX)
        .unwrap_or(1)
        .max(1);
    let place = layout_labels(&widths, x_range.end, rows);
    for (c, (left, row)) in cursors
        .iter()
        .zip(place)
        .filter_map(|(c, p)| p.map(|p| (c, p)))
    {
        let y = y_range.start + 2 + ROW_PX * i32::try_from(row).unwrap_or(0);
        top.draw(&Text::new(
            c.text.clone(),
            (left, y),
            font.clone()
                .color(&c.colour)
                .pos(Pos::new(HPos::Left, VPos::Top)),
        ))
        .map_err(err)?;
    }
    draw_legend(&legend)?;
    draw_speed(&bottom, &a.speed_series)
}

/// The key to the spectrum plot's colours and marks.
fn draw_legend<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    let font = ("sans-serif", 13).into_font();
    let mut x = 92;
    for k in DefectKind::ALL {
        let c = kind_colour(k);
        area.draw(&Rectangle::new([(x, 8), (x + 14, 20)], c.filled()))
            .map_err(err)?;
        let name = match k {
            DefectKind::Bsf => "2xBSF (ball)",
            DefectKind::Bpfo => "BPFO (outer race)",
            DefectKind::Bpfi => "BPFI (inner race)",
            DefectKind::Ftf => "FTF (cage)",
        };
        area.draw(&Text::new(
            name,
            (x + 18, 14),
            font.clone()
                .color(&c)
                .pos(Pos::new(HPos::Left, VPos::Center)),
        ))
        .map_err(err)?;
        x += 170;
    }
    area.draw(&Text::new(
        "full-height line: detected (label gives the harmonic); short tick: searched, not detected",
        (92, 32),
        font.color(&BLACK).pos(Pos::new(HPos::Left, VPos::Center)),
    ))
    .map_err(err)?;
    Ok(())
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
    let (lo, hi) = speed_axis(lo, hi);
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
        .y_label_formatter(&|v| format!("{v:.0}"))
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

/// The speed axis of the speed panel: the data with a 5 % margin, but never
/// narrower than 2 % of the mean speed (at least 10 rpm), so a constant
/// speed is a flat line with round ticks, not its jitter magnified.
fn speed_axis(lo: f32, hi: f32) -> (f32, f32) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let mid = 0.5 * (lo + hi);
    let span = (1.1 * (hi - lo)).max(0.02 * mid.abs()).max(10.0);
    (mid - 0.5 * span, mid + 0.5 * span)
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
    check_out(path)?;
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
        root.present()
            .map_err(|e| err(format!("cannot write {}: {e}", path.display())))
    } else {
        let root = SVGBackend::new(path, size).into_drawing_area();
        draw_scores(&root, rows, title)?;
        root.present().map_err(write_err(path))
    }
}

/// Bars of a group start at 0.1 and are 0.18 wide every 0.2: the group's
/// centre, in groups.
const BAR_GROUP_CENTRE: f32 = 0.1 + (0.2 * 3.0 + 0.18) / 2.0;

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
        // The label hangs from the centre of its bar group, on the axis.
        let (cx, cy) = chart.backend_coord(&(x0 + BAR_GROUP_CENTRE, 0.0));
        root.draw(&Text::new(
            r.label.clone(),
            (cx, cy + 6),
            TextStyle::from(
                ("sans-serif", 11)
                    .into_font()
                    .transform(FontTransform::Rotate90),
            )
            .pos(Pos::new(HPos::Left, VPos::Center)),
        ))
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
