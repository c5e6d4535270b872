//! `envord batch`: many recordings with one measuring point. Writes one JSON
//! report per file, a summary table (Markdown and CSV) and a plot of the
//! scores per file. A file that cannot be analysed is listed in the summary
//! with its reason, and the command then exits 2; it never disappears silently.
//! When the point has no band, the band survey chooses it for each file,
//! exactly as `envord analyze` does ([`crate::cmd_analyze::analyze_record`]).

use std::fmt::Write as _;
use std::path::PathBuf;

use clap::Args;
use dsp_core::diagnosis::kinematics::DefectKind;

use crate::cmd_analyze::{analyze_record, load_record, mark_band_choice, speed_for};
use crate::error::CliError;
use crate::plot::{scores, ScoreRow};
use crate::report_json::to_json;

/// Arguments of `envord batch`.
#[derive(Debug, Args)]
pub struct BatchArgs {
    /// Folder of WAV recordings.
    pub folder: PathBuf,
    /// Measuring point (TOML point file).
    #[arg(long)]
    pub point: PathBuf,
    /// Known constant speed of the tach shaft, rpm (not together with
    /// --tach-channel).
    #[arg(long, allow_negative_numbers = true, conflicts_with = "tach_channel")]
    pub rpm: Option<f32>,
    /// Acceleration channel (0-based).
    #[arg(long, default_value_t = 0)]
    pub channel: usize,
    /// Digitised tach channel (0-based).
    #[arg(long)]
    pub tach_channel: Option<usize>,
    /// Output folder (default: `envord-batch` in the current folder).
    #[arg(long, default_value = "envord-batch")]
    pub out: PathBuf,
    /// Recordings analysed at once, one per thread (default: the number of
    /// cores). Every report is computed exactly as alone; only the order of
    /// the work changes, not the outputs.
    #[arg(long)]
    pub jobs: Option<usize>,
}

/// One analysed file's figures for the summary.
struct RowFigures {
    rpm: f32,
    flags: String,
    /// Highest score per defect kind, dB.
    best: [f32; 4],
    /// The bearing each highest score belongs to.
    best_bearing: [String; 4],
    detected: Vec<String>,
    band: String,
    zone: Option<dsp_core::overall::velocity::Zone>,
}

struct Row {
    file: String,
    result: Result<RowFigures, String>,
}

/// Runs `envord batch`.
pub fn run(args: &BatchArgs) -> Result<(), CliError> {
    let point = crate::point::load(&args.point)?;
    let mut files: Vec<PathBuf> = std::fs::read_dir(&args.folder)
        .map_err(|e| CliError::input(args.folder.display(), format!("cannot list: {e}")))?
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x.eq_ignore_ascii_case("wav")))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(CliError::input(
            args.folder.display(),
            "no .wav files in the folder",
        ));
    }
    std::fs::create_dir_all(&args.out)
        .map_err(|e| CliError::Other(format!("{}: {e}", args.out.display())))?;
    // Every output is checked before the work: an existing one (a previous
    // run's) is not replaced without --force.
    for name in ["summary.md", "summary.csv", "scores.svg"] {
        crate::output::check_free(&args.out.join(name))?;
    }
    for f in &files {
        crate::output::check_free(&report_path(&args.out, f))?;
    }

    let bar = indicatif::ProgressBar::new(u64::try_from(files.len()).unwrap_or(u64::MAX));
    bar.set_style(
        indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} {msg}")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    // Threads take the next file from a shared counter; results land in
    // their file's slot, so the summary keeps the sorted order.
    let jobs = args
        .jobs
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, usize::from))
        .clamp(1, files.len());
    let next = std::sync::atomic::AtomicUsize::new(0);
    let slots: Vec<std::sync::Mutex<Option<Row>>> =
        files.iter().map(|_| std::sync::Mutex::new(None)).collect();
    std::thread::scope(|scope| {
        for _ in 0..jobs {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                let (Some(f), Some(slot)) = (files.get(i), slots.get(i)) else {
                    break;
                };
                let row = analyse_one(f, &point, args, &bar);
                if let Ok(mut s) = slot.lock() {
                    *s = Some(row);
                }
                bar.inc(1);
            });
        }
    });
    let rows: Vec<Row> = slots
        .into_iter()
        .zip(&files)
        .map(|(slot, f)| {
            slot.into_inner().ok().flatten().unwrap_or_else(|| Row {
                file: f
                    .file_name()
                    .and_then(|n| n.to_str())
                    .unwrap_or("?")
                    .to_string(),
                result: Err("not analysed (worker thread failed)".to_string()),
            })
        })
        .collect();
    bar.finish_and_clear();

    let mut md = String::from(
        "| file | speed rpm | flags | band Hz | ISO zone | BPFO dB (bearing) | BPFI dB (bearing) \
         | FTF dB (bearing) | BSF dB (bearing) | detected |\n\
         |---|---|---|---|---|---|---|---|---|---|\n",
    );
    // New columns go at the end: scripts read the older ones by position.
    let mut csv = String::from(
        "file,speed_rpm,flags,band_hz,bpfo_db,bpfi_db,ftf_db,bsf_db,detected,error,\
         bpfo_bearing,bpfi_bearing,ftf_bearing,bsf_bearing,iso_zone\n",
    );
    let mut plot_rows = Vec::new();
    let mut failed = 0usize;
    let mut zones = std::collections::BTreeSet::new();
    for r in &rows {
        match &r.result {
            Ok(f) => {
                let s = &f.best;
                let cell = |i: usize| {
                    let name = f.best_bearing.get(i).map_or("", String::as_str);
                    let v = s.get(i).copied().unwrap_or(0.0);
                    if name.is_empty() {
                        format!("{v:.1}")
                    } else {
                        format!("{v:.1} ({name})")
                    }
                };
                let zone = f.zone.map_or_else(|| "-".to_string(), |z| format!("{z:?}"));
                if let Some(z) = f.zone {
                    zones.insert(z);
                }
                let _ = writeln!(
                    md,
                    "| {} | {:.1} | {} | {} | {zone} | {} | {} | {} | {} | {} |",
                    r.file,
                    f.rpm,
                    f.flags,
                    f.band,
                    cell(0),
                    cell(1),
                    cell(2),
                    cell(3),
                    if f.detected.is_empty() {
                        "-".into()
                    } else {
                        f.detected.join(", ")
                    }
                );
                let _ = writeln!(
                    csv,
                    "{},{:.3},{},{},{:.2},{:.2},{:.2},{:.2},{},,{},{},{},{},{}",
                    r.file,
                    f.rpm,
                    f.flags,
                    f.band,
                    s[0],
                    s[1],
                    s[2],
                    s[3],
                    f.detected.join(";"),
                    f.best_bearing[0],
                    f.best_bearing[1],
                    f.best_bearing[2],
                    f.best_bearing[3],
                    if f.zone.is_some() { zone.as_str() } else { "" },
                );
                plot_rows.push(ScoreRow {
                    label: r.file.clone(),
                    scores: *s,
                });
            }
            Err(e) => {
                failed += 1;
                let _ = writeln!(md, "| {} | - | error: {e} | | | | | | | |", r.file);
                let _ = writeln!(csv, "{},,,,,,,,,\"{}\",,,,,", r.file, e.replace('"', "'"));
            }
        }
    }
    let _ = writeln!(
        md,
        "\nEach dB column is the highest score of that defect kind over the point's bearings, \
         with the bearing it belongs to."
    );
    if !zones.is_empty() {
        let _ = writeln!(
            md,
            "ISO 20816-3 zones ({}):",
            crate::report_json::zone_limits_text(point.machine_group, point.support)
        );
        for z in &zones {
            let _ = writeln!(md, "- {z:?}: {}", crate::report_json::zone_meaning(*z));
        }
    }
    let write =
        |name: &str, text: &str| crate::output::write(&args.out.join(name), text.as_bytes());
    write("summary.md", &md)?;
    write("summary.csv", &csv)?;
    if !plot_rows.is_empty() {
        crate::output::write_with(&args.out.join("scores.svg"), |tmp| {
            scores(tmp, &plot_rows, "Highest defect score per file")
        })?;
    }
    print!("{md}");
    println!(
        "\n{} file(s), {} analysed, {failed} failed; reports in {}",
        rows.len(),
        rows.len() - failed,
        args.out.display()
    );
    if failed > 0 {
        return Err(CliError::Input(format!(
            "{failed} file(s) could not be analysed (see summary.md)"
        )));
    }
    Ok(())
}

