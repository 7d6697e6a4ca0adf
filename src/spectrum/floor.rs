//! The white noise floor of the spectral model: whether the data support it, decided by a
//! likelihood-ratio test, and its estimate.
//!
//! White detector noise of variance sigma_n^2 adds the constant P_n = 2 sigma_n^2 dt to the
//! one-sided spectrum (shared PHYSICS.md section 12). Left out of the model, even 1 % of the
//! variance biases fc and D by several per cent, because the fit bends the Lorentzian's tail up
//! to meet the floor. Put in when it is not there, it costs a little precision. So the floor is
//! fitted when the data support it: the fit without the floor is compared with the fit with it
//! by the likelihood ratio LR = 2 (L_without - L_with) of the Whittle likelihood. The floor's
//! null value P_n = 0 lies on the boundary of its parameter space, so under the null LR follows
//! the 50:50 mixture of chi2 with 0 and with 1 degree of freedom (Self & Liang, J. Am. Stat.
//! Assoc. 82, 605 (1987), their case of one parameter on the boundary), and the floor is kept
//! when LR exceeds the mixture's upper `NOISE_FLOOR_FALSE_INCLUSION` quantile.

use super::fit::{SpectrumFit, SpectrumFitError, SpectrumFitOptions, fit_spectrum_from_theta};
use super::{Block, Periodogram, fit_spectrum};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Whether the white noise floor enters the spectral model.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum NoiseFloorMode {
    /// Fitted when the likelihood-ratio test says the data support it (see the module docs).
    #[default]
    Auto,
    /// Always fitted, except when its maximum-likelihood value is on the boundary P_n = 0 (the
    /// score there is not positive, or the fit from the one-step start fails): the model is
    /// then the one without the floor, and the report says it is not included.
    Fit,
    /// Never in the model.
    Off,
}

/// Rate at which the `Auto` mode puts a floor into the model of a record that has none: the
/// size of the likelihood-ratio test.
pub const NOISE_FLOOR_FALSE_INCLUSION: f64 = 0.01;

/// Critical value of the likelihood-ratio statistic: the upper `NOISE_FLOOR_FALSE_INCLUSION`
/// quantile of the 50:50 mixture of chi2_0 and chi2_1, that is the upper
/// 2 `NOISE_FLOOR_FALSE_INCLUSION` quantile of chi2_1: z_{0.99}^2 = 2.326348^2 = 5.411894
/// (standard normal quantile from any table; a test checks it against statrs).
pub const NOISE_FLOOR_CRITICAL_LR: f64 = 5.411_894;

/// The outcome of the floor's test on one spectrum.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NoiseFloorTest {
    /// The mode the test ran under.
    pub mode: NoiseFloorMode,
    /// LR = 2 (L_without - L_with), 0 when the floor's maximum-likelihood value is P_n = 0.
    pub lr_statistic: f64,
    /// P(LR' >= LR) under the 50:50 mixture of chi2_0 and chi2_1 (1 for LR = 0).
    pub p_value: f64,
    /// Whether the floor is in the model of the fit returned.
    pub included: bool,
    /// The fit without the floor: corner frequency (Hz) and D (signal-unit^2/s), to tell how
    /// much the floor moves them.
    pub corner_frequency_without_hz: f64,
    pub diffusion_without: f64,
}

/// The fitted floor of a spectral fit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NoiseFloorLevel {
    /// One-sided level P_n, signal-unit^2/Hz, and its standard error (inverse Fisher
    /// information, by the delta method from ln P_n).
    pub level: f64,
    pub level_se: f64,
    /// The white noise variance sigma_n^2 = P_n / (2 dt) = P_n f_s / 2, signal-unit^2, and its
    /// standard error.
    pub variance: f64,
    pub variance_se: f64,
}

impl SpectrumFit {
    /// The fitted noise floor, when the model has one.
    pub fn noise_floor(&self) -> Option<NoiseFloorLevel> {
        let i = self.model.noise_floor_index()?;
        let level = self.theta.get(i)?.exp();
        let level_se = level * self.covariance.get(i)?.get(i)?.sqrt();
        let half_rate = self.model.sample_rate_hz / 2.0;
        Some(NoiseFloorLevel {
            level,
            level_se,
            variance: level * half_rate,
            variance_se: level_se * half_rate,
        })
    }
}

