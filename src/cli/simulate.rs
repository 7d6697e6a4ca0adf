//! `trapwise simulate`: exact recordings of a trapped bead with a known truth, written in any
//! supported format, plus a JSON file holding the truth.
//!
//! The plain recording (no instrument term, or `--start-nm`) is the exact AR(1) recursion of the
//! Ornstein-Uhlenbeck process, with the legacy disturbances added in the time domain; its bytes
//! for a given seed never change. The photodiode filter, frequency-dependent drag, a camera
//! exposure and 1/f drift have no AR(1) form: with any of them every axis is drawn by exact
//! random-phase synthesis from its whole aliased spectrum (`simulate::InstrumentAxis`). The new
//! instrument terms are given in the output unit (nm, or V with `--units V`), as the detector
//! sees them; the older `--noise`, `--hum-amplitude` and `--drift` are in nm of bead motion.

use super::Failure;
use crate::calibration::{self, Physics, RunConditions};
use crate::drag::{self, AxisOrientation};
use crate::ingest::{self, Format};
use crate::recording::{AxisTrace, PositionUnit, Recording};
use crate::settings::parse_unit;
use crate::simulate::{
    Disturbances, FlickerDrift, InstrumentAxis, OuAxis, SimulateError, Sinusoid, Start, add_lines,
    simulate_axes_from, simulate_instrument_axes,
};
use crate::spectrum::{DetectorFilter, HydroTerms};
use anyhow::anyhow;
use clap::Args;
use serde::Serialize;
use std::f64::consts::PI;
use std::path::PathBuf;

