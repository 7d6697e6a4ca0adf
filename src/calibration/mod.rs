//! Calibration of one recording: drag from the run conditions, the three stiffness estimates,
//! the detector sensitivity for volt data, their correlations, a consensus stiffness and the
//! verdict, plus the data-quality findings.
//!
//! Units: SI inside (kg/s, N/m, m, s); the result carries the trade's units (pN/nm, nm/V,
//! pN s/nm) in its field names, converted here once. For nanometre data the signal unit is the
//! nanometre; for volt data it is the volt.

mod axis;
mod conditions;
pub mod consensus;
mod covariance;
#[cfg(test)]
mod exclusion_tests;
#[cfg(test)]
mod noise_floor_tests;
mod propagation;
#[cfg(test)]
mod real_instrument_tests;
mod spectral;
#[cfg(test)]
mod synthetic_records;
#[cfg(test)]
mod tests;
mod time_domain;

pub use consensus::{Combined, Discrepancy, METHODS, Verdict, Z_LIMIT};

use crate::autocorrelation::{AcfError, AcfFitOptions, ExponentialFit};
use crate::drag::{self, AxisOrientation, DragError};
use crate::equipartition::{Detrend, EquipartitionError, VarianceEstimate};
use crate::findings::Finding;
use crate::recording::Recording;
use crate::spectrum::{
    self, FilterSetting, FitRange, NarrowPeak, NoiseFloorMode, SpectrumFit, SpectrumFitError,
};
use crate::water::{self, BOLTZMANN_J_PER_K, WaterError, ZERO_CELSIUS_K};

pub use crate::estimate::Estimate;

/// The physical conditions of a run, with optional standard errors (zero when unknown: the
/// reported errors are then statistical only, and say so).
#[derive(Clone, Debug, PartialEq)]
pub struct RunConditions {
    /// Bead diameter, m.
    pub bead_diameter_m: f64,
    pub bead_diameter_se_m: f64,
    /// Sample temperature, degrees Celsius.
    pub temperature_c: f64,
    pub temperature_se_c: f64,
    /// Viscosity override, Pa s; `None` computes water's from the temperature.
    pub viscosity_pa_s: Option<f64>,
    /// Height of the bead centre above the surface, m; `None` for bulk (no wall correction).
    pub height_m: Option<f64>,
    pub height_se_m: f64,
    /// Bead density, kg/m^3 (enters only the hydrodynamic model).
    pub bead_density_kg_per_m3: f64,
}

impl RunConditions {
    /// Conditions with the given diameter (m) and temperature (C), everything else default.
    pub fn new(bead_diameter_m: f64, temperature_c: f64) -> Self {
        RunConditions {
            bead_diameter_m,
            bead_diameter_se_m: 0.0,
            temperature_c,
            temperature_se_c: 0.0,
            viscosity_pa_s: None,
            height_m: None,
            height_se_m: 0.0,
            bead_density_kg_per_m3: drag::POLYSTYRENE_DENSITY_KG_PER_M3,
        }
    }
}

/// How the record is analysed.
#[derive(Clone, Debug)]
pub struct AnalysisOptions {
    /// Spectral fit range.
    pub fit_range: FitRange,
    /// Non-overlapping segments averaged in the periodogram; `None` chooses segments of about
    /// 2^18 samples (see `default_windows`).
    pub n_windows: Option<usize>,
    /// Detector filter model.
    pub filter: FilterSetting,
    /// Include frequency-dependent drag in the spectral model.
    pub hydrodynamics: bool,
    /// What equipartition removes before taking the variance.
    pub detrend: Detrend,
    /// Lag window of the autocorrelation fit.
    pub acf: AcfFitOptions,
    /// Relative standard error of the stiffness the user wants; a larger one is a finding.
    pub target_relative_precision: f64,
    /// Leave narrow peaks out of the spectral fit.
    pub exclude_peaks: bool,
    /// Names of axes moving perpendicular to the surface (default `z`).
    pub axial_axes: Vec<String>,
    /// Whether the white noise floor enters the spectral model (default: when a
    /// likelihood-ratio test says the data support it, see `spectrum::fit_spectrum_with_floor`).
    pub noise_floor: NoiseFloorMode,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            fit_range: FitRange::default(),
            n_windows: None,
            filter: FilterSetting::None,
            hydrodynamics: false,
            detrend: Detrend::Mean,
            acf: AcfFitOptions::default(),
            target_relative_precision: 0.05,
            exclude_peaks: true,
            axial_axes: vec!["z".to_string()],
            noise_floor: NoiseFloorMode::Auto,
        }
    }
}