/// Where the JSON report of recording `f` goes: `<out>/<file name>.json`.
fn report_path(out: &std::path::Path, f: &std::path::Path) -> PathBuf {
    let name = f.file_name().and_then(|n| n.to_str()).unwrap_or("?");
    out.join(format!("{name}.json"))
}

/// Analyses one recording and writes its JSON report.
fn analyse_one(
    f: &std::path::Path,
    point: &dsp_core::config::PointConfig,
    args: &BatchArgs,
    bar: &indicatif::ProgressBar,
) -> Row {
    let name = f
        .file_name()
        .and_then(|n| n.to_str())
        .unwrap_or("?")
        .to_string();
    bar.set_message(name.clone());
    let result = (|| -> Result<_, CliError> {
        let rec = load_record(f, args.channel, args.tach_channel, None)?;
        let p = speed_for(point.clone(), args.rpm, rec.edges_s.is_some(), f)?;
        let (a, survey) = analyze_record(f, p, &rec)?;
        let mut json = to_json(&a.report, Some(&name));
        mark_band_choice(&mut json, survey.as_ref());
        let band = format!(
            "{:.0}-{:.0}{}",
            a.report.band_hz[0],
            a.report.band_hz[1],
            if survey.is_some() { " (survey)" } else { "" }
        );
        crate::output::write(
            &report_path(&args.out, f),
            serde_json::to_string_pretty(&json)
                .map_err(|e| CliError::Other(e.to_string()))?
                .as_bytes(),
        )?;
        let mut best = [0.0f32; 4];
        let mut best_bearing: [String; 4] = Default::default();
        let mut detected = Vec::new();
        for b in &a.report.bearings {
            for k in DefectKind::ALL {
                if let Some(d) = b.diagnosis.as_ref().and_then(|d| d.get(k)) {
                    if let (Some(slot), Some(who)) =
                        (best.get_mut(k.index()), best_bearing.get_mut(k.index()))
                    {
                        if who.is_empty() || d.score_db > *slot {
                            *slot = slot.max(d.score_db);
                            *who = b.name.as_str().to_string();
                        }
                    }
                    if d.detected {
                        detected.push(format!("{} {}", b.name.as_str(), k.name()));
                    }
                }
            }
        }
        Ok(RowFigures {
            rpm: a.report.speed.mean_rpm,
            flags: a.report.flags.to_string(),
            best,
            best_bearing,
            detected,
            band,
            zone: a.report.overall.zone,
        })
    })();
    Row {
        file: name,
        result: result.map_err(|e| e.to_string()),
    }
}
