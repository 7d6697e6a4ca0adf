//! Equipartition method: the variance of a position trace, corrected for the bias of removing
//! its mean (or a fitted line), with a standard error that accounts for correlated samples.
//!
//! By equipartition `kappa <x^2> = k_B T`, so the variance of a trapped bead's position gives the
//! stiffness once the detector sensitivity is known (or the sensitivity once the stiffness is).
//! Successive samples are correlated over the relaxation time, so both the bias of mean removal
//! and the standard error depend on the autocovariance, which the caller supplies (computed once
//! by `autocorrelation::autocovariance` and shared with the autocorrelation fit).
//! The module is pure: plain slices in, plain structs out.

use crate::autocorrelation::{compensated_sum, mean_bias_ar1};

/// Errors of the variance estimate.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum EquipartitionError {
    /// The sample rate is zero, negative or not finite.
    #[error(
        "sample_rate_hz = {value} is not a positive finite number; pass the recording's sampling rate in hertz"
    )]
    InvalidSampleRate {
        /// The rejected value.
        value: f64,
    },
    /// Too few samples for the chosen detrending.
    #[error(
        "too few samples: {n_samples} given, but {detrend} detrending needs at least {needed}; record longer"
    )]
    TooFewSamples {
        /// Number of samples given.
        n_samples: usize,
        /// Minimum number needed.
        needed: usize,
        /// The detrending asked for (`mean` or `linear`).
        detrend: &'static str,
    },
    /// A sample is NaN or infinite.
    #[error(
        "sample {index} is not finite ({value}); remove or interpolate non-finite samples before the variance"
    )]
    NonFiniteSample {
        /// Index of the first offending sample.
        index: usize,
        /// Its value.
        value: f64,
    },
    /// The white noise floor fitted to the spectrum holds all of the measured variance, so
    /// nothing is left for the bead.
    #[error(
        "the white noise floor of the spectral fit, {noise_variance:.4e} signal-unit^2, is not smaller than the measured variance {variance:.4e}; the record is mostly detector noise: check the detector signal, or set the noise floor off"
    )]
    NoiseFloorExceedsVariance {
        /// The sample variance, signal-unit^2.
        variance: f64,
        /// The floor's variance sigma_n^2 = P_n / (2 dt), signal-unit^2.
        noise_variance: f64,
    },
    /// The residuals after detrending are all zero.
    #[error(
        "the samples have zero variance after {detrend} detrending; the trace is constant (or exactly linear), check the channel and the detector"
    )]
    ZeroVariance {
        /// The detrending used (`mean` or `linear`).
        detrend: &'static str,
    },
    /// The autocovariance given holds fewer than 2 lags.
    #[error(
        "the autocovariance holds {n_lags} lags but at least lags 0 and 1 are needed; compute it with max_lag of a few relaxation times"
    )]
    AutocovarianceTooShort {
        /// Number of lags given.
        n_lags: usize,
    },
    /// An autocovariance value is NaN or infinite.
    #[error(
        "autocovariance at lag {lag} is not finite ({value}); remove non-finite samples before computing it"
    )]
    NonFiniteAutocovariance {
        /// The lag of the offending value.
        lag: usize,
        /// Its value.
        value: f64,
    },
    /// The autocovariance does not fall from lag 0 to lag 1, or lag 0 is not positive.
    #[error(
        "autocovariance does not decay: lag 0 holds {lag0} and lag 1 holds {lag1}, but the correction needs acov[0] > 0 and acov[1] < acov[0]; pass the autocovariance of these samples"
    )]
    NotDecaying {
        /// The lag-0 value.
        lag0: f64,
        /// The lag-1 value.
        lag1: f64,
    },
    /// The autocovariance at lag 0 differs from the variance of the detrended samples, so it was
    /// not computed from them.
    #[error(
        "the autocovariance does not belong to these samples: acov[0] = {lag0} but the variance after {detrend} detrending is {raw}; pass autocovariance(&detrended(samples, detrend), max_lag)"
    )]
    AutocovarianceMismatch {
        /// The lag-0 value given.
        lag0: f64,
        /// The raw variance of the detrended samples.
        raw: f64,
        /// The detrending used (`mean` or `linear`).
        detrend: &'static str,
    },
    /// The bias correction is undefined because nearly all variance is taken by the detrending.
    #[error(
        "the detrending removes a fraction {fraction} of the variance, so the bias correction is undefined; the relaxation time is comparable to the record length, record longer"
    )]
    CorrectionUndefined {
        /// Expected fraction of the variance removed by detrending.
        fraction: f64,
    },
}

