//! Second-order statistics of the sample autocovariance of any stationary Gaussian process
//! given its autocovariance as a [`LagSeries`]: the covariance of the count-normalised sample
//! autocovariances (Bartlett's formula with the exact finite-record counts) and the variance of
//! the sample mean (the bias that mean removal puts into every lag).
//!
//! These generalise `autocovariance_covariance_ar1` and `mean_bias_ar1` from the AR(1)
//! autocovariance `A c^k` to the filtered, blurred and hydrodynamic models, so the weights of the
//! general fit are those of the model being fitted.

use super::mean_bias_ar1;
use super::model::LagSeries;
use nalgebra::DMatrix;

impl LagSeries {
    /// `Var(xbar)` of the mean of `n_samples` consecutive samples (signal-unit^2):
    /// `(1/N) [g(0) + 2 sum_{u=1}^{N-1} (1 - u/N) g(u)]`, the sum over all pairs grouped by lag.
    /// Each exponential term contributes `b sum_{j=0}^{N-2} (1 - (j+1)/N) q^j` in closed form
    /// (see [`weighted_geometric_sum`]); the remainder is summed as stored and the hydrodynamic
    /// tail, if any, beyond it in closed form (see `HydroTail`).
    pub(crate) fn mean_variance(&self, n_samples: usize) -> f64 {
        if n_samples == 0 {
            return f64::NAN;
        }
        let n = n_samples as f64;
        let mut sum: f64 = self
            .terms
            .iter()
            .map(|&(b, ln_q)| b * weighted_geometric_sum(ln_q, n_samples))
            .sum();
        for (index, &r) in self
            .remainder
            .iter()
            .enumerate()
            .take(n_samples.saturating_sub(1))
        {
            let lag = (index + 1) as f64;
            sum += (1.0 - lag / n) * r;
        }
        if let Some(tail) = &self.tail {
            sum += tail.weighted_sum(self.remainder.len() + 1, n_samples);
        }
        2.0f64.mul_add(sum, self.lag0) / n
    }

    /// The covariance matrix `Cov(C^_k, C^_l)` over `lags` of the count-normalised sample
    /// autocovariances of `n_samples` values (signal-unit^4), with `ridge` times the mean
    /// diagonal added to the diagonal.
    ///
    /// For Gaussian data the lag sums T_k = sum_j x_j x_(j+k) have
    /// `Cov(T_k, T_l) = sum_d n(d) [g(d) g(d+l-k) + g(d+l) g(d-k)]` (Isserlis' theorem), n(d)
    /// the number of index pairs at offset d: for k <= l, m = l - k, s = l + k,
    /// `n(d) = (N - l) - max(d, 0) - max(-d - m, 0)`. Summing (derived here; the AR(1) case
    /// reduces to `autocovariance_covariance_ar1`, and both are checked against the direct
    /// count sum in the tests):
    ///
    /// `(N-k)(N-l) Cov(C^_k, C^_l) = (N - l) [S(m) + S(s)] - G`,
    /// `S(e) = sum_d g(d) g(d+e) = 2 H(e) + sum_{u=0}^{e} g(u) g(e-u)` (Bartlett's lag sum,
    /// M. S. Bartlett, J. R. Stat. Soc. Suppl. 8, 27 (1946)),
    /// `G = 2 R(m) + 2 R(s) + 2 k H(s) + 2 sum_{v=0}^{k-1} (k - v) g(v) g(s - v)`,
    /// `H(e) = sum_{u>=1} g(u) g(u+e)`, `R(e) = sum_{u>=1} u g(u) g(u+e)`.
    ///
    /// H and R are summed in closed form between exponential terms
    /// (`b_i b_j q_j^e / (1 - q_i q_j)` and `/ (1 - q_i q_j)^2`) and numerically where the
    /// remainder enters. The clamp n(d) >= 0 is neglected (terms of order g(N - l)^2), and so
    /// is the hydrodynamic tail beyond the stored remainder (30 relaxation times past the
    /// lags used, where its products are below 1e-9 sigma^4).
    pub(crate) fn autocovariance_covariance(
        &self,
        lags: &[usize],
        n_samples: usize,
        ridge: f64,
    ) -> DMatrix<f64> {
        let top = 2 * lags.iter().copied().max().unwrap_or(0);
        let values: Vec<f64> = (0..=top).map(|lag| self.at(lag)).collect();
        let sums = LagSums::new(self, top);
        let mut h_cache: Vec<Option<f64>> = vec![None; top + 1];
        let mut r_cache: Vec<Option<f64>> = vec![None; top + 1];
        let mut s_cache: Vec<Option<f64>> = vec![None; top + 1];
        let mut h = |e: usize| *h_cache[e].get_or_insert_with(|| sums.first(e, false));
        let mut r_moment = |e: usize| *r_cache[e].get_or_insert_with(|| sums.first(e, true));
        let mut lag_sum = |e: usize, h_e: f64| {
            *s_cache[e].get_or_insert_with(|| {
                let convolution: f64 = (0..=e).map(|u| values[u] * values[e - u]).sum();
                2.0f64.mul_add(h_e, convolution)
            })
        };
        let n = n_samples as f64;
        let n_lags = lags.len();
        let mut cov = DMatrix::zeros(n_lags, n_lags);
        for i in 0..n_lags {
            for j in i..n_lags {
                let (k, l) = (lags[i].min(lags[j]), lags[i].max(lags[j]));
                let (m, s) = (l - k, l + k);
                let (h_m, h_s) = (h(m), h(s));
                let (lag_sum_m, lag_sum_s) = (lag_sum(m, h_m), lag_sum(s, h_s));
                let edge: f64 = (0..k)
                    .map(|v| (k - v) as f64 * values[v] * values[s - v])
                    .sum();
                let count_correction =
                    2.0 * (r_moment(m) + r_moment(s) + (k as f64).mul_add(h_s, edge));
                let (k_f, l_f) = (k as f64, l as f64);
                let value = (n - l_f).mul_add(lag_sum_m + lag_sum_s, -count_correction)
                    / ((n - k_f) * (n - l_f));
                cov[(i, j)] = value;
                cov[(j, i)] = value;
            }
        }
        let mean_diagonal = cov.diagonal().sum() / n_lags.max(1) as f64;
        for i in 0..n_lags {
            cov[(i, i)] += ridge * mean_diagonal;
        }
        cov
    }
}

