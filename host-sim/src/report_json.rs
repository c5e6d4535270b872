//! The JSON form of a report (a contract outside scripts rely on: extend it,
//! do not break it).
//!
//! Top level: `speed_rpm` (mean tach-shaft speed) and `bearings`, a list of
//! `{ "name", "defects": [ { "kind": "BPFO" | "BPFI" | "FTF" | "BSF",
//! "order", "detected", "score_db", ... } ] }`. A rolling-element defect,
//! searched at 2 x BSF, is reported under kind "BSF" with `order` the watched
//! line (2 x BSF) and `bsf_order` the single-sided ball spin order. Everything
//! else (`flags`, `overall`, `speed`, per-harmonic detail) is added beside it.

use dsp_core::diagnosis::defects::DefectResult;
use dsp_core::diagnosis::kinematics::DefectKind;
use dsp_core::overall::velocity::{zone_limits, MachineGroup, Support, Zone};
use dsp_core::report::Report;
use serde_json::{json, Value};

/// Version of this JSON layout (bumped only for incompatible changes).
pub const JSON_VERSION: u32 = 1;

fn finite(x: f32) -> Value {
    if x.is_finite() {
        json!(f64::from(x))
    } else {
        Value::Null
    }
}

fn defect_json(
    kind: DefectKind,
    line_order: f32,
    r: Option<&DefectResult>,
    not_searched: Option<String>,
) -> Value {
    let searched = r.is_some_and(DefectResult::searched);
    let mut v = json!({
        "kind": kind.name(),
        "order": finite(line_order),
        "detected": r.is_some_and(|r| r.detected),
        "score_db": r.map_or(json!(0.0), |r| finite(r.score_db)),
        "searched": searched,
        // Why not searched (null when searched): never read as "not detected".
        "not_searched": if searched {
            Value::Null
        } else {
            json!(not_searched.unwrap_or_else(|| "no harmonic window fits the spectrum".into()))
        },
        "amplitude_g": r.map_or(Value::Null, |r| finite(r.amplitude_sum())),
        "sidebands": r.map_or(0, |r| r.sidebands),
        "margin_db": r.and_then(DefectResult::margin_db).map_or(Value::Null, finite),
    });
    let Some(obj) = v.as_object_mut() else {
        return v;
    };
    if kind == DefectKind::Bsf {
        obj.insert("bsf_order".into(), finite(0.5 * line_order));
    }
    if let Some(r) = r {
        obj.insert("amplitude".into(), finite(r.fundamental_amplitude));
        obj.insert("harmonics_found".into(), json!(r.harmonics_found));
        obj.insert("harmonics_searched".into(), json!(r.harmonics_searched));
        obj.insert(
            "sideband_db".into(),
            r.sideband_db.map_or(Value::Null, finite),
        );
        obj.insert(
            "harmonics".into(),
            Value::Array(
                r.harmonics
                    .iter()
                    .map(|h| {
                        json!({
                            "h": h.harmonic,
                            "expected_order": finite(h.expected_order),
                            "found_order": finite(h.found_order),
                            "amplitude": finite(h.amplitude),
                            "floor": finite(h.floor),
                            "prominence_db": finite(h.prominence_db),
                            "searched": h.searched,
                            "found": h.found,
                            "counted": h.counted,
                            "shared_with": h.shared_with.map(|k| k.name()),
                        })
                    })
                    .collect(),
            ),
        );
    }
    v
}

