//! Maximum-likelihood fit of a spectrum model to a blocked periodogram, and the analytic
//! weighted least-squares fit of a plain Lorentzian used for starting values.

use super::model::{FilterSetting, Params, PreparedBlock, Segments, SpectrumModel};
use super::{Block, Periodogram, block_periodogram};
use crate::linalg::{invert_spd, solve_spd};
use argmin::core::{CostFunction, Executor};
use argmin::solver::neldermead::NelderMead;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::f64::consts::PI;

/// Frequency range of the fit, Hz; `None` takes the default.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct FitRange {
    /// Lowest frequency fitted. Default: the larger of 10 Hz and 4 resolution steps, which keeps
    /// out the lowest bins where drift and stage vibration live (common practice).
    pub f_min_hz: Option<f64>,
    /// Highest frequency fitted. Default: 0.8 f_Nyquist, or 0.98 f_Nyquist when the detector
    /// filter is modelled. Aliasing is modelled exactly, so the top bins are only left out
    /// because unmodelled detector and anti-alias filtering bite there first (common practice).
    pub f_max_hz: Option<f64>,
}

/// Options of the spectral fit.
#[derive(Clone, Debug, PartialEq)]
pub struct SpectrumFitOptions {
    /// The model to fit.
    pub model: SpectrumModel,
    /// The frequency range.
    pub range: FitRange,
    /// Minimum periodogram bins per block (default 32: block means are then close to Gaussian
    /// and the chi-square goodness of fit is meaningful).
    pub min_bins_per_block: usize,
    /// About how many blocks to form (default 120).
    pub target_blocks: usize,
    /// Periodogram bins left out of the fit (narrow peaks such as mains pickup).
    pub excluded_bins: Vec<usize>,
    /// Fit an additive 1/f term, S(f) + A / f, beside the model (see [`FlickerTerm`]).
    pub flicker: bool,
}

impl SpectrumFitOptions {
    /// Default options for a model.
    pub fn new(model: SpectrumModel) -> Self {
        SpectrumFitOptions {
            model,
            range: FitRange::default(),
            min_bins_per_block: 32,
            target_blocks: 120,
            excluded_bins: Vec::new(),
            flicker: false,
        }
    }

    /// The fit range actually used for this periodogram, (f_min, f_max) in Hz.
    pub fn resolved_range(&self, periodogram: &Periodogram) -> (f64, f64) {
        let nyquist = periodogram.sample_rate_hz / 2.0;
        let f_min = self
            .range
            .f_min_hz
            .unwrap_or_else(|| (4.0 * periodogram.resolution_hz()).max(10.0));
        let default_max = match self.model.filter {
            FilterSetting::None => 0.8 * nyquist,
            _ => 0.98 * nyquist,
        };
        let f_max = self.range.f_max_hz.unwrap_or(default_max).min(nyquist);
        (f_min, f_max)
    }
}

/// Result of the spectral fit. Standard errors come from the inverse Fisher information of the
/// Whittle likelihood at the optimum.
#[derive(Clone, Debug)]
pub struct SpectrumFit {
    /// Corner frequency fc, Hz, and its standard error.
    pub corner_frequency_hz: f64,
    pub corner_frequency_se_hz: f64,
    /// Diffusion coefficient D, signal-units^2/s (one-sided convention, see the module docs),
    /// and its standard error.
    pub diffusion: f64,
    pub diffusion_se: f64,
    /// Correlation coefficient between the estimates of fc and D.
    pub correlation_fc_diffusion: f64,
    /// Fitted detector filter: (f3dB Hz, its SE, alpha, its SE), when the filter was fitted.
    pub fitted_filter: Option<FittedFilter>,
    /// The fitted parameter vector (log space, see `model`), and its covariance.
    pub theta: Vec<f64>,
    pub covariance: Vec<Vec<f64>>,
    /// Chi-square sum_b n_b (P_b - S_b)^2 / S_b^2, its degrees of freedom and the upper-tail
    /// p-value of the chi-square distribution.
    pub chi_square: f64,
    pub degrees_of_freedom: usize,
    pub p_value: f64,
    /// Fit range used, Hz.
    pub f_min_hz: f64,
    pub f_max_hz: f64,
    /// The blocks fitted, and the model's block means at the optimum (for plots and residuals).
    pub blocks: Vec<Block>,
    pub model_psd: Vec<f64>,
    /// Iterations of Fisher scoring used.
    pub iterations: usize,
    /// The model that was fitted.
    pub model: SpectrumModel,
    /// The additive 1/f term, when it was fitted (`SpectrumFitOptions::flicker`); `theta` and
    /// `covariance` then hold the model's parameters only, the covariance being the marginal
    /// one (the inverse of the full Fisher information, the 1/f term's row and column left out).
    pub flicker: Option<FlickerTerm>,
    /// The minimised Whittle cost, sum_b n_b [ln S_b + P_b / S_b], for likelihood-ratio tests
    /// between nested fits of the same blocks (twice the difference is the statistic).
    pub whittle_cost: f64,
}

