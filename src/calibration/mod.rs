//! Calibration of one recording: drag from the run conditions, the three stiffness estimates,
//! the detector sensitivity for volt data, their correlations, a consensus stiffness and the
//! verdict, plus the data-quality findings.
//!
//! Units: SI inside (kg/s, N/m, m, s); the result carries the trade's units (pN/nm, nm/V,
//! pN s/nm) in its field names, converted here once. For nanometre data the signal unit is the
//! nanometre; for volt data it is the volt.

pub mod consensus;
mod covariance;
#[cfg(test)]
mod tests;

pub use consensus::{Combined, Discrepancy, METHODS, Verdict, Z_LIMIT};

use crate::autocorrelation::{self, AcfError, AcfFitOptions, ExponentialFit};
use crate::drag::{self, AxisOrientation, DragError};
use crate::equipartition::{self, Detrend, EquipartitionError, VarianceEstimate};
use crate::findings::{self, Finding, FindingInputs};
use crate::recording::{PositionUnit, Recording};
use crate::spectrum::{
    self, FilterSetting, FitRange, HydroTerms, NarrowPeak, Periodogram, SpectrumFit,
    SpectrumFitError, SpectrumFitOptions, SpectrumModel,
};
use crate::water::{self, BOLTZMANN_J_PER_K, WaterError, ZERO_CELSIUS_K};
use std::f64::consts::PI;

/// 1 N/m expressed in pN/nm, and 1 kg/s (N s/m) in pN s/nm.
const PN_PER_NM_PER_N_PER_M: f64 = 1e3;

/// A value and its standard error, in the unit its holder's name states.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Estimate {
    pub value: f64,
    pub se: f64,
}

impl Estimate {
    fn new(value: f64, se: f64) -> Self {
        Estimate { value, se }
    }

    /// Relative standard error se / |value|.
    pub fn relative_se(&self) -> f64 {
        self.se / self.value.abs()
    }
}

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
        }
    }
}

/// Why a recording could not be calibrated.
#[derive(Debug, thiserror::Error)]
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
    pub psd: Estimate,
    pub acf: Estimate,
    pub equipartition: Estimate,
    /// Whether equipartition is independent of the spectrum (false for volt data, where it uses
    /// the sensitivity from the spectral fit) and so enters the consensus.
    pub equipartition_independent: bool,
    pub consensus: Estimate,
    /// Weights of (psd, acf, equipartition) in the consensus (sum to 1).
    pub consensus_weights: [f64; 3],
    /// Correlation matrix of the three estimates, statistical and input errors together.
    pub correlation: [[f64; 3]; 3],
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

