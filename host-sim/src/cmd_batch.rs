//! `envord batch`: many recordings with one measuring point. Writes one JSON
//! report per file, a summary table (Markdown and CSV) and a plot of the
//! scores per file. A file that cannot be analysed is listed in the summary
//! with its reason, and the command then exits 2; it never disappears silently.
//! When the point has no band, the band survey chooses it for each file,
//! exactly as `envord analyze` does ([`crate::cmd_analyze::analyze_record`]).

use std::fmt::Write as _;
use std::path::PathBuf;

use clap::Args;
use dsp_core::kinematics::DefectKind;

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
    /// Known constant speed of the tach shaft, rpm.
    #[arg(long)]
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

/// Speed, flags, best score per defect kind, detections, band text.
type RowFigures = (f32, String, [f32; 4], Vec<String>, String);

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
        "| file | speed rpm | flags | band Hz | BPFO dB | BPFI dB | FTF dB | BSF dB | detected |\n|---|---|---|---|---|---|---|---|---|\n",
    );
    let mut csv =
        String::from("file,speed_rpm,flags,band_hz,bpfo_db,bpfi_db,ftf_db,bsf_db,detected,error\n");
    let mut plot_rows = Vec::new();
    let mut failed = 0usize;
    for r in &rows {
        match &r.result {
            Ok((rpm, flags, s, det, band)) => {
                let _ = writeln!(
                    md,
                    "| {} | {rpm:.1} | {flags} | {band} | {:.1} | {:.1} | {:.1} | {:.1} | {} |",
                    r.file,
                    s[0],
                    s[1],
                    s[2],
                    s[3],
                    if det.is_empty() {
                        "-".into()
                    } else {
                        det.join(", ")
                    }
                );
                let _ = writeln!(
                    csv,
                    "{},{rpm:.3},{flags},{band},{:.2},{:.2},{:.2},{:.2},{},",
                    r.file,
                    s[0],
                    s[1],
                    s[2],
                    s[3],
                    det.join(";")
                );
                plot_rows.push(ScoreRow {
                    label: r.file.clone(),
                    scores: *s,
                });
            }
            Err(e) => {
                failed += 1;
                let _ = writeln!(md, "| {} | - | error: {e} | | | | | | |", r.file);
                let _ = writeln!(csv, "{},,,,,,,,,\"{}\"", r.file, e.replace('"', "'"));
            }
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
        let mut detected = Vec::new();
        for b in &a.report.bearings {
            for k in DefectKind::ALL {
                if let Some(d) = b.diagnosis.as_ref().and_then(|d| d.get(k)) {
                    if let Some(slot) = best.get_mut(k.index()) {
                        *slot = slot.max(d.score_db);
                    }
                    if d.detected {
                        detected.push(format!("{} {}", b.name.as_str(), k.name()));
                    }
                }
            }
        }
        Ok((
            a.report.speed.mean_rpm,
            a.report.flags.to_string(),
            best,
            detected,
            band,
        ))
    })();
    Row {
        file: name,
        result: result.map_err(|e| e.to_string()),
    }
}