/// The white noise floor of one axis as the report shows it (signal units of the record).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NoiseFloorSummary {
    /// The likelihood-ratio test and the fit without the floor.
    pub test: spectrum::NoiseFloorTest,
    /// The fitted level, when the floor is in the model.
    pub level: Option<spectrum::NoiseFloorLevel>,
    /// sigma_n^2 divided by the measured variance (before the floor was subtracted), when the
    /// floor is in the model and the variance exists.
    pub variance_share: Option<f64>,
}

/// Why a recording could not be calibrated.
#[derive(Clone, Debug, thiserror::Error)]
pub enum CalibrationError {
    /// A run condition is out of its physical range.
    #[error("run condition `{field}` = {value} is invalid: {reason}")]
    InvalidCondition {
        field: &'static str,
        value: f64,
        reason: &'static str,
    },
    /// Water properties are not available at this temperature.
    #[error(transparent)]
    Water(#[from] WaterError),
    /// The wall correction is not defined for this geometry.
    #[error(transparent)]
    Drag(#[from] DragError),
    /// The recording holds no axis.
    #[error("the recording holds no position axis")]
    NoAxes,
    /// The spectral fit failed on an axis.
    #[error("axis `{axis}`: {cause}")]
    Spectrum {
        axis: String,
        cause: SpectrumFitError,
    },
    /// The record is too short for a periodogram.
    #[error("axis `{axis}`: {n_samples} samples are too few for a spectrum")]
    TooShort { axis: String, n_samples: usize },
    /// The autocorrelation fit failed on an axis.
    #[error("axis `{axis}`: {cause}")]
    Autocorrelation { axis: String, cause: AcfError },
    /// The variance could not be taken on an axis.
    #[error("axis `{axis}`: {cause}")]
    Equipartition {
        axis: String,
        cause: EquipartitionError,
    },
    /// The axis never changes value.
    #[error(
        "axis `{axis}`: all {n_samples} samples have the same value; the detector saw no motion (check that the bead is trapped and the signal connected)"
    )]
    ConstantSignal { axis: String, n_samples: usize },
}

/// Quantities derived from the run conditions.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Physics {
    /// Viscosity used, Pa s, and whether it was computed for water.
    pub viscosity_pa_s: f64,
    pub viscosity_from_water: bool,
    /// Thermal energy kB T, J.
    pub thermal_energy_j: f64,
    /// Bulk Stokes drag 6 pi eta R, kg/s, with its standard error from the inputs.
    pub stokes_drag_kg_per_s: Estimate,
    /// Water density used for the hydrodynamic terms, kg/m^3.
    pub fluid_density_kg_per_m3: f64,
}

/// The three stiffness estimates of one axis and their combination, pN/nm.
#[derive(Clone, Debug, PartialEq)]
pub struct Stiffness {
    /// Each method's estimate, `None` when the method failed on this record (a finding says
    /// why).
    pub psd: Option<Estimate>,
    pub acf: Option<Estimate>,
    pub equipartition: Option<Estimate>,
    /// Whether equipartition is independent of the spectrum (false for volt data, where it uses
    /// the sensitivity from the spectral fit) and so enters the consensus.
    pub equipartition_independent: bool,
    pub consensus: Estimate,
    /// Weights of (psd, acf, equipartition) in the consensus (sum to 1).
    pub consensus_weights: [f64; 3],
    /// Correlation matrix of the three estimates, statistical and input errors together.
    pub correlation: [[f64; 3]; 3],
    /// Why each method (psd, acf, equipartition) was left out of the consensus, if it was: its
    /// value stands, its weight is zero.
    pub excluded: [Option<String>; 3],
}

/// A histogram of positions with the Gaussian expected from equipartition.
#[derive(Clone, Debug, PartialEq)]
pub struct Histogram {
    /// Bin centres and width, signal units (mean removed).
    pub centres: Vec<f64>,
    pub bin_width: f64,
    /// Counts per bin, and the expected counts of N(0, variance).
    pub counts: Vec<u64>,
    pub expected: Vec<f64>,
}