/// A fitted additive 1/f ("flicker") term A / f of the one-sided spectrum: low-frequency drift
/// of the bead, the stage or the detector whose density falls as 1/f (common practice, no
/// source: the density of many slow instrumental processes). `A` is the density at 1 Hz in
/// signal-units^2/Hz (so signal-units^2 after multiplying by Hz); it may come out slightly
/// negative on data without drift, which keeps the likelihood-ratio test on the boundary-free
/// parameter.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FlickerTerm {
    pub density_at_1_hz: f64,
    pub density_at_1_hz_se: f64,
}

impl FlickerTerm {
    /// The term's one-sided density at `f_hz` > 0, signal-units^2/Hz.
    pub fn psd_at(&self, f_hz: f64) -> f64 {
        self.density_at_1_hz / f_hz
    }
}

/// Smallest reciprocal condition number (smallest over largest eigenvalue) of the parameters'
/// correlation matrix for a fit to count as identifiable. Below it the Fisher information is
/// numerically singular: some combination of the parameters is not fixed by the data, and the
/// standard errors of a linearised inverse cannot be trusted (common practice; the value is a
/// choice well above the rounding level of a 4 x 4 inverse, about 1e-12).
pub const MIN_PARAMETER_RCOND: f64 = 1e-8;

impl SpectrumFit {
    /// The fitted model's one-sided PSD at `f_hz`, signal-units^2/Hz.
    pub fn model_psd_at(&self, f_hz: f64) -> f64 {
        self.thermal_psd_at(f_hz) + self.flicker.map_or(0.0, |t| t.psd_at(f_hz))
    }

    /// The fitted model without the 1/f term (the bead's motion as the detector sees it),
    /// signal-units^2/Hz.
    pub fn thermal_psd_at(&self, f_hz: f64) -> f64 {
        self.model.one_sided_psd(f_hz, &self.theta)
    }

    /// Why the fitted parameters are not identified by the data, or `None` when they are.
    ///
    /// A parameter whose standard error exceeds its value, or a near-singular correlation
    /// matrix (reciprocal condition number below [`MIN_PARAMETER_RCOND`]), means the fit sits on
    /// a ridge of the likelihood: with a fitted photodiode filter, typically fc against f3dB when
    /// the two are close and alpha is small (Berg-Sorensen, Oddershede, Florin & Flyvbjerg,
    /// J. Appl. Phys. 93, 3167 (2003), recalled from memory, unverified, advise calibrating the
    /// filter separately for this reason).
    pub fn unidentified_reason(&self) -> Option<String> {
        let mut loose = Vec::new();
        if !(self.corner_frequency_se_hz <= self.corner_frequency_hz) {
            loose.push(format!(
                "fc = {:.0} +- {:.3e} Hz",
                self.corner_frequency_hz, self.corner_frequency_se_hz
            ));
        }
        if let Some(f) = &self.fitted_filter {
            if !(f.f3db_se_hz <= f.f3db_hz) {
                loose.push(format!(
                    "f3dB = {:.0} +- {:.3e} Hz",
                    f.f3db_hz, f.f3db_se_hz
                ));
            }
            if !(f.alpha_se <= f.alpha) {
                loose.push(format!("alpha = {:.3} +- {:.3e}", f.alpha, f.alpha_se));
            }
        }
        if !loose.is_empty() {
            return Some(format!(
                "the data do not fix the spectral parameters ({})",
                loose.join(", ")
            ));
        }
        let rcond = correlation_rcond(&self.covariance);
        (!(rcond >= MIN_PARAMETER_RCOND)).then(|| {
            format!(
                "the spectral parameters are nearly degenerate (reciprocal condition number of their correlation matrix {rcond:.1e})"
            )
        })
    }
}

/// Reciprocal condition number of the correlation matrix of a covariance matrix (NaN for an
/// empty or non-finite one).
fn correlation_rcond(covariance: &[Vec<f64>]) -> f64 {
    let n = covariance.len();
    if n == 0 {
        return f64::NAN;
    }
    let corr = nalgebra::DMatrix::from_fn(n, n, |i, j| {
        covariance[i][j] / (covariance[i][i] * covariance[j][j]).sqrt()
    });
    if corr.iter().any(|v| !v.is_finite()) {
        return f64::NAN;
    }
    let eig = corr.symmetric_eigenvalues();
    let max = eig.iter().copied().fold(f64::MIN, f64::max);
    let min = eig.iter().copied().fold(f64::MAX, f64::min);
    min / max
}

/// A fitted photodiode filter with standard errors.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FittedFilter {
    pub f3db_hz: f64,
    pub f3db_se_hz: f64,
    pub alpha: f64,
    pub alpha_se: f64,
}

