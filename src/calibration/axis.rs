//! The calibration of one axis, in named stages: the drag from the run conditions
//! (`conditions`), the spectrum (`spectral`), the lines taken out of the record, the time-domain
//! methods (`time_domain`), the propagation of errors to the stiffness estimates
//! (`propagation`), the consensus, and the findings. Each stage takes and returns plain data, so
//! each can be tested alone; this function only chains them.

use super::active::{self, ActiveCalibration, ActiveInputs, Drive};
use super::allan::allan_stage;
use super::conditions::{self, AxisDrag, DragSource};
use super::consensus;
use super::covariance;
use super::drift;
use super::propagation::{self, Propagated, PropagationInputs};
use super::spectral::{self, SpectralStage};
use super::time_domain::{self, SpectralAccount, TimeDomainStage};
use super::{
    AnalysisOptions, AxisCalibration, CalibrationError, MethodFailure, NoiseFloorSummary, Physics,
    RunConditions, Stiffness,
};
use crate::autocorrelation::TimeDomainModel;
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
    /// The stage drive, when this axis is the driven one.
    pub(crate) drive: Option<&'a Drive>,
    /// The measured drag of the driven axis, when this axis takes it (`Drive::drag_to`).
    pub(crate) shared_drag: Option<SharedDrag>,
}

/// A drag measured on another axis of the same bead, as an input of this one.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct SharedDrag {
    /// kg/s with its standard error (which holds the temperature's share).
    pub(crate) drag_kg_per_s: Estimate,
}

