//! Stage three of an axis calibration: the time-domain methods on the record with its lines
//! removed: the autocovariance and its fit (autocorrelation method) and the variance
//! (equipartition), plus the position histogram the report plots.

use super::{AnalysisOptions, CalibrationError, Histogram};
use crate::autocorrelation::{self, ExponentialFit, TimeDomainModel};
use crate::equipartition::{self, EquipartitionError, VarianceEstimate};
use crate::estimate::Estimate;
use std::f64::consts::PI;

/// The spectral fit's account of what the detector adds, for the time-domain methods: the one
/// model of the axis (photodiode filter with the spectral fit's values, frequency-dependent
/// drag) and the spectral estimate of (fc Hz, D) to start from.
#[derive(Clone, Copy, Debug)]
pub(crate) struct SpectralAccount {
    pub(crate) model: TimeDomainModel,
    pub(crate) corner_frequency_hz: f64,
    pub(crate) diffusion: f64,
    /// The white noise variance sigma_n^2 = P_n / (2 dt) of the spectral fit's floor
    /// (signal-unit^2, with its standard error), when the floor is in the model.
    pub(crate) noise_variance: Option<Estimate>,
}

impl SpectralAccount {
    /// Whether the model holds more than the plain exponential.
    pub(crate) fn is_plain(&self) -> bool {
        self.model.filter.is_none() && self.model.hydro.is_none() && self.model.exposure_s.is_none()
    }
}

/// What the time-domain stage found: each method may fail alone.
#[derive(Clone, Debug)]
pub(crate) struct TimeDomainStage {
    pub(crate) acf: Result<ExponentialFit, CalibrationError>,
    pub(crate) variance: Result<VarianceEstimate, CalibrationError>,
    /// The factor C(0) / sigma^2 by which the detector's variance was divided (1 when the
    /// model leaves the variance as it is); it comes from the spectral fit, so equipartition
    /// corrected by it is no longer independent of the spectrum.
    pub(crate) variance_factor: f64,
    /// Whether the spectral fit's white noise floor was subtracted from the variance (which
    /// then rests on the spectral fit too).
    pub(crate) noise_subtracted: bool,
    /// The position histogram, when the variance exists.
    pub(crate) histogram: Option<Histogram>,
}

/// Runs the autocorrelation and equipartition methods. `corner_frequency_hint_hz` (the
/// spectral estimate, when the spectral fit worked) sets the lag window: several relaxation
/// times serve both the fit and the variance's standard error. Without it the window comes
/// from the lag-1 correlation of the record itself (tau = -dt / ln rho_1 for an exponential
/// decay, the autocorrelation of an Ornstein-Uhlenbeck process).
pub(crate) fn time_domain_stage(
    name: &str,
    samples: &[f64],
    sample_rate_hz: f64,
    account: Option<&SpectralAccount>,
    options: &AnalysisOptions,
) -> TimeDomainStage {
    let tau_guess = account
        .map(|a| 1.0 / (2.0 * PI * a.corner_frequency_hz))
        .unwrap_or_else(|| relaxation_time_from_lag_one(samples, sample_rate_hz));
    let lags_needed =
        ((8.0 * tau_guess * sample_rate_hz).ceil() as usize).clamp(16, (samples.len() / 4).max(16));
    let acov = autocorrelation::autocovariance(samples, lags_needed);
    // Every model the spectrum has, the autocorrelation fit has: with a filter or drag in the
    // spectral model, the autocovariance of that model (a sum of exponentials, or the numerical
    // transform of the hydrodynamic spectrum) is fitted, not a plain exponential.
    // White noise leaves the lags the fit uses alone but adds to their scatter: the weights of
    // either fit include it.
    let acf_options = autocorrelation::AcfFitOptions {
        white_noise_variance: account
            .and_then(|a| a.noise_variance)
            .map_or(0.0, |n| n.value),
        ..options.acf.clone()
    };
    let acf = match account.filter(|a| !a.is_plain()) {
        Some(a) => autocorrelation::fit_autocovariance_model(
            &acov,
            samples.len(),
            &a.model,
            &acf_options,
            a.corner_frequency_hz,
            a.diffusion,
        )
        .map(|fit| fit.decay),
        None => {
            autocorrelation::fit_exponential(&acov, sample_rate_hz, samples.len(), &acf_options)
        }
    }
    .map_err(|e| CalibrationError::Autocorrelation {
        axis: name.to_string(),
        cause: e,
    });
    // The filter (and a camera's exposure) change the variance the detector reports by the
    // factor C(0) / sigma^2 of the model; frequency-dependent drag does not (the variance stays
    // kB T / kappa).
    let variance_factor = account
        .map(|a| autocorrelation::variance_factor(&a.model, a.corner_frequency_hz))
        .filter(|f| f.is_finite() && *f > 0.0)
        .unwrap_or(1.0);
    // White detector noise adds sigma_n^2 = P_n / (2 dt) to the measured variance (P_n is the
    // spectral fit's one-sided floor; shared PHYSICS.md section 12): it is subtracted before the
    // filter's factor, which applies to the bead's part only. The standard errors are added in
    // quadrature, neglecting the covariance between the sample variance (dominated by the
    // low-frequency plateau) and the floor (fixed by the top of the band); an approximation.
    let noise_variance = account.and_then(|a| a.noise_variance);
    let variance = equipartition::variance(samples, sample_rate_hz, options.detrend, &acov)
        .and_then(|mut v| {
            if let Some(noise) = noise_variance {
                if !(noise.value < v.variance) {
                    return Err(EquipartitionError::NoiseFloorExceedsVariance {
                        variance: v.variance,
                        noise_variance: noise.value,
                    });
                }
                v.variance -= noise.value;
                v.variance_se = v.variance_se.hypot(noise.se);
            }
            v.variance /= variance_factor;
            v.variance_se /= variance_factor;
            Ok(v)
        })
        .map_err(|e| CalibrationError::Equipartition {
            axis: name.to_string(),
            cause: e,
        });
    let histogram = variance
        .as_ref()
        .ok()
        .map(|v| histogram(samples, v.mean, v.variance));
    TimeDomainStage {
        acf,
        variance,
        variance_factor,
        noise_subtracted: noise_variance.is_some(),
        histogram,
    }
}

/// Relaxation time (s) from the lag-1 correlation, for the lag window only; 16 samples when the
/// correlation does not decay like an exponential.
fn relaxation_time_from_lag_one(samples: &[f64], sample_rate_hz: f64) -> f64 {
    let acov = autocorrelation::autocovariance(samples, 1);
    let rho1 = match acov.as_slice() {
        [c0, c1] if *c0 > 0.0 => c1 / c0,
        _ => f64::NAN,
    };
    if rho1 > 0.0 && rho1 < 1.0 {
        -1.0 / (sample_rate_hz * rho1.ln())
    } else {
        16.0 / sample_rate_hz
    }
}

/// Histogram over mean +- 4.5 standard deviations in 61 bins, with the expected counts of the
/// Gaussian N(mean, variance) that equipartition predicts (Boltzmann distribution in a harmonic
/// potential).
pub(crate) fn histogram(samples: &[f64], mean: f64, variance: f64) -> Histogram {
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