/// Why a spectrum could not be fitted.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum SpectrumFitError {
    /// The fit range holds too few blocks to fit the parameters.
    #[error(
        "the fit range {f_min_hz:.1}-{f_max_hz:.1} Hz holds {n_blocks} spectral blocks, too few to fit {n_params} parameters; widen the range or record longer"
    )]
    TooFewBlocks {
        f_min_hz: f64,
        f_max_hz: f64,
        n_blocks: usize,
        n_params: usize,
    },
    /// The fit range is empty or inverted.
    #[error(
        "the fit range {f_min_hz:.1}-{f_max_hz:.1} Hz is empty; the upper limit must exceed the lower and stay below the Nyquist frequency"
    )]
    EmptyRange { f_min_hz: f64, f_max_hz: f64 },
    /// The likelihood could not be maximised (no finite optimum found).
    #[error("the spectral fit did not converge: {reason}")]
    NoConvergence { reason: String },
}

/// Negative Whittle log-likelihood of blocked periodogram data (Whittle, Ark. Mat. 2, 423 (1953)
/// (citation from memory, unverified); for block means of n exponential ordinates it is the
/// Gamma log-likelihood up to constants): L = sum_b n_b [ln S_b + P_b / S_b].
struct Whittle<'a> {
    model: &'a SpectrumModel,
    blocks: &'a [Block],
    /// The periodogram's segments, for the leakage term of the expected periodogram.
    segment_len: Option<Segments>,
    /// The additive 1/f term, when it is fitted.
    flicker: Option<FlickerColumn>,
    /// The blocks' quadrature nodes with what the model computes at them independently of
    /// theta (`SpectrumModel::prepare_block`), built once per fit.
    prepared: Vec<PreparedBlock>,
}

/// The 1/f term's place in theta and its shape over the blocks. Its parameter is linear (not
/// logarithmic, so that zero is an interior point and the likelihood-ratio statistic for it is
/// chi-square with one degree of freedom on data without drift): A = theta[index] * scale, with
/// scale = P_1 f_1 of the first block, so the parameter is about the term's share of the first
/// block's power.
#[derive(Clone, Debug)]
struct FlickerColumn {
    index: usize,
    scale: f64,
    /// Mean of 1/f over each block, 1/Hz: ln(upper / lower) / (upper - lower), the continuous
    /// mean standing for the mean over the block's bins as the model's block mean does (the
    /// 1/f term's own leakage is not modelled).
    inverse_f: Vec<f64>,
}

impl FlickerColumn {
    fn new(index: usize, blocks: &[Block]) -> Option<FlickerColumn> {
        let first = blocks.first()?;
        let scale = first.psd * first.frequency_hz;
        let inverse_f = blocks
            .iter()
            .map(|b| {
                if b.lower_hz > 0.0 && b.upper_hz > b.lower_hz {
                    (b.upper_hz / b.lower_hz).ln() / (b.upper_hz - b.lower_hz)
                } else {
                    1.0 / b.frequency_hz.max(f64::MIN_POSITIVE)
                }
            })
            .collect();
        (scale.is_finite() && scale > 0.0).then_some(FlickerColumn {
            index,
            scale,
            inverse_f,
        })
    }

    /// A, signal-units^2/Hz at 1 Hz, from theta.
    fn density_at_1_hz(&self, theta: &[f64]) -> f64 {
        theta.get(self.index).copied().unwrap_or(0.0) * self.scale
    }
}

impl<'a> Whittle<'a> {
    fn new(
        model: &'a SpectrumModel,
        blocks: &'a [Block],
        segment_len: Option<Segments>,
        flicker: Option<FlickerColumn>,
    ) -> Self {
        let prepared = blocks
            .iter()
            .map(|b| model.prepare_block(b.lower_hz, b.upper_hz, segment_len))
            .collect();
        Whittle {
            model,
            blocks,
            segment_len,
            flicker,
            prepared,
        }
    }

    fn model_means(&self, p: &Params) -> Vec<f64> {
        self.prepared
            .iter()
            .map(|b| self.model.prepared_block_mean(b, p, self.segment_len))
            .collect()
    }

    /// The expected block means for theta: the model's, plus the 1/f term when it is fitted.
    fn means_at(&self, theta: &[f64]) -> Vec<f64> {
        let mut means = self.model_means(&self.model.decode(theta));
        if let Some(flicker) = &self.flicker {
            let a = flicker.density_at_1_hz(theta);
            for (m, inv_f) in means.iter_mut().zip(&flicker.inverse_f) {
                *m = a.mul_add(*inv_f, *m);
            }
        }
        means
    }

    fn cost_at(&self, theta: &[f64]) -> f64 {
        self.cost_of(&self.means_at(theta))
    }

    /// The Whittle cost of the block means `means` (infinite when one is not positive).
    fn cost_of(&self, means: &[f64]) -> f64 {
        let mut total = 0.0;
        for (b, &s) in self.blocks.iter().zip(means) {
            if !(s.is_finite() && s > 0.0) {
                return f64::INFINITY;
            }
            total += b.n_averaged as f64 * (s.ln() + b.psd / s);
        }
        total
    }

