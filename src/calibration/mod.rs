//! Calibration of one recording: drag from the run conditions, the three stiffness estimates,
//! the detector sensitivity for volt data, their correlations, a consensus stiffness and the
//! verdict, plus the data-quality findings.
//!
//! Units: SI inside (kg/s, N/m, m, s); the result carries the trade's units (pN/nm, nm/V,
//! pN s/nm) in its field names, converted here once. For nanometre data the signal unit is the
//! nanometre; for volt data it is the volt.

mod active;
#[cfg(test)]
mod active_tests;
mod allan;
#[cfg(test)]
mod allan_tests;
mod axis;
#[cfg(test)]
mod camera_blur_tests;
#[cfg(test)]
mod combined_effects_tests;
mod conditions;
pub mod consensus;
mod coupling;
#[cfg(test)]
mod coupling_tests;
mod covariance;
mod drift;
#[cfg(test)]
mod drift_tests;
#[cfg(test)]
mod exclusion_tests;
#[cfg(test)]
mod noise_floor_tests;
pub mod principal;
#[cfg(test)]
mod principal_tests;
mod propagation;
#[cfg(test)]
mod real_instrument_tests;
mod spectral;
#[cfg(test)]
mod synthetic_records;
#[cfg(test)]
mod tests;
mod time_domain;

pub use active::{ActiveCalibration, Drive, response_power};
pub use conditions::DragSource;
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
    /// Standard error of the viscosity, Pa s: of the override, or of water's formula (its
    /// stated accuracy, which a user may enter here) when there is none. Independent of the
    /// temperature's error.
    pub viscosity_se_pa_s: f64,
    /// Height of the bead centre above the surface, m; `None` for bulk (no wall correction).
    pub height_m: Option<f64>,
    pub height_se_m: f64,
    /// Bead density, kg/m^3 (enters only the hydrodynamic model).
    pub bead_density_kg_per_m3: f64,
    /// Density of the medium, kg/m^3 (enters only the hydrodynamic model); `None` takes water's
    /// at the temperature.
    pub medium_density_kg_per_m3: Option<f64>,
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
            viscosity_se_pa_s: 0.0,
            height_m: None,
            height_se_m: 0.0,
            bead_density_kg_per_m3: drag::POLYSTYRENE_DENSITY_KG_PER_M3,
            medium_density_kg_per_m3: None,
        }
    }
}

/// The version of the models and defaults behind a calibration. Raise it whenever a change of a
/// model or of a default can change the result for the same file and settings: it is recorded
/// in every result (`software.model_version`) and hashed into the service's idempotency key, so
/// a retried upload never returns a result computed under older models.
///
/// 1: until frequency-dependent drag became the default of the run settings;
/// 2: frequency-dependent drag on by default (`hydrodynamics`), bead material, medium density;
/// 3: the Allan deviation of every axis (`allan`) and its `drift-dominates` finding.
pub const MODEL_VERSION: u32 = 3;

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
    /// Include frequency-dependent drag in the axis's model (every method). The core's default
    /// is the plain model (off); the run settings turn it on unless told otherwise (their
    /// table, `settings::SPECS`, holds the user-facing default).
    pub hydrodynamics: bool,
    /// Exposure time of a camera, s: every sample is the box-car average of the position over
    /// this time (motion blur), which every method models (Wong & Halvorsen, Opt. Express 14,
    /// 12517 (2006)). At most the frame interval 1 / sample rate; `None` for instantaneous
    /// samples.
    pub exposure_time_s: Option<f64>,
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
    /// Calibrate the two lateral axes along the trap's principal axes in their plane (the
    /// samples rotated by the measured angle) instead of along the detector's axes; nanometre
    /// data only.
    pub principal_axes: bool,
    /// Whether the white noise floor enters the spectral model (default: when a
    /// likelihood-ratio test says the data support it, see `spectrum::fit_spectrum_with_floor`).
    pub noise_floor: NoiseFloorMode,
    /// The sample stage's sinusoidal drive during the recording, for active calibration
    /// (`active`); `None` for a passive recording.
    pub drive: Option<Drive>,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            fit_range: FitRange::default(),
            n_windows: None,
            filter: FilterSetting::None,
            hydrodynamics: false,
            exposure_time_s: None,
            detrend: Detrend::Mean,
            acf: AcfFitOptions::default(),
            target_relative_precision: 0.05,
            exclude_peaks: true,
            axial_axes: vec!["z".to_string()],
            principal_axes: false,
            noise_floor: NoiseFloorMode::Auto,
            drive: None,
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
    /// The camera's exposure is longer than the frame interval, or not a positive number.
    #[error(
        "setting `exposure_time_s` = {exposure_time_s} s is invalid: an exposure must be positive and fit within its frame, at most the frame interval 1/sample rate = {frame_interval_s} s"
    )]
    InvalidExposure {
        exposure_time_s: f64,
        frame_interval_s: f64,
    },
    /// The axis never changes value.
    #[error(
        "axis `{axis}`: all {n_samples} samples have the same value; the detector saw no motion (check that the bead is trapped and the signal connected)"
    )]
    ConstantSignal { axis: String, n_samples: usize },
    /// The setting `principal_axes` cannot apply to this recording.
    #[error("setting `principal_axes`: {reason}")]
    PrincipalAxes { reason: String },
    /// The stage drive cannot apply to this recording (`field` names the setting).
    #[error("setting `{field}`: {reason}")]
    InvalidDrive { field: &'static str, reason: String },
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
    /// Density of the medium used for the hydrodynamic terms (given, or water's), kg/m^3.
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
    /// Where `drag_kg_per_s` comes from: the run conditions, or a stage drive.
    pub drag_source: DragSource,
    /// The active calibration, when the stage drove this axis and its spike stood above the
    /// background.
    pub active: Option<ActiveCalibration>,
    /// Whether the errors include the run conditions' uncertainties.
    pub includes_input_errors: bool,
    /// Sampling rate, Hz, and the periodogram's frequency resolution, Hz.
    pub sample_rate_hz: f64,
    pub resolution_hz: f64,
    /// Periodogram segments averaged.
    pub n_windows: usize,
    /// Sinusoids fitted and subtracted before the autocorrelation and equipartition methods.
    pub lines_removed: Vec<spectrum::SpectralLine>,
    /// The Allan deviation of the record the time-domain methods see, with the curve and band
    /// of the fitted spectral model when the fit exists (a diagnostic, see `crate::allan`).
    pub allan: crate::allan::AllanCurve,
}

