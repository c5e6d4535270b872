//! The trend plot (SVG): for each defect kind of one bearing, the envelope
//! amplitude against receive time, with the baseline and the alert and danger
//! levels exactly as the state logic computed them for each report
//! ([`super::trend::Levels`], drawn as steps), the state of each report as a
//! marker shape (and in the legend as text), and band changes marked.
//! The legend sits in its own area right of the charts, so it never covers
//! them; kind colours are the spectrum plot's ([`crate::palette`]).

use super::timefmt::{format_minute, format_rfc3339};
use super::trend::{Graded, Line, State};
use crate::error::CliError;
use crate::palette::{kind_colour_by_name, ALERT_LINE, BASELINE_LINE, DANGER_LINE};
use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint};
use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::Path;

const FONT: &[u8] = include_bytes!("../../assets/DejaVuSans.ttf");

fn err(e: impl std::fmt::Display) -> CliError {
    CliError::Other(format!("trend plot: {e}"))
}

/// The x axis: receive time when every report has one, else arrival order.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Axis {
    /// Unix ms.
    Time,
    /// Report row id (arrival order).
    Arrival,
}

/// Which axis a set of lines gets.
pub fn axis_of(lines: &[&Line]) -> Axis {
    let all_timed = lines
        .iter()
        .flat_map(|l| l.history.iter())
        .all(|g| g.point.time_ms.is_some());
    if all_timed {
        Axis::Time
    } else {
        Axis::Arrival
    }
}

/// x value of a report on an axis.
pub fn x_of(g: &Graded, axis: Axis) -> f64 {
    #[allow(clippy::cast_precision_loss)] // ms and row ids far below 2^52
    match axis {
        Axis::Time => g.point.time_ms.unwrap_or(0) as f64,
        Axis::Arrival => g.point.report_id as f64,
    }
}

/// Round tick steps for a time span (s): minutes to weeks.
const TIME_STEPS_S: [f64; 16] = [
    60.0,
    300.0,
    600.0,
    900.0,
    1800.0,
    3600.0,
    7200.0,
    10_800.0,
    21_600.0,
    43_200.0,
    86_400.0,
    172_800.0,
    604_800.0,
    1_209_600.0,
    2_592_000.0,
    7_776_000.0,
];

/// Tick positions on `lo..hi` at a round step (time: the steps above, in
/// ms; arrival: 1, 2, 5 x 10^k), at most about `max` of them.
pub fn x_ticks(lo: f64, hi: f64, axis: Axis, max: usize) -> Vec<f64> {
    let span = (hi - lo).max(1.0);
    let steps: Vec<f64> = match axis {
        Axis::Time => TIME_STEPS_S.iter().map(|s| s * 1000.0).collect(),
        Axis::Arrival => (0..12)
            .flat_map(|e| [1.0, 2.0, 5.0].map(|m| m * 10f64.powi(e)))
            .collect(),
    };
    let maxf = f64::from(u32::try_from(max.max(2)).unwrap_or(8));
    let step = steps
        .iter()
        .copied()
        .find(|s| span / s <= maxf)
        .unwrap_or_else(|| span / maxf);
    let mut t = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while t <= hi + 1e-9 && out.len() < 64 {
        out.push(t);
        t += step;
    }
    out
}

/// Amplitude ticks (g) on `lo..hi` in a 1-2-5 sequence, or decades only when
/// that would give more than `max`.
pub fn y_ticks(lo: f64, hi: f64, max: usize) -> Vec<f64> {
    // amplitudes in g lie far inside i32 decades; clamp makes that explicit
    #[allow(clippy::cast_possible_truncation)]
    let (e0, e1) = (
        lo.log10().floor().clamp(-30.0, 30.0) as i32,
        hi.log10().ceil().clamp(-30.0, 30.0) as i32,
    );
    let gen = |ms: &[f64]| -> Vec<f64> {
        (e0..=e1)
            .flat_map(|e| ms.iter().map(move |m| m * 10f64.powi(e)))
            .filter(|v| *v >= lo * 0.999 && *v <= hi * 1.001)
            .collect()
    };
    let t = gen(&[1.0, 2.0, 5.0]);
    if t.len() <= max {
        t
    } else {
        gen(&[1.0])
    }
}

/// Plain text of an amplitude tick (`0.002`, `0.05`, `2e-5`).
pub fn g_label(v: f64) -> String {
    if v >= 1e-3 {
        let s = format!("{v:.4}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        s.to_string()
    } else {
        format!("{v:.0e}")
    }
}

fn marker_text(s: State) -> &'static str {
    match s {
        State::Danger => "filled square",
        State::Alert => "filled triangle",
        State::Normal => "open circle",
        State::Learning => "small dot",
        State::NotCovered => "cross (at the floor)",
        State::Stale => "open circle",
        State::NoData => "-",
    }
}