    /// d ln S_b / d theta for every block, given the means S_b at theta. The parameters the
    /// means are linear in are differentiated exactly: D scales everything but the white floor
    /// and the 1/f term (d S_b / d ln D = S_b - P_n floor_gain_b - A / f_b), P_n enters as
    /// P_n floor_gain_b and the 1/f term's parameter as scale / f_b. The others (ln fc and a
    /// fitted filter's) by central differences, step 1e-5 in log space (truncation and
    /// rounding both near 1e-10 relative).
    fn log_derivatives(&self, theta: &[f64], means: &[f64]) -> Vec<Vec<f64>> {
        let h = 1e-5;
        let n = theta.len();
        let floor_index = self.model.noise_floor_index();
        let floor_level = floor_index
            .and_then(|i| theta.get(i))
            .map_or(0.0, |v| v.exp());
        let flicker = self
            .flicker
            .as_ref()
            .map(|column| (column, column.density_at_1_hz(theta)));
        let mut out = vec![vec![0.0; n]; self.blocks.len()];
        for (b, row) in out.iter_mut().enumerate() {
            let floor = floor_level * self.prepared[b].floor_gain;
            let drift = flicker.map_or(0.0, |(column, a)| a * column.inverse_f[b]);
            row[1] = (means[b] - floor - drift) / means[b];
            if let Some(i) = floor_index {
                row[i] = floor / means[b];
            }
            if let Some((column, _)) = flicker {
                row[column.index] = column.scale * column.inverse_f[b] / means[b];
            }
        }
        let mut t = theta.to_vec();
        let linear = |i: usize| {
            i == 1 || Some(i) == floor_index || flicker.is_some_and(|(c, _)| c.index == i)
        };
        for i in (0..n).filter(|&i| !linear(i)) {
            t[i] = theta[i] + h;
            let up = self.means_at(&t);
            t[i] = theta[i] - h;
            let down = self.means_at(&t);
            t[i] = theta[i];
            for (b, row) in out.iter_mut().enumerate() {
                row[i] = (up[b].ln() - down[b].ln()) / (2.0 * h);
            }
        }
        out
    }
}

impl CostFunction for Whittle<'_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, theta: &Self::Param) -> Result<Self::Output, argmin::core::Error> {
        Ok(self.cost_at(theta))
    }
}

/// Fisher information F = sum_b n_b (d ln S_b)(d ln S_b)^T and score g = sum_b n_b (P_b/S_b - 1)
/// d ln S_b (the gradient of minus L), given the block means S_b at theta.
fn fisher_and_score(w: &Whittle<'_>, theta: &[f64], means: &[f64]) -> (Vec<Vec<f64>>, Vec<f64>) {
    let n = theta.len();
    let derivs = w.log_derivatives(theta, means);
    let mut fisher = vec![vec![0.0; n]; n];
    let mut score = vec![0.0; n];
    for ((b, s), d) in w.blocks.iter().zip(means).zip(&derivs) {
        let nb = b.n_averaged as f64;
        let r = b.psd / s - 1.0;
        for i in 0..n {
            score[i] += nb * r * d[i];
            for j in 0..n {
                fisher[i][j] += nb * d[i] * d[j];
            }
        }
    }
    (fisher, score)
}

/// Fits `options.model` to the periodogram by maximum likelihood.
///
/// The Whittle likelihood of the block means is maximised by Fisher scoring with step halving
/// (the expected information replaces the Hessian; standard for likelihoods of exponential
/// families), started from `start` = (fc Hz, D) or, if `None`, from the analytic plain-Lorentzian
/// fit. Should scoring stall, argmin's Nelder-Mead simplex takes over and scoring polishes its
/// result. The maximum-likelihood estimate of D is unbiased for any block size, unlike
/// least squares with data-derived weights (Norrelykke & Flyvbjerg, Rev. Sci. Instrum. 81,
/// 075103 (2010)).
pub fn fit_spectrum(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    start: Option<(f64, f64)>,
) -> Result<SpectrumFit, SpectrumFitError> {
    let blocks = fitted_blocks(periodogram, options)?;
    let (fc0, d0) = match start {
        Some(s) => s,
        None => starting_values(&blocks, periodogram.sample_rate_hz),
    };
    fit_blocks(
        periodogram,
        options,
        blocks,
        options.model.initial_theta(fc0, d0),
    )
}

/// The blocks of the fit range that `fit_spectrum` and `fit_spectrum_from_theta` fit: an empty
/// range, or fewer blocks than the parameters (a 1/f term included) plus two, is an error.
fn fitted_blocks(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
) -> Result<Vec<Block>, SpectrumFitError> {
    let (f_min_hz, f_max_hz) = options.resolved_range(periodogram);
    if !(f_max_hz > f_min_hz && f_min_hz >= 0.0) {
        return Err(SpectrumFitError::EmptyRange { f_min_hz, f_max_hz });
    }
    let blocks = block_periodogram(
        periodogram,
        f_min_hz,
        f_max_hz,
        &options.excluded_bins,
        options.min_bins_per_block,
        options.target_blocks,
    );
    let n_params = options.model.n_params() + usize::from(options.flicker);
    if blocks.len() < n_params + 2 {
        return Err(SpectrumFitError::TooFewBlocks {
            f_min_hz,
            f_max_hz,
            n_blocks: blocks.len(),
            n_params,
        });
    }
    Ok(blocks)
}