/// Arguments of `simulate`.
#[derive(Debug, Args)]
pub struct SimulateArgs {
    /// Output file; the format follows the extension unless --format is given.
    #[arg(long, short)]
    pub output: PathBuf,
    /// Output format: csv, tsv, columns, raw-f32, raw-f64, raw-i16, npy.
    #[arg(long)]
    pub format: Option<String>,
    /// Trap stiffness per axis, pN/nm, comma-separated (one value per axis).
    #[arg(long, default_value = "0.05", value_name = "PN_PER_NM")]
    pub stiffness: String,
    /// Axis names, comma-separated (default x, y, z by count).
    #[arg(long, value_name = "NAMES")]
    pub axes: Option<String>,
    /// Bead diameter, micrometres.
    #[arg(long, default_value_t = 1.0, value_name = "UM")]
    pub bead_diameter: f64,
    /// Temperature, degrees Celsius.
    #[arg(
        long,
        default_value_t = 25.0,
        value_name = "C",
        allow_negative_numbers = true
    )]
    pub temperature: f64,
    /// Height of the bead centre above the surface, micrometres (wall-corrected drag).
    #[arg(long, value_name = "UM")]
    pub height: Option<f64>,
    /// Sampling rate, Hz.
    #[arg(long, default_value_t = 50_000.0, value_name = "HZ")]
    pub sample_rate: f64,
    /// Record length, seconds.
    #[arg(long, default_value_t = 2.0, value_name = "S")]
    pub duration: f64,
    /// Seed of the random stream (Xoshiro256++).
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Output unit: nm, or V through the sensitivity.
    #[arg(long, default_value = "nm", value_name = "nm|V")]
    pub units: String,
    /// Detector sensitivity for volt output, nm/V.
    #[arg(long, default_value_t = 500.0, value_name = "NM_PER_V")]
    pub sensitivity: f64,
    /// Volts per count for raw-i16 output.
    #[arg(long, default_value_t = 10.0 / 32768.0, value_name = "V")]
    pub volts_per_count: f64,
    /// Amplitude of a sinusoidal pickup, nm.
    #[arg(long, default_value_t = 0.0, value_name = "NM")]
    pub hum_amplitude: f64,
    /// Frequency of the pickup, Hz.
    #[arg(long, default_value_t = 50.0, value_name = "HZ")]
    pub hum_frequency: f64,
    /// Linear drift, nm/s.
    #[arg(
        long,
        default_value_t = 0.0,
        value_name = "NM_PER_S",
        allow_negative_numbers = true
    )]
    pub drift: f64,
    /// White detection noise, nm rms (the same noise as --noise-floor, in nm).
    #[arg(long, default_value_t = 0.0, value_name = "NM")]
    pub noise: f64,
    /// Photodiode filter of the detector: F3DB:ALPHA (corner of the slow part in Hz, and the
    /// instantly passed amplitude fraction, 0 < ALPHA <= 1).
    #[arg(long, value_name = "F3DB:ALPHA", allow_hyphen_values = true)]
    pub detector_filter: Option<String>,
    /// Frequency-dependent drag of the fluid on the bead (from --bead-diameter, --temperature
    /// and --bead-density; bulk form, so not with --height).
    #[arg(long)]
    pub hydrodynamics: bool,
    /// Bead density, kg/m^3, for --hydrodynamics (polystyrene 1050).
    #[arg(long, default_value_t = drag::POLYSTYRENE_DENSITY_KG_PER_M3, value_name = "KG_PER_M3",
        allow_negative_numbers = true)]
    pub bead_density: f64,
    /// White noise floor of the detector, rms in the output unit (nm, or V with --units V).
    #[arg(long, value_name = "NM_OR_V", allow_negative_numbers = true)]
    pub noise_floor: Option<f64>,
    /// 1/f drift: its one-sided density at 1 Hz in the output unit squared per Hz (nm^2/Hz or
    /// V^2/Hz); flat below 1 / duration.
    #[arg(
        long = "drift-1f",
        value_name = "UNIT2_PER_HZ",
        allow_negative_numbers = true
    )]
    pub drift_1f: Option<f64>,
    /// A sinusoidal line, HZ:AMPLITUDE (peak amplitude in the output unit), at any frequency up
    /// to Nyquist; repeat for more lines.
    #[arg(long = "line", value_name = "HZ:AMPLITUDE", allow_hyphen_values = true)]
    pub lines: Vec<String>,
    /// Camera exposure, seconds (0 < S <= 1 / sample rate): each sample averages the position
    /// over the exposure.
    #[arg(long, value_name = "S", allow_negative_numbers = true)]
    pub exposure_time_s: Option<f64>,
    /// Start every axis at this position, nm, instead of the stationary start (relaxation of
    /// beads released from one point); exact AR(1) path only.
    #[arg(long, value_name = "NM", allow_negative_numbers = true)]
    pub start_nm: Option<f64>,
    /// Oscillate the sample stage sinusoidally at this frequency, Hz (active calibration): the
    /// driven axis gets the bead's steady-state response to the moving fluid, exactly, on top of
    /// its thermal motion. With --drive-amplitude.
    #[arg(long, value_name = "HZ", requires = "drive_amplitude")]
    pub drive_frequency: Option<f64>,
    /// Stage amplitude, zero to peak, nm. With --drive-frequency.
    #[arg(long, value_name = "NM", requires = "drive_frequency")]
    pub drive_amplitude: Option<f64>,
    /// The driven axis (default: the first).
    #[arg(long, value_name = "NAME", requires = "drive_frequency")]
    pub drive_axis: Option<String>,
    /// Where to write the truth (default: OUTPUT with `.truth.json` appended).
    #[arg(long)]
    pub truth: Option<PathBuf>,
}

/// The known truth of a simulated recording.
#[derive(Debug, Serialize)]
struct Truth {
    seed: u64,
    sample_rate_hz: f64,
    n_samples: usize,
    unit: &'static str,
    format: &'static str,
    bead_diameter_um: f64,
    temperature_c: f64,
    height_um: Option<f64>,
    viscosity_mpa_s: f64,
    thermal_energy_pn_nm: f64,
    /// Only with --start-nm (so plain recordings keep their truth bytes).
    #[serde(skip_serializing_if = "Option::is_none")]
    start_nm: Option<f64>,
    /// Only with --drive-frequency.
    #[serde(skip_serializing_if = "Option::is_none")]
    drive: Option<DriveTruth>,
    axes: Vec<AxisTruth>,
}

