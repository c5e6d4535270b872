//! `envord`: run the node's diagnosis core on a PC, and read node reports at
//! the gateway. See README.md for the commands.
use clap::{Parser, Subcommand};
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "envord",
    version,
    about = "Bearing envelope order analysis, as the node runs it"
)]
struct Cli {
    /// Replace output files that already exist (by default a command never
    /// overwrites a file; it stops with exit 2 naming it).
    #[arg(long, global = true)]
    force: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run the main job on a built-in simulated gearbox (the embedded demo).
    Demo(host_sim::cmd_demo::DemoArgs),
    /// Analyse a recording with a measuring point and print the report.
    Analyze(host_sim::cmd_analyze::AnalyzeArgs),
    /// Compare two reports (or folders of reports); exit 1 on a difference.
    Compare(host_sim::cmd_compare::CompareArgs),
    /// Analyse every WAV in a folder; summary table, reports and a score plot.
    Batch(host_sim::cmd_batch::BatchArgs),
    /// Write a simulated gearbox record (WAV: ch0 accel g, ch1 tach V).
    Simulate(host_sim::cmd_simulate::SimulateArgs),
    /// The plant gateway: node frames into a store, alarm states and score
    /// histories, signed messages to nodes (every subcommand: `envord gateway --help`).
    Gateway(host_sim::gateway::GatewayArgs),
    /// Check the diagnosis on a labelled data folder (manifest.toml + WAVs).
    Validate(host_sim::validate::ValidateArgs),
    /// Energy budget of one measurement and battery life at given intervals.
    Energy(host_sim::energy::EnergyArgs),
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            // clap prints help/version to stdout and usage errors to stderr.
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    host_sim::closed_stdout::install_quiet_hook();
    host_sim::output::set_force(cli.force);
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| dispatch(cli.command)));
    match result {
        Ok(Ok(()) | Err(host_sim::error::CliError::StdoutClosed)) => ExitCode::SUCCESS,
        Ok(Err(e)) => {
            eprintln!("envord: {e}");
            ExitCode::from(e.exit_code())
        }
        Err(p) if host_sim::closed_stdout::is_closed_stdout_panic(p.as_ref()) => ExitCode::SUCCESS,
        Err(p) => std::panic::resume_unwind(p),
    }
}

fn dispatch(command: Command) -> Result<(), host_sim::error::CliError> {
    match command {
        Command::Simulate(a) => host_sim::cmd_simulate::run(&a),
        Command::Demo(a) => host_sim::cmd_demo::run_cmd(&a),
        Command::Analyze(a) => host_sim::cmd_analyze::run_cmd(&a),
        Command::Compare(a) => host_sim::cmd_compare::run(&a),
        Command::Batch(a) => host_sim::cmd_batch::run(&a),
        Command::Gateway(a) => host_sim::gateway::run(a),
        Command::Validate(a) => host_sim::validate::run_cmd(&a),
        Command::Energy(a) => host_sim::energy::run(&a),
    }
}