/// Fits `options.model` to the periodogram by maximum likelihood from the parameter vector
/// `theta` (log space, see `model`), as `fit_spectrum` does from (fc, D).
pub(crate) fn fit_spectrum_from_theta(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    theta: Vec<f64>,
) -> Result<SpectrumFit, SpectrumFitError> {
    let blocks = fitted_blocks(periodogram, options)?;
    if theta.len() != options.model.n_params() {
        let (f_min_hz, f_max_hz) = options.resolved_range(periodogram);
        return Err(SpectrumFitError::TooFewBlocks {
            f_min_hz,
            f_max_hz,
            n_blocks: blocks.len(),
            n_params: options.model.n_params(),
        });
    }
    fit_blocks(periodogram, options, blocks, theta)
}

/// The maximum-likelihood fit of `options.model` to `blocks` of `periodogram` from `theta`.
fn fit_blocks(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    blocks: Vec<Block>,
    mut theta: Vec<f64>,
) -> Result<SpectrumFit, SpectrumFitError> {
    let (f_min_hz, f_max_hz) = options.resolved_range(periodogram);
    let model = &options.model;
    let n_model_params = model.n_params();
    let n_params = n_model_params + usize::from(options.flicker);
    let whittle = Whittle::new(
        model,
        &blocks,
        Some(segments_of(periodogram)),
        options
            .flicker
            .then(|| FlickerColumn::new(n_model_params, &blocks))
            .flatten(),
    );
    if whittle.flicker.is_some() {
        theta.push(0.0);
    }
    let (mut theta_opt, mut iterations, converged) = fisher_scoring(&whittle, theta.clone(), 200);
    if !converged {
        theta = nelder_mead(&whittle, &theta_opt).unwrap_or(theta_opt.clone());
        let (t, extra, ok) = fisher_scoring(&whittle, theta, 200);
        if !ok {
            return Err(SpectrumFitError::NoConvergence {
                reason: "the likelihood kept improving after 400 scoring steps; check the fit range and the model options".into(),
            });
        }
        theta_opt = t;
        iterations += extra;
    }
    let mut theta = theta_opt;
    let model_psd = whittle.means_at(&theta);
    let (fisher, _) = fisher_and_score(&whittle, &theta, &model_psd);
    let mut covariance = invert_spd(&fisher).ok_or_else(|| SpectrumFitError::NoConvergence {
        reason: "the Fisher information is singular: the parameters are not determined by the data in this range".into(),
    })?;
    let whittle_cost = whittle.cost_of(&model_psd);
    let flicker = whittle.flicker.as_ref().map(|column| FlickerTerm {
        density_at_1_hz: column.density_at_1_hz(&theta),
        density_at_1_hz_se: column.scale * covariance[column.index][column.index].sqrt(),
    });
    // The model's parameters and their marginal covariance; the 1/f term is reported apart.
    theta.truncate(n_model_params);
    covariance.truncate(n_model_params);
    for row in &mut covariance {
        row.truncate(n_model_params);
    }
    let p = model.decode(&theta);
    let chi_square: f64 = blocks
        .iter()
        .zip(&model_psd)
        .map(|(b, s)| b.n_averaged as f64 * ((b.psd - s) / s).powi(2))
        .sum();
    let degrees_of_freedom = blocks.len() - n_params;
    let p_value = ChiSquared::new(degrees_of_freedom as f64)
        .map(|d| d.sf(chi_square))
        .unwrap_or(f64::NAN);
    let var_ln_fc = covariance[0][0];
    let var_ln_d = covariance[1][1];
    let fitted_filter = match (model.filter, p.filter) {
        (FilterSetting::Fitted(_), Some(f)) => {
            // alpha = sqrt(logistic(u)); d alpha / du = alpha (1 - alpha^2) / 2.
            let dalpha = f.alpha * f.alpha.mul_add(-f.alpha, 1.0) / 2.0;
            Some(FittedFilter {
                f3db_hz: f.f3db_hz,
                f3db_se_hz: f.f3db_hz * covariance[2][2].sqrt(),
                alpha: f.alpha,
                alpha_se: dalpha.abs() * covariance[3][3].sqrt(),
            })
        }
        _ => None,
    };
    Ok(SpectrumFit {
        corner_frequency_hz: p.fc,
        corner_frequency_se_hz: p.fc * var_ln_fc.sqrt(),
        diffusion: p.d,
        diffusion_se: p.d * var_ln_d.sqrt(),
        correlation_fc_diffusion: covariance[0][1] / (var_ln_fc * var_ln_d).sqrt(),
        fitted_filter,
        theta,
        covariance,
        chi_square,
        degrees_of_freedom,
        p_value,
        f_min_hz,
        f_max_hz,
        blocks,
        model_psd,
        iterations,
        model: *model,
        flicker,
        whittle_cost,
    })
}

