//! The command line: argument definitions (clap) and one run function per subcommand. Each
//! subcommand module turns its arguments into plain settings and calls the library.
//!
//! Exit codes (documented in the README): 0 success; 1 an unexpected failure (IO and the like);
//! 2 a usage error (clap); 3 the input file could not be read as a recording; 4 the recording
//! was read but cannot be calibrated; 5 `--strict` was given and the calibration is inconsistent
//! or has an error-level finding; 6 `upload`: the server refused the upload for a reason other
//! than the recording (token, size, queue full) or could not be reached.
//!
//! `serve` and `token` read the service configuration from the environment (`config`).

mod calibrate;
mod serve;
mod simulate;
mod token;
mod upload;

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

pub use calibrate::CalibrateArgs;
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

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Calibrate one recording offline and print the result.
    Calibrate(CalibrateArgs),
    /// Write exact simulated recordings with a known truth.
    Simulate(SimulateArgs),
    /// Run the calibration service (HTTP API, SQLite or PostgreSQL storage).
    Serve(ServeArgs),
    /// Send a recording to a calibration service and print its summary.
    Upload(UploadArgs),
    /// Create, list and revoke the bearer tokens of labs.
    Token(TokenArgs),
}

/// Run conditions and analysis options shared by `calibrate` and `upload`.
#[derive(Debug, Clone, Args)]
pub struct RunArgs {
    /// Bead diameter, micrometres.
    #[arg(long, value_name = "UM", allow_negative_numbers = true)]
    pub bead_diameter: f64,
    /// Standard error of the bead diameter, micrometres (from the bead supplier).
    #[arg(long, value_name = "UM", allow_negative_numbers = true)]
    pub bead_diameter_se: Option<f64>,
    /// Sample temperature, degrees Celsius.
    #[arg(long, value_name = "C", allow_negative_numbers = true)]
    pub temperature: f64,
    /// Standard error of the temperature, degrees Celsius.
    #[arg(long, value_name = "C", allow_negative_numbers = true)]
    pub temperature_se: Option<f64>,
    /// Sampling rate, Hz (needed when the file has no time column).
    #[arg(long, value_name = "HZ", allow_negative_numbers = true)]
    pub sample_rate: Option<f64>,
    /// Viscosity, mPa s (default: water at the given temperature, IAPWS 2008).
    #[arg(long, value_name = "MPA_S", allow_negative_numbers = true)]
    pub viscosity: Option<f64>,
    /// Height of the bead centre above the surface, micrometres (enables the wall correction).
    #[arg(long, value_name = "UM", allow_negative_numbers = true)]
    pub height: Option<f64>,
    /// Standard error of the height, micrometres.
    #[arg(long, value_name = "UM", allow_negative_numbers = true)]
    pub height_se: Option<f64>,
    /// Bead density, kg/m^3 (only for --hydrodynamics; default polystyrene 1050).
    #[arg(long, value_name = "KG_M3", allow_negative_numbers = true)]
    pub bead_density: Option<f64>,
    /// Unit of the samples when the header does not say: nm or V.
    #[arg(long, value_name = "nm|V")]
    pub units: Option<String>,
    /// File format instead of detection: csv, tsv, columns, raw-f32, raw-f64, raw-i16, npy.
    #[arg(long, value_name = "FORMAT", allow_negative_numbers = true)]
    pub format: Option<String>,
    /// Interleaved channels in raw binary files.
    #[arg(long, value_name = "N", allow_negative_numbers = true)]
    pub channels: Option<usize>,
    /// Volts per count for integer samples (raw-i16, integer npy).
    #[arg(long, value_name = "V", allow_negative_numbers = true)]
    pub volts_per_count: Option<f64>,
    /// Lowest frequency in the spectral fit, Hz.
    #[arg(long, value_name = "HZ", allow_negative_numbers = true)]
    pub fit_min: Option<f64>,
    /// Highest frequency in the spectral fit, Hz.
    #[arg(long, value_name = "HZ", allow_negative_numbers = true)]
    pub fit_max: Option<f64>,
    /// Non-overlapping segments averaged in the periodogram.
    #[arg(long, value_name = "N", allow_negative_numbers = true)]
    pub windows: Option<usize>,
    /// Detector filter: none, fit, fit:F3DB:ALPHA (starting values) or F3DB:ALPHA (fixed).
    #[arg(long, value_name = "SPEC", allow_negative_numbers = true)]
    pub detector_filter: Option<String>,
    /// Model frequency-dependent drag (matters for beads of 1 um and larger at kHz).
    #[arg(long)]
    pub hydrodynamics: bool,
    /// Remove a straight line, not just the mean, before equipartition.
    #[arg(long)]
    pub linear_detrend: bool,
    /// Comma-separated names of axes perpendicular to the surface (default z).
    #[arg(long, value_name = "NAMES", allow_negative_numbers = true)]
    pub axial_axes: Option<String>,
    /// Relative standard error of the stiffness you need, per cent (default 5).
    #[arg(long, value_name = "PERCENT", allow_negative_numbers = true)]
    pub precision: Option<f64>,
}

impl RunArgs {
    /// The same settings as text pairs go through `Settings::apply`, so the command line and
    /// the HTTP fields share one parser and one set of error messages.
    pub fn settings(
        &self,
    ) -> Result<trapwise_settings::Settings, trapwise_settings::SettingsError> {
        let mut s = trapwise_settings::Settings::default();
        let mut set =
            |k: &str, v: Option<String>| -> Result<(), trapwise_settings::SettingsError> {
                match v {
                    Some(v) => s.apply(k, &v),
                    None => Ok(()),
                }
            };
        let f = |v: Option<f64>| v.map(|x| x.to_string());
        set("bead_diameter_um", Some(self.bead_diameter.to_string()))?;
        set("bead_diameter_se_um", f(self.bead_diameter_se))?;
        set("temperature_c", Some(self.temperature.to_string()))?;
        set("temperature_se_c", f(self.temperature_se))?;
        set("sample_rate_hz", f(self.sample_rate))?;
        set("viscosity_mpa_s", f(self.viscosity))?;
        set("height_um", f(self.height))?;
        set("height_se_um", f(self.height_se))?;
        set("bead_density_kg_per_m3", f(self.bead_density))?;
        set("units", self.units.clone())?;
        set("format", self.format.clone())?;
        set("channels", self.channels.map(|c| c.to_string()))?;
        set("volts_per_count", f(self.volts_per_count))?;
        set("fit_min_hz", f(self.fit_min))?;
        set("fit_max_hz", f(self.fit_max))?;
        set("windows", self.windows.map(|w| w.to_string()))?;
        set("detector_filter", self.detector_filter.clone())?;
        set("hydrodynamics", self.hydrodynamics.then(|| "true".into()))?;
        set("detrend", self.linear_detrend.then(|| "linear".into()))?;
        set("axial_axes", self.axial_axes.clone())?;
        set("precision_percent", f(self.precision))?;
        Ok(s)
    }
}

use crate::settings as trapwise_settings;

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