/// Calibrates one axis by chaining the stages. A method that fails leaves the others standing
/// (its failure is a finding); only when no stiffness can be computed at all is the first
/// failure the error.
pub(crate) fn calibrate_axis(input: &AxisInput<'_>) -> Result<AxisCalibration, CalibrationError> {
    let AxisInput {
        name,
        samples: raw_samples,
        sample_rate_hz,
        unit,
        conditions,
        physics,
        options,
        drive,
        shared_drag,
    } = *input;
    let orientation = conditions::orientation_of(name, &options.axial_axes);
    let mut drag = conditions::axis_drag_stage(orientation, conditions, physics)?;
    if let Some(shared) = shared_drag {
        take_shared_drag(&mut drag, shared);
    }
    let samples = prepared_samples(name, raw_samples, options.detrend)?;
    // The drive's spike is fitted at its known frequency and subtracted before any passive
    // method sees the record (see `active`).
    let (samples, drive_line) = match drive {
        Some(d) => {
            let (cleaned, line) = active::remove_drive(&samples, sample_rate_hz, d.frequency_hz);
            (Cow::Owned(cleaned), Some(line))
        }
        None => (samples, None),
    };

    let model = spectral::spectrum_model(sample_rate_hz, conditions, physics, options);
    let mut spectral = spectral::spectral_stage(
        name,
        &samples,
        model,
        options,
        drive.map(|d| d.frequency_hz),
    )?;
    let active = match (drive, drive_line.as_ref(), spectral.fit.as_ref()) {
        (Some(drive), Some(line), Ok(fit)) => active::active_stage(&ActiveInputs {
            drive,
            line,
            n_samples: samples.len(),
            sample_rate_hz,
            fit,
            thermal_energy_j: physics.thermal_energy_j,
            var_ln_t: drag.var_ln_t,
            assumed_drag_kg_per_s: drag.drag_kg_per_s.value,
            var_ln_assumed: drag.var_ln_gamma,
            cov_ln_assumed_ln_t: drag.cov_ln_gamma_ln_t,
            bulk_drag_kg_per_s: physics.stokes_drag_kg_per_s.value,
        }),
        _ => None,
    };
    if let Some(stage) = active.as_ref() {
        drag.drag_kg_per_s = stage.summary.drag_kg_per_s;
        drag.source = DragSource::Measured;
    }
    if let Some(line) = drive_line {
        spectral.lines.removed.insert(0, line);
    }

    // The lines were taken out of the record before the periodogram; the time-domain methods
    // see the same cleaned record. Removing a line can leave a trace of a trend, so the cleaned
    // record is detrended again and the time-domain methods see exactly what they assume.
    let cleaned = spectral
        .lines
        .cleaned
        .as_ref()
        .map(|y| equipartition::detrended(y, options.detrend));
    let time_samples: &[f64] = cleaned.as_deref().unwrap_or(&samples);
    let account = spectral.fit.as_ref().ok().map(|fit| SpectralAccount {
        model: TimeDomainModel {
            sample_rate_hz,
            filter: spectral.model.decode(&fit.theta).filter,
            hydro: spectral.model.hydro,
            exposure_s: spectral.model.exposure_s,
        },
        corner_frequency_hz: fit.corner_frequency_hz,
        diffusion: fit.diffusion,
        noise_variance: fit
            .noise_floor()
            .map(|floor| Estimate::new(floor.variance, floor.variance_se)),
    });
    let mut time = time_domain::time_domain_stage(
        name,
        time_samples,
        sample_rate_hz,
        account.as_ref(),
        options,
    );
    // Low-frequency drift: equipartition loses the drift's share of the variance, and the
    // shifts it caused are measured for the finding (see `drift`).
    let mut drift_account = drift::drift_account(
        &spectral,
        &spectral.periodogram,
        time_samples,
        sample_rate_hz,
    );
    if let Some(account) = drift_account.as_mut() {
        drift::correct_variance(&mut time, account);
    }
    // The Allan deviation of the same record against the fitted model (a diagnostic).
    let allan = allan_stage(time_samples, sample_rate_hz, spectral.fit.as_ref().ok());
    let drift_shifts = drift_account
        .as_ref()
        .map(|a| drift::shifts(a, &spectral, &time))
        .unwrap_or_default();

    let propagated = propagation::propagate(&PropagationInputs {
        measured_drag: active.as_ref().map(|a| a.terms),
        ..propagation_inputs(&spectral, &time, &drag, physics, unit, sample_rate_hz)
    });
    let active_terms = active.as_ref().map(|a| a.terms);
    let active = active.map(|stage| ActiveCalibration {
        stiffness_pn_per_nm: propagated.stiffness[0],
        ..stage.summary
    });
    let failures = failures(&spectral, &time);
    if propagated.stiffness.iter().all(Option::is_none) {
        // Nothing stands: the first failure, in the order the methods ran, is the error.
        return Err(failures
            .into_iter()
            .next()
            .map(|f| f.error)
            .unwrap_or(CalibrationError::NoAxes));
    }
    let mut excluded = exclusions(&spectral, &time, &failures, unit);
    let drift_acf_reason = drift_account
        .as_ref()
        .and_then(|a| drift::acf_exclusion(a, &drift_shifts))
        .filter(|_| excluded[1].is_none() && time.acf.is_ok());
    let acf_left_out_for_drift = drift_acf_reason.is_some();
    if let Some(reason) = drift_acf_reason {
        excluded[1] = Some(reason);
    }
    // Equipartition corrected by a factor from the spectral fit (or by the drift's share of the
    // variance computed from it, or with the fit's noise floor subtracted) is no more independent of the spectrum than equipartition in
    // volts.
    let equipartition_independent = unit == PositionUnit::Nanometre
        && time.variance_factor == 1.0
        && drift_account.is_none()
        && !time.noise_subtracted;
    let drift_evidence = drift_account.as_ref().map(|a| {
        drift::evidence(
            a,
            spectral.fit.as_ref().ok(),
            drift_shifts.clone(),
            acf_left_out_for_drift,
        )
    });
    let stiffness = consensus_stage(&propagated, equipartition_independent, excluded);
    let d_theory = physics.thermal_energy_j / drag.drag_kg_per_s.value;
    let noise_floor = noise_floor_summary(&spectral, &time);
    let failure_texts: Vec<(&str, String)> = failures
        .iter()
        .map(|f| (f.method, f.error.to_string()))
        .collect();
    let findings = findings::assess(&FindingInputs {
        axis: name,
        samples: raw_samples,
        sample_rate_hz,
        unit,
        periodogram: &spectral.periodogram,
        spectrum: spectral.fit.as_ref().ok(),
        peaks: &spectral.peaks,
        consensus: stiffness.stiffness.consensus,
        disagreements: &disagreements(&stiffness.discrepancies, &stiffness.stiffness.excluded),
        target_relative_precision: options.target_relative_precision,
        diffusion_theory_m2_per_s: d_theory,
        radius_m: conditions.bead_diameter_m / 2.0,
        height_m: conditions.height_m,
        hydrodynamics: options.hydrodynamics,
        hydro_terms: Some(spectral::hydro_terms(conditions, physics)),
        relaxation_time_s: time.acf.as_ref().ok().map(|a| a.relaxation_time_s),
        lines_removed: spectral.lines.removed.len(),
        lines_kept: spectral.lines.kept,
        failed_methods: &failure_texts,
        spectrum_excluded: stiffness.stiffness.excluded[0].as_deref(),
        drift: drift_evidence.as_ref(),
    });
    let findings: Vec<findings::Finding> = findings
        .into_iter()
        .chain(noise_floor.as_ref().and_then(|summary| {
            findings::noise_floor(&noise_floor_shifts(
                (name, unit),
                summary,
                &spectral,
                &time,
                &propagated,
            ))
        }))
        .chain(
            drive
                .zip(active.as_ref())
                .zip(active_terms)
                .and_then(|((drive, act), terms)| {
                    let stiffness = act.stiffness_pn_per_nm?;
                    let amplitude_relative_variance =
                        4.0 * (drive.amplitude_se_m / drive.amplitude_m).powi(2);
                    Some(findings::drive(&findings::DriveEvidence {
                        axis: name,
                        orientation,
                        drag_ratio: act.drag_ratio,
                        drag_over_bulk: act.drag_over_bulk,
                        radius_m: conditions.bead_diameter_m / 2.0,
                        viscosity_pa_s: physics.viscosity_pa_s,
                        height_m: conditions.height_m,
                        stiffness,
                        target_relative_precision: options.target_relative_precision,
                        spike_noise_relative_variance: terms.spike_log_variance
                            - amplitude_relative_variance,
                        amplitude_relative_variance,
                        amplitude_m: drive.amplitude_m,
                        record_length_s: samples.len() as f64 / sample_rate_hz,
                    }))
                })
                .into_iter()
                .flatten(),
        )
        .chain(allan.expected.as_ref().and_then(|e| {
            findings::drift_dominates(
                name,
                unit,
                e.drift_onset_s,
                samples.len() as f64 / sample_rate_hz,
            )
        }))
        .collect();
    let mut axis = assemble(
        name,
        noise_floor,
        active,
        drag,
        d_theory,
        spectral,
        time,
        propagated,
        stiffness,
        findings,
        failures,
        sample_rate_hz,
    );
    axis.allan = allan;
    Ok(axis)
}