/// What is removed from the samples before taking the variance.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Detrend {
    /// Remove the sample mean.
    Mean,
    /// Remove the least-squares straight line in time (a constant drift).
    Linear,
}

impl Detrend {
    /// Lower-case name used in messages.
    fn name(self) -> &'static str {
        match self {
            Detrend::Mean => "mean",
            Detrend::Linear => "linear",
        }
    }
}

/// Result of [`variance`].
#[derive(Clone, Debug, PartialEq)]
pub struct VarianceEstimate {
    /// Bias-corrected variance in signal units squared: `raw + bias_correction`.
    pub variance: f64,
    /// Standard error of `variance` in signal units squared.
    pub variance_se: f64,
    /// Sample mean in signal units (with `Linear`, also the value of the line at mid-record).
    pub mean: f64,
    /// Slope of the removed line in signal units per second (0 for `Mean`).
    pub slope_per_s: f64,
    /// Amount added to the raw variance `(1/N) sum r_i^2` of the residuals `r_i` to correct the
    /// bias of detrending, in signal units squared.
    pub bias_correction: f64,
}

/// Variance of the samples after removing the mean (or a least-squares line), corrected for the
/// bias of detrending, with a standard error that accounts for correlated samples.
///
/// **Raw variance.** `s^2 = (1/N) sum_i r_i^2`, with `r_i` the residuals after removing the mean
/// or the least-squares line `a + b t_i` (`t_i = i/f_s`).
///
/// **Bias.** For a stationary process with covariance matrix `Sigma`, removing the projection `H`
/// onto the fitted functions gives exactly `E[s^2] = (N sigma^2 - tr(H Sigma))/N` (derived:
/// `E[r^T r] = tr((I - H) Sigma)`). With an orthonormal basis `u` of the fitted functions,
/// `tr(H Sigma) = sum_u u^T Sigma u`. Modelled as AR(1), `Sigma_ij = sigma^2 c^|i-j|`:
/// - `Mean`: `u = 1/sqrt(N)` gives `E[s^2] = sigma^2 (1 - v(c, N))`, `v = Var(xbar)/sigma^2` from
///   [`mean_bias_ar1`] (sigma^2 - Var(xbar), derived from the AR(1) autocovariance);
/// - `Linear`: adding the unit vector along the centred time `u_2` gives
///   `E[s^2] = sigma^2 (1 - v(c, N) - q/N)` with `q = u_2^T Sigma u_2 / sigma^2`, evaluated exactly
///   in O(N) by the recursion `s_i = c (s_(i-1) + u_(i-1))`, `q = 1 + 2 sum_i u_i s_i`. For
///   `tau << T_msr` `q/N ~ v`, so the line removes about twice the variance the mean does.
///
/// The estimate is `variance = s^2/(1 - v - q/N)`, unbiased for AR(1) data given `c`; `c` is
/// estimated as `max(acov[1]/acov[0], 0)` (the lag-1 correlation; white detection noise lowers it,
/// but the correction is of order `2 tau/T_msr`, so its own error is negligible).
///
/// **Standard error.** `Var(s^2) ~= (2/N) sum_{|k|<K} C_k^2`, the Gaussian-process result (M. S.
/// Bartlett, J. R. Stat. Soc. Suppl. 8, 27 (1946); M. B. Priestley, Spectral Analysis and Time
/// Series (1981), ch. 5, chapter from memory, unverified), with `C_k = acov[k]` truncated at `K`,
/// the first lag `k >= 1` where `acov[k] <= 0` (first zero crossing, common practice: beyond it the
/// sample autocovariance is noise), or the number of lags given if it never crosses zero. It is
/// divided by the same factor `1 - v - q/N` as the variance. This needs no AR(1) assumption, so
/// white detection noise and filtering are accounted for; pass enough lags (several relaxation
/// times).
///
/// `acov` is the autocovariance of the detrended samples, lags `0..` as returned by
/// `autocorrelation::autocovariance(&detrended(samples, detrend), max_lag)` (for `Mean` that is
/// the autocovariance of the samples themselves); `acov[0]` must equal the raw variance to 1e-6.
///
/// # Errors
/// See [`EquipartitionError`]: invalid rate, too few (fewer than 2, or 3 for `Linear`) or
/// non-finite samples, zero variance, a short, non-finite, non-decaying or mismatched
/// autocovariance, or an undefined correction.
pub fn variance(
    samples: &[f64],
    sample_rate_hz: f64,
    detrend: Detrend,
    acov: &[f64],
) -> Result<VarianceEstimate, EquipartitionError> {
    if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
        return Err(EquipartitionError::InvalidSampleRate {
            value: sample_rate_hz,
        });
    }
    let n_samples = samples.len();
    let needed = match detrend {
        Detrend::Mean => 2,
        Detrend::Linear => 3,
    };
    if n_samples < needed {
        return Err(EquipartitionError::TooFewSamples {
            n_samples,
            needed,
            detrend: detrend.name(),
        });
    }
    if let Some((index, &value)) = samples.iter().enumerate().find(|(_, x)| !x.is_finite()) {
        return Err(EquipartitionError::NonFiniteSample { index, value });
    }
    let n = n_samples as f64;
    let (mean, slope_per_sample) = fit_trend(samples, detrend);
    let centre = (n - 1.0) / 2.0;
    let raw = compensated_sum(samples.iter().enumerate().map(|(i, &x)| {
        let residual = residual(x, i, mean, slope_per_sample, centre);
        residual * residual
    })) / n;
    // Below the rounding level of the samples the variance is zero: the data are constant.
    let scale = samples.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
    let rounding = 8.0 * f64::EPSILON * scale;
    if raw <= rounding * rounding {
        return Err(EquipartitionError::ZeroVariance {
            detrend: detrend.name(),
        });
    }

    let (Some(&lag0), Some(&lag1)) = (acov.first(), acov.get(1)) else {
        return Err(EquipartitionError::AutocovarianceTooShort { n_lags: acov.len() });
    };
    if let Some((lag, &value)) = acov.iter().enumerate().find(|(_, x)| !x.is_finite()) {
        return Err(EquipartitionError::NonFiniteAutocovariance { lag, value });
    }
    if !(lag0 > 0.0 && lag1 < lag0) {
        return Err(EquipartitionError::NotDecaying { lag0, lag1 });
    }
    // Both are (1/N) sum r_i^2 of the same residuals, so they agree to rounding (the residuals have
    // zero mean, so the autocovariance's own mean removal changes nothing).
    if (lag0 - raw).abs() > 1e-6 * raw {
        return Err(EquipartitionError::AutocovarianceMismatch {
            lag0,
            raw,
            detrend: detrend.name(),
        });
    }

    let c = (lag1 / lag0).max(0.0);
    let mut removed_fraction = mean_bias_ar1(c, n_samples);
    if detrend == Detrend::Linear {
        removed_fraction += line_quadratic_form_ar1(c, n_samples) / n;
    }
    let kept_fraction = 1.0 - removed_fraction;
    if !(kept_fraction > 0.0 && kept_fraction.is_finite()) {
        return Err(EquipartitionError::CorrectionUndefined {
            fraction: removed_fraction,
        });
    }
    let variance = raw / kept_fraction;

    let window = acov
        .iter()
        .skip(1)
        .position(|&value| value <= 0.0)
        .map_or(acov.len(), |position| position + 1);
    let sum_squares = compensated_sum(acov.iter().take(window).enumerate().map(|(lag, &value)| {
        if lag == 0 {
            value * value
        } else {
            2.0 * value * value
        }
    }));
    let variance_se = (2.0 * sum_squares / n).sqrt() / kept_fraction;

    Ok(VarianceEstimate {
        variance,
        variance_se,
        mean,
        slope_per_s: slope_per_sample * sample_rate_hz,
        bias_correction: variance - raw,
    })
}

