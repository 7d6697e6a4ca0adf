//! Correlations between the three estimates drawn from one record.
//!
//! The spectral fit, the autocorrelation fit and the variance are all, to first order, linear
//! functionals of the periodogram: an estimate u satisfies u - E u ~= integral a_u(f) (I(f) - S(f)) df
//! over 0..f_Nyquist, where I is the one-sided periodogram and S its expectation. Periodogram
//! ordinates at distinct Fourier frequencies are independent with variance S^2 (exponential
//! statistics, Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004), sec. IV), so
//!
//!   Cov(u, v) = (1 / T) integral a_u(f) a_v(f) S(f)^2 df,            T = record length.
//!
//! This is the standard delta-method (influence-function) argument for smooth functionals of
//! the periodogram (Priestley, Spectral Analysis and Time Series (1981), sec. 6.2, for the
//! covariance of such integrals (citation from memory, unverified)); the weights used here are
//! derived for each estimator:
//! - variance s^2 = integral I df (Parseval): a = 1;
//! - sample autocovariance at lag m, C_m = integral I(f) cos(2 pi f m dt) df (Wiener-Khinchin):
//!   a = cos(2 pi f m dt), so tau, linear in the C_m with weights w_m, has a = sum_m w_m cos(...);
//! - the Whittle estimate theta = (ln fc, ln D, ...) with Fisher information F: the score is
//!   sum_k (I_k / S_k - 1) d ln S_k / d theta over the fitted bins, so
//!   a_theta(f) = T F^-1 d ln S(f) / d theta / S(f) inside the fit range and 0 outside.
//!
//! With these weights Var(theta) reproduces F^-1 and Var(s^2) the Bartlett formula, which the
//! tests check.

use crate::spectrum::SpectrumModel;
use std::f64::consts::PI;

/// Everything the covariance integrals need, in plain numbers.
pub(crate) struct InfluenceInputs<'a> {
    pub(crate) model: &'a SpectrumModel,
    pub(crate) theta: &'a [f64],
    /// Inverse Fisher information of the spectral fit (covariance of theta).
    pub(crate) theta_covariance: &'a [Vec<f64>],
    pub(crate) fit_min_hz: f64,
    pub(crate) fit_max_hz: f64,
    pub(crate) record_length_s: f64,
    pub(crate) sample_rate_hz: f64,
    /// tau_hat - tau ~= sum (lag, weight) (C_lag - E C_lag), weight in s per unit^2.
    pub(crate) tau_influence: &'a [(usize, f64)],
    pub(crate) relaxation_time_s: f64,
    pub(crate) variance: f64,
}

/// Covariance matrix of (ln fc, ln D, ln tau, ln variance), dimensionless.
pub(crate) fn log_covariance(inp: &InfluenceInputs<'_>) -> [[f64; 4]; 4] {
    let nyquist = inp.sample_rate_hz / 2.0;
    let dt = 1.0 / inp.sample_rate_hz;
    let max_lag = inp
        .tau_influence
        .iter()
        .map(|(lag, _)| *lag)
        .max()
        .unwrap_or(1);
    // The autocorrelation weight oscillates with period 1/(max_lag dt) in f; resolve it with
    // at least 16 points per period, and the Lorentzian with at least 4096 points.
    let n_grid = (16 * max_lag).clamp(4096, 1 << 20);
    let df = nyquist / n_grid as f64;
    let n_theta = inp.theta.len();
    let mut acc = [[0.0f64; 4]; 4];
    let h = 1e-5;
    let mut t = inp.theta.to_vec();
    for i in 0..=n_grid {
        let f = i as f64 * df;
        // Trapezoid rule weights.
        let w = if i == 0 || i == n_grid { 0.5 } else { 1.0 } * df;
        let s = inp.model.one_sided_psd(f, inp.theta);
        let mut a = [0.0f64; 4];
        if f >= inp.fit_min_hz && f <= inp.fit_max_hz {
            let mut dlns = vec![0.0; n_theta];
            for (j, d) in dlns.iter_mut().enumerate() {
                t[j] = inp.theta[j] + h;
                let up = inp.model.one_sided_psd(f, &t).ln();
                t[j] = inp.theta[j] - h;
                let down = inp.model.one_sided_psd(f, &t).ln();
                t[j] = inp.theta[j];
                *d = (up - down) / (2.0 * h);
            }
            for (slot, row) in a.iter_mut().zip(inp.theta_covariance.iter().take(2)) {
                let proj: f64 = row.iter().zip(&dlns).map(|(c, d)| c * d).sum();
                *slot = inp.record_length_s * proj / s;
            }
        }
        let g: f64 = inp
            .tau_influence
            .iter()
            .map(|(lag, weight)| weight * (2.0 * PI * f * *lag as f64 * dt).cos())
            .sum();
        a[2] = g / inp.relaxation_time_s;
        a[3] = 1.0 / inp.variance;
        let s2 = s * s * w / inp.record_length_s;
        for p in 0..4 {
            for q in 0..4 {
                acc[p][q] += a[p] * a[q] * s2;
            }
        }
    }
    acc
}

/// Correlation matrix from a covariance matrix (zero where a variance vanishes).
pub(crate) fn correlation<const N: usize>(cov: &[[f64; N]; N]) -> [[f64; N]; N] {
    let mut r = [[0.0; N]; N];
    for i in 0..N {
        for j in 0..N {
            let denom = (cov[i][i] * cov[j][j]).sqrt();
            r[i][j] = if denom > 0.0 { cov[i][j] / denom } else { 0.0 };
        }
    }
    r
}
