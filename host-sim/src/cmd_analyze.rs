//! `envord analyze`: run the node's core on a recording and print its report.

use std::path::{Path, PathBuf};

use clap::Args;
use dsp_core::config::{PointConfig, SpeedInput};

use crate::analysis::{edges_from_channel, run, Accel, Analysis, Record};
use crate::edges_csv::read_edges_csv;
use crate::error::CliError;
use crate::report_json::{to_json, to_table};
use crate::wav::{read_wav, ReadOptions, SampleFormat};

/// Arguments of `envord analyze`.
#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// Recording (WAV: int16, int24, int32 or float32; one or more channels).
    pub recording: PathBuf,
    /// Measuring point (TOML point file).
    #[arg(long)]
    pub point: PathBuf,
    /// Known constant speed of the tach shaft, rpm (no tach needed; not
    /// together with a tach).
    #[arg(long, allow_negative_numbers = true, conflicts_with_all = ["tach_channel", "tach"])]
    pub rpm: Option<f32>,
    /// Channel holding the acceleration (0-based).
    #[arg(long, default_value_t = 0)]
    pub channel: usize,
    /// Channel holding a digitised tach pulse (0-based).
    #[arg(long, conflicts_with = "tach")]
    pub tach_channel: Option<usize>,
    /// Tach edges as CSV (`time_s` or `sample` column).
    #[arg(long)]
    pub tach: Option<PathBuf>,
    /// Print the report as JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Write a plot of the envelope order spectrum (SVG, or PNG by extension).
    #[arg(long)]
    pub plot: Option<PathBuf>,
    /// Print only the radio frame the node would send, as hex (node id and
    /// sequence number from --node-id and --seq).
    #[arg(long)]
    pub frame_hex: bool,
    /// Node id written into the frame.
    #[arg(long, default_value_t = 0)]
    pub node_id: u16,
    /// Sequence number written into the frame.
    #[arg(long, default_value_t = 0)]
    pub seq: u16,
}

/// The node's radio frame for a report, as lower-case hex.
pub fn frame_hex(
    report: &dsp_core::report::Report,
    node_id: u16,
    seq: u16,
) -> Result<String, CliError> {
    let most = wire::frame::layout::MAX_BEARINGS;
    if report.bearings.len() > most {
        // The frame would silently carry only the first bearings.
        return Err(CliError::Other(format!(
            "frame: the point watches {} bearings; radio frame format {} carries at most {most}: \
             split the point into points of at most {most} bearings for the node",
            report.bearings.len(),
            wire::frame::layout::FORMAT_VERSION_2
        )));
    }
    let fr = wire::frame::FrameReport::from_report(report, node_id, seq);
    let mut buf = [0u8; 256];
    let n =
        wire::frame::encode(&fr, &mut buf).map_err(|e| CliError::Other(format!("frame: {e}")))?;
    Ok(buf.iter().take(n).map(|b| format!("{b:02x}")).collect())
}

/// The slowest LoRaWAN EU868 data rate whose maximum application payload
/// holds `bytes`: DR0-DR2 51 bytes, DR3 115, DR4-DR7 222 (LoRaWAN Regional
/// Parameters RP002-1.0.x, maximum payload without FOpts; from memory of
/// the document). `None` above 222 bytes.
pub fn slowest_eu868_rate(bytes: usize) -> Option<&'static str> {
    match bytes {
        0..=51 => Some("DR0 (SF12/125 kHz)"),
        52..=115 => Some("DR3 (SF9/125 kHz)"),
        116..=222 => Some("DR4 (SF8/125 kHz)"),
        _ => None,
    }
}