/// A method that failed on one axis while others stood.
#[derive(Clone, Debug)]
pub struct MethodFailure {
    /// `psd`, `acf` or `equipartition`.
    pub method: &'static str,
    pub error: CalibrationError,
}

/// The calibration of one axis.
#[derive(Clone, Debug)]
pub struct AxisCalibration {
    /// The white noise floor: its test and, when it is in the model, its level and share of
    /// the measured variance; `None` with the floor off or without a spectral fit.
    pub noise_floor: Option<NoiseFloorSummary>,
    pub axis: String,
    pub orientation: AxisOrientation,
    /// Wall factor gamma / gamma0 (1 in bulk).
    pub wall_factor: f64,
    /// Drag of this axis, kg/s.
    pub drag_kg_per_s: Estimate,
    /// From the spectral fit; `None` when it failed.
    pub corner_frequency_hz: Option<Estimate>,
    /// From the autocorrelation fit; `None` when it failed.
    pub relaxation_time_s: Option<Estimate>,
    /// Measured diffusion coefficient, signal-units^2/s (one-sided convention), from the
    /// spectral fit.
    pub diffusion: Option<Estimate>,
    /// Einstein's D = kB T / gamma, m^2/s, for the same axis.
    pub diffusion_theory_m2_per_s: f64,
    pub stiffness_pn_per_nm: Stiffness,
    /// Displacement sensitivity beta, nm/V, for volt data.
    pub sensitivity_nm_per_v: Option<Estimate>,
    pub discrepancies: Vec<Discrepancy>,
    pub verdict: Verdict,
    pub verdict_reasons: Vec<String>,
    pub findings: Vec<Finding>,
    /// The methods' own results; `None` for a method that failed (see `failures`).
    pub spectrum: Option<SpectrumFit>,
    pub acf: Option<ExponentialFit>,
    pub variance: Option<VarianceEstimate>,
    pub peaks: Vec<NarrowPeak>,
    pub histogram: Option<Histogram>,
    /// Methods that failed on this axis, with the error; the others stand without them.
    pub failures: Vec<MethodFailure>,
    /// Whether the errors include the run conditions' uncertainties.
    pub includes_input_errors: bool,
    /// Sampling rate, Hz, and the periodogram's frequency resolution, Hz.
    pub sample_rate_hz: f64,
    pub resolution_hz: f64,
    /// Periodogram segments averaged.
    pub n_windows: usize,
    /// Sinusoids fitted and subtracted before the autocorrelation and equipartition methods.
    pub lines_removed: Vec<spectrum::SpectralLine>,
}

/// The calibration of a whole recording.
#[derive(Clone, Debug)]
pub struct Calibration {
    pub physics: Physics,
    pub axes: Vec<AxisCalibration>,
}

fn check_positive(field: &'static str, value: f64) -> Result<(), CalibrationError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(CalibrationError::InvalidCondition {
            field,
            value,
            reason: "must be a positive finite number",
        })
    }
}

fn check_non_negative(field: &'static str, value: f64) -> Result<(), CalibrationError> {
    if value.is_finite() && value >= 0.0 {
        Ok(())
    } else {
        Err(CalibrationError::InvalidCondition {
            field,
            value,
            reason: "a standard error must be zero or positive",
        })
    }
}

/// Viscosity (Pa s) for the conditions at temperature `temperature_c`.
pub(crate) fn viscosity_at(
    conditions: &RunConditions,
    temperature_c: f64,
) -> Result<f64, CalibrationError> {
    match conditions.viscosity_pa_s {
        Some(v) => Ok(v),
        None => Ok(water::water_viscosity_pa_s(temperature_c)?),
    }
}