fn draw_marker<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    (x, y): (i32, i32),
    s: State,
    c: RGBColor,
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    match s {
        State::Danger => area
            .draw(&Rectangle::new(
                [(x - 5, y - 5), (x + 5, y + 5)],
                c.filled(),
            ))
            .map_err(err),
        State::Alert => area
            .draw(&TriangleMarker::new((x, y), 6, c.filled()))
            .map_err(err),
        State::Normal | State::Stale => area
            .draw(&Circle::new((x, y), 4, c.stroke_width(2)))
            .map_err(err),
        State::Learning => area.draw(&Circle::new((x, y), 2, c.filled())).map_err(err),
        State::NotCovered => area
            .draw(&Cross::new((x, y), 5, c.stroke_width(2)))
            .map_err(err),
        State::NoData => Ok(()),
    }
}

/// A linear f64 axis with our own (round) tick positions.
struct Ticked {
    lo: f64,
    hi: f64,
    ticks: Vec<f64>,
}

impl Ranged for Ticked {
    type FormatOption = DefaultFormatting;
    type ValueType = f64;

    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        RangedCoordf64::from(self.lo..self.hi).map(v, limit)
    }

    fn key_points<H: KeyPointHint>(&self, hint: H) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            Vec::new()
        } else {
            self.ticks.clone()
        }
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.lo..self.hi
    }
}

/// What the plot shows, for the caption.
pub struct PlotInfo<'a> {
    /// Title (node, bearing, name).
    pub title: &'a str,
}

/// Writes the trend plot of `lines` (one panel per defect kind) to `path`.
pub fn write_svg(path: &Path, info: &PlotInfo<'_>, lines: &[&Line]) -> Result<(), CliError> {
    let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, FONT);
    let panels = lines.len().max(1);
    let ph = 300u32;
    let h = 70 + ph * u32::try_from(panels).unwrap_or(4);
    let root = SVGBackend::new(path, (1100, h)).into_drawing_area();
    root.fill(&WHITE).map_err(err)?;
    let (title_area, body) = root.split_vertically(40);
    title_area
        .draw(&Text::new(
            info.title.to_string(),
            (12, 12),
            ("sans-serif", 18).into_font(),
        ))
        .map_err(err)?;
    let (charts, legend) = body.split_horizontally(800);
    let axis = axis_of(lines);
    let xs: Vec<f64> = lines
        .iter()
        .flat_map(|l| l.history.iter().map(|g| x_of(g, axis)))
        .collect();
    let (mut x0, mut x1) = xs
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
            (a.min(*x), b.max(*x))
        });
    if !x0.is_finite() {
        (x0, x1) = (0.0, 1.0);
    }
    let pad = ((x1 - x0) * 0.03).max(if axis == Axis::Time { 60_000.0 } else { 0.5 });
    let (x0, x1) = (x0 - pad, x1 + pad);
    let xt = x_ticks(x0, x1, axis, 7);
    let x_desc = match axis {
        Axis::Time => "receive time (UTC)".to_string(),
        Axis::Arrival => "report number in arrival order (receive times missing)".to_string(),
    };
    let step_ms = xt.get(1).zip(xt.first()).map_or(0.0, |(b, a)| b - a);
    let areas = charts.split_evenly((panels, 1));
    for (line, area) in lines.iter().zip(areas.iter()) {
        draw_panel(area, line, axis, (x0, x1), &xt, step_ms, &x_desc)?;
    }
    draw_legend(&legend, lines, axis)?;
    root.present().map_err(err)
}

