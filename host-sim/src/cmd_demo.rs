//! `envord demo`: the embedded default. Simulates an invented gearbox (see
//! `host-sim/examples/demo-machine.toml`), digitises it as the node's 16-bit
//! ADC would, finds the tach edges in the pulse channel, runs the node's
//! pipeline with `host-sim/examples/demo-point.toml`, prints a short summary
//! and writes the report (JSON) and the order-spectrum plot (SVG and PNG).

use std::path::PathBuf;

use clap::Args;
use dsp_core::diagnosis::kinematics::DefectKind;

use crate::analysis::{edges_from_channel, run, Accel, Analysis, Record};
use crate::error::CliError;
use crate::report_json::to_json;
use crate::simulate::{simulate, MachineSpec};

/// The demo machine (simulator description).
pub const DEMO_MACHINE: &str = crate::simulate::DEMO_MACHINE_TOML;
/// The demo measuring point.
pub const DEMO_POINT: &str = include_str!("../examples/demo-point.toml");
/// The files `demo` writes into its output folder.
pub const DEMO_FILES: [&str; 3] = ["demo-report.json", "demo-spectrum.svg", "demo-spectrum.png"];
/// Seed of the demo record.
pub const DEMO_SEED: u64 = 7;

/// Arguments of `envord demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder for the report and plots (created if missing; files
    /// already in it are not replaced without --force).
    #[arg(long, default_value = "envord-out")]
    pub out: PathBuf,
    /// Seed of the simulated record.
    #[arg(long, default_value_t = DEMO_SEED)]
    pub seed: u64,
}

/// Scales g to ADC counts as the node's converter would (round, saturate).
pub fn to_counts(x: &[f32], counts_to_g: f32) -> Vec<i16> {
    x.iter()
        .map(|&v| {
            let c = (v / counts_to_g).round();
            if c.is_nan() {
                0
            } else {
                #[allow(clippy::cast_possible_truncation)]
                let c = c.clamp(f32::from(i16::MIN), f32::from(i16::MAX)) as i16;
                c
            }
        })
        .collect()
}

/// Simulates the demo machine and analyses it as the node would.
pub fn demo_analysis(seed: u64) -> Result<Analysis, CliError> {
    let spec = MachineSpec::from_toml_str(DEMO_MACHINE)
        .map_err(|e| CliError::Other(format!("demo machine: {e}")))?;
    let point =
        crate::point::parse(DEMO_POINT).map_err(|e| CliError::Other(format!("demo point: {e}")))?;
    let sim = simulate(&spec, seed).map_err(|e| CliError::Other(format!("simulate: {e}")))?;
    #[allow(clippy::cast_possible_truncation)]
    let fs = sim.fs as f32;
    let edges = edges_from_channel(&sim.tach, fs).map_err(|e| CliError::Other(e.to_string()))?;
    let rec = Record {
        sample_rate_hz: fs,
        accel: Accel::Counts(to_counts(&sim.accel, point.counts_to_g)),
        edges_s: Some(edges),
    };
    run(&point, &rec)
}

/// Runs `envord demo`.
pub fn run_cmd(args: &DemoArgs) -> Result<(), CliError> {
    // An existing (even empty) folder is fine; files in it are not replaced
    // without --force, checked before the work.
    for name in DEMO_FILES {
        crate::output::check_free(&args.out.join(name))?;
    }
    let a = demo_analysis(args.seed)?;
    let r = &a.report;
    println!("envord demo: Quorvalith quarry (fictional), conveyor CV-7 drive reducer");
    println!(
        "  simulated: 46 s at 51.2 kS/s, speed wandering 1150-1450 rpm, outer-race defect on inter-de"
    );
    println!(
        "speed     {:.0} rpm mean ({:.0}-{:.0}), {} revolutions, quality: {}",
        r.speed.mean_rpm, r.speed.min_rpm, r.speed.max_rpm, r.speed.revs, r.flags
    );
    let o = &r.overall;
    println!(
        "overall   {:.3} g rms, {:.2} g peak, crest {:.1}, kurtosis {:.1}, velocity {:.2} mm/s{}",
        o.rms_ac,
        o.peak,
        o.crest_factor,
        o.kurtosis,
        o.velocity_rms_mm_s,
        o.zone
            .map(|z| format!(" ({})", crate::report_json::zone_label(z)))
            .unwrap_or_default()
    );
    if let (Some(z), Ok(p)) = (o.zone, crate::point::parse(DEMO_POINT)) {
        println!(
            "zone {z:?}    {}; {}",
            crate::report_json::zone_meaning(z),
            crate::report_json::zone_limits_text(p.machine_group, p.support)
        );
    }
    println!(
        "envelope  {:.0}-{:.0} Hz, decimation {}, {} segments x {} revolutions",
        r.band_hz[0],
        r.band_hz[1],
        r.decimation,
        r.segments,
        r.revolutions / r.segments.max(1)
    );
    for b in &r.bearings {
        let mut line = format!("{:<10}", b.name.as_str());
        for k in DefectKind::ALL {
            let d = b.diagnosis.as_ref().and_then(|d| d.get(k));
            line.push_str(&match d {
                Some(d) => format!(
                    "  {} {:5.1} dB{}",
                    k.name(),
                    d.score_db,
                    if d.detected { " DETECTED" } else { "" }
                ),
                None => format!("  {} not evaluated", k.name()),
            });
        }
        println!("{line}");
    }
    std::fs::create_dir_all(&args.out)
        .map_err(|e| CliError::Other(format!("{}: {e}", args.out.display())))?;
    let json = to_json(r, Some("demo (simulated)"));
    let jp = args.out.join("demo-report.json");
    crate::output::write(
        &jp,
        serde_json::to_string_pretty(&json)
            .map_err(|e| CliError::Other(e.to_string()))?
            .as_bytes(),
    )?;
    for ext in ["svg", "png"] {
        crate::output::write_with(&args.out.join(format!("demo-spectrum.{ext}")), |tmp| {
            crate::plot::order_spectrum(tmp, &a, "demo, CV-7 reducer (fictional)")
        })?;
    }
    println!(
        "wrote {0}/demo-report.json, {0}/demo-spectrum.svg, {0}/demo-spectrum.png",
        args.out.display()
    );
    Ok(())
}