/// The stage drive of a simulated recording.
#[derive(Debug, Serialize)]
struct DriveTruth {
    frequency_hz: f64,
    amplitude_nm: f64,
    axis: String,
    /// |X / X_stage|^2 of the bead at the drive frequency (`calibration::response_power`).
    response_power: f64,
    /// The driven motion's amplitude in the record, output unit (after the detector's filter
    /// and the exposure).
    recorded_amplitude: f64,
}

#[derive(Debug, Serialize)]
struct AxisTruth {
    axis: String,
    stiffness_pn_per_nm: f64,
    drag_pn_s_per_nm: f64,
    corner_frequency_hz: f64,
    relaxation_time_s: f64,
    variance_nm2: f64,
    sensitivity_nm_per_v: Option<f64>,
    /// Only when an instrument term is given (so plain recordings keep their truth bytes).
    #[serde(skip_serializing_if = "Option::is_none")]
    model: Option<ModelTruth>,
}

/// Every term of the simulated recording of one axis, in the output unit, so that a reader can
/// rebuild its spectrum.
#[derive(Debug, Serialize)]
struct ModelTruth {
    /// `ar1` (exact recursion, terms added in the time domain) or `spectral` (random-phase
    /// synthesis from the whole aliased spectrum).
    synthesis: &'static str,
    unit: &'static str,
    corner_frequency_hz: f64,
    /// Variance of the bead's motion, unit^2.
    variance_unit2: f64,
    /// D = 2 pi fc variance, unit^2/s.
    diffusion_unit2_per_s: f64,
    detector_filter: Option<FilterTruth>,
    hydrodynamics: Option<HydroTruth>,
    exposure_time_s: Option<f64>,
    /// White noise rms, unit (from --noise-floor, or --noise converted).
    noise_floor_rms: f64,
    /// 1/f drift: density at 1 Hz (unit^2/Hz) and the cut below which it is flat (Hz).
    drift_1f_density_at_1_hz: f64,
    drift_1f_low_cut_hz: Option<f64>,
    /// Sinusoidal lines (the --hum pickup among them), amplitude in unit.
    lines: Vec<LineTruth>,
    /// Linear drift, unit/s.
    linear_drift_per_s: f64,
    /// Fixed start, unit.
    start: Option<f64>,
}

#[derive(Debug, Serialize)]
struct FilterTruth {
    f3db_hz: f64,
    alpha: f64,
}

#[derive(Debug, Serialize)]
struct HydroTruth {
    f_nu_hz: f64,
    f_m_hz: f64,
    bead_density_kg_per_m3: f64,
    fluid_density_kg_per_m3: f64,
}

#[derive(Debug, Serialize)]
struct LineTruth {
    frequency_hz: f64,
    amplitude: f64,
    phase_rad: f64,
}

fn usage(msg: String) -> Failure {
    Failure::new(2, anyhow!(msg))
}

/// The instrument terms of the command line, in the output unit, common to every axis.
struct Terms {
    filter: Option<DetectorFilter>,
    hydro: Option<HydroTerms>,
    exposure_time_s: Option<f64>,
    noise_floor_rms: f64,
    flicker: Option<FlickerDrift>,
    lines: Vec<Sinusoid>,
    linear_drift_per_s: f64,
    start: Option<f64>,
    /// The white noise in nm for the AR(1) path (exactly --noise when given that way).
    white_noise_nm: f64,
    /// Bead and fluid density behind `hydro`, kg/m^3.
    densities_kg_per_m3: (f64, f64),
    /// Whether any term beyond the original flags was given (then the truth lists the model).
    any_new: bool,
}

