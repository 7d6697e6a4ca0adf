//! The trapwise binary: parses the command line and dispatches to `trapwise::cli`.

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = trapwise::cli::Cli::parse();
    match trapwise::cli::run(cli) {
        Ok(code) => ExitCode::from(code),
        Err(failure) => {
            eprintln!("error: {:#}", failure.error);
            ExitCode::from(failure.code)
        }
    }
}
