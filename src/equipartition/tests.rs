//! Unit tests of the equipartition variance: the exact bias formulas against brute-force matrix
//! sums, small hand cases, and the estimate and its standard error against exact AR(1) simulations.

use super::*;
use crate::autocorrelation::autocovariance;
use nalgebra::DMatrix;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256PlusPlus;

/// Exact AR(1) simulation of sampled Ornstein-Uhlenbeck motion with a stationary start:
/// `x_0 ~ N(0, sigma^2)`, `x_(j+1) = c x_j + sigma sqrt(1-c^2) xi_j` (exact for any `dt`; the
/// overdamped limit of S. F. Nørrelykke and H. Flyvbjerg, Phys. Rev. E 83, 041103 (2011)).
fn ar1(n_samples: usize, c: f64, sigma: f64, seed: u64) -> Vec<f64> {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let innovation = sigma * c.mul_add(-c, 1.0).sqrt();
    let start: f64 = StandardNormal.sample(&mut rng);
    let mut x = sigma * start;
    let mut out = Vec::with_capacity(n_samples);
    for _ in 0..n_samples {
        out.push(x);
        let xi: f64 = StandardNormal.sample(&mut rng);
        x = c.mul_add(x, innovation * xi);
    }
    out
}

/// Brute-force `u^T R u` with `R_ij = c^|i-j|` and `u` the unit vector along the centred index.
fn brute_line_quadratic_form(c: f64, n: usize) -> f64 {
    let centre = (n as f64 - 1.0) / 2.0;
    let u: Vec<f64> = (0..n).map(|i| i as f64 - centre).collect();
    let norm2: f64 = u.iter().map(|x| x * x).sum();
    let mut sum = 0.0;
    for (i, ui) in u.iter().enumerate() {
        for (j, uj) in u.iter().enumerate() {
            sum += ui * uj * c.powi(i.abs_diff(j) as i32);
        }
    }
    sum / norm2
}

#[track_caller]
fn check_line_form(c: f64, n: usize) {
    let want = brute_line_quadratic_form(c, n);
    let got = line_quadratic_form_ar1(c, n);
    assert!(
        (got - want).abs() <= 1e-12 * want.abs(),
        "c = {c}, N = {n}: {got} vs {want}"
    );
}

#[test]
fn line_quadratic_form_equals_brute_force_double_sum() {
    for n in [2, 3, 7, 40, 301] {
        for c in [-0.7, 0.0, 0.4, 0.9, 0.999] {
            check_line_form(c, n);
        }
    }
}

/// Exact `E[s^2]/sigma^2 = tr((I - H) R)/N` for detrending by the projection `H` onto the columns
/// of the design matrix (the constant, and the index for a line), by explicit matrices.
fn brute_kept_fraction(c: f64, n: usize, detrend: Detrend) -> f64 {
    let columns = match detrend {
        Detrend::Mean => 1,
        Detrend::Linear => 2,
    };
    let design = DMatrix::from_fn(n, columns, |i, j| if j == 0 { 1.0 } else { i as f64 });
    let gram_inverse = (design.transpose() * &design)
        .try_inverse()
        .unwrap_or_else(|| DMatrix::zeros(columns, columns));
    let hat = &design * gram_inverse * design.transpose();
    let correlation = DMatrix::from_fn(n, n, |i, j| c.powi(i.abs_diff(j) as i32));
    let residual_maker = DMatrix::identity(n, n) - hat;
    (residual_maker * correlation).trace() / n as f64
}

#[track_caller]
fn check_kept_fraction(c: f64, n: usize, detrend: Detrend) {
    let want = brute_kept_fraction(c, n, detrend);
    let mut removed = mean_bias_ar1(c, n);
    if detrend == Detrend::Linear {
        removed += line_quadratic_form_ar1(c, n) / n as f64;
    }
    let got = 1.0 - removed;
    assert!(
        (got - want).abs() <= 1e-11,
        "c = {c}, N = {n}, {detrend:?}: {got} vs {want}"
    );
}

#[test]
fn bias_factor_equals_trace_of_residual_maker_times_covariance() {
    // E[r^T r] = tr((I - H) Sigma) for any linear detrending H (exact analytical result).
    for n in [3, 5, 16, 60] {
        for c in [-0.5, 0.0, 0.5, 0.95] {
            check_kept_fraction(c, n, Detrend::Mean);
            check_kept_fraction(c, n, Detrend::Linear);
        }
    }
}