impl Terms {
    fn spectral(&self) -> bool {
        self.filter.is_some()
            || self.hydro.is_some()
            || self.exposure_time_s.is_some()
            || self.flicker.is_some()
    }
}

/// One axis: its name, truth and the core description.
struct SimAxis {
    truth: AxisTruth,
    ou: OuAxis,
}

pub(super) fn run(args: &SimulateArgs) -> Result<u8, Failure> {
    let format = output_format(args)?;
    let unit = parse_unit(&args.units).ok_or_else(|| usage("--units takes nm or V".into()))?;
    if !(args.sample_rate > 0.0 && args.duration > 0.0 && args.sensitivity > 0.0) {
        return Err(usage(
            "--sample-rate, --duration and --sensitivity must be positive".into(),
        ));
    }
    let n_samples = (args.sample_rate * args.duration).round() as usize;
    let mut conditions = RunConditions::new(args.bead_diameter * 1e-6, args.temperature);
    conditions.height_m = args.height.map(|h| h * 1e-6);
    let physics = calibration::physics(&conditions).map_err(|e| Failure::new(2, e))?;
    let scale = match unit {
        PositionUnit::Nanometre => 1.0,
        PositionUnit::Volt => 1.0 / args.sensitivity,
    };
    let mut axes = build_axes(args, unit, &conditions, &physics)?;
    let terms = instrument_terms(args, unit, &conditions, &physics)?;
    let drive = drive_of(args, &axes, &terms, scale)?;
    let drive_line = drive.as_ref().map(|(i, line, _)| (*i, *line));
    let series = simulate_series(args, &mut axes, &terms, scale, unit, n_samples, drive_line)?;
    let recording = Recording {
        sample_rate_hz: args.sample_rate,
        unit,
        axes: axes
            .iter()
            .zip(series)
            .map(|(axis, samples)| AxisTrace {
                name: axis.ou.name.clone(),
                samples,
            })
            .collect(),
    };
    let bytes = ingest::encode(&recording, format, Some(args.volts_per_count))
        .map_err(|e| Failure::new(2, e))?;
    std::fs::write(&args.output, &bytes)
        .map_err(|e| Failure::new(1, anyhow!("cannot write {}: {e}", args.output.display())))?;
    let truth = Truth {
        seed: args.seed,
        sample_rate_hz: args.sample_rate,
        n_samples,
        unit: unit.suffix(),
        format: format.name(),
        bead_diameter_um: args.bead_diameter,
        temperature_c: args.temperature,
        height_um: args.height,
        viscosity_mpa_s: physics.viscosity_pa_s * 1e3,
        thermal_energy_pn_nm: physics.thermal_energy_j * 1e21,
        start_nm: args.start_nm,
        drive: drive.map(|(_, _, truth)| truth),
        axes: axes.into_iter().map(|a| a.truth).collect(),
    };
    let truth_path = args.truth.clone().unwrap_or_else(|| {
        let mut p = args.output.clone().into_os_string();
        p.push(".truth.json");
        PathBuf::from(p)
    });
    let text = serde_json::to_string_pretty(&truth).map_err(|e| Failure::new(1, e))? + "\n";
    std::fs::write(&truth_path, text)
        .map_err(|e| Failure::new(1, anyhow!("cannot write {}: {e}", truth_path.display())))?;
    eprintln!(
        "wrote {} ({} axis(es) × {} samples, {}{}) and {}",
        args.output.display(),
        recording.axes.len(),
        n_samples,
        format.name(),
        if terms.spectral() {
            ", spectral synthesis"
        } else {
            ""
        },
        truth_path.display()
    );
    Ok(0)
}

