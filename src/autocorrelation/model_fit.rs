//! The general autocorrelation fit: corner frequency and diffusion coefficient of any
//! [`TimeDomainModel`] by generalised least squares on the sample autocovariance, weighted by
//! Bartlett's formula evaluated with the model's own autocovariance.
//!
//! For the plain model it is the same estimator as `fit_exponential` (same lags, same weights,
//! same mean-removal bias, parameterised by (ln fc, ln D) instead of (A, c)); the tests check
//! that both give the same relaxation time and standard error.

use super::model::{LagSeries, SeriesEvaluator, TimeDomainModel};
use super::{AcfError, AcfFitOptions, ExponentialFit, LagWindow, lag_window};
use nalgebra::{Cholesky, DMatrix, DVector, Dyn, Matrix2, Vector2};
use std::f64::consts::PI;

/// Result of [`fit_autocovariance_model`].
#[derive(Clone, Debug)]
pub struct ModelAcfFit {
    /// Corner frequency fc = kappa/(2 pi gamma0), Hz.
    pub corner_frequency_hz: f64,
    /// Standard error of fc, Hz.
    pub corner_frequency_se_hz: f64,
    /// Diffusion coefficient D = k_B T/gamma0 in signal-unit^2/s.
    pub diffusion: f64,
    /// Standard error of D, signal-unit^2/s.
    pub diffusion_se: f64,
    /// Covariance of the estimates of fc and D, Hz signal-unit^2/s.
    pub corner_diffusion_covariance: f64,
    /// What the calibration reads of every autocorrelation fit, in the shape of
    /// [`ExponentialFit`]: tau = 1/(2 pi fc) with its se, the positional variance
    /// sigma^2 = D/(2 pi fc) as `amplitude` (not the detector's variance: see
    /// [`super::variance_factor`]), the lags, the sample and fitted autocovariance
    /// (`C_model(k) - Var(xbar)`), the generalised chi-square on lags - 2 degrees of freedom, and
    /// the influence of each lag on tau.
    pub decay: ExponentialFit,
}

/// Upper bound on Gauss-Newton iterations (each re-evaluates the weights).
const MAX_ITERATIONS: usize = 100;
/// Step in (ln fc, ln D) below which the iteration has converged.
const CONVERGENCE_TOLERANCE: f64 = 1e-10;
/// Step of the central difference in ln fc for the Jacobian: truncation and rounding both stay
/// near 1e-10 relative.
const LN_FC_STEP: f64 = 1e-5;
/// Largest Gauss-Newton step in ln fc (a factor e), so a poor start cannot jump far away.
const MAX_LN_FC_STEP: f64 = 1.0;