/// The calibration of one axis.
#[derive(Clone, Debug)]
pub struct AxisCalibration {
    pub axis: String,
    pub orientation: AxisOrientation,
    /// Wall factor gamma / gamma0 (1 in bulk).
    pub wall_factor: f64,
    /// Drag of this axis, kg/s.
    pub drag_kg_per_s: Estimate,
    pub corner_frequency_hz: Estimate,
    pub relaxation_time_s: Estimate,
    /// Measured diffusion coefficient, signal-units^2/s (one-sided convention).
    pub diffusion: Estimate,
    /// Einstein's D = kB T / gamma, m^2/s, for the same axis.
    pub diffusion_theory_m2_per_s: f64,
    pub stiffness_pn_per_nm: Stiffness,
    /// Displacement sensitivity beta, nm/V, for volt data.
    pub sensitivity_nm_per_v: Option<Estimate>,
    pub discrepancies: Vec<Discrepancy>,
    pub verdict: Verdict,
    pub verdict_reasons: Vec<String>,
    pub findings: Vec<Finding>,
    pub spectrum: SpectrumFit,
    pub acf: ExponentialFit,
    pub variance: VarianceEstimate,
    pub peaks: Vec<NarrowPeak>,
    pub histogram: Histogram,
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
fn viscosity_at(conditions: &RunConditions, temperature_c: f64) -> Result<f64, CalibrationError> {
    match conditions.viscosity_pa_s {
        Some(v) => Ok(v),
        None => Ok(water::water_viscosity_pa_s(temperature_c)?),
    }
}

/// Drag (kg/s) of one axis for perturbed inputs: diameter (m), temperature (C), height (m).
fn axis_drag(
    conditions: &RunConditions,
    orientation: AxisOrientation,
    diameter_m: f64,
    temperature_c: f64,
    height_m: Option<f64>,
) -> Result<f64, CalibrationError> {
    let radius = diameter_m / 2.0;
    let eta = viscosity_at(conditions, temperature_c)?;
    let factor = drag::wall_factor(orientation, radius, height_m)?;
    Ok(drag::stokes_drag_kg_per_s(eta, radius) * factor)
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
    let fluid_density = water::water_density_kg_per_m3(conditions.temperature_c.clamp(0.0, 40.0))?;
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
        calibrate_axis(
            &axis.name,
            &axis.samples,
            recording.sample_rate_hz,
            recording.unit,
            conditions,
            &physics,
            options,
        )
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

/// Derivatives of ln(gamma_axis) with respect to (diameter m, temperature C, height m), and
/// of ln(T) with respect to temperature, by central differences.
fn input_sensitivities(
    conditions: &RunConditions,
    orientation: AxisOrientation,
) -> Result<([f64; 3], f64), CalibrationError> {
    let d = conditions.bead_diameter_m;
    let t = conditions.temperature_c;
    let h = conditions.height_m;
    let base = axis_drag(conditions, orientation, d, t, h)?.ln();
    let rel = 1e-6;
    let dd = d * rel;
    let ln_d = (axis_drag(conditions, orientation, d + dd, t, h)?.ln()
        - axis_drag(conditions, orientation, d - dd, t, h)?.ln())
        / (2.0 * dd);
    let dt = 0.01;
    let ln_t = match (
        axis_drag(conditions, orientation, d, t + dt, h),
        axis_drag(conditions, orientation, d, t - dt, h),
    ) {
        (Ok(u), Ok(v)) => (u.ln() - v.ln()) / (2.0 * dt),
        _ => 0.0,
    };
    let ln_h = match h {
        Some(hv) => {
            let dh = hv * rel;
            match (
                axis_drag(conditions, orientation, d, t, Some(hv + dh)),
                axis_drag(conditions, orientation, d, t, Some(hv - dh)),
            ) {
                (Ok(u), Ok(v)) => (u.ln() - v.ln()) / (2.0 * dh),
                _ => 0.0,
            }
        }
        None => 0.0,
    };
    let _ = base;
    Ok(([ln_d, ln_t, ln_h], 1.0 / (t + ZERO_CELSIUS_K)))
}

#[allow(clippy::too_many_arguments)]
fn calibrate_axis(
    name: &str,
    samples: &[f64],
    sample_rate_hz: f64,
    unit: PositionUnit,
    conditions: &RunConditions,
    physics: &Physics,
    options: &AnalysisOptions,
) -> Result<AxisCalibration, CalibrationError> {
    let orientation = if options
        .axial_axes
        .iter()
        .any(|a| a.eq_ignore_ascii_case(name))
    {
        AxisOrientation::Axial
    } else {
        AxisOrientation::Lateral
    };
    let radius = conditions.bead_diameter_m / 2.0;
    let wall_factor = drag::wall_factor(orientation, radius, conditions.height_m)?;
    let gamma = physics.stokes_drag_kg_per_s.value * wall_factor;
    let (dln_gamma, dln_t) = input_sensitivities(conditions, orientation)?;
    let input_se = [
        conditions.bead_diameter_se_m,
        conditions.temperature_se_c,
        conditions.height_se_m,
    ];
    let var_ln_gamma: f64 = dln_gamma
        .iter()
        .zip(&input_se)
        .map(|(g, s)| (g * s).powi(2))
        .sum();
    let drag_estimate = Estimate::new(gamma, gamma * var_ln_gamma.sqrt());
    let kt = physics.thermal_energy_j;
    let d_theory = kt / gamma;

    // With linear detrending all three methods work on the residuals of the line, so a drift
    // leaks into none of them; the clipping check still looks at the raw samples.
    let raw_samples = samples;
    let detrended;
    let samples: &[f64] = match options.detrend {
        Detrend::Mean => samples,
        Detrend::Linear => {
            detrended = equipartition::detrended(samples, Detrend::Linear);
            &detrended
        }
    };

    if samples.iter().all(|&x| x == samples[0]) {
        return Err(CalibrationError::ConstantSignal {
            axis: name.to_string(),
            n_samples: samples.len(),
        });
    }

    // --- spectrum -------------------------------------------------------------------------
    let n_windows = options
        .n_windows
        .unwrap_or_else(|| default_windows(samples.len()));
    let periodogram = spectrum::periodogram(samples, sample_rate_hz, n_windows).ok_or(
        CalibrationError::TooShort {
            axis: name.to_string(),
            n_samples: samples.len(),
        },
    )?;
    // Peaks below the fit range are drift, which has its own finding.
    let peaks: Vec<NarrowPeak> = spectrum::find_narrow_peaks(&periodogram, 0.01)
        .into_iter()
        .filter(|p| p.frequency_hz >= fit_options_range_min(options, &periodogram))
        .collect();
    let hydro = options.hydrodynamics.then(|| {
        let h = drag::hydrodynamic_frequencies(
            physics.viscosity_pa_s,
            physics.fluid_density_kg_per_m3,
            conditions.bead_density_kg_per_m3,
            radius,
        );
        HydroTerms {
            f_nu_hz: h.f_nu_hz,
            f_m_hz: h.f_m_hz,
        }
    });
    let model = SpectrumModel {
        sample_rate_hz,
        aliasing: true,
        filter: options.filter,
        hydro,
    };
    let mut fit_options = SpectrumFitOptions::new(model);
    fit_options.range = options.fit_range;
    if options.exclude_peaks {
        fit_options.excluded_bins = excluded_bins(&peaks, periodogram.psd.len());
    }
    let spectrum_fit = spectrum::fit_spectrum(&periodogram, &fit_options, None).map_err(|e| {
        CalibrationError::Spectrum {
            axis: name.to_string(),
            cause: e,
        }
    })?;

    // --- narrow lines ---------------------------------------------------------------------
    // The spectral fit leaves the peaks' bins out; the time-domain methods need the lines
    // themselves taken out of the record.
    let (cleaned, lines_removed, lines_kept) =
        remove_lines(samples, sample_rate_hz, &peaks, &periodogram);
    // Removing a line can leave a trace of a trend; detrend again so the time-domain methods see
    // exactly what they assume.
    let cleaned = cleaned.map(|y| equipartition::detrended(&y, options.detrend));
    let samples: &[f64] = cleaned.as_deref().unwrap_or(samples);

    // --- autocorrelation ------------------------------------------------------------------
    // Lags up to several relaxation times of the spectral estimate serve both the fit window
    // and the variance's standard error.
    let tau_guess = 1.0 / (2.0 * PI * spectrum_fit.corner_frequency_hz);
    let lags_needed =
        ((8.0 * tau_guess * sample_rate_hz).ceil() as usize).clamp(16, samples.len() / 4);
    let acov = autocorrelation::autocovariance(samples, lags_needed);
    let acf_fit =
        autocorrelation::fit_exponential(&acov, sample_rate_hz, samples.len(), &options.acf)
            .map_err(|e| CalibrationError::Autocorrelation {
                axis: name.to_string(),
                cause: e,
            })?;

    // --- equipartition --------------------------------------------------------------------
    let variance = equipartition::variance(samples, sample_rate_hz, options.detrend, &acov)
        .map_err(|e| CalibrationError::Equipartition {
            axis: name.to_string(),
            cause: e,
        })?;

    // --- covariance of the record's estimates ---------------------------------------------
    let record_length_s =
        periodogram.segment_len as f64 * periodogram.n_windows as f64 / sample_rate_hz;
    let log_cov = covariance::log_covariance(&covariance::InfluenceInputs {
        model: &model,
        theta: &spectrum_fit.theta,
        theta_covariance: &spectrum_fit.covariance,
        fit_min_hz: spectrum_fit.f_min_hz,
        fit_max_hz: spectrum_fit.f_max_hz,
        record_length_s,
        sample_rate_hz,
        tau_influence: &acf_fit.tau_influence,
        relaxation_time_s: acf_fit.relaxation_time_s,
        variance: variance.variance,
    });
    let r = covariance::correlation(&log_cov);

    let fc = spectrum_fit.corner_frequency_hz;
    let tau = acf_fit.relaxation_time_s;
    let rel_fc = spectrum_fit.corner_frequency_se_hz / fc;
    let rel_d = spectrum_fit.diffusion_se / spectrum_fit.diffusion;
    let rel_tau = acf_fit.relaxation_time_se_s / tau;
    let rel_var = variance.variance_se / variance.variance;
    // Statistical covariance of (ln fc, ln D, ln tau, ln var), with each estimator's own
    // standard error and the correlations of the influence calculation.
    let rel = [rel_fc, rel_d, rel_tau, rel_var];
    let mut stat = [[0.0; 4]; 4];
    for i in 0..4 {
        for j in 0..4 {
            stat[i][j] = r[i][j] * rel[i] * rel[j];
        }
    }
    // Each log-stiffness (and ln beta) as a linear combination of (ln fc, ln D, ln tau, ln var)
    // plus the input terms (ln gamma, ln T).
    let volts = unit == PositionUnit::Volt;
    // Rows: psd, acf, equipartition, ln beta. Columns: ln fc, ln D, ln tau, ln var, ln gamma, ln T.
    let rows: [[f64; 6]; 4] = if volts {
        [
            [1.0, 0.0, 0.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, -1.0, 0.0, 1.0, 0.0],
            // kappa = kB T / (beta^2 var_V) = gamma D_V / var_V.
            [0.0, 1.0, 0.0, -1.0, 1.0, 0.0],
            // beta = sqrt(kB T / (gamma D_V)).
            [0.0, -0.5, 0.0, 0.0, -0.5, 0.5],
        ]
    } else {
        [
            [1.0, 0.0, 0.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, -1.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, 0.0, -1.0, 0.0, 1.0],
            [0.0; 6],
        ]
    };
    // Input covariance of (ln gamma, ln T).
    let var_ln_t = (dln_t * conditions.temperature_se_c).powi(2);
    let cov_gamma_t = dln_gamma[1] * dln_t * conditions.temperature_se_c.powi(2);
    let input_cov = [[var_ln_gamma, cov_gamma_t], [cov_gamma_t, var_ln_t]];
    let mut full = [[0.0f64; 4]; 4];
    for a in 0..4 {
        for b in 0..4 {
            let mut c = 0.0;
            for i in 0..4 {
                for j in 0..4 {
                    c += rows[a][i] * rows[b][j] * stat[i][j];
                }
            }
            for i in 0..2 {
                for j in 0..2 {
                    c += rows[a][4 + i] * rows[b][4 + j] * input_cov[i][j];
                }
            }
            full[a][b] = c;
        }
    }
    let unit_scale_m = match unit {
        PositionUnit::Nanometre => 1e-9,
        PositionUnit::Volt => 1.0,
    };
    let kappa_psd = 2.0 * PI * gamma * fc;
    let kappa_acf = gamma / tau;
    let var_m2 = variance.variance * unit_scale_m * unit_scale_m;
    let (kappa_eq, sensitivity) = if volts {
        let beta_m_per_v = (d_theory / spectrum_fit.diffusion).sqrt();
        let beta_nm = beta_m_per_v * 1e9;
        (
            kt / (beta_m_per_v * beta_m_per_v * variance.variance),
            Some(Estimate::new(beta_nm, beta_nm * full[3][3].sqrt())),
        )
    } else {
        (kt / var_m2, None)
    };
    let values = [kappa_psd, kappa_acf, kappa_eq].map(|k| k * PN_PER_NM_PER_N_PER_M);
    let mut cov_kappa = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            cov_kappa[i][j] = full[i][j] * values[i] * values[j];
        }
    }
    let estimates: [Estimate; 3] =
        std::array::from_fn(|i| Estimate::new(values[i], cov_kappa[i][i].sqrt()));
    let include = [true, true, !volts];
    let combined = consensus::combine(&values, &cov_kappa, &include);
    let discrepancies = consensus::discrepancies(&values, &cov_kappa);
    let (verdict, verdict_reasons) = consensus::verdict(&discrepancies, &combined);
    let stiffness = Stiffness {
        psd: estimates[0],
        acf: estimates[1],
        equipartition: estimates[2],
        equipartition_independent: !volts,
        consensus: combined.estimate,
        consensus_weights: combined.weights,
        correlation: covariance::correlation(&cov_kappa),
    };
    let diffusion = Estimate::new(spectrum_fit.diffusion, spectrum_fit.diffusion_se);
    let histogram = histogram(samples, variance.mean, variance.variance);
    let findings = findings::assess(&FindingInputs {
        axis: name,
        samples: raw_samples,
        sample_rate_hz,
        unit,
        periodogram: &periodogram,
        spectrum: &spectrum_fit,
        peaks: &peaks,
        stiffness: &stiffness,
        discrepancies: &discrepancies,
        target_relative_precision: options.target_relative_precision,
        diffusion_theory_m2_per_s: d_theory,
        radius_m: radius,
        height_m: conditions.height_m,
        hydrodynamics: options.hydrodynamics,
        relaxation_time_s: tau,
        lines_removed: lines_removed.len(),
        lines_kept,
    });
    Ok(AxisCalibration {
        axis: name.to_string(),
        orientation,
        wall_factor,
        drag_kg_per_s: drag_estimate,
        corner_frequency_hz: Estimate::new(fc, spectrum_fit.corner_frequency_se_hz),
        relaxation_time_s: Estimate::new(tau, acf_fit.relaxation_time_se_s),
        diffusion,
        diffusion_theory_m2_per_s: d_theory,
        stiffness_pn_per_nm: stiffness,
        sensitivity_nm_per_v: sensitivity,
        discrepancies,
        verdict,
        verdict_reasons,
        findings,
        spectrum: spectrum_fit,
        acf: acf_fit,
        variance,
        peaks,
        histogram,
        includes_input_errors: input_se.iter().any(|s| *s > 0.0),
        sample_rate_hz,
        resolution_hz: periodogram.resolution_hz(),
        n_windows: periodogram.n_windows,
        lines_removed,
    })
}

