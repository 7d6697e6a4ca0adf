//! The command line: argument definitions (clap) and one run function per subcommand. Each
//! subcommand module turns its arguments into plain settings and calls the library.
//!
//! Exit codes (documented in the README): 0 success; 1 an unexpected failure (IO and the like);
//! 2 a usage error (clap); 3 the input file could not be read as a recording; 4 the recording
//! was read but cannot be calibrated; 5 `--strict` was given and the calibration is inconsistent
//! or has an error-level finding; 6 `upload`: the server refused the upload for a reason other
//! than the recording (token, size, queue full) or could not be reached.
//!
//! The run settings of `calibrate` and `upload` (`RunArgs`) are generated from the settings
//! table, one flag per setting (`run_args`).
//!
//! `serve` and `token` read the service configuration from the environment (`config`).

mod calibrate;
mod inspect;
mod run_args;
mod serve;
mod simulate;
mod token;
mod upload;

use clap::{Parser, Subcommand};
use std::path::PathBuf;

pub use calibrate::CalibrateArgs;
pub use inspect::InspectArgs;
pub use run_args::RunArgs;
pub use serve::ServeArgs;
pub use simulate::SimulateArgs;
pub use token::{TokenAction, TokenArgs};
pub use upload::UploadArgs;

/// Exit code for input that could not be read as a recording.
pub const EXIT_BAD_INPUT: u8 = 3;
/// Exit code for a recording that cannot be calibrated.
pub const EXIT_NOT_CALIBRATABLE: u8 = 4;
/// Exit code for `--strict` when the result is not trustworthy.
pub const EXIT_STRICT: u8 = 5;
/// Exit code for an upload the server refused (not for the recording) or could not take.
pub const EXIT_SERVER: u8 = 6;

/// trapwise: trap stiffness and detector sensitivity from a bead's thermal motion.
#[derive(Debug, Parser)]
#[command(name = "trapwise", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands. Parsed once per process, so the size of the largest variant's arguments
/// (the simulator's many flags) costs nothing worth a box.
#[derive(Debug, Subcommand)]
#[allow(clippy::large_enum_variant)]
pub enum Command {
    /// Calibrate one recording offline and print the result.
    Calibrate(CalibrateArgs),
    /// Show what a file holds and how it would be read, and the settings it lacks.
    Inspect(InspectArgs),
    /// Write exact simulated recordings with a known truth.
    Simulate(SimulateArgs),
    /// Run the calibration service (HTTP API, SQLite or PostgreSQL storage).
    Serve(ServeArgs),
    /// Send a recording to a calibration service and print its summary.
    Upload(UploadArgs),
    /// Create, list and revoke the bearer tokens of labs.
    Token(TokenArgs),
}

/// A failure with the exit code it maps to.
#[derive(Debug)]
pub struct Failure {
    pub code: u8,
    pub error: anyhow::Error,
}

impl Failure {
    pub fn new(code: u8, error: impl Into<anyhow::Error>) -> Self {
        Failure {
            code,
            error: error.into(),
        }
    }
}

/// Runs a parsed command line; returns the process exit code.
pub fn run(cli: Cli) -> Result<u8, Failure> {
    match cli.command {
        Command::Calibrate(args) => calibrate::run(&args),
        Command::Inspect(args) => inspect::run(&args),
        Command::Simulate(args) => simulate::run(&args),
        Command::Serve(args) => serve::run(&args),
        Command::Upload(args) => upload::run(&args),
        Command::Token(args) => token::run(&args),
    }
}

/// Opens a file for reading with its length in bytes (if the metadata tells), naming it in the
/// error.
pub(crate) fn open_file(path: &PathBuf) -> Result<(std::fs::File, Option<usize>), Failure> {
    let file = std::fs::File::open(path).map_err(|e| {
        Failure::new(
            EXIT_BAD_INPUT,
            anyhow::anyhow!("cannot read {}: {e}", path.display()),
        )
    })?;
    let size = file
        .metadata()
        .ok()
        .and_then(|m| usize::try_from(m.len()).ok());
    Ok((file, size))
}

#[cfg(test)]
mod tests;
