//! The calibration of one axis, in named stages: the drag from the run conditions
//! (`conditions`), the spectrum (`spectral`), the lines taken out of the record, the time-domain
//! methods (`time_domain`), the propagation of errors to the stiffness estimates
//! (`propagation`), the consensus, and the findings. Each stage takes and returns plain data, so
//! each can be tested alone; this function only chains them.

use super::conditions::{self, AxisDrag};
use super::consensus;
use super::covariance;
use super::propagation::{self, Propagated, PropagationInputs};
use super::spectral::{self, LineRemoval, SpectralStage};
use super::time_domain::{self, TimeDomainStage};
use super::{
    AnalysisOptions, AxisCalibration, CalibrationError, Physics, RunConditions, Stiffness,
};
use crate::equipartition::{self, Detrend};
use crate::estimate::Estimate;
use crate::findings::{self, FindingInputs, MethodDisagreement};
use crate::recording::PositionUnit;
use std::borrow::Cow;

/// One axis of a recording with what it is calibrated under.
pub(crate) struct AxisInput<'a> {
    pub(crate) name: &'a str,
    pub(crate) samples: &'a [f64],
    pub(crate) sample_rate_hz: f64,
    pub(crate) unit: PositionUnit,
    pub(crate) conditions: &'a RunConditions,
    pub(crate) physics: &'a Physics,
    pub(crate) options: &'a AnalysisOptions,
}

/// Calibrates one axis by chaining the stages.
pub(crate) fn calibrate_axis(input: &AxisInput<'_>) -> Result<AxisCalibration, CalibrationError> {
    let AxisInput {
        name,
        samples: raw_samples,
        sample_rate_hz,
        unit,
        conditions,
        physics,
        options,
    } = *input;
    let orientation = conditions::orientation_of(name, &options.axial_axes);
    let drag = conditions::axis_drag_stage(orientation, conditions, physics)?;
    let samples = prepared_samples(name, raw_samples, options.detrend)?;

    let model = spectral::spectrum_model(sample_rate_hz, conditions, physics, options);
    let spectral = spectral::spectral_stage(name, &samples, model, options)?;

    // The spectral fit leaves the peaks' bins out; the time-domain methods need the lines
    // themselves taken out of the record. Removing a line can leave a trace of a trend, so the
    // cleaned record is detrended again and the time-domain methods see exactly what they assume.
    let lines = spectral::remove_lines(
        &samples,
        sample_rate_hz,
        &spectral.peaks,
        &spectral.periodogram,
    );
    let cleaned = lines
        .cleaned
        .as_ref()
        .map(|y| equipartition::detrended(y, options.detrend));
    let time_samples: &[f64] = cleaned.as_deref().unwrap_or(&samples);
    let time = time_domain::time_domain_stage(
        name,
        time_samples,
        sample_rate_hz,
        spectral.fit.corner_frequency_hz,
        options,
    )?;

    let propagated = propagation::propagate(&propagation_inputs(
        &spectral,
        &time,
        &drag,
        physics,
        unit,
        sample_rate_hz,
    ));
    let stiffness = consensus_stage(&propagated, unit);
    let d_theory = physics.thermal_energy_j / drag.drag_kg_per_s.value;
    let findings = findings::assess(&FindingInputs {
        axis: name,
        samples: raw_samples,
        sample_rate_hz,
        unit,
        periodogram: &spectral.periodogram,
        spectrum: &spectral.fit,
        peaks: &spectral.peaks,
        consensus: stiffness.stiffness.consensus,
        disagreements: &disagreements(&stiffness.discrepancies),
        target_relative_precision: options.target_relative_precision,
        diffusion_theory_m2_per_s: d_theory,
        radius_m: conditions.bead_diameter_m / 2.0,
        height_m: conditions.height_m,
        hydrodynamics: options.hydrodynamics,
        relaxation_time_s: time.acf.relaxation_time_s,
        lines_removed: lines.removed.len(),
        lines_kept: lines.kept,
    });
    Ok(assemble(
        name,
        drag,
        d_theory,
        spectral,
        time,
        propagated,
        stiffness,
        findings,
        lines,
        sample_rate_hz,
    ))
}

/// The samples the methods see: with linear detrending all three work on the residuals of the
/// line, so a drift leaks into none of them (the clipping check still looks at the raw
/// samples). A record that never changes is refused here.
fn prepared_samples<'a>(
    name: &str,
    samples: &'a [f64],
    detrend: Detrend,
) -> Result<Cow<'a, [f64]>, CalibrationError> {
    if samples.iter().all(|&x| x == samples[0]) {
        return Err(CalibrationError::ConstantSignal {
            axis: name.to_string(),
            n_samples: samples.len(),
        });
    }
    Ok(match detrend {
        Detrend::Mean => Cow::Borrowed(samples),
        Detrend::Linear => Cow::Owned(equipartition::detrended(samples, Detrend::Linear)),
    })
}

