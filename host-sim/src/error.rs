//! The command-line error type and the exit-code contract.
//!
//! Exit codes (a contract outside scripts rely on): 0 success, 1 for a
//! `compare` difference beyond tolerance, 2 for bad input (with a message
//! naming the file, line or key at fault), 3 for an internal failure such as
//! an unwritable output file. A closed standard output (`envord ... | head`)
//! ends the command quietly with 0.

use std::fmt;

/// Why a subcommand failed; maps to the process exit code.
#[derive(Debug)]
pub enum CliError {
    /// Bad input: a file, line or key at fault, named in the message. Exit 2.
    Input(String),
    /// A comparison found differences beyond tolerance. Exit 1.
    Difference(String),
    /// Anything else (I/O on outputs, internal). Exit 3.
    Other(String),
    /// The reader of standard output went away (`envord ... | head`): the
    /// command stops quietly. Exit 0.
    StdoutClosed,
}

impl CliError {
    /// Bad input naming its source, e.g. `CliError::input("point.toml", "missing key ...")`.
    pub fn input(source: impl fmt::Display, msg: impl fmt::Display) -> Self {
        CliError::Input(format!("{source}: {msg}"))
    }

    /// An error writing standard output: a closed pipe stops quietly.
    pub fn stdout(e: std::io::Error) -> Self {
        if e.kind() == std::io::ErrorKind::BrokenPipe {
            CliError::StdoutClosed
        } else {
            CliError::Other(format!("stdout: {e}"))
        }
    }

    /// The process exit code for this error.
    pub fn exit_code(&self) -> u8 {
        match self {
            CliError::Difference(_) => 1,
            CliError::Input(_) => 2,
            CliError::Other(_) => 3,
            CliError::StdoutClosed => 0,
        }
    }
}

impl fmt::Display for CliError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CliError::Input(m) => write!(f, "bad input: {m}"),
            CliError::Difference(m) => write!(f, "{m}"),
            CliError::Other(m) => write!(f, "error: {m}"),
            CliError::StdoutClosed => write!(f, "standard output closed"),
        }
    }
}

impl std::error::Error for CliError {}

impl From<std::io::Error> for CliError {
    fn from(e: std::io::Error) -> Self {
        CliError::Other(e.to_string())
    }
}