/// Upper-tail probability of the 50:50 mixture of chi2_0 and chi2_1 at `lr`.
pub fn boundary_mixture_p_value(lr: f64) -> f64 {
    if !(lr > 0.0) {
        return 1.0;
    }
    0.5 * ChiSquared::new(1.0).map_or(f64::NAN, |d| d.sf(lr))
}

/// Negative Whittle log-likelihood of a fit at its optimum, sum_b n_b (ln S_b + P_b / S_b).
fn neg_log_likelihood(fit: &SpectrumFit) -> f64 {
    fit.blocks
        .iter()
        .zip(&fit.model_psd)
        .map(|(b, s)| b.n_averaged as f64 * (s.ln() + b.psd / s))
        .sum()
}

/// The floor's score and information at P_n = 0 in the linear parameter P_n:
/// U = sum_b n_b (P_b / S_b - 1) g_b / S_b and I = sum_b n_b g_b^2 / S_b^2, where g_b is the
/// block mean of dS/dP_n (1 plus the differenced segments' finite-record term, see
/// `SpectrumModel::leakage_params`).
fn score_at_zero(
    fit: &SpectrumFit,
    with_floor: &SpectrumFitOptions,
    periodogram: &Periodogram,
) -> (f64, f64) {
    let model = &with_floor.model;
    let segments = Some(super::model::Segments {
        len: periodogram.segment_len,
        differenced_from_hz: (periodogram.first_differenced_bin as f64 - 0.5)
            * periodogram.resolution_hz(),
    });
    let gain = |b: &Block| model.block_floor_gain(b.lower_hz, b.upper_hz, segments);
    let mut score = 0.0;
    let mut information = 0.0;
    for (b, s) in fit.blocks.iter().zip(&fit.model_psd) {
        let n = b.n_averaged as f64;
        let g = gain(b);
        score += n * (b.psd / s - 1.0) * g / s;
        information += n * g * g / (s * s);
    }
    (score, information)
}

/// Fits `options.model` (whose own `noise_floor` is ignored) with or without the white noise
/// floor as `mode` says, and returns the fit with the test's outcome (`None` for `Off`).
///
/// The fit without the floor comes first. When the floor's score at P_n = 0 is not positive,
/// the likelihood decreases into P_n > 0, so its maximum is on the boundary: LR = 0 and no
/// second fit is needed. Otherwise the floor is fitted from the one-step estimate
/// P_n = U / I (a scoring step from the boundary), and LR compares the two optima; a floor fit
/// that fails counts as LR = 0.
pub fn fit_spectrum_with_floor(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    mode: NoiseFloorMode,
    base: Option<SpectrumFit>,
) -> Result<(SpectrumFit, Option<NoiseFloorTest>), SpectrumFitError> {
    let mut without = options.clone();
    without.model.noise_floor = false;
    let base = match base {
        Some(fit) => fit,
        None => fit_spectrum(periodogram, &without, None)?,
    };
    if mode == NoiseFloorMode::Off {
        return Ok((base, None));
    }
    let mut with = options.clone();
    with.model.noise_floor = true;
    let (score, information) = score_at_zero(&base, &with, periodogram);
    let floor_fit = (score > 0.0 && information > 0.0)
        .then(|| {
            let mut theta = base.theta.clone();
            theta.push((score / information).ln());
            fit_spectrum_from_theta(periodogram, &with, theta).ok()
        })
        .flatten();
    let lr_statistic = floor_fit.as_ref().map_or(0.0, |f| {
        (2.0 * (neg_log_likelihood(&base) - neg_log_likelihood(f))).max(0.0)
    });
    let included = match mode {
        NoiseFloorMode::Fit => floor_fit.is_some(),
        _ => lr_statistic > NOISE_FLOOR_CRITICAL_LR && floor_fit.is_some(),
    };
    let test = NoiseFloorTest {
        mode,
        lr_statistic,
        p_value: boundary_mixture_p_value(lr_statistic),
        included,
        corner_frequency_without_hz: base.corner_frequency_hz,
        diffusion_without: base.diffusion,
    };
    let fit = match floor_fit {
        Some(f) if included => f,
        _ => base,
    };
    Ok((fit, Some(test)))
}
