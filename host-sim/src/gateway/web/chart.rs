//! Inline SVG charts: series against a real time axis, level lines, event
//! marks and a bar chart. Legends are HTML beside the chart (they never
//! cover the plot); series differ by dash pattern and marker shape as well as
//! colour.

use super::clock;
use std::fmt::Write as _;

/// Escapes text for HTML and SVG.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            c => o.push(c),
        }
    }
    o
}

/// Marker shape of a series.
#[derive(Clone, Copy, Debug)]
pub enum Marker {
    /// Circle.
    Circle,
    /// Square.
    Square,
    /// Triangle.
    Triangle,
    /// Diamond.
    Diamond,
}

impl Marker {
    /// One of four shapes by index.
    pub fn nth(i: usize) -> Self {
        [
            Marker::Circle,
            Marker::Square,
            Marker::Triangle,
            Marker::Diamond,
        ]
        .get(i % 4)
        .copied()
        .unwrap_or(Marker::Circle)
    }

    fn draw(self, x: f64, y: f64, class: &str) -> String {
        match self {
            Marker::Circle => format!("<circle class=\"{class}\" cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"2.6\"/>"),
            Marker::Square => format!("<rect class=\"{class}\" x=\"{:.1}\" y=\"{:.1}\" width=\"5\" height=\"5\"/>", x - 2.5, y - 2.5),
            Marker::Triangle => format!(
                "<path class=\"{class}\" d=\"M{x:.1} {:.1}L{:.1} {:.1}L{:.1} {:.1}Z\"/>",
                y - 3.2,
                x + 3.0,
                y + 2.4,
                x - 3.0,
                y + 2.4
            ),
            Marker::Diamond => format!(
                "<path class=\"{class}\" d=\"M{x:.1} {:.1}L{:.1} {y:.1}L{x:.1} {:.1}L{:.1} {y:.1}Z\"/>",
                y - 3.2,
                x + 3.2,
                y + 3.2,
                x - 3.2
            ),
        }
    }

    /// A small standalone SVG of the marker (for legends).
    pub fn icon(self, class: &str) -> String {
        format!(
            "<svg class=\"icon\" viewBox=\"0 0 10 10\" width=\"10\" height=\"10\" aria-hidden=\"true\">{}</svg>",
            self.draw(5.0, 5.0, class)
        )
    }
}

/// One series.
pub struct Series {
    /// Legend text.
    pub label: String,
    /// CSS class giving its colour (`s0`..`s3`).
    pub class: String,
    /// Marker.
    pub marker: Marker,
    /// SVG dash pattern, empty for solid.
    pub dash: &'static str,
    /// `node-bearing` of the sensor (for tests and readers).
    pub sensor: String,
    /// (x, y): x in Unix ms (or arrival index), y None where invalid.
    pub points: Vec<(f64, Option<f64>)>,
}

/// Kind of a level line.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum LevelKind {
    /// Baseline.
    Baseline,
    /// Alert level.
    Alert,
    /// Danger level.
    Danger,
}

/// One horizontal level.
pub struct Level {
    /// Kind (style).
    pub kind: LevelKind,
    /// Value.
    pub y: f64,
    /// Tooltip text.
    pub label: String,
}

/// A vertical mark (e.g. a band change).
pub struct Mark {
    /// x (Unix ms or arrival index).
    pub x: f64,
    /// Tooltip and label.
    pub label: String,
}

const W: f64 = 720.0;
const H: f64 = 230.0;
const L: f64 = 52.0;
const R: f64 = 12.0;
const T: f64 = 10.0;
const B: f64 = 34.0;

fn nice_step(span: f64, target: f64) -> f64 {
    let raw = (span / target).max(1e-12);
    let mag = 10f64.powf(raw.log10().floor());
    [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag)
}

/// Time ticks: (value, label).
fn time_ticks(x0: f64, x1: f64) -> Vec<(f64, String)> {
    const HOUR: f64 = 3_600_000.0;
    let span = x1 - x0;
    let step = [
        HOUR,
        3.0 * HOUR,
        6.0 * HOUR,
        12.0 * HOUR,
        24.0 * HOUR,
        48.0 * HOUR,
        168.0 * HOUR,
        720.0 * HOUR,
        2160.0 * HOUR,
    ]
    .iter()
    .copied()
    .find(|s| span / s <= 6.0)
    .unwrap_or(8760.0 * HOUR);
    let mut t = (x0 / step).ceil() * step;
    let mut out = Vec::new();
    while t <= x1 && out.len() < 12 {
        #[allow(clippy::cast_possible_truncation)]
        let ms = t as i64;
        let l = if step >= 24.0 * HOUR {
            clock::day_label(ms)
        } else {
            clock::label(ms)
        };
        out.push((t, l));
        t += step;
    }
    out
}