/// The report as JSON; `file` names the recording when there is one.
pub fn to_json(report: &Report, file: Option<&str>) -> Value {
    let s = &report.speed;
    let o = &report.overall;
    let bearings: Vec<Value> = report
        .bearings
        .iter()
        .map(|b| {
            let why = b.not_searched(report.analysed());
            let defects: Vec<Value> = DefectKind::ALL
                .iter()
                .map(|&k| {
                    let r = b.diagnosis.as_ref().and_then(|d| d.get(k));
                    defect_json(k, b.orders.line(k), r, why.map(|w| w.to_string()))
                })
                .collect();
            let pass = b.coverage.ok();
            let pass_info = pass.and_then(|p| report.passes.iter().find(|q| q.pass == p));
            json!({
                "name": b.name.as_str(),
                "shaft_order": finite(b.orders.shaft_order()),
                "pass": pass,
                "samples_per_rev": pass_info.map(|q| q.samples_per_rev),
                "orders_per_bin": pass_info.map_or(Value::Null, |q| finite(q.orders_per_bin)),
                "not_searched": why.map(|w| w.to_string()),
                "defects": defects,
            })
        })
        .collect();
    json!({
        "envord_json": JSON_VERSION,
        "file": file,
        "speed_rpm": finite(s.mean_rpm),
        "speed": {
            "mean_rpm": finite(s.mean_rpm),
            "min_rpm": finite(s.min_rpm),
            "max_rpm": finite(s.max_rpm),
            "revolutions": s.revs,
            "good_revolutions": s.good_revs,
            "missing_pulses": s.missing_pulses,
            "extra_pulses": s.extra_pulses,
            "constant_speed": s.constant_speed,
        },
        "flags": report.flags.names().collect::<Vec<_>>(),
        "analysed": report.analysed(),
        "overall": {
            "samples": o.count,
            "mean_g": finite(o.mean),
            "rms_g": finite(o.rms_ac),
            "peak_g": finite(o.peak),
            "peak_to_peak_g": finite(o.peak_to_peak),
            "crest_factor": finite(o.crest_factor),
            "kurtosis": finite(o.kurtosis),
            "clipped_samples": o.clipped,
            "non_finite_samples": o.non_finite,
            "velocity_rms_mm_s": finite(o.velocity_rms_mm_s),
            "iso20816_zone": o.zone.map(|z| format!("{z:?}")),
        },
        "envelope": {
            "band_hz": [finite(report.band_hz[0]), finite(report.band_hz[1])],
            "rectifier": match report.rectifier {
                dsp_core::frontend::rectify::Rectifier::Abs => "abs",
                dsp_core::frontend::rectify::Rectifier::Square => "square",
            },
            "amplitude_unit": match report.rectifier {
                dsp_core::frontend::rectify::Rectifier::Abs => "g",
                dsp_core::frontend::rectify::Rectifier::Square => "g^2",
            },
            "decimation": report.decimation,
            "samples_per_rev": report.samples_per_rev,
            "segments": report.segments,
            "revolutions": report.revolutions,
            "orders_per_bin": finite(report.orders_per_bin),
            "max_search_order": finite(report.max_search_order),
            // Set to true by `envord analyze` when the band survey chose the band.
            "band_auto": false,
        },
        "bearings": bearings,
        "passes": report
            .passes
            .iter()
            .map(|p| {
                json!({
                    "pass": p.pass,
                    "samples_per_rev": p.samples_per_rev,
                    "segments": p.segments,
                    "revolutions": p.revolutions,
                    "orders_per_bin": finite(p.orders_per_bin),
                    "max_search_order": finite(p.max_search_order),
                    "decimation": p.decimation,
                    "mean_rpm": finite(p.mean_rpm),
                    "flags": p.flags.names().collect::<Vec<_>>(),
                })
            })
            .collect::<Vec<_>>(),
        "lines": report
            .lines
            .iter()
            .map(|l| {
                let m = &l.measurement;
                json!({
                    "name": l.name.as_str(),
                    "kind": "mesh",
                    "order": finite(m.order),
                    "searched": m.searched,
                    "found_order": finite(m.found_order),
                    "amplitude": finite(m.amplitude),
                    "floor": finite(m.floor),
                    "prominence_db": finite(m.prominence_db),
                })
            })
            .collect::<Vec<_>>(),
    })
}

/// What an ISO 20816-3 evaluation zone means (the standard's zone
/// descriptions in our words).
pub fn zone_meaning(z: Zone) -> &'static str {
    match z {
        Zone::A => "typical of newly commissioned machines",
        Zone::B => "acceptable for unrestricted long-term operation",
        Zone::C => {
            "not acceptable for long-term continuous operation; run only until a planned repair"
        }
        Zone::D => "severe enough to cause damage",
    }
}

/// The zone limits of a machine group and support, in words, with the
/// caveat that they are from memory (docs/sources-to-verify.md).
pub fn zone_limits_text(group: MachineGroup, support: Support) -> String {
    let [ab, bc, cd] = zone_limits(group, support);
    let g = match group {
        MachineGroup::Large => 1,
        MachineGroup::Medium => 2,
    };
    let sup = match support {
        Support::Rigid => "rigid",
        Support::Flexible => "flexible",
    };
    format!(
        "group {g}, {sup} support: A up to {ab}, B up to {bc}, C up to {cd} mm/s rms, D above \
         (limits from memory, to be verified: docs/sources-to-verify.md)"
    )
}