/// The residuals of the samples after removing their mean or their least-squares line, in signal
/// units; compute the autocovariance passed to [`variance`] from these.
///
/// The line is fitted against the sample index (equivalently time); see [`variance`]. Non-finite
/// samples give non-finite residuals; empty input gives an empty vector.
pub fn detrended(samples: &[f64], detrend: Detrend) -> Vec<f64> {
    let (mean, slope_per_sample) = fit_trend(samples, detrend);
    let centre = (samples.len() as f64 - 1.0) / 2.0;
    samples
        .iter()
        .enumerate()
        .map(|(i, &x)| residual(x, i, mean, slope_per_sample, centre))
        .collect()
}

/// The residual of sample `x` at index `i` from the line `mean + slope (i - centre)`.
///
/// Written as a plain multiply and add rather than `mul_add`: on the default x86-64 target
/// `mul_add` is a call into the runtime's fma routine per sample, which made this loop a
/// noticeable share of a short calibration; the difference is one rounding of the product (and
/// none for mean removal, where the slope is zero).
#[inline]
#[allow(clippy::suboptimal_flops)]
fn residual(x: f64, i: usize, mean: f64, slope_per_sample: f64, centre: f64) -> f64 {
    (x - mean) - slope_per_sample * (i as f64 - centre)
}