/// The output format from --format or the file extension.
fn output_format(args: &SimulateArgs) -> Result<Format, Failure> {
    match &args.format {
        Some(f) => Format::parse_name(f).ok_or_else(|| usage(format!("unknown format `{f}`"))),
        None => {
            let ext = args
                .output
                .extension()
                .and_then(|e| e.to_str())
                .unwrap_or("");
            Format::ALL
                .into_iter()
                .find(|f| f.extension().eq_ignore_ascii_case(ext))
                .ok_or_else(|| {
                    usage(format!(
                        "cannot tell the format from `{}`; give --format",
                        args.output.display()
                    ))
                })
        }
    }
}

/// The axes from --stiffness and --axes, with their drag, corner frequency and variance.
fn build_axes(
    args: &SimulateArgs,
    unit: PositionUnit,
    conditions: &RunConditions,
    physics: &Physics,
) -> Result<Vec<SimAxis>, Failure> {
    let stiffness: Vec<f64> = args
        .stiffness
        .split(',')
        .map(|s| s.trim().parse::<f64>())
        .collect::<Result<_, _>>()
        .map_err(|_| {
            usage(format!(
                "--stiffness `{}` is not a list of numbers",
                args.stiffness
            ))
        })?;
    if stiffness.is_empty() || stiffness.len() > 3 || stiffness.iter().any(|k| !(*k > 0.0)) {
        return Err(usage(
            "--stiffness takes one to three positive values in pN/nm".into(),
        ));
    }
    let names: Vec<String> = match &args.axes {
        Some(a) => a.split(',').map(|s| s.trim().to_string()).collect(),
        None => ["x", "y", "z"][..stiffness.len()]
            .iter()
            .map(|s| s.to_string())
            .collect(),
    };
    if names.len() != stiffness.len() {
        return Err(usage(format!(
            "{} axis names for {} stiffness values",
            names.len(),
            stiffness.len()
        )));
    }
    let kt = physics.thermal_energy_j;
    let radius = conditions.bead_diameter_m / 2.0;
    let mut axes = Vec::new();
    for (name, &k) in names.iter().zip(&stiffness) {
        let orientation = if name.eq_ignore_ascii_case("z") {
            AxisOrientation::Axial
        } else {
            AxisOrientation::Lateral
        };
        let factor = drag::wall_factor(orientation, radius, conditions.height_m)
            .map_err(|e| Failure::new(2, e))?;
        let gamma = physics.stokes_drag_kg_per_s.value * factor;
        let kappa_si = k * 1e-3;
        let fc = kappa_si / (2.0 * PI * gamma);
        let variance_nm2 = kt / kappa_si * 1e18;
        axes.push(SimAxis {
            ou: OuAxis {
                name: name.clone(),
                corner_frequency_hz: fc,
                variance: variance_nm2,
            },
            truth: AxisTruth {
                axis: name.clone(),
                stiffness_pn_per_nm: k,
                drag_pn_s_per_nm: gamma * 1e3,
                corner_frequency_hz: fc,
                relaxation_time_s: 1.0 / (2.0 * PI * fc),
                variance_nm2,
                sensitivity_nm_per_v: (unit == PositionUnit::Volt).then_some(args.sensitivity),
                model: None,
            },
        });
    }
    Ok(axes)
}

/// Parses `A:B` into two numbers, or says what `flag` takes.
fn pair(flag: &str, what: &str, value: &str) -> Result<(f64, f64), Failure> {
    let parsed = value.split_once(':').and_then(|(a, b)| {
        let a: f64 = a.trim().parse().ok()?;
        let b: f64 = b.trim().parse().ok()?;
        Some((a, b))
    });
    parsed.ok_or_else(|| usage(format!("{flag} takes {what}, got `{value}`")))
}