#[track_caller]
fn check_hand_case(
    samples: &[f64],
    detrend: Detrend,
    sample_rate_hz: f64,
    want: &VarianceEstimate,
) {
    let acov = autocovariance(&detrended(samples, detrend), 3);
    let Ok(got) = variance(samples, sample_rate_hz, detrend, &acov) else {
        panic!("variance failed on {samples:?}");
    };
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b.abs().max(1.0);
    assert!(
        close(got.variance, want.variance),
        "variance {} vs {}",
        got.variance,
        want.variance
    );
    assert!(
        close(got.mean, want.mean),
        "mean {} vs {}",
        got.mean,
        want.mean
    );
    assert!(
        close(got.slope_per_s, want.slope_per_s),
        "slope {} vs {}",
        got.slope_per_s,
        want.slope_per_s
    );
    assert!(
        close(got.bias_correction, want.bias_correction),
        "correction {} vs {}",
        got.bias_correction,
        want.bias_correction
    );
}

#[test]
fn uncorrelated_hand_cases_reduce_to_the_textbook_unbiased_variances() {
    // With a negative lag-1 autocovariance c is taken as 0, and the corrections reduce to the
    // textbook unbiased estimates: sum r^2/(N-1) after the mean, sum r^2/(N-2) after a line
    // (exact analytical results). [1, 3, 2, 4]: mean 2.5, sum r^2 = 5, acov[1] = -1.75/3 < 0.
    let mean_case = VarianceEstimate {
        variance: 5.0 / 3.0,
        variance_se: 0.0,
        mean: 2.5,
        slope_per_s: 0.0,
        bias_correction: 5.0 / 3.0 - 1.25,
    };
    check_hand_case(&[1.0, 3.0, 2.0, 4.0], Detrend::Mean, 1.0, &mean_case);
    // Line through [1, 3, 2, 4] at 10 Hz: slope 0.8 per sample = 8 per second, residuals
    // (0.2, 0.4, -1.4, 0.8)... sum r^2 = 5 - 0.8^2 * 5 = 1.8, so 1.8/(N-2) = 0.9.
    let line_case = VarianceEstimate {
        variance: 0.9,
        variance_se: 0.0,
        mean: 2.5,
        slope_per_s: 8.0,
        bias_correction: 0.9 - 0.45,
    };
    check_hand_case(&[1.0, 3.0, 2.0, 4.0], Detrend::Linear, 10.0, &line_case);
}

/// Mean and sample standard deviation.
fn mean_and_sd(values: &[f64]) -> (f64, f64) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let var = values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / (n - 1.0);
    (mean, var.sqrt())
}

/// Summary over seeds: (bias of the corrected variance in standard errors of the mean, bias of the
/// raw variance in the same units, mean reported SE over the empirical SD).
fn simulate(
    tau_over_dt: f64,
    n_samples: usize,
    n_seeds: u64,
    detrend: Detrend,
    seed_base: u64,
) -> (f64, f64, f64) {
    let (sigma, sample_rate_hz) = (0.8, 50_000.0);
    let c = (-1.0 / tau_over_dt).exp();
    let mut estimates = Vec::new();
    let mut raws = Vec::new();
    let mut ses = Vec::new();
    for seed in 0..n_seeds {
        let mut x = ar1(n_samples, c, sigma, seed_base + seed);
        if detrend == Detrend::Linear {
            // A drift of 2 sigma over the record, which the line removes.
            let slope = 2.0 * sigma / n_samples as f64;
            for (i, value) in x.iter_mut().enumerate() {
                *value += slope * i as f64;
            }
        }
        let acov = autocovariance(&detrended(&x, detrend), (12.0 * tau_over_dt) as usize);
        let result = variance(&x, sample_rate_hz, detrend, &acov);
        let Ok(estimate) = result else {
            panic!("seed {seed}: {result:?}");
        };
        estimates.push(estimate.variance);
        raws.push(estimate.variance - estimate.bias_correction);
        ses.push(estimate.variance_se);
    }
    let truth = sigma * sigma;
    let (mean, sd) = mean_and_sd(&estimates);
    let (raw_mean, _) = mean_and_sd(&raws);
    let (se_mean, _) = mean_and_sd(&ses);
    let sem = sd / (n_seeds as f64).sqrt();
    ((mean - truth) / sem, (raw_mean - truth) / sem, se_mean / sd)
}

#[track_caller]
fn check_unbiased_and_honest(tau_over_dt: f64, detrend: Detrend) {
    // Exact AR(1) simulations with fixed seeds; the truth sigma^2 is the simulation input. Bias
    // within 3 standard errors of the mean; mean reported SE within 25% of the empirical SD.
    let (bias, _, se_ratio) = simulate(tau_over_dt, 1 << 16, 60, detrend, 500);
    assert!(
        bias.abs() < 3.0,
        "tau/dt = {tau_over_dt}, {detrend:?}: bias {bias} sem"
    );
    assert!(
        (se_ratio - 1.0).abs() < 0.25,
        "tau/dt = {tau_over_dt}, {detrend:?}: se/sd {se_ratio}"
    );
}