/// Loads a recording as the node would see it.
pub fn load_record(
    path: &Path,
    channel: usize,
    tach_channel: Option<usize>,
    tach_csv: Option<&Path>,
) -> Result<Record, CliError> {
    let wav =
        read_wav(path, ReadOptions::strict()).map_err(|e| CliError::input(path.display(), e))?;
    let n_ch = wav.channels.len();
    let pick = |c: usize, what: &str| {
        if c >= n_ch {
            Err(CliError::input(
                path.display(),
                format!("{what} {c} does not exist: the file has {n_ch} channel(s)"),
            ))
        } else {
            Ok(c)
        }
    };
    let ch = pick(channel, "--channel")?;
    let fs = wav.info.sample_rate;
    #[allow(clippy::cast_precision_loss)]
    let fs_f = fs as f32;
    if wav.channels.get(ch).is_none_or(Vec::is_empty) {
        return Err(CliError::input(
            path.display(),
            "the recording has no samples",
        ));
    }
    let edges_s = match (tach_channel, tach_csv) {
        (Some(t), _) => {
            let t = pick(t, "--tach-channel")?;
            let tach = wav.channels.get(t).map_or(&[][..], Vec::as_slice);
            Some(edges_from_channel(tach, fs_f).map_err(|e| CliError::input(path.display(), e))?)
        }
        (None, Some(csv)) => {
            let e = read_edges_csv(csv).map_err(|e| CliError::input(csv.display(), e))?;
            Some(e.to_seconds(f64::from(fs)))
        }
        (None, None) => None,
    };
    // The channel is moved out of the decoded file, not copied.
    let format = wav.info.format;
    let accel = match (wav.raw_i16, format) {
        (Some(raw), SampleFormat::Int16) => {
            Accel::Counts(raw.into_iter().nth(ch).unwrap_or_default())
        }
        _ => Accel::G(wav.channels.into_iter().nth(ch).unwrap_or_default()),
    };
    Ok(Record {
        sample_rate_hz: fs_f,
        accel,
        edges_s,
    })
}

/// Speeds `--rpm` accepts, rpm.
pub const RPM_RANGE: [f32; 2] = [1.0, 100_000.0];

/// Applies `--rpm` to a point, or checks that a tach is given when the point expects one.
pub fn speed_for(
    mut point: PointConfig,
    rpm: Option<f32>,
    has_tach: bool,
    source: &Path,
) -> Result<PointConfig, CliError> {
    if let Some(rpm) = rpm {
        let [lo, hi] = RPM_RANGE;
        if !(rpm.is_finite() && (lo..=hi).contains(&rpm)) {
            return Err(CliError::input(
                format!("--rpm {rpm}"),
                format!(
                    "give the tach shaft's speed in revolutions per minute, from {lo} to {hi} \
                     (for example --rpm 1480)"
                ),
            ));
        }
        if has_tach {
            return Err(CliError::input(
                format!("--rpm {rpm}"),
                "give either --rpm or a tach (--tach-channel / --tach), not both",
            ));
        }
        point.speed = SpeedInput::Constant { rpm };
        if !(point.min_rpm..=point.max_rpm).contains(&rpm) {
            // Outside the point's plausible range: the constant speed is
            // the range (a wider span could exceed the resampler's 16:1).
            point.min_rpm = rpm;
            point.max_rpm = rpm;
        }
    } else if matches!(point.speed, SpeedInput::Tach { .. }) && !has_tach {
        return Err(CliError::input(
            source.display(),
            "the point expects a tach: give --tach-channel N, --tach edges.csv or --rpm R",
        ));
    }
    Ok(point)
}

/// Loads the point and recording of `args` and analyses them.
pub fn analyze(args: &AnalyzeArgs) -> Result<Analysis, CliError> {
    analyze_auto(args).map(|(a, _)| a)
}