/// The drag measured on the driven axis replaces this axis's assumed drag: its error, which
/// holds the temperature's share through kB T, becomes the input error of ln gamma, and the
/// temperature's correlation with it is that of ln T with itself.
fn take_shared_drag(drag: &mut AxisDrag, shared: SharedDrag) {
    drag.drag_kg_per_s = shared.drag_kg_per_s;
    drag.var_ln_gamma = shared.drag_kg_per_s.relative_se().powi(2);
    drag.cov_ln_gamma_ln_t = drag.var_ln_t;
    drag.source = DragSource::Measured;
    drag.includes_input_errors = true;
}

/// The white noise floor's test, level and share of the measured variance.
fn noise_floor_summary(
    spectral: &SpectralStage,
    time: &TimeDomainStage,
) -> Option<NoiseFloorSummary> {
    let test = spectral.noise_floor_test?;
    let level = spectral
        .fit
        .as_ref()
        .ok()
        .and_then(|f| f.noise_floor())
        .filter(|_| test.included);
    let variance_share = level.and_then(|l| {
        let v = time.variance.as_ref().ok()?;
        Some(l.variance / v.variance.mul_add(time.variance_factor, l.variance))
    });
    Some(NoiseFloorSummary {
        test,
        level,
        variance_share,
    })
}