#[test]
fn variance_is_unbiased_with_honest_errors_on_long_records() {
    for detrend in [Detrend::Mean, Detrend::Linear] {
        check_unbiased_and_honest(5.0, detrend);
        check_unbiased_and_honest(40.0, detrend);
    }
}

#[test]
fn bias_correction_removes_the_detrending_bias_on_short_records() {
    // T_msr = 100 tau: mean removal lowers the raw variance by about 2 tau/T_msr = 2% and a line
    // by about 4% (E[s^2] = sigma^2 - Var(xbar), and twice that for a line; exact for AR(1)). With
    // 2000 records the standard error of the mean is 0.3%, so the raw variance must show the bias
    // and the corrected one must not.
    for detrend in [Detrend::Mean, Detrend::Linear] {
        let (bias, raw_bias, se_ratio) = simulate(40.0, 4000, 2000, detrend, 90_000);
        assert!(bias.abs() < 3.0, "{detrend:?}: corrected bias {bias} sem");
        assert!(raw_bias < -4.0, "{detrend:?}: raw bias only {raw_bias} sem");
        assert!(
            (se_ratio - 1.0).abs() < 0.25,
            "{detrend:?}: se/sd {se_ratio}"
        );
    }
}

#[test]
fn white_noise_is_valid_input_for_the_variance() {
    // Uncorrelated data have a well-defined variance: c = 0 and the SE tends to sigma^2 sqrt(2/N)
    // (the Gaussian result Var(s^2) = 2 sigma^4/N; exact analytical result).
    let n = 20_000;
    let x = ar1(n, 0.0, 2.0, 11);
    let acov = autocovariance(&x, 20);
    let Ok(estimate) = variance(&x, 1e3, Detrend::Mean, &acov) else {
        panic!("variance failed on white noise");
    };
    let expected_se = 4.0 * (2.0 / n as f64).sqrt();
    assert!(
        (estimate.variance - 4.0).abs() < 3.0 * expected_se,
        "variance {}",
        estimate.variance
    );
    assert!(
        (estimate.variance_se / expected_se - 1.0).abs() < 0.1,
        "se {}",
        estimate.variance_se
    );
}

#[track_caller]
fn check_error(samples: &[f64], sample_rate_hz: f64, detrend: Detrend, acov: &[f64], want: &str) {
    match variance(samples, sample_rate_hz, detrend, acov) {
        Ok(estimate) => panic!("expected an error containing {want:?}, got {estimate:?}"),
        Err(error) => {
            let message = error.to_string();
            assert!(message.contains(want), "{message:?} lacks {want:?}");
            assert!(
                message.starts_with(|ch: char| ch.is_lowercase()),
                "upper-case start in {message:?}"
            );
            assert!(!message.ends_with('.'), "final period in {message:?}");
        }
    }
}

#[test]
fn variance_rejects_unusable_input_with_errors_not_panics() {
    let x = ar1(1000, 0.8, 1.0, 3);
    let acov = autocovariance(&x, 30);
    check_error(
        &[0.1; 500],
        1e3,
        Detrend::Mean,
        &autocovariance(&[0.1; 500], 5),
        "constant",
    );
    let line: Vec<f64> = (0..100).map(|i| 0.5f64.mul_add(i as f64, -3.0)).collect();
    check_error(
        &line,
        1e3,
        Detrend::Linear,
        &autocovariance(&line, 5),
        "exactly linear",
    );
    check_error(&[1.0], 1e3, Detrend::Mean, &[0.0], "needs at least 2");
    check_error(
        &[1.0, 2.0],
        1e3,
        Detrend::Linear,
        &[0.25, -0.25],
        "at least 3",
    );
    check_error(&[], 1e3, Detrend::Mean, &[], "0 given");
    let mut with_nan = x.clone();
    with_nan[17] = f64::NAN;
    check_error(&with_nan, 1e3, Detrend::Mean, &acov, "sample 17");
    check_error(&x, 1e3, Detrend::Mean, &acov[..1], "holds 1 lags");
    check_error(&x, 0.0, Detrend::Mean, &acov, "sample_rate_hz");
    check_error(&x, f64::INFINITY, Detrend::Mean, &acov, "sample_rate_hz");
    check_error(&x, 1e3, Detrend::Mean, &[1.0, 1.0, 0.5], "does not decay");
    // With a drift, the autocovariance of the mean-removed samples is not that of the residuals.
    let drifting: Vec<f64> = x
        .iter()
        .enumerate()
        .map(|(i, v)| v + 0.01 * i as f64)
        .collect();
    check_error(
        &drifting,
        1e3,
        Detrend::Linear,
        &autocovariance(&drifting, 30),
        "does not belong",
    );
    check_error(
        &x,
        1e3,
        Detrend::Mean,
        &[2.0 * acov[0], acov[1]],
        "does not belong",
    );
    check_error(&x, 1e3, Detrend::Mean, &[1.0, f64::NAN], "lag 1");
}