/// Mean and least-squares slope per sample (0 for `Mean`) by ordinary least squares against the
/// centred index `i - (N-1)/2`, whose sum of squares is `N(N^2-1)/12`.
fn fit_trend(samples: &[f64], detrend: Detrend) -> (f64, f64) {
    let n = samples.len() as f64;
    if samples.is_empty() {
        return (0.0, 0.0);
    }
    let mean = compensated_sum(samples.iter().copied()) / n;
    let index_sum_squares = n * n.mul_add(n, -1.0) / 12.0;
    if detrend == Detrend::Mean || index_sum_squares <= 0.0 {
        return (mean, 0.0);
    }
    let centre = (n - 1.0) / 2.0;
    let slope = compensated_sum(
        samples
            .iter()
            .enumerate()
            .map(|(i, &x)| (i as f64 - centre) * (x - mean)),
    ) / index_sum_squares;
    (mean, slope)
}

/// `q = u^T R u` for the unit vector `u` along the centred sample index and the AR(1) correlation
/// matrix `R_ij = c^|i-j|`, exactly, in O(N) time and O(1) memory.
///
/// `sum_ij u_i u_j c^|i-j| = sum_i u_i^2 + 2 sum_i u_i s_i` with `s_i = sum_{j<i} u_j c^(i-j)`,
/// which obeys `s_i = c (s_(i-1) + u_(i-1))`, `s_0 = 0` (derived). `q = 1` for `c = 0`.
fn line_quadratic_form_ar1(c: f64, n_samples: usize) -> f64 {
    let n = n_samples as f64;
    let centre = (n - 1.0) / 2.0;
    let norm = (n * n.mul_add(n, -1.0) / 12.0).sqrt();
    if norm <= 0.0 {
        return 0.0;
    }
    let mut running = 0.0_f64;
    let mut previous = 0.0_f64;
    let cross = compensated_sum((0..n_samples).map(|i| {
        let u = (i as f64 - centre) / norm;
        running = c * (running + previous);
        previous = u;
        u * running
    }));
    2.0f64.mul_add(cross, 1.0)
}

#[cfg(test)]
mod tests;