/// Fits the corner frequency fc and diffusion coefficient D of `model` to the sample
/// autocovariance `acov` (lags `0..`, from [`super::autocovariance`] of `n_samples` samples),
/// starting from `start_fc_hz` and `start_diffusion` (signal-unit^2/s), usually the spectral
/// fit's values.
///
/// Expectation: `E[C^_k] = C_model(k dt; fc, D) - Var(xbar)`, the model autocovariance (see
/// [`TimeDomainModel::autocovariance_at`]) lowered by the variance of the sample mean (the bias
/// of mean removal to leading order, the generalisation of [`super::mean_bias_ar1`]).
/// Weights: the inverse of the covariance of the sample autocovariances by Bartlett's formula
/// with the exact finite-record counts, evaluated with the model's autocovariance at the current
/// parameters (M. S. Bartlett, J. R. Stat. Soc. Suppl. 8, 27 (1946)), with a relative ridge of
/// 1e-12 (raised if Cholesky fails). Gauss-Newton steps in (ln fc, ln D) with step halving
/// alternate with re-evaluating the weights until the step is below 1e-10 (iteratively
/// reweighted generalised least squares, as in `fit_exponential`). D enters linearly, so its
/// derivative is exact; the fc derivative is a central difference.
///
/// Lags `options.first_lag..=last_lag` (strided to at most `options.max_lags_used`), with the
/// last lag chosen as in `fit_exponential` ([`super::default_last_lag`] unless given). Standard
/// errors come from `(J^T W J)^-1`; tau, sigma^2 and their errors by the delta method.
///
/// Cost: for models with a closed form, about that of `fit_exponential`; with hydrodynamic drag
/// each model evaluation is a quadrature of a few hundred nodes per lag (see `quadrature`).
///
/// # Errors
/// [`AcfError::InvalidModel`], [`AcfError::InvalidSampleRate`], [`AcfError::InvalidStart`],
/// the lag-window errors of `fit_exponential`, or [`AcfError::NotConverged`].
pub fn fit_autocovariance_model(
    acov: &[f64],
    n_samples: usize,
    model: &TimeDomainModel,
    options: &AcfFitOptions,
    start_fc_hz: f64,
    start_diffusion: f64,
) -> Result<ModelAcfFit, AcfError> {
    model.validate()?;
    let valid_start = start_fc_hz.is_finite()
        && start_fc_hz > 0.0
        && start_diffusion.is_finite()
        && start_diffusion > 0.0;
    if !valid_start {
        return Err(AcfError::InvalidStart {
            corner_frequency_hz: start_fc_hz,
            diffusion: start_diffusion,
        });
    }
    let LagWindow { lags, data, .. } = lag_window(acov, model.sample_rate_hz, n_samples, options)?;
    let last_lag = lags.last().copied().unwrap_or(0);
    let mut problem = Problem {
        lags: &lags,
        data: &data,
        n_samples,
        white_noise_variance: options.white_noise_variance.max(0.0),
        evaluator: SeriesEvaluator::new(model, 2 * last_lag + 1, start_fc_hz),
    };
    let (theta, iterations) = problem.solve(start_fc_hz.ln(), start_diffusion.ln())?;
    let not_converged = |reason: &'static str| AcfError::NotConverged { iterations, reason };
    let system = problem
        .system(theta)
        .ok_or_else(|| not_converged("weight matrix not positive definite at the solution"))?;
    let covariance = system
        .normal_matrix
        .try_inverse()
        .ok_or_else(|| not_converged("singular normal matrix at the solution"))?;
    let fit = assemble(lags, data, theta, &covariance, system);
    let finite = [
        fit.corner_frequency_hz,
        fit.corner_frequency_se_hz,
        fit.diffusion,
        fit.diffusion_se,
        fit.decay.relaxation_time_se_s,
    ]
    .iter()
    .all(|v| v.is_finite());
    if !finite {
        return Err(not_converged("non-finite estimate or standard error"));
    }
    Ok(fit)
}

/// The result from the solution `theta = (ln fc, ln D)`, its covariance and the system there.
fn assemble(
    lags: Vec<usize>,
    data: Vec<f64>,
    theta: Vector2<f64>,
    covariance: &Matrix2<f64>,
    system: System,
) -> ModelAcfFit {
    let (fc, d) = (theta[0].exp(), theta[1].exp());
    let (var_fc, var_d, cov_fd) = (
        covariance[(0, 0)].max(0.0),
        covariance[(1, 1)].max(0.0),
        covariance[(0, 1)],
    );
    let tau = 1.0 / (2.0 * PI * fc);
    let amplitude = d / (2.0 * PI * fc);
    // ln sigma^2 = ln D - ln fc.
    let var_ln_amplitude = 2.0f64.mul_add(-cov_fd, var_d + var_fc).max(0.0);
    // Row of (J^T W J)^-1 J^T W for ln fc, times d tau / d ln fc = -tau.
    let tau_influence = lags
        .iter()
        .enumerate()
        .map(|(i, &lag)| {
            let weight = covariance[(0, 0)].mul_add(
                system.weighted_jacobian[(i, 0)],
                covariance[(0, 1)] * system.weighted_jacobian[(i, 1)],
            );
            (lag, -tau * weight)
        })
        .collect();
    let degrees_of_freedom = lags.len() - 2;
    ModelAcfFit {
        corner_frequency_hz: fc,
        corner_frequency_se_hz: fc * var_fc.sqrt(),
        diffusion: d,
        diffusion_se: d * var_d.sqrt(),
        corner_diffusion_covariance: fc * d * cov_fd,
        decay: ExponentialFit {
            relaxation_time_s: tau,
            relaxation_time_se_s: tau * var_fc.sqrt(),
            amplitude,
            amplitude_se: amplitude * var_ln_amplitude.sqrt(),
            lags,
            acov: data,
            model: system.model,
            chi_square: system.chi_square,
            degrees_of_freedom,
            tau_influence,
        },
    }
}