/// The periodogram's segments, for the leakage term of the expected periodogram.
fn segments_of(periodogram: &Periodogram) -> Segments {
    Segments {
        len: periodogram.segment_len,
        // Halfway between the last plain bin and the first differenced one.
        differenced_from_hz: (periodogram.first_differenced_bin as f64 - 0.5)
            * periodogram.resolution_hz(),
    }
}

/// How much better `alternative` describes the blocks `fit` was made on: twice the drop of the
/// negative Whittle log-likelihood, 2 (L_fit - L_alternative), with the alternative's
/// parameters refitted by Fisher scoring from the fit's own (so `alternative` must have the
/// same parameters as `fit.model`, for instance the same model with a camera exposure added).
/// Positive when the alternative fits better; e^(gain/2) is the likelihood ratio. `None` when
/// the alternative cannot be fitted (no finite likelihood or no convergence).
pub fn likelihood_gain(
    fit: &SpectrumFit,
    periodogram: &Periodogram,
    alternative: &SpectrumModel,
) -> Option<f64> {
    if alternative.n_params() != fit.theta.len() {
        return None;
    }
    likelihood_gain_from(
        fit,
        periodogram,
        alternative,
        &|theta| vec![theta.to_vec()],
        200,
    )
    .map(|(gain, _)| gain)
}

/// [`likelihood_gain`] for an alternative with more parameters than `fit.model` (the same model
/// with a fitted detector filter, say): `starts` turns the fit's own parameters (refitted
/// without a 1/f term, as there) into one or more starting vectors of the alternative, each is
/// refitted by at most `max_steps` scoring steps, and the best converged one counts (a cap
/// keeps the cost down where the extra parameters run off to a boundary, as a filter's alpha
/// does towards 1 on unfiltered data, and scoring never converges). Returns the gain and the
/// alternative's parameters there; `None` when no start converges to a finite likelihood.
pub fn likelihood_gain_from(
    fit: &SpectrumFit,
    periodogram: &Periodogram,
    alternative: &SpectrumModel,
    starts: &dyn Fn(&[f64]) -> Vec<Vec<f64>>,
    max_steps: usize,
) -> Option<(f64, Vec<f64>)> {
    let segments = Some(segments_of(periodogram));
    // Both models are compared without a 1/f drift term: when the fit kept one, its own model
    // is refitted without it first, so the two costs are of like models.
    let own = Whittle::new(&fit.model, &fit.blocks, segments, None);
    let other = Whittle::new(alternative, &fit.blocks, segments, None);
    let own_theta = if fit.flicker.is_some() {
        fisher_scoring(&own, fit.theta.clone(), 200).0
    } else {
        fit.theta.clone()
    };
    let own_cost = own.cost_at(&own_theta);
    let mut best: Option<(f64, Vec<f64>)> = None;
    for start in starts(&own_theta) {
        if start.len() != alternative.n_params() {
            continue;
        }
        let (theta, _, converged) = fisher_scoring(&other, start, max_steps);
        let gain = 2.0 * (own_cost - other.cost_at(&theta));
        if converged && gain.is_finite() && best.as_ref().is_none_or(|(g, _)| gain > *g) {
            best = Some((gain, theta));
        }
    }
    best
}

/// Rao's efficient score statistic (Rao, Proc. Camb. Phil. Soc. 44, 50 (1948), citation from
/// memory) of `alternative` at `theta`, a point where the alternative equals, or all but equals,
/// the model `fit` was made with (its parameters, the extra ones at their null values): s' F^-1 s
/// with the Whittle score s and expected information F of the alternative there, over every
/// parameter but those in `dropped` (an extra parameter that the null leaves undetermined, such
/// as a filter's f3dB when alpha is 1, is held fixed instead). On data from the fitted model it
/// is about chi-square with as many degrees of freedom as extra parameters kept, and it costs one
/// model evaluation plus two per nonlinear parameter, against a refit's hundreds: a screen that
/// says whether a refit ([`likelihood_gain_from`]) can find anything. Returns the statistic and
/// the scoring step F^-1 s over the kept parameters in their order (its signs say which way the
/// data pull each one); `None` when the fit has a 1/f term (the null would need a refit without
/// it first) or the information is not positive definite.
pub fn score_statistic(
    fit: &SpectrumFit,
    periodogram: &Periodogram,
    alternative: &SpectrumModel,
    theta: &[f64],
    dropped: &[usize],
) -> Option<(f64, Vec<f64>)> {
    if fit.flicker.is_some() || theta.len() != alternative.n_params() {
        return None;
    }
    let w = Whittle::new(
        alternative,
        &fit.blocks,
        Some(segments_of(periodogram)),
        None,
    );
    let means = w.means_at(theta);
    if !w.cost_of(&means).is_finite() {
        return None;
    }
    let (fisher, score) = fisher_and_score(&w, theta, &means);
    let kept: Vec<usize> = (0..theta.len()).filter(|i| !dropped.contains(i)).collect();
    let f: Vec<Vec<f64>> = kept
        .iter()
        .map(|&i| kept.iter().map(|&j| fisher[i][j]).collect())
        .collect();
    let s: Vec<f64> = kept.iter().map(|&i| score[i]).collect();
    let step = solve_spd(&f, &s)?;
    let statistic = s.iter().zip(&step).map(|(a, b)| a * b).sum();
    Some((statistic, step))
}