/// The zero-lag correlation of two axes as calibrated, and what it says about the trap's
/// principal axes (see `principal`).
#[derive(Clone, Debug, PartialEq)]
pub struct AxisCoupling {
    pub first: String,
    pub second: String,
    /// Correlation coefficient, with its standard error were the axes independent.
    pub correlation: Estimate,
    /// Correlation over that standard error.
    pub z: f64,
    /// Whether |z| exceeds the two-sided limit of `principal::COUPLING_FALSE_ALARM`.
    pub significant: bool,
    /// For significant couplings of nanometre data: the rotation, rad, from these two axes to
    /// the principal axes of their plane (from `first` towards `second`), with its standard
    /// error.
    pub principal_angle_rad: Option<Estimate>,
}

/// The rotation applied with `principal_axes`: which detector axes were replaced by which
/// principal axes, and the angle between them.
#[derive(Clone, Debug, PartialEq)]
pub struct PrincipalRotation {
    pub detector_axes: [String; 2],
    /// Names of the rotated axes (the detector names primed: `x'` is the principal axis nearest
    /// `x`).
    pub rotated_axes: [String; 2],
    /// Rotation from the detector axes to the principal axes, rad (from the first towards the
    /// second, at most pi/4 in size), with its standard error.
    pub angle_rad: Estimate,
}