#[allow(clippy::too_many_arguments)]
fn draw_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    line: &Line,
    axis: Axis,
    (x0, x1): (f64, f64),
    xt: &[f64],
    step_ms: f64,
    x_desc: &str,
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    let kind = &line.state.kind;
    let colour = kind_colour_by_name(kind);
    let h = &line.history;
    // y range over amplitudes and every level drawn
    let mut vals: Vec<f64> = Vec::new();
    for g in h {
        vals.extend(g.point.amplitude_g.map(|a| a.max(g.levels.floor_g)));
        vals.extend([g.levels.baseline_g, g.levels.alert_g, g.levels.danger_g]);
        vals.extend(g.levels.alert_abs_g);
        vals.extend(g.levels.danger_abs_g);
    }
    let (lo, hi) = vals
        .iter()
        .filter(|v| v.is_finite() && **v > 0.0)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    let (lo, hi) = if lo.is_finite() {
        (lo / 1.6, hi * 1.6)
    } else {
        (1e-4, 1.0)
    };
    let yt = y_ticks(lo, hi, 9);
    let ly = |v: f64| v.max(lo).log10();
    let mut chart = ChartBuilder::on(area)
        .caption(
            format!("{kind}: envelope amplitude"),
            ("sans-serif", 15).into_font().color(&colour),
        )
        .margin(8)
        .x_label_area_size(42)
        .y_label_area_size(70)
        .build_cartesian_2d(
            Ticked {
                lo: x0,
                hi: x1,
                ticks: xt.to_vec(),
            },
            Ticked {
                lo: lo.log10(),
                hi: hi.log10(),
                ticks: yt.iter().map(|v| v.log10()).collect(),
            },
        )
        .map_err(err)?;
    let xfmt = |x: &f64| -> String {
        match axis {
            #[allow(clippy::cast_possible_truncation)] // ms fit i64
            Axis::Time if step_ms >= 86_400_000.0 => format_rfc3339(*x as i64)
                .get(..10)
                .unwrap_or("")
                .to_string(),
            #[allow(clippy::cast_possible_truncation)]
            Axis::Time => format_minute(*x as i64),
            Axis::Arrival => format!("{x:.0}"),
        }
    };
    let yfmt = |y: &f64| g_label(10f64.powf(*y));
    chart
        .configure_mesh()
        .x_label_formatter(&xfmt)
        .y_label_formatter(&yfmt)
        .x_desc(x_desc)
        .y_desc("amplitude (g, log scale)")
        .label_style(("sans-serif", 12))
        .light_line_style(WHITE)
        .draw()
        .map_err(err)?;
    // band changes: a dotted vertical line at the first report of a new band
    for g in h.iter().filter(|g| g.band_changed) {
        let x = x_of(g, axis);
        chart
            .draw_series(DashedLineSeries::new(
                [(x, lo.log10()), (x, hi.log10())],
                2,
                4,
                RGBColor(120, 60, 160).stroke_width(2),
            ))
            .map_err(err)?;
    }
    // levels as steps: each report's levels hold from it to the next report
    let step_points = |f: &dyn Fn(&Graded) -> Option<f64>| -> Vec<Vec<(f64, f64)>> {
        let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
        let mut cur: Vec<(f64, f64)> = Vec::new();
        for (i, g) in h.iter().enumerate() {
            let xa = x_of(g, axis);
            let xb = h.get(i + 1).map_or(x1, |n| x_of(n, axis));
            match f(g) {
                Some(v) => {
                    cur.push((xa, ly(v)));
                    cur.push((xb, ly(v)));
                }
                None => {
                    if !cur.is_empty() {
                        runs.push(std::mem::take(&mut cur));
                    }
                }
            }
        }
        if !cur.is_empty() {
            runs.push(cur);
        }
        runs
    };
    type LevelOf = fn(&Graded) -> Option<f64>;
    let styles: [(LevelOf, ShapeStyle, u32, u32); 5] = [
        (
            |g| Some(g.levels.baseline_g),
            BASELINE_LINE.stroke_width(2),
            2,
            3,
        ),
        (|g| Some(g.levels.alert_g), ALERT_LINE.stroke_width(2), 8, 5),
        (
            |g| Some(g.levels.danger_g),
            DANGER_LINE.stroke_width(2),
            14,
            4,
        ),
        (|g| g.levels.alert_abs_g, ALERT_LINE.stroke_width(1), 3, 3),
        (|g| g.levels.danger_abs_g, DANGER_LINE.stroke_width(1), 3, 3),
    ];
    for (f, style, dash, gap) in styles {
        for run in step_points(&f) {
            chart
                .draw_series(DashedLineSeries::new(run, dash, gap, style))
                .map_err(err)?;
        }
    }
    // amplitude line (breaks at reports with no amplitude) and state markers
    let mut run: Vec<(f64, f64)> = Vec::new();
    let mut runs = Vec::new();
    for g in h {
        match g.point.amplitude_g.filter(|_| g.point.searched) {
            Some(a) => run.push((x_of(g, axis), ly(a.max(g.levels.floor_g)))),
            None => runs.push(std::mem::take(&mut run)),
        }
    }
    runs.push(run);
    for r in runs.into_iter().filter(|r| !r.is_empty()) {
        chart
            .draw_series(LineSeries::new(r, colour.stroke_width(2)))
            .map_err(err)?;
    }
    let at = |g: &Graded| -> (f64, f64) {
        let y = g
            .point
            .amplitude_g
            .filter(|_| g.point.searched)
            .map_or(ly(g.levels.floor_g), |a| ly(a.max(g.levels.floor_g)));
        (x_of(g, axis), y)
    };
    let of = |s: State| h.iter().filter(move |g| g.state == s).map(at);
    chart
        .draw_series(
            of(State::Danger)
                .map(|c| EmptyElement::at(c) + Rectangle::new([(-5, -5), (5, 5)], colour.filled())),
        )
        .map_err(err)?;
    chart
        .draw_series(
            of(State::Alert)
                .map(|c| EmptyElement::at(c) + TriangleMarker::new((0, 0), 6, colour.filled())),
        )
        .map_err(err)?;
    chart
        .draw_series(
            of(State::Normal)
                .chain(of(State::Stale))
                .map(|c| EmptyElement::at(c) + Circle::new((0, 0), 4, colour.stroke_width(2))),
        )
        .map_err(err)?;
    chart
        .draw_series(
            of(State::Learning)
                .map(|c| EmptyElement::at(c) + Circle::new((0, 0), 2, colour.filled())),
        )
        .map_err(err)?;
    chart
        .draw_series(
            of(State::NotCovered)
                .map(|c| EmptyElement::at(c) + Cross::new((0, 0), 5, colour.stroke_width(2))),
        )
        .map_err(err)?;
    Ok(())
}

