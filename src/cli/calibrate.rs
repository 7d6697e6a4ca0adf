//! `trapwise calibrate FILE`: calibrate one recording offline.

use super::{EXIT_BAD_INPUT, EXIT_NOT_CALIBRATABLE, EXIT_STRICT, Failure, RunArgs, open_file};
use crate::pipeline::{self, PipelineError};
use crate::report::{self, CalibrationReport};
use clap::Args;
use std::io::Write;
use std::path::PathBuf;

/// Arguments of `calibrate`.
#[derive(Debug, Args)]
pub struct CalibrateArgs {
    /// The recording: CSV, TSV, headerless columns, raw little-endian binary or NumPy .npy.
    pub file: PathBuf,
    #[command(flatten)]
    pub run: RunArgs,
    /// Print the whole result as JSON instead of the summary table.
    #[arg(long)]
    pub json: bool,
    /// Leave the plotting arrays out of the JSON.
    #[arg(long)]
    pub no_plots: bool,
    /// Exit with code 5 when the methods disagree or a finding is an error.
    #[arg(long)]
    pub strict: bool,
}

/// The exit code a pipeline failure maps to.
pub(crate) fn failure(e: PipelineError) -> Failure {
    let code = match e {
        PipelineError::Settings(_) | PipelineError::Ingest(_) => EXIT_BAD_INPUT,
        PipelineError::Calibration(_) => EXIT_NOT_CALIBRATABLE,
    };
    Failure::new(code, e)
}

/// Whether a report passes `--strict`.
pub(crate) fn trustworthy(r: &CalibrationReport) -> bool {
    r.axes
        .iter()
        .all(|a| a.verdict == "consistent" && a.findings.iter().all(|f| f.severity != "error"))
}

/// Prints a report as the summary table or JSON, and returns the exit code.
pub(crate) fn print_report(r: &CalibrationReport, json: bool, strict: bool) -> Result<u8, Failure> {
    let mut out = std::io::stdout().lock();
    let text = if json {
        serde_json::to_string_pretty(r).map_err(|e| Failure::new(1, e))? + "\n"
    } else {
        report::summary_table(r)
    };
    out.write_all(text.as_bytes())
        .map_err(|e| Failure::new(1, e))?;
    Ok(if strict && !trustworthy(r) {
        EXIT_STRICT
    } else {
        0
    })
}

pub(super) fn run(args: &CalibrateArgs) -> Result<u8, Failure> {
    let settings = args.run.settings();
    // Check the settings before touching the file, so a typo is reported as such.
    settings
        .resolve()
        .map_err(|e| Failure::new(EXIT_BAD_INPUT, e))?;
    let (mut file, size) = open_file(&args.file)?;
    let name = args
        .file
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| args.file.display().to_string());
    let with_plots = args.json && !args.no_plots;
    let report =
        pipeline::run_from(&name, &mut file, size, settings, with_plots).map_err(failure)?;
    print_report(&report, args.json, args.strict)
}
