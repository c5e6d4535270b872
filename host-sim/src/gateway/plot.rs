//! A small hand-written SVG line plot of scores over arrival order.

use std::fmt::Write;

/// One line of the plot.
pub struct Series<'a> {
    /// Legend label.
    pub label: &'a str,
    /// (x, y) points; y None leaves a break.
    pub points: Vec<(f64, Option<f64>)>,
    /// SVG colour.
    pub colour: &'a str,
}

/// Renders series plus horizontal level lines (label, value, colour) as SVG.
pub fn svg(
    title: &str,
    x_label: &str,
    series: &[Series<'_>],
    levels: &[(&str, f64, &str)],
) -> String {
    let (w, h, ml, mr, mt, mb) = (800.0, 400.0, 60.0, 130.0, 40.0, 50.0);
    let xs = series.iter().flat_map(|s| s.points.iter().map(|p| p.0));
    let (x0, x1) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
        (a.min(x), b.max(x))
    });
    let ys = series
        .iter()
        .flat_map(|s| s.points.iter().filter_map(|p| p.1))
        .chain(levels.iter().map(|l| l.1));
    let (y0, y1) = ys.fold((0.0f64, 10.0f64), |(a, b), y| (a.min(y), b.max(y)));
    let (x0, x1) = if x0.is_finite() && x1 > x0 {
        (x0, x1)
    } else {
        (0.0, 1.0)
    };
    let y1 = y1 + 2.0;
    let px = |x: f64| ml + (x - x0) / (x1 - x0) * (w - ml - mr);
    let py = |y: f64| h - mb - (y - y0) / (y1 - y0) * (h - mt - mb);
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif" font-size="12">"#
    );
    let _ = writeln!(s, r#"<rect width="{w}" height="{h}" fill="white"/>"#);
    let _ = writeln!(
        s,
        r#"<text x="{ml}" y="24" font-size="14">{}</text>"#,
        escape(title)
    );
    let _ = writeln!(
        s,
        r#"<line x1="{ml}" y1="{}" x2="{}" y2="{}" stroke="black"/>"#,
        h - mb,
        w - mr,
        h - mb
    );
    let _ = writeln!(
        s,
        r#"<line x1="{ml}" y1="{mt}" x2="{ml}" y2="{}" stroke="black"/>"#,
        h - mb
    );
    for i in 0..=5 {
        let y = y0 + (y1 - y0) * f64::from(i) / 5.0;
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{:.1}" text-anchor="end">{y:.0}</text>"#,
            ml - 6.0,
            py(y) + 4.0
        );
    }
    let _ = writeln!(
        s,
        r#"<text x="14" y="{:.1}" transform="rotate(-90 14 {:.1})">score (dB)</text>"#,
        h / 2.0,
        h / 2.0
    );
    let _ = writeln!(
        s,
        r#"<text x="{:.1}" y="{}" text-anchor="middle">{}</text>"#,
        (ml + w - mr) / 2.0,
        h - 12.0,
        escape(x_label)
    );
    let _ = writeln!(
        s,
        r#"<text x="{ml}" y="{}">{x0:.0}</text><text x="{}" y="{}" text-anchor="end">{x1:.0}</text>"#,
        h - mb + 16.0,
        w - mr,
        h - mb + 16.0
    );
    for (label, v, colour) in levels {
        let _ = writeln!(
            s,
            r#"<line class="level" x1="{ml}" y1="{:.1}" x2="{}" y2="{:.1}" stroke="{colour}" stroke-dasharray="6 4"/><text x="{}" y="{:.1}" fill="{colour}">{} {v:.1}</text>"#,
            py(*v),
            w - mr,
            py(*v),
            w - mr + 4.0,
            py(*v) + 4.0,
            escape(label)
        );
    }
    for (i, ser) in series.iter().enumerate() {
        // Each unbroken run of points is one polyline.
        let mut run: Vec<String> = Vec::new();
        let flush = |run: &mut Vec<String>, s: &mut String| {
            if !run.is_empty() {
                let _ = writeln!(
                    s,
                    r#"<polyline class="series" fill="none" stroke="{}" stroke-width="1.5" points="{}"/>"#,
                    ser.colour,
                    run.join(" ")
                );
                run.clear();
            }
        };
        for (x, y) in &ser.points {
            match y {
                Some(y) => run.push(format!("{:.1},{:.1}", px(*x), py(*y))),
                None => flush(&mut run, &mut s),
            }
        }
        flush(&mut run, &mut s);
        let ly = mt + 16.0 * f64::from(u32::try_from(i).unwrap_or(0));
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{ly:.1}" fill="{}">{}</text>"#,
            w - mr + 4.0,
            ser.colour,
            escape(ser.label)
        );
    }
    s.push_str("</svg>\n");
    s
}

fn escape(t: &str) -> String {
    t.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}