/// What the `noise-floor` finding weighs: how far the floor moved each estimate it touches,
/// against that estimate's standard error, both relative.
fn noise_floor_shifts<'a>(
    (axis, unit): (&'a str, PositionUnit),
    summary: &NoiseFloorSummary,
    spectral: &SpectralStage,
    time: &TimeDomainStage,
    propagated: &Propagated,
) -> findings::NoiseFloorInputs<'a> {
    let mut shifts = Vec::new();
    if let (Some(level), Ok(fit)) = (summary.level, spectral.fit.as_ref()) {
        let test = &summary.test;
        // kappa_psd is proportional to fc.
        shifts.push((
            "psd stiffness",
            fit.corner_frequency_hz / test.corner_frequency_without_hz - 1.0,
            fit.corner_frequency_se_hz / fit.corner_frequency_hz,
        ));
        // beta is proportional to D^(-1/2).
        if let Some(beta) = propagated.sensitivity_nm_per_v {
            shifts.push((
                "sensitivity beta",
                (test.diffusion_without / fit.diffusion).sqrt() - 1.0,
                beta.relative_se(),
            ));
        }
        // Equipartition's variance lost sigma_n^2.
        if let Ok(v) = time.variance.as_ref() {
            let corrected = v.variance * time.variance_factor;
            shifts.push((
                "equipartition stiffness",
                level.variance / corrected,
                v.variance_se / v.variance,
            ));
        }
    }
    findings::NoiseFloorInputs {
        axis,
        unit,
        share: summary.variance_share,
        level: summary.level.map(|l| Estimate::new(l.level, l.level_se)),
        shifts,
    }
}

/// The methods that failed, in the order they ran.
fn failures(spectral: &SpectralStage, time: &TimeDomainStage) -> Vec<MethodFailure> {
    let mut out = Vec::new();
    if let Err(e) = &spectral.fit {
        out.push(MethodFailure {
            method: "psd",
            error: e.clone(),
        });
    }
    if let Err(e) = &time.acf {
        out.push(MethodFailure {
            method: "acf",
            error: e.clone(),
        });
    }
    if let Err(e) = &time.variance {
        out.push(MethodFailure {
            method: "equipartition",
            error: e.clone(),
        });
    }
    out
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
    let fit = spectral.fit.as_ref().ok();
    let acf = time.acf.as_ref().ok();
    let variance = time.variance.as_ref().ok();
    let periodogram = &spectral.periodogram;
    let record_length_s =
        periodogram.segment_len as f64 * periodogram.n_windows as f64 / sample_rate_hz;
    PropagationInputs {
        corner_frequency_hz: fit
            .map(|f| Estimate::new(f.corner_frequency_hz, f.corner_frequency_se_hz)),
        diffusion: fit.map(|f| Estimate::new(f.diffusion, f.diffusion_se)),
        relaxation_time_s: acf.map(|a| Estimate::new(a.relaxation_time_s, a.relaxation_time_se_s)),
        variance: variance.map(|v| Estimate::new(v.variance, v.variance_se)),
        correlation: covariance::method_correlation(
            &spectral.model,
            fit,
            acf,
            variance.map(|v| v.variance),
            record_length_s,
            sample_rate_hz,
        ),
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
        measured_drag: None,
    }
}

/// The consensus of the methods with the verdict.
pub(crate) struct ConsensusStage {
    pub(crate) stiffness: Stiffness,
    pub(crate) discrepancies: Vec<consensus::Discrepancy>,
    pub(crate) verdict: consensus::Verdict,
    pub(crate) verdict_reasons: Vec<String>,
}

/// Upper-tail p-value of a method's own goodness of fit below which the fit is rejected and the
/// method leaves the consensus. On data its model describes, the p-value is uniform, so this
/// excludes a sound method in 0.1 % of records per method (the tests measure the rate on exact
/// simulations: at most 1 % for the two fits together).
pub(crate) const FIT_REJECTION_P: f64 = 1e-3;

