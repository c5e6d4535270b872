//! Layout of the plots, checked on the SVG text and rectangle positions:
//! cursor labels of the spectrum plot neither overlap nor run past the
//! right edge, the colours have a legend, the speed panel of a constant
//! speed has a sensible span with whole-rpm ticks, and the score plot's file
//! labels sit under their bars.
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_precision_loss,
    clippy::cast_possible_truncation
)]

use std::path::PathBuf;

use dsp_core::config::{PointConfig, SpeedInput};
use host_sim::analysis::{run, Accel, Record};
use host_sim::plot::{order_spectrum, scores, ScoreRow};

/// One `<text>` element of an SVG written by plotters.
#[derive(Debug)]
struct SvgText {
    x: f64,
    y: f64,
    size: f64,
    fill: String,
    rotated: bool,
    text: String,
}

fn attr(tag: &str, name: &str) -> Option<String> {
    let key = format!(" {name}=\"");
    let i = tag.find(&key)? + key.len();
    let j = tag[i..].find('"')? + i;
    Some(tag[i..j].to_string())
}

fn texts(svg: &str) -> Vec<SvgText> {
    let mut out = Vec::new();
    let mut rest = svg;
    while let Some(i) = rest.find("<text ") {
        let after = &rest[i..];
        let close = after.find('>').unwrap();
        let tag = &after[..close];
        let end = after.find("</text>").unwrap();
        let text = after[close + 1..end].trim().to_string();
        out.push(SvgText {
            x: attr(tag, "x").unwrap().parse().unwrap(),
            y: attr(tag, "y").unwrap().parse().unwrap(),
            size: attr(tag, "font-size").unwrap().parse().unwrap(),
            fill: attr(tag, "fill").unwrap_or_default(),
            rotated: tag.contains("rotate(90"),
            text,
        });
        rest = &after[end..];
    }
    out
}

fn rects(svg: &str) -> Vec<(f64, f64, f64, f64, String)> {
    let mut out = Vec::new();
    let mut rest = svg;
    while let Some(i) = rest.find("<rect ") {
        let after = &rest[i..];
        let tag = &after[..after.find('>').unwrap()];
        let num = |n: &str| attr(tag, n).unwrap().parse::<f64>().unwrap();
        out.push((
            num("x"),
            num("y"),
            num("width"),
            num("height"),
            attr(tag, "fill").unwrap_or_default(),
        ));
        rest = &after[1..];
    }
    out
}

fn tmp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("envord_plot_layout_{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d.join(name)
}

/// The kind colours of the spectrum plot (BPFO, BPFI, FTF, BSF).
const KIND_FILLS: [&str; 4] = ["#C82828", "#1E64C8", "#28963C", "#AA5A0A"];

/// The demo record has a detected outer-race defect with ten harmonics and
/// twelve watched fundamentals crowded below order 6: the worst case for
/// label piling.
#[test]
fn spectrum_cursor_labels_do_not_overlap_or_clip() {
    let a = host_sim::cmd_demo::demo_analysis(host_sim::cmd_demo::DEMO_SEED).unwrap();
    let p = tmp("demo-spectrum.svg");
    order_spectrum(&p, &a, "layout test").unwrap();
    let svg = std::fs::read_to_string(&p).unwrap();
    let labels: Vec<SvgText> = texts(&svg)
        .into_iter()
        .filter(|t| (t.size - 11.0 / 1.24).abs() < 0.01 && KIND_FILLS.contains(&t.fill.as_str()))
        .collect();
    assert!(labels.len() >= 10, "labels: {labels:?}");
    // Every detected harmonic of the demo's inter-de BPFO is labelled.
    for h in 1..=10 {
        let want = format!("inter-de BPFOx{h}");
        assert!(
            labels.iter().any(|t| t.text == want),
            "no label {want}: {labels:?}"
        );
    }
    // Boxes: the width at 0.55 em per character of the SVG font size (about
    // DejaVu Sans's average advance) and a 10 px line height.
    let boxes: Vec<(f64, f64, f64, &str)> = labels
        .iter()
        .map(|t| {
            (
                t.x,
                t.x + 0.55 * t.size * t.text.len() as f64,
                t.y,
                t.text.as_str(),
            )
        })
        .collect();
    for (i, a) in boxes.iter().enumerate() {
        assert!(
            a.1 <= 1200.0,
            "label {} runs past the right edge: {a:?}",
            a.3
        );
        assert!(a.0 >= 0.0, "label {} starts left of the image: {a:?}", a.3);
        for b in boxes.iter().skip(i + 1) {
            let same_row = (a.2 - b.2).abs() < 10.0;
            let overlap = a.0 < b.1 && b.0 < a.1;
            assert!(!(same_row && overlap), "labels overlap: {a:?} and {b:?}");
        }
    }
    // The legend names each colour.
    for name in [
        "BPFO (outer race)",
        "BPFI (inner race)",
        "FTF (cage)",
        "BSF (ball)",
    ] {
        assert!(
            texts(&svg).iter().any(|t| t.text.contains(name)),
            "legend lacks {name}"
        );
    }
}

