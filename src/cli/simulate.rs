//! `trapwise simulate`: exact Ornstein-Uhlenbeck recordings with a known truth, written in any
//! supported format, plus a JSON file holding the truth.

use super::Failure;
use crate::calibration::{self, RunConditions};
use crate::drag::{self, AxisOrientation};
use crate::ingest::{self, Format};
use crate::recording::{AxisTrace, PositionUnit, Recording};
use crate::settings::parse_unit;
use crate::simulate::{Disturbances, OuAxis, simulate_axes};
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
    /// White detection noise, nm rms.
    #[arg(long, default_value_t = 0.0, value_name = "NM")]
    pub noise: f64,
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
    axes: Vec<AxisTruth>,
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
}

fn usage(msg: String) -> Failure {
    Failure::new(2, anyhow!(msg))
}

pub(super) fn run(args: &SimulateArgs) -> Result<u8, Failure> {
    let format = match &args.format {
        Some(f) => Format::parse_name(f).ok_or_else(|| usage(format!("unknown format `{f}`")))?,
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
                })?
        }
    };
    let unit = parse_unit(&args.units).ok_or_else(|| usage("--units takes nm or V".into()))?;
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
    if !(args.sample_rate > 0.0 && args.duration > 0.0 && args.sensitivity > 0.0) {
        return Err(usage(
            "--sample-rate, --duration and --sensitivity must be positive".into(),
        ));
    }
    let n_samples = (args.sample_rate * args.duration).round() as usize;
    let mut conditions = RunConditions::new(args.bead_diameter * 1e-6, args.temperature);
    conditions.height_m = args.height.map(|h| h * 1e-6);
    let physics = calibration::physics(&conditions).map_err(|e| Failure::new(2, e))?;
    let kt = physics.thermal_energy_j;
    let radius = conditions.bead_diameter_m / 2.0;
    let mut truth_axes = Vec::new();
    let mut ou = Vec::new();
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
        ou.push(OuAxis {
            name: name.clone(),
            corner_frequency_hz: fc,
            variance: variance_nm2,
        });
        truth_axes.push(AxisTruth {
            axis: name.clone(),
            stiffness_pn_per_nm: k,
            drag_pn_s_per_nm: gamma * 1e3,
            corner_frequency_hz: fc,
            relaxation_time_s: 1.0 / (2.0 * PI * fc),
            variance_nm2,
            sensitivity_nm_per_v: (unit == PositionUnit::Volt).then_some(args.sensitivity),
        });
    }
    let disturbances = Disturbances {
        hum_amplitude: args.hum_amplitude,
        hum_frequency_hz: args.hum_frequency,
        drift_per_s: args.drift,
        white_noise: args.noise,
    };
    let series = simulate_axes(&ou, args.sample_rate, n_samples, args.seed, &disturbances);
    let scale = match unit {
        PositionUnit::Nanometre => 1.0,
        PositionUnit::Volt => 1.0 / args.sensitivity,
    };
    let recording = Recording {
        sample_rate_hz: args.sample_rate,
        unit,
        axes: names
            .iter()
            .zip(series)
            .map(|(name, s)| AxisTrace {
                name: name.clone(),
                samples: s.into_iter().map(|v| v * scale).collect(),
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
        thermal_energy_pn_nm: kt * 1e21,
        axes: truth_axes,
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
        "wrote {} ({} axis(es) × {} samples, {}) and {}",
        args.output.display(),
        recording.axes.len(),
        n_samples,
        format.name(),
        truth_path.display()
    );
    Ok(0)
}