/// The lower end of the spectral fit range these options give for this periodogram, Hz.
fn fit_options_range_min(options: &AnalysisOptions, periodogram: &Periodogram) -> f64 {
    let model = SpectrumModel {
        sample_rate_hz: periodogram.sample_rate_hz,
        aliasing: true,
        filter: options.filter,
        hydro: None,
    };
    let mut fit_options = SpectrumFitOptions::new(model);
    fit_options.range = options.fit_range;
    fit_options.resolved_range(periodogram).0
}

/// Segments of about 2^18 samples: long enough that the segment-end leakage of the periodogram
/// (Berg-Sorensen & Flyvbjerg 2004; it scales as tau / T_segment) is negligible for any trap and
/// the resolution (under 0.4 Hz at 100 kHz) still separates mains harmonics, short enough that
/// the transforms stay cheap. Averaging segments and averaging neighbouring bins give the same
/// Gamma statistics for the fit (common practice).
pub fn default_windows(n_samples: usize) -> usize {
    ((n_samples as f64 / f64::from(1u32 << 18)).round() as usize).max(1)
}

/// Most lines removed from one axis.
const MAX_LINES: usize = 10;
/// Work budget of line removal in sample-evaluations (a line costs about (6 n_windows + 32) N:
/// the grid scan, a dozen or so evaluations of Brent's method, the final fit and the
/// subtraction); past it the lines stay in and a finding says so.
const LINE_BUDGET: f64 = 6e8;