fn draw_legend<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    lines: &[&Line],
    axis: Axis,
) -> Result<(), CliError>
where
    DB::ErrorType: 'static,
{
    let font = ("sans-serif", 13).into_font();
    let mut y = 20;
    let text = |t: String, y: &mut i32, c: RGBColor| -> Result<(), CliError> {
        area.draw(&Text::new(t, (34, *y - 6), font.clone().color(&c)))
            .map_err(err)?;
        *y += 20;
        Ok(())
    };
    for l in lines {
        let c = kind_colour_by_name(&l.state.kind);
        area.draw(&PathElement::new(vec![(4, y), (28, y)], c.stroke_width(3)))
            .map_err(err)?;
        text(
            format!("{}: now {}", l.state.kind, l.state.state.label()),
            &mut y,
            RGBColor(0, 0, 0),
        )?;
    }
    y += 8;
    let first = lines.first().map(|l| l.state.limits);
    let levels: [(&str, RGBColor, u32, i32, i32); 3] = [
        ("baseline (learned or set)", BASELINE_LINE, 2, 2, 3),
        ("alert level", ALERT_LINE, 2, 8, 5),
        ("danger level", DANGER_LINE, 2, 14, 4),
    ];
    for (name, c, w, dash, gap) in levels {
        let mut x = 4;
        while x < 28 {
            area.draw(&PathElement::new(
                vec![(x, y), ((x + dash).min(28), y)],
                c.stroke_width(w),
            ))
            .map_err(err)?;
            x += dash + gap;
        }
        let extra = match (name, first) {
            ("alert level", Some(l)) => format!(" (+{} dB)", l.alert_db),
            ("danger level", Some(l)) => format!(" (+{} dB)", l.danger_db),
            _ => String::new(),
        };
        text(format!("{name}{extra}"), &mut y, RGBColor(0, 0, 0))?;
    }
    if lines
        .iter()
        .any(|l| l.state.limits.alert_abs_g.is_some() || l.state.limits.danger_abs_g.is_some())
    {
        text("thin: absolute level".into(), &mut y, RGBColor(0, 0, 0))?;
    }
    y += 8;
    for s in [
        State::Normal,
        State::Learning,
        State::Alert,
        State::Danger,
        State::NotCovered,
    ] {
        draw_marker(area, (16, y - 4), s, RGBColor(60, 60, 60))?;
        text(
            format!("{}: {}", s.label(), marker_text(s)),
            &mut y,
            RGBColor(0, 0, 0),
        )?;
    }
    let changes: Vec<&Graded> = lines
        .iter()
        .flat_map(|l| l.history.iter())
        .filter(|g| g.band_changed)
        .collect();
    if !changes.is_empty() {
        y += 8;
        area.draw(&PathElement::new(
            vec![(16, y - 12), (16, y + 2)],
            RGBColor(120, 60, 160).stroke_width(2),
        ))
        .map_err(err)?;
        text("band change:".into(), &mut y, RGBColor(120, 60, 160))?;
        let mut seen = Vec::new();
        for g in changes {
            let at = match axis {
                Axis::Time => format_minute(g.point.time_ms.unwrap_or(0)),
                Axis::Arrival => format!("report {}", g.point.report_id),
            };
            let band = g
                .point
                .band_hz
                .map_or("?".into(), |b| format!("{:.0}-{:.0} Hz", b[0], b[1]));
            let t = format!("{at}: {band}");
            if !seen.contains(&t) {
                text(t.clone(), &mut y, RGBColor(120, 60, 160))?;
                seen.push(t);
            }
        }
    }
    Ok(())
}