/// Fisher scoring: theta <- theta + F^-1 g, halving the step until the likelihood improves.
/// Returns the last parameters, the iterations used and whether the step size converged.
fn fisher_scoring(
    w: &Whittle<'_>,
    mut theta: Vec<f64>,
    max_iter: usize,
) -> (Vec<f64>, usize, bool) {
    // The block means at theta, kept from the accepted trial so that the next Fisher step does
    // not evaluate the model there again.
    let mut means = w.means_at(&theta);
    let mut cost = w.cost_of(&means);
    if !cost.is_finite() {
        return (theta, 0, false);
    }
    for iter in 1..=max_iter {
        let (fisher, score) = fisher_and_score(w, &theta, &means);
        let Some(step) = solve_spd(&fisher, &score) else {
            return (theta, iter, false);
        };
        let mut scale: f64 = 1.0;
        let mut improved = false;
        for _ in 0..40 {
            let trial: Vec<f64> = theta
                .iter()
                .zip(&step)
                .map(|(t, s)| scale.mul_add(*s, *t))
                .collect();
            let trial_means = w.means_at(&trial);
            let c = w.cost_of(&trial_means);
            if c.is_finite() && c <= cost {
                theta = trial;
                means = trial_means;
                cost = c;
                improved = true;
                break;
            }
            scale *= 0.5;
        }
        let step_norm = step.iter().map(|s| s * s).sum::<f64>().sqrt() * scale;
        if !improved || step_norm < 1e-9 {
            // A full Newton-type step that no longer moves the parameters is convergence; a
            // failed line search right after a large step is not.
            return (theta, iter, step_norm < 1e-6);
        }
    }
    (theta, max_iter, false)
}

/// Nelder-Mead simplex from argmin, around `theta`, for starts where scoring stalls.
fn nelder_mead(w: &Whittle<'_>, theta: &[f64]) -> Option<Vec<f64>> {
    let mut simplex = vec![theta.to_vec()];
    for i in 0..theta.len() {
        let mut v = theta.to_vec();
        v[i] += 0.3;
        simplex.push(v);
    }
    let solver = NelderMead::new(simplex).with_sd_tolerance(1e-10).ok()?;
    let problem = Whittle {
        model: w.model,
        blocks: w.blocks,
        segment_len: w.segment_len,
        flicker: w.flicker.clone(),
        prepared: w.prepared.clone(),
    };
    let result = Executor::new(problem, solver)
        .configure(|state| state.max_iters(2000))
        .run()
        .ok()?;
    result.state.best_param.clone()
}

/// Starting values (fc, D) from the analytic fit over the blocks below half the Nyquist
/// frequency, where aliasing distorts the Lorentzian least; falls back to fc = f_s / 10 and the
/// matching D when that fit is not usable.
fn starting_values(blocks: &[Block], sample_rate_hz: f64) -> (f64, f64) {
    let low: Vec<Block> = blocks
        .iter()
        .filter(|b| b.frequency_hz < sample_rate_hz / 4.0)
        .cloned()
        .collect();
    let use_blocks = if low.len() >= 4 { &low[..] } else { blocks };
    if let Some(fit) = plain_lorentzian_wls(use_blocks)
        && fit.corner_frequency_hz.is_finite()
        && fit.corner_frequency_hz > 0.0
        && fit.diffusion > 0.0
    {
        return (fit.corner_frequency_hz, fit.diffusion);
    }
    let fc = sample_rate_hz / 10.0;
    let b0 = &blocks[0];
    (
        fc,
        b0.psd * PI * PI * fc.mul_add(fc, b0.frequency_hz.powi(2)),
    )
}

/// The analytic weighted least-squares fit of a plain (unaliased) Lorentzian.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlainLorentzianFit {
    pub corner_frequency_hz: f64,
    pub corner_frequency_se_hz: f64,
    /// D (one-sided convention), corrected for the +1/n bias of the method.
    pub diffusion: f64,
    pub diffusion_se: f64,
}