/// The calibration of a whole recording.
#[derive(Clone, Debug)]
pub struct Calibration {
    pub physics: Physics,
    pub axes: Vec<AxisCalibration>,
    /// Every pair of the calibrated axes (none for one axis).
    pub coupling: Vec<AxisCoupling>,
    /// The rotation used when `principal_axes` was asked for.
    pub principal_axes: Option<PrincipalRotation>,
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
    check_non_negative("viscosity_se_pa_s", conditions.viscosity_se_pa_s)?;
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
    let fluid_density = match conditions.medium_density_kg_per_m3 {
        Some(rho) => {
            check_positive("medium_density_kg_per_m3", rho)?;
            rho
        }
        None => water::water_density_kg_per_m3(conditions.temperature_c.clamp(
            water::WATER_MIN_TEMPERATURE_C,
            water::WATER_MAX_TEMPERATURE_C,
        ))?,
    };
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
    let rel_gamma0 = rel_d
        .hypot(dlneta_dt * conditions.temperature_se_c)
        .hypot(conditions.viscosity_se_pa_s / viscosity);
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
    if let Some(w) = options.exposure_time_s
        && !(w > 0.0 && w <= max_exposure_s(recording.sample_rate_hz))
    {
        return Err(CalibrationError::InvalidExposure {
            exposure_time_s: w,
            frame_interval_s: 1.0 / recording.sample_rate_hz,
        });
    }
    let physics = physics(conditions)?;
    let (traces, rotation) = coupling::axes_to_calibrate(recording, options)?;
    let driven = active::driven_axis(&traces, recording.sample_rate_hz, options)?;
    let one_axis = |axis: &crate::recording::AxisTrace, shared_drag: Option<axis::SharedDrag>| {
        axis::calibrate_axis(&axis::AxisInput {
            name: &axis.name,
            samples: &axis.samples,
            sample_rate_hz: recording.sample_rate_hz,
            unit: recording.unit,
            conditions,
            physics: &physics,
            options,
            drive: options
                .drive
                .as_ref()
                .filter(|_| driven.is_some_and(|i| traces[i].name == axis.name)),
            shared_drag,
        })
    };
    // An axis that takes the driven axis's measured drag waits for it; the rest are
    // independent.
    let mut results: Vec<Option<Result<AxisCalibration, CalibrationError>>> =
        traces.iter().map(|_| None).collect();
    let mut shared = None;
    if let Some(i) = driven.filter(|_| {
        options
            .drive
            .as_ref()
            .is_some_and(|d| !d.drag_to.is_empty())
    }) {
        let result = one_axis(&traces[i], None);
        shared = result.as_ref().ok().and_then(|a| {
            a.active.as_ref().map(|act| axis::SharedDrag {
                drag_kg_per_s: act.drag_kg_per_s,
            })
        });
        results[i] = Some(result);
    }
    let takes_shared = |name: &str| {
        options
            .drive
            .as_ref()
            .is_some_and(|d| d.drag_to.iter().any(|a| a == name))
    };
    let pending: Vec<usize> = (0..traces.len())
        .filter(|&i| results[i].is_none())
        .collect();
    let run = |i: usize| one_axis(&traces[i], shared.filter(|_| takes_shared(&traces[i].name)));
    // The axes are independent: each runs on its own scoped thread (the first here), and the
    // results are taken in axis order, so the first failing axis is reported as in one pass.
    match pending.split_first() {
        Some((&first, rest)) if !rest.is_empty() => std::thread::scope(|scope| {
            let others: Vec<_> = rest
                .iter()
                .map(|&i| (i, scope.spawn(move || run(i))))
                .collect();
            results[first] = Some(run(first));
            for (i, handle) in others {
                // A panicking axis is a bug; computing it again here surfaces it on this thread.
                results[i] = Some(handle.join().unwrap_or_else(|_| run(i)));
            }
        }),
        _ => {
            for &i in &pending {
                results[i] = Some(run(i));
            }
        }
    }
    let mut axes = results
        .into_iter()
        .flatten()
        .collect::<Result<Vec<_>, _>>()?;
    let lines: Vec<&[spectrum::SpectralLine]> =
        axes.iter().map(|a| a.lines_removed.as_slice()).collect();
    let coupling = coupling::measure(
        &traces,
        &lines,
        recording.sample_rate_hz,
        recording.unit,
        options,
    );
    coupling::add_findings(
        &mut axes,
        &coupling,
        recording.unit,
        options,
        rotation.as_ref(),
    );
    Ok(Calibration {
        physics,
        axes,
        coupling,
        principal_axes: rotation,
    })
}

/// Segments of about 2^18 samples: long enough that the segment-end leakage of the periodogram
/// (Berg-Sorensen & Flyvbjerg 2004; it scales as tau / T_segment) is negligible for any trap and
/// the resolution (under 0.4 Hz at 100 kHz) still separates mains harmonics, short enough that
/// the transforms stay cheap. Averaging segments and averaging neighbouring bins give the same
/// Gamma statistics for the fit (common practice).
pub fn default_windows(n_samples: usize) -> usize {
    ((n_samples as f64 / f64::from(1u32 << 18)).round() as usize).max(1)
}

/// The longest exposure a camera sampling at `sample_rate_hz` can have, s: the frame interval,
/// with a relative allowance of 1e-9 so that an exposure equal to it written in decimal passes.
pub fn max_exposure_s(sample_rate_hz: f64) -> f64 {
    (1.0 + 1e-9) / sample_rate_hz
}