/// The data of one fit and the model evaluator.
struct Problem<'a> {
    lags: &'a [usize],
    data: &'a [f64],
    n_samples: usize,
    /// sigma_n^2 of white detection noise, signal-unit^2: in the weights only (see
    /// `factorise`).
    white_noise_variance: f64,
    evaluator: SeriesEvaluator,
}

/// The GLS quantities at one parameter point.
struct System {
    /// Expectation at the lags.
    model: Vec<f64>,
    /// `J^T W J` in (ln fc, ln D).
    normal_matrix: Matrix2<f64>,
    /// `J^T W r`.
    gradient: Vector2<f64>,
    /// `W J` (`K x 2`).
    weighted_jacobian: DMatrix<f64>,
    /// `r^T W r`.
    chi_square: f64,
    /// Cholesky factor of the covariance of the data (re-used in step halving).
    cholesky: Cholesky<f64, Dyn>,
}

impl Problem<'_> {
    /// The series at `theta` and the expectation `g(k) - Var(xbar)` at the lags.
    fn expectation(&mut self, theta: Vector2<f64>) -> (Vec<f64>, LagSeries) {
        let series = self.evaluator.series(theta[0].exp(), theta[1].exp());
        let mean_variance = series.mean_variance(self.n_samples);
        let values = self
            .lags
            .iter()
            .map(|&lag| series.at(lag) - mean_variance)
            .collect();
        (values, series)
    }

    /// Residuals `data - model`.
    fn residuals(&self, model: &[f64]) -> DVector<f64> {
        DVector::from_iterator(model.len(), self.data.iter().zip(model).map(|(d, m)| d - m))
    }

    /// Factorises the Bartlett covariance of `series`, raising the ridge if needed.
    ///
    /// White detection noise of variance sigma_n^2 makes the observed autocovariance
    /// g(d) + sigma_n^2 [d = 0]; the Bartlett covariance (Isserlis' theorem, see
    /// `LagSeries::autocovariance_covariance`) takes g(0) only through the series' lag 0, so
    /// the noise enters the weights exactly by adding it there. The lags fitted (>= 1) keep
    /// their expectation; the noise's share of the mean-removal bias, sigma_n^2 / N, is left
    /// out of it (a relative 1/N of the noise).
    fn factorise(&self, series: &LagSeries) -> Option<Cholesky<f64, Dyn>> {
        let noisy;
        let series = if self.white_noise_variance > 0.0 {
            let mut with_noise = series.clone();
            with_noise.lag0 += self.white_noise_variance;
            noisy = with_noise;
            &noisy
        } else {
            series
        };
        let mut ridge = 1e-12;
        while ridge <= 1e-6 {
            let cov = series.autocovariance_covariance(self.lags, self.n_samples, ridge);
            if let Some(cholesky) = cov.cholesky() {
                return Some(cholesky);
            }
            ridge *= 1e3;
        }
        None
    }

    /// Builds the GLS system at `theta`.
    fn system(&mut self, theta: Vector2<f64>) -> Option<System> {
        let (model, series) = self.expectation(theta);
        let cholesky = self.factorise(&series)?;
        let step = Vector2::new(LN_FC_STEP, 0.0);
        let (upper, _) = self.expectation(theta + step);
        let (lower, _) = self.expectation(theta - step);
        let n_lags = self.lags.len();
        let mut jacobian = DMatrix::zeros(n_lags, 2);
        for i in 0..n_lags {
            jacobian[(i, 0)] = (upper[i] - lower[i]) / (2.0 * LN_FC_STEP);
            // The model is proportional to D.
            jacobian[(i, 1)] = model[i];
        }
        let residuals = self.residuals(&model);
        let weighted_jacobian = cholesky.solve(&jacobian);
        let normal = jacobian.transpose() * &weighted_jacobian;
        let gradient = weighted_jacobian.transpose() * &residuals;
        let chi_square = residuals.dot(&cholesky.solve(&residuals));
        Some(System {
            model,
            normal_matrix: Matrix2::new(
                normal[(0, 0)],
                normal[(0, 1)],
                normal[(1, 0)],
                normal[(1, 1)],
            ),
            gradient: Vector2::new(gradient[0], gradient[1]),
            weighted_jacobian,
            chi_square,
            cholesky,
        })
    }

    /// `r^T W r` at `theta` with a fixed weight matrix.
    fn objective(&mut self, theta: Vector2<f64>, cholesky: &Cholesky<f64, Dyn>) -> f64 {
        let (model, _) = self.expectation(theta);
        let residuals = self.residuals(&model);
        residuals.dot(&cholesky.solve(&residuals))
    }

    /// The D that minimises `r^T W r` at fixed fc and weights (the model is linear in D):
    /// `ln D + ln((m^T W data)/(m^T W m))`, or `ln D` unchanged if that is not positive.
    fn best_ln_diffusion(&mut self, theta: Vector2<f64>) -> f64 {
        let (model, series) = self.expectation(theta);
        let Some(cholesky) = self.factorise(&series) else {
            return theta[1];
        };
        let m = DVector::from_column_slice(&model);
        let weighted = cholesky.solve(&m);
        let ratio = weighted.dot(&DVector::from_column_slice(self.data)) / weighted.dot(&m);
        if ratio.is_finite() && ratio > 0.0 {
            theta[1] + ratio.ln()
        } else {
            theta[1]
        }
    }

    /// Iteratively reweighted Gauss-Newton from the start; returns `(theta, iterations)`.
    fn solve(
        &mut self,
        start_ln_fc: f64,
        start_ln_d: f64,
    ) -> Result<(Vector2<f64>, usize), AcfError> {
        let mut theta = Vector2::new(start_ln_fc, start_ln_d);
        theta[1] = self.best_ln_diffusion(theta);
        for iteration in 1..=MAX_ITERATIONS {
            let not_converged = |reason: &'static str| AcfError::NotConverged {
                iterations: iteration,
                reason,
            };
            let system = self
                .system(theta)
                .ok_or_else(|| not_converged("weight matrix not positive definite"))?;
            let mut step = system
                .normal_matrix
                .try_inverse()
                .map(|inverse| inverse * system.gradient)
                .ok_or_else(|| not_converged("singular normal matrix"))?;
            if !(step[0].is_finite() && step[1].is_finite()) {
                return Err(not_converged("non-finite step"));
            }
            if step[0].abs() > MAX_LN_FC_STEP {
                step *= MAX_LN_FC_STEP / step[0].abs();
            }
            let small = |scale: f64| (scale * step).amax() <= CONVERGENCE_TOLERANCE;
            if small(1.0) {
                return Ok((theta, iteration));
            }
            let mut scale = 1.0_f64;
            let mut accepted = false;
            for _ in 0..60 {
                let trial = theta + scale * step;
                let objective = self.objective(trial, &system.cholesky);
                if objective.is_finite() && objective <= system.chi_square {
                    theta = trial;
                    accepted = true;
                    break;
                }
                if small(scale) {
                    // No decrease within rounding: the current point is the optimum.
                    return Ok((theta, iteration));
                }
                scale *= 0.5;
            }
            if !accepted {
                return Err(not_converged("no step decreased the weighted residuals"));
            }
        }
        Err(AcfError::NotConverged {
            iterations: MAX_ITERATIONS,
            reason: "iteration limit reached",
        })
    }
}