/// Why each method (psd, acf, equipartition) cannot stand in the consensus, if it cannot: its
/// own fit is rejected, or its model cannot describe what the spectral model contains.
pub(crate) fn exclusions(
    spectral: &SpectralStage,
    time: &TimeDomainStage,
    failures: &[MethodFailure],
    unit: PositionUnit,
) -> [Option<String>; 3] {
    let failed = |method: &str| {
        failures
            .iter()
            .find(|f| f.method == method)
            .map(|f| format!("it failed: {}", f.error))
    };
    let psd = if let Some(reason) = failed("psd") {
        Some(reason)
    } else if let Some(reason) = spectral
        .fit
        .as_ref()
        .ok()
        .and_then(|f| f.unidentified_reason())
    {
        Some(reason)
    } else {
        spectral
            .fit
            .as_ref()
            .ok()
            .filter(|f| f.p_value < FIT_REJECTION_P)
            .map(|fit| {
                format!(
                    "its model does not fit the spectrum (chi-square {:.1} on {} degrees of freedom, p = {:.1e} < {FIT_REJECTION_P})",
                    fit.chi_square, fit.degrees_of_freedom, fit.p_value
                )
            })
    };
    let mut unmodelled = Vec::new();
    if !matches!(spectral.model.filter, crate::spectrum::FilterSetting::None) {
        unmodelled.push("the photodiode filter");
    }
    if spectral.model.hydro.is_some() {
        unmodelled.push("frequency-dependent drag");
    }
    if spectral.model.exposure_s.is_some() {
        unmodelled.push("the camera's exposure");
    }
    let acf_p = time.acf.as_ref().map_or(1.0, |a| {
        chi_square_p_value(a.chi_square, a.degrees_of_freedom)
    });
    let acf = if let Some(reason) = failed("acf") {
        Some(reason)
    } else if !unmodelled.is_empty() && spectral.fit.is_err() {
        Some(format!(
            "not applicable: the spectral model holds {}, whose parameters come from the spectral fit, which failed",
            unmodelled.join(" and ")
        ))
    } else if acf_p < FIT_REJECTION_P {
        Some(format!(
            "its model does not fit the autocovariance (p = {acf_p:.1e} < {FIT_REJECTION_P})"
        ))
    } else {
        None
    };
    // In volts, equipartition's length scale is beta from the spectral fit.
    let equipartition = if let Some(reason) = failed("equipartition") {
        Some(reason)
    } else if unit == PositionUnit::Volt && psd.is_some() {
        Some(
            "it converts volts to nanometres with beta from the spectral fit, which was left out"
                .to_string(),
        )
    } else if !matches!(spectral.model.filter, crate::spectrum::FilterSetting::None)
        && spectral.fit.is_err()
    {
        Some(
            "not applicable: the photodiode filter removes part of the variance the detector reports, and without a spectral fit there is no filter to correct it by"
                .to_string(),
        )
    } else if spectral.model.exposure_s.is_some() && spectral.fit.is_err() {
        Some(
            "not applicable: the camera's exposure averages away part of the variance, by a factor that depends on the corner frequency, and without a spectral fit there is none to correct it by"
                .to_string(),
        )
    } else {
        None
    };
    [psd, acf, equipartition]
}

/// Upper-tail probability of a chi-square statistic (1 for no degrees of freedom).
fn chi_square_p_value(chi_square: f64, degrees_of_freedom: usize) -> f64 {
    use statrs::distribution::{ChiSquared, ContinuousCDF};
    if degrees_of_freedom == 0 {
        return 1.0;
    }
    ChiSquared::new(degrees_of_freedom as f64)
        .map(|d| d.sf(chi_square))
        .unwrap_or(f64::NAN)
}