/// Fits and subtracts the sinusoids behind the narrow peaks. Returns the cleaned samples (or
/// `None` when there is nothing to remove), the lines removed, and how many peaks were left in.
fn remove_lines(
    samples: &[f64],
    sample_rate_hz: f64,
    peaks: &[NarrowPeak],
    periodogram: &Periodogram,
) -> (Option<Vec<f64>>, Vec<spectrum::SpectralLine>, usize) {
    if peaks.is_empty() {
        return (None, Vec::new(), 0);
    }
    let n = samples.len() as f64;
    let per_line = 6.0f64.mul_add(periodogram.n_windows as f64, 32.0) * n;
    let affordable = ((LINE_BUDGET / per_line).floor() as usize).min(MAX_LINES);
    let mut strongest: Vec<&NarrowPeak> = peaks.iter().collect();
    strongest.sort_by(|a, b| b.excess_power.total_cmp(&a.excess_power));
    strongest.truncate(affordable);
    if strongest.is_empty() {
        return (None, Vec::new(), peaks.len());
    }
    let mean = samples.iter().sum::<f64>() / n;
    let mut y: Vec<f64> = samples.iter().map(|v| v - mean).collect();
    let half_width = 0.75 * periodogram.resolution_hz();
    let lines: Vec<spectrum::SpectralLine> = strongest
        .iter()
        .map(|p| spectrum::fit_line(&y, sample_rate_hz, p.frequency_hz, half_width))
        .collect();
    spectrum::subtract_lines(&mut y, sample_rate_hz, &lines);
    let kept = peaks.len() - lines.len();
    (Some(y), lines, kept)
}

