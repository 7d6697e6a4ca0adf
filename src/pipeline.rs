//! One recording from bytes to report: parse, calibrate, build the wire report. The CLI and the
//! HTTP service both call `run`, so they give the same numbers for the same bytes and settings.

use crate::calibration::{self, CalibrationError};
use crate::ingest::{self, IngestError};
use crate::report::{self, CalibrationReport, InputFacts};
use crate::settings::{Settings, SettingsError};

/// Why a recording produced no calibration.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The settings are incomplete or invalid.
    #[error(transparent)]
    Settings(#[from] SettingsError),
    /// The file could not be read as a recording.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// The recording parsed but cannot be calibrated.
    #[error(transparent)]
    Calibration(#[from] CalibrationError),
}

/// Parses `bytes` (named `file_name`, for format detection and messages), calibrates them
/// with `settings`, and returns the report (with plot arrays when `with_plots`).
pub fn run(
    file_name: &str,
    bytes: &[u8],
    settings: &Settings,
    with_plots: bool,
) -> Result<CalibrationReport, PipelineError> {
    let (ingest_options, conditions, analysis) = settings.resolve()?;
    let format = match ingest_options.format {
        Some(f) => f,
        None => ingest::detect_format(file_name, bytes)?,
    };
    let recording = ingest::parse(file_name, bytes, &ingest_options)?;
    let calibration = calibration::calibrate(&recording, &conditions, &analysis)?;
    let facts = InputFacts {
        file_name: file_name.to_string(),
        sha256: report::sha256_hex(bytes),
        format: format.name().to_string(),
    };
    Ok(report::build(
        &calibration,
        &recording,
        &facts,
        &conditions,
        &analysis,
        with_plots,
    ))
}
