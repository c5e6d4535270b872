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
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Read node frames at the plant gateway: decode, import, status, trend.
    Gateway(host_sim::gateway::GatewayArgs),
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
    let result: Result<(), host_sim::error::CliError> = match cli.command {
        Command::Gateway(a) => host_sim::gateway::run(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("envord: {e}");
            ExitCode::from(e.exit_code())
        }
    }
}