/// A constant speed (the tracker's estimate varies by a few thousandths of
/// an rpm) must not be magnified into a sawtooth with ticks like
/// "1480.01501": the speed axis spans at least 10 rpm, ticks are whole rpm.
#[test]
fn speed_panel_of_a_constant_speed_has_round_ticks_and_a_sensible_span() {
    let fs = 25_600.0f32;
    let x: Vec<f32> = (0..(fs as usize) * 12)
        .map(|k| 0.02 * (((k as u32).wrapping_mul(2_654_435_761) >> 16) as f32 / 65_536.0 - 0.5))
        .collect();
    let mut point = PointConfig::default();
    point.speed = SpeedInput::Constant { rpm: 1480.0 };
    point.band_hz = Some([3000.0, 6000.0]);
    let mut a = run(
        &point,
        &Record {
            sample_rate_hz: fs,
            accel: Accel::G(x),
            edges_s: None,
        },
    )
    .unwrap();
    // the wobble of a measured constant speed
    for (i, v) in a.speed_series.iter_mut().enumerate() {
        *v = 1480.0 + 0.015 * ((i % 7) as f32 - 3.0) / 3.0;
    }
    let p = tmp("constant-speed.svg");
    order_spectrum(&p, &a, "constant").unwrap();
    let svg = std::fs::read_to_string(&p).unwrap();
    // y-axis tick labels of the speed panel: left of the plot, lower third
    let ticks: Vec<SvgText> = texts(&svg)
        .into_iter()
        .filter(|t| t.y > 600.0 && t.x < 92.0 && t.text.parse::<f64>().is_ok() && !t.rotated)
        .collect();
    assert!(ticks.len() >= 2, "{ticks:?}");
    for t in &ticks {
        assert!(!t.text.contains('.'), "tick {} is not whole rpm", t.text);
    }
    let v: Vec<f64> = ticks.iter().map(|t| t.text.parse().unwrap()).collect();
    let span =
        v.iter().copied().fold(f64::MIN, f64::max) - v.iter().copied().fold(f64::MAX, f64::min);
    assert!(span >= 5.0, "speed ticks span only {span} rpm: {v:?}");
}

/// Each file label of the score plot is centred under its group of four
/// bars (it was drawn at the group's left edge).
#[test]
fn score_plot_labels_sit_under_their_bars() {
    let rows: Vec<ScoreRow> = (0..6)
        .map(|i| ScoreRow {
            label: format!("record-{i}.wav"),
            scores: [12.0 + i as f32, 3.0, 8.0, 15.0],
        })
        .collect();
    let p = tmp("scores.svg");
    scores(&p, &rows, "layout").unwrap();
    let svg = std::fs::read_to_string(&p).unwrap();
    let bars: Vec<_> = rects(&svg)
        .into_iter()
        .filter(|r| KIND_FILLS.contains(&r.4.as_str()) && r.3 > 0.0)
        .collect();
    assert_eq!(bars.len(), 6 * 4, "{bars:?}");
    let mut centres: Vec<f64> = bars
        .chunks(4)
        .map(|g| {
            let l = g.iter().map(|r| r.0).fold(f64::MAX, f64::min);
            let r = g.iter().map(|r| r.0 + r.2).fold(f64::MIN, f64::max);
            0.5 * (l + r)
        })
        .collect();
    centres.sort_by(f64::total_cmp);
    for (i, c) in centres.iter().enumerate() {
        let name = format!("record-{i}.wav");
        let t = texts(&svg)
            .into_iter()
            .find(|t| t.text == name)
            .unwrap_or_else(|| panic!("no label {name}"));
        assert!(t.rotated, "{t:?}");
        // rotated text centred on x (dominant baseline at its middle)
        assert!(
            (t.x - c).abs() <= 3.0,
            "label {name} at x {} but its bars centre at {c}",
            t.x
        );
    }
}