/// As [`analyze`]; when the point file gives no `[envelope] band_hz`, the
/// band survey ([`dsp_core::survey`]) runs on the record first and its
/// choice (returned beside the analysis) sets the band.
pub fn analyze_auto(
    args: &AnalyzeArgs,
) -> Result<(Analysis, Option<dsp_core::survey::SurveyResult>), CliError> {
    let point = crate::point::load(&args.point)?;
    // One configuration: what is analysed here can be sent to the node.
    wire::point::check_sendable(&point).map_err(|e| {
        CliError::input(
            args.point.display(),
            format!("{e}; the node could not be sent this point, so it is not analysed"),
        )
    })?;
    let rec = load_record(
        &args.recording,
        args.channel,
        args.tach_channel,
        args.tach.as_deref(),
    )?;
    let point = speed_for(point, args.rpm, rec.edges_s.is_some(), &args.recording)?;
    analyze_record(&args.recording, point, &rec)
}

/// One recording with one point, as `analyze` and `batch` both run it: the
/// band survey when the point has no band ([`crate::analysis::choose_band`],
/// the node's commissioning rule), then the node pipeline. Bad input
/// (including an impossible sample rate in the file's header) names `path`.
pub fn analyze_record(
    path: &Path,
    mut point: PointConfig,
    rec: &Record,
) -> Result<(Analysis, Option<dsp_core::survey::SurveyResult>), CliError> {
    crate::analysis::check_sample_rate(rec.sample_rate_hz)
        .map_err(|m| CliError::input(path.display(), m))?;
    let survey = crate::analysis::choose_band(&mut point, rec)
        .map_err(|e| CliError::input(path.display(), format!("band survey: {e}")))?;
    let a = run(&point, rec).map_err(|e| match e {
        CliError::Input(m) => CliError::input(path.display(), m),
        other => other,
    })?;
    Ok((a, survey))
}

/// Marks in a report's JSON whether the band survey chose the band, and
/// its spectral kurtosis.
pub fn mark_band_choice(
    v: &mut serde_json::Value,
    survey: Option<&dsp_core::survey::SurveyResult>,
) {
    if let Some(env) = v.get_mut("envelope").and_then(|e| e.as_object_mut()) {
        env.insert("band_auto".into(), serde_json::json!(survey.is_some()));
        if let Some(r) = survey {
            env.insert(
                "band_kurtosis".into(),
                serde_json::json!(f64::from(r.kurtosis)),
            );
        }
    }
}

/// The point's coinciding lines of different bearings
/// ([`PointConfig::line_coincidences`]), as text for the table and as JSON.
pub fn coincidences(point: &PointConfig) -> (Vec<String>, serde_json::Value) {
    let name = |i: u8| {
        point
            .bearings
            .get(usize::from(i))
            .map_or_else(|| format!("#{i}"), |b| b.name.to_string())
    };
    let kind = |k: dsp_core::diagnosis::kinematics::DefectKind| match k {
        dsp_core::diagnosis::kinematics::DefectKind::Bsf => "2xBSF",
        other => other.name(),
    };
    let list = point.line_coincidences();
    let text = list
        .iter()
        .map(|c| {
            format!(
                "caution: {} {} h{} ({:.3}) and {} {} h{} ({:.3}) lie within the {:.0} % slip \
                 window: a detection there may belong to either bearing",
                name(c.bearings[0]),
                kind(c.kinds[0]),
                c.harmonics[0],
                c.orders[0],
                name(c.bearings[1]),
                kind(c.kinds[1]),
                c.harmonics[1],
                c.orders[1],
                100.0 * point.search.slip_tolerance,
            )
        })
        .collect();
    let json = list
        .iter()
        .map(|c| {
            serde_json::json!({
                "bearings": [name(c.bearings[0]), name(c.bearings[1])],
                "kinds": [kind(c.kinds[0]), kind(c.kinds[1])],
                "harmonics": c.harmonics,
                "orders": [f64::from(c.orders[0]), f64::from(c.orders[1])],
            })
        })
        .collect();
    (text, serde_json::Value::Array(json))
}

