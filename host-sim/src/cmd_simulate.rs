//! `envord simulate`: write a simulated gearbox record as a 2-channel
//! float32 WAV (channel 0 acceleration in g, channel 1 tach pulse in V) and,
//! optionally, the true tach edges as CSV.

use crate::edges_csv::format_edges_csv;
use crate::error::CliError;
use crate::output;
use crate::simulate::{simulate, Fault, MachineSpec, SpeedProfile};
use crate::wav::encode_wav_f32;
use clap::{Args, ValueEnum};
use std::path::PathBuf;

/// Fault choice on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FaultArg {
    /// Healthy bearing.
    None,
    /// Outer-race defect (impacts at BPFO).
    Outer,
    /// Inner-race defect (impacts at BPFI, modulated at 1x).
    Inner,
    /// Rolling-element defect (impacts at 2 x BSF, modulated at FTF).
    Ball,
}

impl From<FaultArg> for Fault {
    fn from(f: FaultArg) -> Self {
        match f {
            FaultArg::None => Fault::None,
            FaultArg::Outer => Fault::Outer,
            FaultArg::Inner => Fault::Inner,
            FaultArg::Ball => Fault::Ball,
        }
    }
}

/// Arguments of `envord simulate`.
#[derive(Debug, Args)]
pub struct SimulateArgs {
    /// Output WAV file (float32, ch0 acceleration g, ch1 tach V); an
    /// existing file is not replaced without --force.
    #[arg(long)]
    pub out: PathBuf,
    /// Machine description (TOML); without it, the built-in demo machine.
    #[arg(long)]
    pub spec: Option<PathBuf>,
    /// Random seed (same seed, same record).
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Record length, s (overrides the spec).
    #[arg(long)]
    pub seconds: Option<f64>,
    /// Constant tach-shaft speed, rpm (replaces the spec's speed profile).
    #[arg(long)]
    pub rpm: Option<f64>,
    /// Fault of the first bearing in the spec (overrides the spec).
    #[arg(long, value_enum)]
    pub fault: Option<FaultArg>,
    /// Also write the true once-per-rev times (s) to this CSV file.
    #[arg(long)]
    pub edges_csv: Option<PathBuf>,
}

/// Runs `envord simulate`.
pub fn run(args: &SimulateArgs) -> Result<(), CliError> {
    // Outputs first: an existing file (say, the point file given as --out)
    // stops the command before any work.
    output::check_free(&args.out)?;
    if let Some(p) = &args.edges_csv {
        output::check_free(p)?;
    }
    let mut spec = match &args.spec {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| CliError::input(p.display(), format!("cannot read: {e}")))?;
            MachineSpec::from_toml_str(&text).map_err(|e| CliError::input(p.display(), e))?
        }
        None => MachineSpec::default(),
    };
    if let Some(s) = args.seconds {
        spec.seconds = s;
    }
    if let Some(rpm) = args.rpm {
        spec.speed = SpeedProfile::Constant { rpm };
    }
    if let Some(f) = args.fault {
        let b = spec.bearings.first_mut().ok_or_else(|| {
            CliError::input(
                "--fault",
                "the machine spec has no bearings to put a fault in",
            )
        })?;
        b.fault = f.into();
    }
    let source = args
        .spec
        .as_ref()
        .map_or_else(|| "demo machine".to_string(), |p| p.display().to_string());
    let out = simulate(&spec, args.seed).map_err(|e| CliError::input(&source, e))?;

    // validate() guarantees a whole-number fs within u32 range.
    let fs = u32::try_from(dsp_core::num::f32_to_usize_sat(dsp_core::num::f64_to_f32(
        out.fs,
    )))
    .map_err(|_| CliError::Other(format!("sample rate {} out of range", out.fs)))?;
    let wav = encode_wav_f32(fs, &[&out.accel, &out.tach])
        .map_err(|e| CliError::Other(format!("{}: {e}", args.out.display())))?;
    output::write(&args.out, &wav)?;
    if let Some(p) = &args.edges_csv {
        let comment = format!(
            "true once-per-rev times of the tach shaft, s; {}; seed {}",
            spec.name, args.seed
        );
        output::write(
            p,
            format_edges_csv(&out.true_edges_s, Some(&comment)).as_bytes(),
        )?;
    }
    eprintln!(
        "envord simulate: {} s at {} Hz, {} revs ({} pulses dropped), {} impacts -> {}",
        spec.seconds,
        fs,
        out.true_edges_s.len(),
        out.dropped_pulses,
        out.impacts.len(),
        args.out.display()
    );
    Ok(())
}