/// `sum_{j=0}^{N-2} (1 - (j+1)/N) q^j` for q = exp(ln_q) in [0, 1):
/// `1/(1-q) - (1 - q^N)/(N (1-q)^2)` (derived by summing the geometric series and its
/// derivative). Above q = 1/2, where that form cancels, it is computed as
/// `(N v(q, N) - 1)/(2 q)` from [`mean_bias_ar1`], which equals it (v's closed form is
/// `(1/N)[1 + 2 sum_{u=1}^{N-1} (1 - u/N) q^u]`).
fn weighted_geometric_sum(ln_q: f64, n_samples: usize) -> f64 {
    if n_samples < 2 {
        return 0.0;
    }
    let q = ln_q.exp();
    let n = n_samples as f64;
    if q > 0.5 {
        return n.mul_add(mean_bias_ar1(q, n_samples), -1.0) / (2.0 * q);
    }
    let one_minus = 1.0 - q;
    1.0 / one_minus - (1.0 - q.powf(n)) / (n * one_minus * one_minus)
}

/// The infinite sums H(e) and R(e) of one series.
struct LagSums<'a> {
    series: &'a LagSeries,
    /// The exponential part `sum_i b_i q_i^(u-1)` at u = 0.. (index u) where the remainder
    /// needs it: up to remainder length + top.
    exponential: Vec<f64>,
}

impl<'a> LagSums<'a> {
    fn new(series: &'a LagSeries, top: usize) -> Self {
        let exponential = if series.remainder.is_empty() {
            Vec::new()
        } else {
            (0..=series.remainder.len() + top)
                .map(|u| {
                    if u == 0 {
                        return 0.0;
                    }
                    series
                        .terms
                        .iter()
                        .map(|&(b, ln_q)| b * (ln_q * (u - 1) as f64).exp())
                        .sum()
                })
                .collect()
        };
        Self {
            series,
            exponential,
        }
    }

    /// H(e) = sum_{u>=1} g(u) g(u+e), or R(e) = sum_{u>=1} u g(u) g(u+e) when `moment`.
    fn first(&self, e: usize, moment: bool) -> f64 {
        let e_f = e as f64;
        let mut total = 0.0;
        for &(b_i, ln_qi) in &self.series.terms {
            for &(b_j, ln_qj) in &self.series.terms {
                let one_minus_p = -(ln_qi + ln_qj).exp_m1();
                let denominator = if moment {
                    one_minus_p * one_minus_p
                } else {
                    one_minus_p
                };
                total += b_i * b_j * (ln_qj * e_f).exp() / denominator;
            }
        }
        let remainder = &self.series.remainder;
        let r_at = |u: usize| remainder.get(u - 1).copied().unwrap_or(0.0);
        for u in 1..=remainder.len() {
            let (r_u, r_ue) = (r_at(u), r_at(u + e));
            let product = self.exponential[u].mul_add(r_ue, r_u * (self.exponential[u + e] + r_ue));
            total += if moment { u as f64 * product } else { product };
        }
        total
    }
}