/// Combines the estimates not excluded. When equipartition rests on the spectral fit (volt data
/// use its beta; a variance corrected for the detector filter uses its filter and fc) it is not
/// independent of the spectrum and stays out of the consensus (without being excluded: it still
/// counts in the verdict).
/// When every method is excluded, the consensus is computed over all of them for reference and
/// the verdict says it should not be used.
pub(crate) fn consensus_stage(
    propagated: &Propagated,
    equipartition_independent: bool,
    excluded: [Option<String>; 3],
) -> ConsensusStage {
    let not_independent = !equipartition_independent;
    let present = propagated.stiffness.map(|e| e.is_some());
    let values = propagated.stiffness.map(|e| e.map_or(0.0, |e| e.value));
    let mut include: [bool; 3] = std::array::from_fn(|i| excluded[i].is_none() && present[i]);
    if not_independent {
        include[2] = false;
    }
    if !include.contains(&true) {
        // Every method is out: the consensus over those that exist, for reference only (the
        // verdict says `unreliable`).
        include = present;
    }
    let combined = consensus::combine(&values, &propagated.covariance, &include);
    let discrepancies: Vec<consensus::Discrepancy> =
        consensus::discrepancies(&values, &propagated.covariance)
            .into_iter()
            .filter(|d| {
                let index = |m: &str| consensus::METHODS.iter().position(|n| *n == m);
                [index(d.first), index(d.second)]
                    .iter()
                    .all(|i| i.is_some_and(|i| present[i]))
            })
            .collect();
    let (verdict, verdict_reasons) = consensus::verdict(&discrepancies, &combined, &excluded);
    let [psd, acf, equipartition] = propagated.stiffness;
    ConsensusStage {
        stiffness: Stiffness {
            psd,
            acf,
            equipartition,
            equipartition_independent,
            consensus: combined.estimate,
            consensus_weights: combined.weights,
            correlation: covariance::correlation(&propagated.covariance),
            excluded,
        },
        discrepancies,
        verdict,
        verdict_reasons,
    }
}

/// The pairs of methods left in the consensus that differ by more than `Z_LIMIT` standard
/// errors, as the findings take them (a method left out already has its reason).
fn disagreements(
    discrepancies: &[consensus::Discrepancy],
    excluded: &[Option<String>; 3],
) -> Vec<MethodDisagreement> {
    let standing = |m: &str| {
        consensus::METHODS
            .iter()
            .position(|n| *n == m)
            .is_some_and(|i| excluded[i].is_none())
    };
    discrepancies
        .iter()
        .filter(|d| d.z.abs() > consensus::Z_LIMIT && standing(d.first) && standing(d.second))
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
    noise_floor: Option<NoiseFloorSummary>,
    active: Option<ActiveCalibration>,
    drag: AxisDrag,
    diffusion_theory_m2_per_s: f64,
    spectral: SpectralStage,
    time: TimeDomainStage,
    propagated: Propagated,
    stiffness: ConsensusStage,
    findings: Vec<findings::Finding>,
    failures: Vec<MethodFailure>,
    sample_rate_hz: f64,
) -> AxisCalibration {
    let fit = spectral.fit.ok();
    let acf = time.acf.ok();
    AxisCalibration {
        noise_floor,
        axis: name.to_string(),
        orientation: drag.orientation,
        wall_factor: drag.wall_factor,
        drag_kg_per_s: drag.drag_kg_per_s,
        corner_frequency_hz: fit
            .as_ref()
            .map(|f| Estimate::new(f.corner_frequency_hz, f.corner_frequency_se_hz)),
        relaxation_time_s: acf
            .as_ref()
            .map(|a| Estimate::new(a.relaxation_time_s, a.relaxation_time_se_s)),
        diffusion: fit
            .as_ref()
            .map(|f| Estimate::new(f.diffusion, f.diffusion_se)),
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
        acf,
        variance: time.variance.ok(),
        peaks: spectral.peaks,
        histogram: time.histogram,
        failures,
        drag_source: drag.source,
        active,
        includes_input_errors: drag.includes_input_errors,
        sample_rate_hz,
        lines_removed: spectral.lines.removed,
        allan: crate::allan::AllanCurve::default(),
    }
}