/// The instrument terms of the command line, in the output unit `unit`, with the checks that
/// concern flags rather than values.
fn instrument_terms(
    args: &SimulateArgs,
    unit: PositionUnit,
    conditions: &RunConditions,
    physics: &Physics,
) -> Result<Terms, Failure> {
    let filter = match &args.detector_filter {
        Some(v) => {
            let (f3db_hz, alpha) = pair("--detector-filter", "F3DB:ALPHA", v)?;
            Some(DetectorFilter { f3db_hz, alpha })
        }
        None => None,
    };
    let hydro = if args.hydrodynamics {
        if args.height.is_some() {
            return Err(usage(
                "--hydrodynamics models the drag's frequency dependence in bulk fluid and has no form near a wall here; drop --height or --hydrodynamics".into(),
            ));
        }
        if !(args.bead_density.is_finite() && args.bead_density > 0.0) {
            return Err(usage(format!(
                "--bead-density {} must be a positive density in kg/m^3 (polystyrene 1050, silica about 2000)",
                args.bead_density
            )));
        }
        let h = drag::hydrodynamic_frequencies(
            physics.viscosity_pa_s,
            physics.fluid_density_kg_per_m3,
            args.bead_density,
            conditions.bead_diameter_m / 2.0,
        );
        Some(HydroTerms {
            f_nu_hz: h.f_nu_hz,
            f_m_hz: h.f_m_hz,
        })
    } else {
        None
    };
    if args.noise != 0.0 && args.noise_floor.is_some() {
        return Err(usage(
            "--noise (nm) and --noise-floor (output unit) are the same white noise; give one"
                .into(),
        ));
    }
    // Output unit to nm: the sensitivity for volts (a product, so that --noise-floor R in volts
    // and --noise R x sensitivity in nm give the same noise to the last bit when exact), and
    // back (as `run` scales the samples).
    let (nm_per_unit, scale) = match unit {
        PositionUnit::Nanometre => (1.0, 1.0),
        PositionUnit::Volt => (args.sensitivity, 1.0 / args.sensitivity),
    };
    let (noise_floor_rms, white_noise_nm) = match args.noise_floor {
        Some(rms) => (rms, rms * nm_per_unit),
        None => (args.noise * scale, args.noise),
    };
    let mut lines = Vec::new();
    if args.hum_amplitude != 0.0 {
        lines.push(Sinusoid {
            frequency_hz: args.hum_frequency,
            amplitude: args.hum_amplitude * scale,
            phase_rad: 0.0,
        });
    }
    for v in &args.lines {
        let (frequency_hz, amplitude) = pair("--line", "HZ:AMPLITUDE", v)?;
        lines.push(Sinusoid {
            frequency_hz,
            amplitude,
            phase_rad: 0.0,
        });
    }
    let terms = Terms {
        filter,
        hydro,
        exposure_time_s: args.exposure_time_s,
        noise_floor_rms,
        flicker: args.drift_1f.map(|density_at_1_hz| FlickerDrift {
            density_at_1_hz,
            low_cut_hz: 1.0 / args.duration,
        }),
        lines,
        linear_drift_per_s: args.drift * scale,
        start: args.start_nm.map(|x| x * scale),
        white_noise_nm,
        densities_kg_per_m3: (args.bead_density, physics.fluid_density_kg_per_m3),
        any_new: args.detector_filter.is_some()
            || args.hydrodynamics
            || args.noise_floor.is_some()
            || args.drift_1f.is_some()
            || !args.lines.is_empty()
            || args.exposure_time_s.is_some()
            || args.start_nm.is_some(),
    };
    if terms.start.is_some() && terms.spectral() {
        return Err(usage(
            "--start-nm runs the exact AR(1) recursion, which has no form for --detector-filter, --hydrodynamics, --exposure-time-s or --drift-1f; drop them or the start".into(),
        ));
    }
    if let Some(x) = args.start_nm {
        if !x.is_finite() {
            return Err(usage(format!(
                "--start-nm {x} must be a finite position in nm"
            )));
        }
    }
    Ok(terms)
}