/// Berg-Sorensen & Flyvbjerg 2004 analytic fit of 1/P = a + b f^2, minimising
/// sum_b n_b P_b^2 (a + b f_b^2 - 1/P_b)^2, with their error bars, and D corrected by
/// n/(n+1) for the bias of weighting by the data (Norrelykke & Flyvbjerg 2010), using the mean
/// number of ordinates per block. In the one-sided convention a = pi^2 fc^2 / D, b = pi^2 / D.
///
/// It ignores aliasing and filtering; trapwise uses it for starting values and to show what the
/// plain Lorentzian gets wrong. Returns `None` for fewer than three blocks or a singular system.
pub fn plain_lorentzian_wls(blocks: &[Block]) -> Option<PlainLorentzianFit> {
    if blocks.len() < 3 {
        return None;
    }
    let mut s = [[0.0f64; 3]; 3]; // s[p][q] = sum n f^(2p) P^q
    let mut n_total = 0.0;
    for b in blocks {
        let n = b.n_averaged as f64;
        let f2 = b.frequency_hz * b.frequency_hz;
        let mut fp = 1.0;
        for row in &mut s {
            let mut pq = 1.0;
            for cell in row.iter_mut() {
                *cell += n * fp * pq;
                pq *= b.psd;
            }
            fp *= f2;
        }
        n_total += n;
    }
    let delta = s[0][2].mul_add(s[2][2], -(s[1][2] * s[1][2]));
    if delta == 0.0 || !delta.is_finite() {
        return None;
    }
    let a = s[0][1].mul_add(s[2][2], -(s[1][1] * s[1][2])) / delta;
    let b = s[1][1].mul_add(s[0][2], -(s[0][1] * s[1][2])) / delta;
    let n_mean = n_total / blocks.len() as f64;
    let fc = (a / b).sqrt();
    let d_raw = PI * PI / b;
    // The sums already carry the weights n_b, so the covariance is S/Delta without a 1/n.
    let var_a = s[2][2] / delta;
    let var_b = s[0][2] / delta;
    let cov_ab = -s[1][2] / delta;
    let rel_var_fc = (var_a / (a * a) + var_b / (b * b) - 2.0 * cov_ab / (a * b)) / 4.0;
    let correction = n_mean / (n_mean + 1.0);
    Some(PlainLorentzianFit {
        corner_frequency_hz: fc,
        corner_frequency_se_hz: fc * rel_var_fc.abs().sqrt(),
        diffusion: d_raw * correction,
        diffusion_se: d_raw * correction * (var_b.sqrt() / b.abs()),
    })
}

#[cfg(test)]
mod tests {
    //! The exact derivatives of the linear parameters against central differences.

    use super::*;

    #[test]
    fn linear_parameters_are_differentiated_as_central_differences_would() {
        // d ln S_b / d theta for ln D, ln P_n and the 1/f term is written out exactly in
        // `log_derivatives`; central differences of step 1e-6 of the same means (truncation
        // about 1e-12 relative, rounding about 1e-10) must agree with it to 1e-8 on a drag model
        // with a floor and a 1/f term, on differenced and plain blocks (drag scales of the order
        // of a 1 um bead's in water, rounded; synthetic block powers, a Lorentzian of fc 950 Hz).
        let fs = 50_000.0;
        let model = SpectrumModel {
            sample_rate_hz: fs,
            aliasing: true,
            filter: FilterSetting::None,
            hydro: Some(crate::spectrum::HydroTerms {
                f_nu_hz: 1.27e6,
                f_m_hz: 1.6e6,
            }),
            exposure_s: None,
            noise_floor: true,
        };
        let blocks: Vec<Block> = (0..12)
            .map(|i| {
                let lower_hz = 10.0 * 1.8f64.powi(i);
                let upper_hz = 1.8 * lower_hz;
                let x = lower_hz / 950.0;
                Block {
                    frequency_hz: 0.5 * (lower_hz + upper_hz),
                    lower_hz,
                    upper_hz,
                    psd: 1e-4 / x.mul_add(x, 1.0),
                    n_bins: 40,
                    n_averaged: 40,
                }
            })
            .collect();
        let segments = Some(Segments {
            len: 8192,
            differenced_from_hz: 900.0,
        });
        let flicker = FlickerColumn::new(model.n_params(), &blocks);
        let whittle = Whittle::new(&model, &blocks, segments, flicker);
        let mut theta = model.initial_theta(950.0, 0.6);
        theta[2] = 3e-9f64.ln();
        theta.push(0.2);
        let means = whittle.means_at(&theta);
        let exact = whittle.log_derivatives(&theta, &means);
        let h = 1e-6;
        for i in 0..theta.len() {
            let mut t = theta.clone();
            t[i] = theta[i] + h;
            let up = whittle.means_at(&t);
            t[i] = theta[i] - h;
            let down = whittle.means_at(&t);
            for (b, row) in exact.iter().enumerate() {
                let central = (up[b].ln() - down[b].ln()) / (2.0 * h);
                assert!(
                    (row[i] - central).abs() <= 1e-8 * central.abs().max(1.0),
                    "parameter {i}, block {b}: exact {} against central {central}",
                    row[i]
                );
            }
        }
    }
}