/// The overall line's zone, worded alike by `analyze`, `batch` and `demo`.
pub fn zone_label(z: Zone) -> String {
    format!("ISO 20816-3 zone {z:?}")
}

/// A short human table of a report; `group` and `support` are the
/// point's, for the meaning of the zone.
pub fn to_table(report: &Report, group: MachineGroup, support: Support) -> String {
    use std::fmt::Write;
    let mut out = String::new();
    let s = &report.speed;
    let o = &report.overall;
    let _ = writeln!(
        out,
        "speed      {:.1} rpm (min {:.1}, max {:.1}) over {} revolutions{}",
        s.mean_rpm,
        s.min_rpm,
        s.max_rpm,
        s.revs,
        if s.constant_speed { " [constant]" } else { "" }
    );
    let _ = writeln!(out, "quality    {}", report.flags);
    let _ = writeln!(
        out,
        "overall    rms {:.3} g, peak {:.3} g, crest {:.2}, kurtosis {:.2}, velocity {:.2} mm/s{}",
        o.rms_ac,
        o.peak,
        o.crest_factor,
        o.kurtosis,
        o.velocity_rms_mm_s,
        o.zone
            .map(|z| format!(" ({})", zone_label(z)))
            .unwrap_or_default()
    );
    if let Some(z) = o.zone {
        let _ = writeln!(
            out,
            "zone {z:?}     {}; {}",
            zone_meaning(z),
            zone_limits_text(group, support)
        );
    }
    let _ = writeln!(
        out,
        "envelope   {:.0}-{:.0} Hz, decimation {}, {} segments, {:.4} orders/bin",
        report.band_hz[0],
        report.band_hz[1],
        report.decimation,
        report.segments,
        report.orders_per_bin
    );
    if !report.analysed() {
        let _ = writeln!(out, "defects    not evaluated: record not analysable");
    }
    let _ = writeln!(
        out,
        "{:<16} {:<5} {:>8} {:>9} {:>5} {:>10} {:>10}  detected",
        "bearing",
        "kind",
        "order",
        "score dB",
        "harm",
        match report.rectifier {
            dsp_core::frontend::rectify::Rectifier::Abs => "1x amp g",
            dsp_core::frontend::rectify::Rectifier::Square => "1x amp g^2",
        },
        match report.rectifier {
            dsp_core::frontend::rectify::Rectifier::Abs => "sum amp g",
            dsp_core::frontend::rectify::Rectifier::Square => "sum g^2",
        }
    );
    for b in &report.bearings {
        let why = b.not_searched(report.analysed());
        for k in DefectKind::ALL {
            let r = b.diagnosis.as_ref().and_then(|d| d.get(k));
            if !r.is_some_and(DefectResult::searched) {
                let _ = writeln!(
                    out,
                    "{:<16} {:<5} {:>8.3}  NOT SEARCHED: {}",
                    b.name.as_str(),
                    k.name(),
                    b.orders.line(k),
                    why.map_or_else(
                        || "no harmonic window fits the spectrum".to_string(),
                        |w| w.to_string()
                    )
                );
                continue;
            }
            let _ = writeln!(
                out,
                "{:<16} {:<5} {:>8.3} {:>9} {:>5} {:>10} {:>10}  {}",
                b.name.as_str(),
                k.name(),
                b.orders.line(k),
                r.map_or("-".into(), |r| format!("{:.1}", r.score_db)),
                r.map_or("-".into(), |r| format!(
                    "{}/{}",
                    r.harmonics_found, r.harmonics_searched
                )),
                r.map_or("-".into(), |r| format!("{:.2e}", r.fundamental_amplitude)),
                r.map_or("-".into(), |r| format!("{:.2e}", r.amplitude_sum())),
                if r.is_some_and(|r| r.detected) {
                    "YES"
                } else {
                    "no"
                }
            );
        }
    }
    for l in &report.lines {
        let m = &l.measurement;
        let _ = writeln!(
            out,
            "{:<16} {:<5} {:>8.3} {:>9}  (gear mesh, watched line)",
            l.name.as_str(),
            "MESH",
            m.order,
            if m.searched {
                format!("{:.1}", m.prominence_db)
            } else {
                "-".into()
            },
        );
    }
    out
}