/// Bins of the narrow peaks, widened by one bin on each side, to leave out of the fit.
fn excluded_bins(peaks: &[NarrowPeak], n_bins: usize) -> Vec<usize> {
    let mut out = Vec::new();
    for p in peaks {
        let lo = p.first_bin.saturating_sub(1);
        let hi = (p.last_bin + 1).min(n_bins.saturating_sub(1));
        out.extend(lo..=hi);
    }
    out
}

/// Histogram over mean +- 4.5 standard deviations in 61 bins, with the expected counts of the
/// Gaussian N(mean, variance) that equipartition predicts (Boltzmann distribution in a harmonic
/// potential).
fn histogram(samples: &[f64], mean: f64, variance: f64) -> Histogram {
    let n_bins = 61usize;
    let sd = variance.sqrt();
    let lo = -4.5 * sd;
    let width = 9.0 * sd / n_bins as f64;
    let mut counts = vec![0u64; n_bins];
    // For t >= 0 truncation is floor, and floor(t) < n_bins exactly when t < n_bins, so the cast
    // bins exactly as `floor` would, without a call to the runtime's `floor` per sample (not an
    // instruction on the default x86-64 target; it was 5 % of a 2^16 calibration). NaN fails
    // both comparisons.
    for &x in samples {
        let t = (x - mean - lo) / width;
        if t >= 0.0 && t < n_bins as f64 {
            counts[t as usize] += 1;
        }
    }
    let centres: Vec<f64> = (0..n_bins)
        .map(|i| (i as f64 + 0.5).mul_add(width, lo))
        .collect();
    let n = samples.len() as f64;
    let expected = centres
        .iter()
        .map(|c| {
            let a = (c - width / 2.0) / (sd * std::f64::consts::SQRT_2);
            let b = (c + width / 2.0) / (sd * std::f64::consts::SQRT_2);
            n * 0.5 * (statrs::function::erf::erf(b) - statrs::function::erf::erf(a))
        })
        .collect();
    Histogram {
        centres,
        bin_width: width,
        counts,
        expected,
    }
}
