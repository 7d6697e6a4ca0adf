//! One recording from bytes to report: parse, calibrate, build the wire report. The CLI and the
//! HTTP service both call `run`, so they give the same numbers for the same bytes and settings.

use crate::calibration::{self, CalibrationError};
use crate::ingest::{self, IngestError};
use crate::report::{self, CalibrationReport, InputFacts};
use crate::settings::{Settings, SettingsError};
use sha2::{Digest, Sha256};
use std::io::Read;

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
    let mut source = bytes;
    run_from(
        file_name,
        &mut source,
        Some(bytes.len()),
        settings,
        with_plots,
    )
}

/// `run` on a stream: the recording is parsed as it is read (text formats never sit in memory
/// whole; see `ingest::read`) and the SHA-256 in the report is taken on the way through, so
/// the file is read once. `size_hint` is the stream's length in bytes if known.
pub fn run_from(
    file_name: &str,
    source: &mut dyn Read,
    size_hint: Option<usize>,
    settings: &Settings,
    with_plots: bool,
) -> Result<CalibrationReport, PipelineError> {
    let (ingest_options, conditions, analysis) = settings.resolve()?;
    let mut digesting = Digesting {
        inner: source,
        hasher: Sha256::new(),
    };
    let (recording, format) = ingest::read(file_name, &mut digesting, size_hint, &ingest_options)?;
    // Bytes after the end of a text table cannot exist (the parser reads to the end), and
    // binary formats are read whole, so the digest covers the whole file.
    let sha256 = format!("{:x}", digesting.hasher.finalize());
    let calibration = calibration::calibrate(&recording, &conditions, &analysis)?;
    let facts = InputFacts {
        file_name: file_name.to_string(),
        sha256,
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

/// A reader that feeds every byte it passes on into a SHA-256 (FIPS 180-4).
struct Digesting<'a> {
    inner: &'a mut dyn Read,
    hasher: Sha256,
}

impl Read for Digesting<'_> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(out)?;
        self.hasher.update(out.get(..n).unwrap_or_default());
        Ok(n)
    }
}