/// The plain numbers of the propagation stage, with the correlations between the methods from
/// the influence of each periodogram ordinate on each estimate (`covariance`).
fn propagation_inputs(
    spectral: &SpectralStage,
    time: &TimeDomainStage,
    drag: &AxisDrag,
    physics: &Physics,
    unit: PositionUnit,
    sample_rate_hz: f64,
) -> PropagationInputs {
    let fit = &spectral.fit;
    let periodogram = &spectral.periodogram;
    let record_length_s =
        periodogram.segment_len as f64 * periodogram.n_windows as f64 / sample_rate_hz;
    let log_cov = covariance::log_covariance(&covariance::InfluenceInputs {
        model: &spectral.model,
        theta: &fit.theta,
        theta_covariance: &fit.covariance,
        fit_min_hz: fit.f_min_hz,
        fit_max_hz: fit.f_max_hz,
        record_length_s,
        sample_rate_hz,
        tau_influence: &time.acf.tau_influence,
        relaxation_time_s: time.acf.relaxation_time_s,
        variance: time.variance.variance,
    });
    PropagationInputs {
        corner_frequency_hz: Estimate::new(fit.corner_frequency_hz, fit.corner_frequency_se_hz),
        diffusion: Estimate::new(fit.diffusion, fit.diffusion_se),
        relaxation_time_s: Estimate::new(time.acf.relaxation_time_s, time.acf.relaxation_time_se_s),
        variance: Estimate::new(time.variance.variance, time.variance.variance_se),
        correlation: covariance::correlation(&log_cov),
        drag_kg_per_s: drag.drag_kg_per_s.value,
        thermal_energy_j: physics.thermal_energy_j,
        input_covariance: [
            [drag.var_ln_gamma, drag.cov_ln_gamma_ln_t],
            [drag.cov_ln_gamma_ln_t, drag.var_ln_t],
        ],
        metres_per_unit: match unit {
            PositionUnit::Nanometre => Some(1e-9),
            PositionUnit::Volt => None,
        },
    }
}

/// The consensus of the methods with the verdict.
pub(crate) struct ConsensusStage {
    pub(crate) stiffness: Stiffness,
    pub(crate) discrepancies: Vec<consensus::Discrepancy>,
    pub(crate) verdict: consensus::Verdict,
    pub(crate) verdict_reasons: Vec<String>,
}

/// Combines the estimates. For volt data equipartition uses the sensitivity from the spectral
/// fit, so it is not independent of the spectrum and stays out of the consensus.
pub(crate) fn consensus_stage(propagated: &Propagated, unit: PositionUnit) -> ConsensusStage {
    let volts = unit == PositionUnit::Volt;
    let values = propagated.stiffness.map(|e| e.value);
    let include = [true, true, !volts];
    let combined = consensus::combine(&values, &propagated.covariance, &include);
    let discrepancies = consensus::discrepancies(&values, &propagated.covariance);
    let (verdict, verdict_reasons) = consensus::verdict(&discrepancies, &combined);
    let [psd, acf, equipartition] = propagated.stiffness;
    ConsensusStage {
        stiffness: Stiffness {
            psd,
            acf,
            equipartition,
            equipartition_independent: !volts,
            consensus: combined.estimate,
            consensus_weights: combined.weights,
            correlation: covariance::correlation(&propagated.covariance),
        },
        discrepancies,
        verdict,
        verdict_reasons,
    }
}

/// The pairs of methods that differ by more than `Z_LIMIT` standard errors, as the findings
/// take them.
fn disagreements(discrepancies: &[consensus::Discrepancy]) -> Vec<MethodDisagreement> {
    discrepancies
        .iter()
        .filter(|d| d.z.abs() > consensus::Z_LIMIT)
        .map(|d| MethodDisagreement {
            first: d.first,
            second: d.second,
            z: d.z,
        })
        .collect()
}

/// Puts the stages' results into the axis calibration.
#[allow(clippy::too_many_arguments)]
fn assemble(
    name: &str,
    drag: AxisDrag,
    diffusion_theory_m2_per_s: f64,
    spectral: SpectralStage,
    time: TimeDomainStage,
    propagated: Propagated,
    stiffness: ConsensusStage,
    findings: Vec<findings::Finding>,
    lines: LineRemoval,
    sample_rate_hz: f64,
) -> AxisCalibration {
    let fit = spectral.fit;
    let tau = time.acf.relaxation_time_s;
    AxisCalibration {
        axis: name.to_string(),
        orientation: drag.orientation,
        wall_factor: drag.wall_factor,
        drag_kg_per_s: drag.drag_kg_per_s,
        corner_frequency_hz: Estimate::new(fit.corner_frequency_hz, fit.corner_frequency_se_hz),
        relaxation_time_s: Estimate::new(tau, time.acf.relaxation_time_se_s),
        diffusion: Estimate::new(fit.diffusion, fit.diffusion_se),
        diffusion_theory_m2_per_s,
        stiffness_pn_per_nm: stiffness.stiffness,
        sensitivity_nm_per_v: propagated.sensitivity_nm_per_v,
        discrepancies: stiffness.discrepancies,
        verdict: stiffness.verdict,
        verdict_reasons: stiffness.verdict_reasons,
        findings,
        resolution_hz: spectral.periodogram.resolution_hz(),
        n_windows: spectral.periodogram.n_windows,
        spectrum: fit,
        acf: time.acf,
        variance: time.variance,
        peaks: spectral.peaks,
        histogram: time.histogram,
        includes_input_errors: drag.includes_input_errors,
        sample_rate_hz,
        lines_removed: lines.removed,
    }
}