/// Validates the conditions and derives viscosity, kB T and the bulk drag.
pub fn physics(conditions: &RunConditions) -> Result<Physics, CalibrationError> {
    check_positive("bead_diameter_m", conditions.bead_diameter_m)?;
    if conditions.bead_diameter_m > 1e-3 {
        return Err(CalibrationError::InvalidCondition {
            field: "bead_diameter_m",
            value: conditions.bead_diameter_m,
            reason: "exceeds 1 mm; give the diameter in micrometres on the command line",
        });
    }
    check_non_negative("bead_diameter_se_m", conditions.bead_diameter_se_m)?;
    check_non_negative("temperature_se_c", conditions.temperature_se_c)?;
    check_non_negative("height_se_m", conditions.height_se_m)?;
    check_positive("bead_density_kg_per_m3", conditions.bead_density_kg_per_m3)?;
    if let Some(v) = conditions.viscosity_pa_s {
        check_positive("viscosity_pa_s", v)?;
    }
    let t_k = conditions.temperature_c + ZERO_CELSIUS_K;
    if !(t_k.is_finite() && t_k > 0.0) {
        return Err(CalibrationError::InvalidCondition {
            field: "temperature_c",
            value: conditions.temperature_c,
            reason: "must be above absolute zero",
        });
    }
    let viscosity = viscosity_at(conditions, conditions.temperature_c)?;
    let fluid_density = water::water_density_kg_per_m3(conditions.temperature_c.clamp(
        water::WATER_MIN_TEMPERATURE_C,
        water::WATER_MAX_TEMPERATURE_C,
    ))?;
    let radius = conditions.bead_diameter_m / 2.0;
    let gamma0 = drag::stokes_drag_kg_per_s(viscosity, radius);
    let rel_d = conditions.bead_diameter_se_m / conditions.bead_diameter_m;
    let dlneta_dt = if conditions.viscosity_pa_s.is_none() {
        let h = 0.01;
        let up = viscosity_at(conditions, conditions.temperature_c + h);
        let down = viscosity_at(conditions, conditions.temperature_c - h);
        match (up, down) {
            (Ok(u), Ok(d)) => (u.ln() - d.ln()) / (2.0 * h),
            _ => 0.0,
        }
    } else {
        0.0
    };
    let rel_gamma0 = rel_d.hypot(dlneta_dt * conditions.temperature_se_c);
    Ok(Physics {
        viscosity_pa_s: viscosity,
        viscosity_from_water: conditions.viscosity_pa_s.is_none(),
        thermal_energy_j: BOLTZMANN_J_PER_K * t_k,
        stokes_drag_kg_per_s: Estimate::new(gamma0, gamma0 * rel_gamma0),
        fluid_density_kg_per_m3: fluid_density,
    })
}

/// Calibrates every axis of the recording.
pub fn calibrate(
    recording: &Recording,
    conditions: &RunConditions,
    options: &AnalysisOptions,
) -> Result<Calibration, CalibrationError> {
    if recording.axes.is_empty() {
        return Err(CalibrationError::NoAxes);
    }
    check_positive("sample_rate_hz", recording.sample_rate_hz)?;
    let physics = physics(conditions)?;
    let one_axis = |axis: &crate::recording::AxisTrace| {
        axis::calibrate_axis(&axis::AxisInput {
            name: &axis.name,
            samples: &axis.samples,
            sample_rate_hz: recording.sample_rate_hz,
            unit: recording.unit,
            conditions,
            physics: &physics,
            options,
        })
    };
    // The axes are independent: each runs on its own scoped thread (the first here), and the
    // results are taken in axis order, so the first failing axis is reported as in one pass.
    let axes = match recording.axes.split_first() {
        Some((first, rest)) if !rest.is_empty() => std::thread::scope(|scope| {
            let others: Vec<_> = rest
                .iter()
                .map(|axis| scope.spawn(move || one_axis(axis)))
                .collect();
            let mut results = vec![one_axis(first)];
            for (axis, handle) in rest.iter().zip(others) {
                // A panicking axis is a bug; computing it again here surfaces it on this thread.
                results.push(handle.join().unwrap_or_else(|_| one_axis(axis)));
            }
            results
        }),
        _ => recording.axes.iter().map(one_axis).collect(),
    }
    .into_iter()
    .collect::<Result<Vec<_>, _>>()?;
    Ok(Calibration { physics, axes })
}

/// Segments of about 2^18 samples: long enough that the segment-end leakage of the periodogram
/// (Berg-Sorensen & Flyvbjerg 2004; it scales as tau / T_segment) is negligible for any trap and
/// the resolution (under 0.4 Hz at 100 kHz) still separates mains harmonics, short enough that
/// the transforms stay cheap. Averaging segments and averaging neighbouring bins give the same
/// Gamma statistics for the fit (common practice).
pub fn default_windows(n_samples: usize) -> usize {
    ((n_samples as f64 / f64::from(1u32 << 18)).round() as usize).max(1)
}