/// The flag a description error comes from.
fn flag_of(error: &SimulateError) -> &'static str {
    match error {
        SimulateError::FilterAlpha { .. } => "--detector-filter",
        SimulateError::ExposureTooLong { .. } => "--exposure-time-s",
        SimulateError::LineFrequency { .. } | SimulateError::LineNotFinite { .. } => {
            "--line (or --hum-frequency)"
        }
        SimulateError::NotPositive { field, .. }
        | SimulateError::Negative { field, .. }
        | SimulateError::NotFinite { field, .. } => match *field {
            f if f.starts_with("detector filter") => "--detector-filter",
            f if f.starts_with("exposure") => "--exposure-time-s",
            f if f.starts_with("noise") => "--noise-floor",
            f if f.starts_with("drift_1f") => "--drift-1f",
            f if f.starts_with("linear_drift") => "--drift",
            f if f.starts_with("hydrodynamic") => "--hydrodynamics",
            _ => "--stiffness",
        },
    }
}

/// The stage drive's line on the driven axis (its index), in the output unit, and its truth.
///
/// The bead follows the moving fluid with X / X_stage = R(f_d) (`calibration::response_power`:
/// i f / (fc + i f) with constant drag, Tolic-Norrelykke et al., Rev. Sci. Instrum. 77, 103101
/// (2006); with --hydrodynamics the same derivation with the frequency-dependent drag); the
/// detector's filter and the camera's exposure then scale the recorded amplitude by the square
/// root of their power gains (a deterministic sinusoid below Nyquist is not aliased).
fn drive_of(
    args: &SimulateArgs,
    axes: &[SimAxis],
    terms: &Terms,
    scale: f64,
) -> Result<Option<(usize, Sinusoid, DriveTruth)>, Failure> {
    let (Some(fd), Some(a)) = (args.drive_frequency, args.drive_amplitude) else {
        return Ok(None);
    };
    let nyquist = args.sample_rate / 2.0;
    if !(fd > 0.0 && fd < nyquist) {
        return Err(usage(format!(
            "--drive-frequency {fd} must lie between 0 and the Nyquist frequency {nyquist} Hz"
        )));
    }
    if !(a.is_finite() && a > 0.0) {
        return Err(usage(format!(
            "--drive-amplitude {a} must be a positive amplitude in nm"
        )));
    }
    let index = match &args.drive_axis {
        None => 0,
        Some(name) => axes
            .iter()
            .position(|x| &x.ou.name == name)
            .ok_or_else(|| usage(format!("--drive-axis {name}: no such axis")))?,
    };
    let fc = axes[index].ou.corner_frequency_hz;
    let response = calibration::response_power(fd, fc, terms.hydro);
    let filter_gain = terms.filter.map_or(1.0, |f| f.gain(fd));
    let blur_gain = terms.exposure_time_s.map_or(1.0, |w| {
        let x = PI * fd * w;
        (x.sin() / x).powi(2)
    });
    let recorded = a * (response * filter_gain * blur_gain).sqrt() * scale;
    Ok(Some((
        index,
        Sinusoid {
            frequency_hz: fd,
            amplitude: recorded,
            phase_rad: 0.0,
        },
        DriveTruth {
            frequency_hz: fd,
            amplitude_nm: a,
            axis: axes[index].ou.name.clone(),
            response_power: response,
            recorded_amplitude: recorded,
        },
    )))
}