/// A chart of series against time (`time_axis`) or arrival order.
pub fn series_chart(
    aria: &str,
    y_unit: &str,
    series: &[Series],
    levels: &[Level],
    marks: &[Mark],
    time_axis: bool,
) -> String {
    let xs = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.0))
        .chain(marks.iter().map(|m| m.x));
    let (mut x0, mut x1) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
        (a.min(x), b.max(x))
    });
    let ys = series
        .iter()
        .flat_map(|s| s.points.iter().filter_map(|p| p.1))
        .chain(levels.iter().map(|l| l.y));
    let (mut y0, mut y1) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), y| {
        (a.min(y), b.max(y))
    });
    if !x0.is_finite() {
        return "<p class=\"muted\">No points.</p>".into();
    }
    if x1 <= x0 {
        x0 -= 1.0;
        x1 += 1.0;
    }
    if !y0.is_finite() {
        (y0, y1) = (0.0, 1.0);
    }
    // pad relative to the values: amplitudes in g are thousandths
    let mut pad = ((y1 - y0) * 0.08).max(y0.abs().max(y1.abs()) * 0.05);
    if pad <= 0.0 {
        pad = 0.5;
    }
    y0 -= pad;
    y1 += pad;
    let ystep = nice_step(y1 - y0, 5.0);
    y0 = (y0 / ystep).floor() * ystep;
    y1 = (y1 / ystep).ceil() * ystep;
    let px = |x: f64| L + (x - x0) / (x1 - x0) * (W - L - R);
    let py = |y: f64| T + (y1 - y) / (y1 - y0) * (H - T - B);
    let mut s = String::new();
    let _ = write!(
        s,
        "<svg class=\"chart\" viewBox=\"0 0 {W} {H}\" role=\"img\" aria-label=\"{}\" preserveAspectRatio=\"xMidYMid meet\">",
        esc(aria)
    );
    // grid and axes; tick decimals follow the step (amplitudes in g are
    // thousandths, scores whole dB)
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    let dec = (-ystep.log10().floor()).clamp(0.0, 9.0) as usize;
    let tick = |v: f64| {
        if ystep >= 1.0 {
            trim_num(v)
        } else {
            format!("{v:.dec$}")
        }
    };
    let mut y = y0;
    while y <= y1 + ystep * 0.01 {
        let _ = write!(
            s,
            "<line class=\"grid\" x1=\"{L}\" x2=\"{:.1}\" y1=\"{:.1}\" y2=\"{:.1}\"/><text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
            W - R,
            py(y),
            py(y),
            L - 5.0,
            py(y) + 3.5,
            tick(y)
        );
        y += ystep;
    }
    let ticks: Vec<(f64, String)> = if time_axis {
        time_ticks(x0, x1)
    } else {
        let st = nice_step(x1 - x0, 6.0).max(1.0);
        let mut v = Vec::new();
        let mut t = (x0 / st).ceil() * st;
        while t <= x1 && v.len() < 12 {
            v.push((t, trim_num(t)));
            t += st;
        }
        v
    };
    for (t, l) in &ticks {
        let _ = write!(
            s,
            "<line class=\"grid\" x1=\"{0:.1}\" x2=\"{0:.1}\" y1=\"{T}\" y2=\"{1:.1}\"/><text class=\"tick\" x=\"{0:.1}\" y=\"{2:.1}\" text-anchor=\"middle\">{3}</text>",
            px(*t),
            H - B,
            H - B + 14.0,
            esc(l)
        );
    }
    let _ = write!(
        s,
        "<text class=\"axis\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text><text class=\"axis\" x=\"12\" y=\"{:.1}\" transform=\"rotate(-90 12 {:.1})\" text-anchor=\"middle\">{}</text>",
        (L + W - R) / 2.0,
        H - 4.0,
        if time_axis { "receive time (UTC)" } else { "report (arrival order: no receive times stored)" },
        (T + H - B) / 2.0,
        (T + H - B) / 2.0,
        esc(y_unit)
    );
    for l in levels {
        let class = match l.kind {
            LevelKind::Baseline => "lv-base",
            LevelKind::Alert => "lv-alert",
            LevelKind::Danger => "lv-danger",
        };
        let _ = write!(
            s,
            "<line class=\"{class}\" x1=\"{L}\" x2=\"{:.1}\" y1=\"{:.1}\" y2=\"{:.1}\"><title>{}</title></line>",
            W - R,
            py(l.y),
            py(l.y),
            esc(&l.label)
        );
    }
    for m in marks {
        let _ = write!(
            s,
            "<line class=\"mark\" x1=\"{0:.1}\" x2=\"{0:.1}\" y1=\"{T}\" y2=\"{1:.1}\"><title>{2}</title></line><text class=\"marktxt\" x=\"{3:.1}\" y=\"{4:.1}\">&#9663; band</text>",
            px(m.x),
            H - B,
            esc(&m.label),
            px(m.x) + 2.0,
            T + 9.0
        );
    }
    for se in series {
        // One path per series, broken where a score is invalid.
        let mut d = String::new();
        let mut pen = false;
        let mut valid = 0usize;
        for (x, y) in &se.points {
            match y {
                Some(y) => {
                    let _ = write!(
                        d,
                        "{}{:.1} {:.1}",
                        if pen { "L" } else { "M" },
                        px(*x),
                        py(*y)
                    );
                    pen = true;
                    valid += 1;
                }
                None => pen = false,
            }
        }
        let dash = if se.dash.is_empty() {
            String::new()
        } else {
            format!(" stroke-dasharray=\"{}\"", se.dash)
        };
        let _ = write!(
            s,
            "<g class=\"series\" data-sensor=\"{}\" data-points=\"{}\" data-valid=\"{valid}\"><path class=\"ln {}\" d=\"{d}\"{dash}/>",
            esc(&se.sensor),
            se.points.len(),
            se.class
        );
        // Markers while they stay readable; level lines (`lv-*`) have none.
        if valid <= 400 && !se.class.starts_with("lv-") {
            for (x, y) in &se.points {
                if let Some(y) = y {
                    s.push_str(&se.marker.draw(px(*x), py(*y), &format!("pt {}", se.class)));
                }
            }
        }
        s.push_str("</g>");
    }
    s.push_str("</svg>");
    s
}