/// Runs `envord analyze`.
pub fn run_cmd(args: &AnalyzeArgs) -> Result<(), CliError> {
    let (a, survey) = analyze_auto(args)?;
    let point = crate::point::load(&args.point)?;
    let (caution, caution_json) = coincidences(&point);
    if let Some(plot) = &args.plot {
        crate::output::write_with(plot, |tmp| {
            crate::plot::order_spectrum(tmp, &a, &args.recording.display().to_string())
        })?;
    }
    if args.frame_hex {
        let hex = frame_hex(&a.report, args.node_id, args.seq)?;
        let bytes = hex.len() / 2;
        // On stderr: stdout stays the frame alone, for scripts.
        eprintln!(
            "frame: {bytes} bytes; slowest EU868 data rate that carries it: {}",
            slowest_eu868_rate(bytes).unwrap_or("none (over 222 bytes)")
        );
        println!("{hex}");
    } else if args.json {
        let mut v = to_json(&a.report, Some(&args.recording.display().to_string()));
        mark_band_choice(&mut v, survey.as_ref());
        if let Some(o) = v.as_object_mut() {
            o.insert("line_coincidences".into(), caution_json);
        }
        println!(
            "{}",
            serde_json::to_string_pretty(&v).map_err(|e| CliError::Other(e.to_string()))?
        );
    } else {
        if let Some(r) = &survey {
            println!(
                "band       {:.0}-{:.0} Hz chosen by the band survey (spectral kurtosis {:.2})",
                r.band_hz[0], r.band_hz[1], r.kurtosis
            );
        }
        print!(
            "{}",
            to_table(&a.report, point.machine_group, point.support)
        );
        for c in &caution {
            println!("{c}");
        }
        // Lines this setting cannot search (as `envord point check`).
        for l in crate::cmd_point::unsearchable(&point) {
            println!("caution: {l}");
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use dsp_core::config::{name_from, Bearing, BearingKinematics};

    /// Two identical bearings on one shaft coincide in BPFO, BPFI and
    /// 2 x BSF; a bearing at half the outer-race line coincides through
    /// its 2nd harmonic; a distinct one does not (CWRU drive-end multiples,
    /// kinematics_published.rs).
    #[test]
    fn coinciding_lines_are_named() {
        let cwru = BearingKinematics::Multiples {
            bpfo_x: 3.5848,
            bpfi_x: 5.4152,
            ftf_x: 0.39828,
            bsf_x: 2.357,
        };
        let mut p = PointConfig::default();
        p.bearings.clear();
        for name in ["input-de", "input-nde"] {
            p.bearings
                .push(Bearing {
                    name: name_from(name),
                    shaft: 0,
                    kinematics: cwru,
                })
                .unwrap();
        }
        let (text, json) = coincidences(&p);
        assert_eq!(text.len(), 3, "{text:?}");
        assert!(
            text[0].contains("input-de BPFO h1 (3.585) and input-nde BPFO h1"),
            "{}",
            text[0]
        );
        assert!(text[2].contains("2xBSF"), "{}", text[2]);
        assert_eq!(json[1]["kinds"], serde_json::json!(["BPFI", "BPFI"]));
        // Half the outer-race line: its 2nd harmonic is the first one's BPFO.
        p.bearings.pop();
        p.bearings
            .push(Bearing {
                name: name_from("half"),
                shaft: 0,
                kinematics: BearingKinematics::Multiples {
                    bpfo_x: 3.5848 / 2.0,
                    bpfi_x: 7.9,
                    ftf_x: 0.2,
                    bsf_x: 1.5,
                },
            })
            .unwrap();
        let (text, json) = coincidences(&p);
        assert_eq!(text.len(), 1, "{text:?}");
        assert_eq!(json[0]["harmonics"], serde_json::json!([1, 2]));
        // A distinct bearing: nothing.
        p.bearings.pop();
        p.bearings
            .push(Bearing {
                name: name_from("other"),
                shaft: 0,
                kinematics: BearingKinematics::Multiples {
                    bpfo_x: 3.05,
                    bpfi_x: 4.95,
                    ftf_x: 0.38,
                    bsf_x: 1.99,
                },
            })
            .unwrap();
        assert!(coincidences(&p).0.is_empty());
    }
}