/// The samples of every axis in the output unit; fills in each axis's model truth.
fn simulate_series(
    args: &SimulateArgs,
    axes: &mut [SimAxis],
    terms: &Terms,
    scale: f64,
    unit: PositionUnit,
    n_samples: usize,
    drive: Option<(usize, Sinusoid)>,
) -> Result<Vec<Vec<f64>>, Failure> {
    let driven = |i: usize| drive.filter(|(d, _)| *d == i).map(|(_, line)| line);
    let instrument: Vec<InstrumentAxis> = axes
        .iter()
        .enumerate()
        .map(|(i, a)| InstrumentAxis {
            corner_frequency_hz: a.ou.corner_frequency_hz,
            variance: a.ou.variance * scale * scale,
            detector_filter: terms.filter,
            hydrodynamics: terms.hydro,
            exposure_time_s: terms.exposure_time_s,
            noise_floor_rms: terms.noise_floor_rms,
            flicker: terms.flicker,
            lines: terms.lines.iter().copied().chain(driven(i)).collect(),
            linear_drift_per_s: terms.linear_drift_per_s,
        })
        .collect();
    for axis in &instrument {
        axis.validate(args.sample_rate)
            .map_err(|e| usage(format!("{}: {e}", flag_of(&e))))?;
    }
    if terms.any_new {
        for (a, i) in axes.iter_mut().zip(&instrument) {
            a.truth.model = Some(model_truth(i, terms, unit));
        }
    }
    if terms.spectral() {
        return simulate_instrument_axes(&instrument, args.sample_rate, n_samples, args.seed)
            .map_err(|e| usage(format!("{}: {e}", flag_of(&e))));
    }
    // The exact AR(1) path, in nm with the original disturbances (their random stream is the one
    // the demo data were made with), then scaled, then the --line terms (deterministic).
    let ou: Vec<OuAxis> = axes.iter().map(|a| a.ou.clone()).collect();
    let disturbances = Disturbances {
        hum_amplitude: args.hum_amplitude,
        hum_frequency_hz: args.hum_frequency,
        drift_per_s: args.drift,
        white_noise: terms.white_noise_nm,
    };
    let start = args.start_nm.map_or(Start::Stationary, Start::Fixed);
    let series = simulate_axes_from(
        &ou,
        start,
        args.sample_rate,
        n_samples,
        args.seed,
        &disturbances,
    );
    let extra_lines: Vec<Sinusoid> = terms
        .lines
        .iter()
        .skip(usize::from(args.hum_amplitude != 0.0))
        .copied()
        .collect();
    Ok(series
        .into_iter()
        .enumerate()
        .map(|(i, s)| {
            let mut out: Vec<f64> = s.into_iter().map(|v| v * scale).collect();
            let lines: Vec<Sinusoid> = extra_lines.iter().copied().chain(driven(i)).collect();
            add_lines(&mut out, args.sample_rate, &lines);
            out
        })
        .collect())
}

/// The truth of one axis's model.
fn model_truth(axis: &InstrumentAxis, terms: &Terms, unit: PositionUnit) -> ModelTruth {
    let (bead_density_kg_per_m3, fluid_density_kg_per_m3) = terms.densities_kg_per_m3;
    ModelTruth {
        synthesis: if terms.spectral() { "spectral" } else { "ar1" },
        unit: unit.suffix(),
        corner_frequency_hz: axis.corner_frequency_hz,
        variance_unit2: axis.variance,
        diffusion_unit2_per_s: axis.diffusion(),
        detector_filter: axis.detector_filter.map(|f| FilterTruth {
            f3db_hz: f.f3db_hz,
            alpha: f.alpha,
        }),
        hydrodynamics: axis.hydrodynamics.map(|h| HydroTruth {
            f_nu_hz: h.f_nu_hz,
            f_m_hz: h.f_m_hz,
            bead_density_kg_per_m3,
            fluid_density_kg_per_m3,
        }),
        exposure_time_s: axis.exposure_time_s,
        noise_floor_rms: axis.noise_floor_rms,
        drift_1f_density_at_1_hz: axis.flicker.map_or(0.0, |d| d.density_at_1_hz),
        drift_1f_low_cut_hz: axis.flicker.map(|d| d.low_cut_hz),
        lines: axis
            .lines
            .iter()
            .map(|l| LineTruth {
                frequency_hz: l.frequency_hz,
                amplitude: l.amplitude,
                phase_rad: l.phase_rad,
            })
            .collect(),
        linear_drift_per_s: axis.linear_drift_per_s,
        start: terms.start,
    }
}