/// Short number text.
pub fn trim_num(v: f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{v:.0}")
    } else if v.abs() >= 10.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

/// One bar of the bar chart.
pub struct Bar {
    /// Group label under the bar (e.g. defect kind).
    pub group: String,
    /// Value.
    pub value: f64,
    /// Text above the bar.
    pub note: String,
    /// CSS class.
    pub class: String,
}

/// A horizontal bar chart (one row per bar: reads on a phone too).
pub fn bar_chart(aria: &str, unit: &str, bars: &[Bar]) -> String {
    if bars.is_empty() {
        return "<p class=\"muted\">No amplitudes in the newest report.</p>".into();
    }
    let (w, l, row, top) = (720.0, 150.0, 22.0, 8.0);
    let right = 170.0;
    #[allow(clippy::cast_precision_loss)]
    let h = top + row * bars.len() as f64 + 30.0;
    let vmax = bars
        .iter()
        .map(|x| x.value)
        .fold(0.0f64, f64::max)
        .max(1e-9);
    let step = nice_step(vmax, 4.0);
    let end = (vmax / step).ceil() * step;
    let px = |v: f64| l + v / end * (w - l - right);
    let mut s = format!(
        "<svg class=\"chart bars\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"{}\">",
        esc(aria)
    );
    let mut v = 0.0;
    while v <= end + step * 0.01 {
        let _ = write!(
            s,
            "<line class=\"grid\" x1=\"{0:.1}\" x2=\"{0:.1}\" y1=\"{top}\" y2=\"{1:.1}\"/><text class=\"tick\" x=\"{0:.1}\" y=\"{2:.1}\" text-anchor=\"middle\">{3}</text>",
            px(v),
            h - 26.0,
            h - 14.0,
            trim_num(v)
        );
        v += step;
    }
    for (i, bar) in bars.iter().enumerate() {
        #[allow(clippy::cast_precision_loss)]
        let y = top + row * i as f64;
        let _ = write!(
            s,
            "<text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text><rect class=\"bar {}\" x=\"{l}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\"><title>{}: {}</title></rect><text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\">{}</text>",
            l - 6.0,
            y + row * 0.65,
            esc(&bar.group),
            bar.class,
            y + 3.0,
            (px(bar.value) - l).max(0.5),
            row - 6.0,
            esc(&bar.group),
            esc(&bar.note),
            px(bar.value) + 5.0,
            y + row * 0.65,
            esc(&bar.note)
        );
    }
    let _ = write!(
        s,
        "<text class=\"axis\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text></svg>",
        (l + w - right) / 2.0,
        h - 2.0,
        esc(unit)
    );
    s
}
