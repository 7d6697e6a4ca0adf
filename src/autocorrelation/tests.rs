//! Unit tests of the autocorrelation module: the FFT autocovariance against a direct sum, the
//! closed forms against brute-force sums, and the fit against exact AR(1) simulations.

use super::*;
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

/// White Gaussian noise of unit variance.
fn white(n_samples: usize, seed: u64) -> Vec<f64> {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    (0..n_samples)
        .map(|_| StandardNormal.sample(&mut rng))
        .collect()
}

/// Slow, obviously correct reference: the definition of the count-normalised autocovariance of the
/// mean-removed samples, summed directly in O(N L).
fn direct_autocovariance(samples: &[f64], max_lag: usize) -> Vec<f64> {
    let n = samples.len();
    let mean = samples.iter().sum::<f64>() / n as f64;
    (0..=max_lag.min(n - 1))
        .map(|k| {
            let sum: f64 = (0..n - k)
                .map(|j| (samples[j] - mean) * (samples[j + k] - mean))
                .sum();
            sum / (n - k) as f64
        })
        .collect()
}

#[track_caller]
fn check_hand_case(samples: &[f64], max_lag: usize, expected: &[f64]) {
    let direct = direct_autocovariance(samples, max_lag);
    let fast = autocovariance(samples, max_lag);
    assert_eq!(direct.len(), expected.len(), "direct length");
    assert_eq!(fast.len(), expected.len(), "fft length");
    for (lag, &want) in expected.iter().enumerate() {
        assert!(
            (direct[lag] - want).abs() <= 1e-15,
            "direct lag {lag}: {} vs {want}",
            direct[lag]
        );
        assert!(
            (fast[lag] - want).abs() <= 1e-14,
            "fft lag {lag}: {} vs {want}",
            fast[lag]
        );
    }
}

#[test]
fn autocovariance_matches_hand_computed_small_cases() {
    // Worked by hand from the definition C_k = (1/(N-k)) sum (x_j - xbar)(x_{j+k} - xbar).
    check_hand_case(&[1.0, -1.0, 1.0, -1.0], 3, &[1.0, -1.0, 1.0, -1.0]);
    // Mean 2.5, deviations (-1.5, -0.5, 0.5, 1.5):
    // C_0 = 5/4, C_1 = 1.25/3, C_2 = -1.5/2, C_3 = -2.25.
    check_hand_case(&[1.0, 2.0, 3.0, 4.0], 3, &[1.25, 1.25 / 3.0, -0.75, -2.25]);
    // max_lag beyond the record is clamped to N - 1.
    check_hand_case(&[3.0, 5.0], 10, &[1.0, -1.0]);
    check_hand_case(&[7.0], 4, &[0.0]);
    // A constant offset is removed with the mean.
    check_hand_case(&[101.0, 99.0, 101.0, 99.0], 1, &[1.0, -1.0]);
}

#[track_caller]
fn check_fft_against_direct(samples: &[f64], max_lag: usize) {
    let direct = direct_autocovariance(samples, max_lag);
    let fast = autocovariance(samples, max_lag);
    assert_eq!(fast.len(), direct.len());
    let scale = direct[0].abs();
    for (lag, (f, d)) in fast.iter().zip(&direct).enumerate() {
        assert!(
            (f - d).abs() <= 1e-10 * scale,
            "lag {lag}: fft {f} vs direct {d}"
        );
    }
}

#[test]
fn autocovariance_by_fft_equals_direct_sum_on_seeded_random_input() {
    // Oracle chain: the direct sum is checked on exact cases above; the FFT path against it here.
    check_fft_against_direct(&ar1(1000, 0.9, 3.0, 1), 100);
    check_fft_against_direct(&ar1(997, 0.5, 1.0, 2), 996);
    check_fft_against_direct(&ar1(4096, 0.99, 1e-3, 3), 300);
    let offset: Vec<f64> = white(1531, 4).iter().map(|x| x + 1e4).collect();
    check_fft_against_direct(&offset, 50);
}

#[test]
fn autocovariance_of_empty_or_non_finite_input_does_not_panic() {
    assert!(autocovariance(&[], 5).is_empty());
    let with_nan = autocovariance(&[1.0, f64::NAN, 2.0], 2);
    assert_eq!(with_nan.len(), 3);
    assert!(with_nan.iter().all(|v| v.is_nan()));
}

#[test]
fn fast_fft_len_is_the_smallest_seven_smooth_length() {
    // Reference: scan upward, testing smoothness by trial division.
    let smooth = |mut m: usize| {
        for p in [2, 3, 5, 7] {
            while m % p == 0 {
                m /= p;
            }
        }
        m == 1
    };
    for n in 1..3000 {
        let want = (n..).find(|&m| smooth(m)).unwrap_or(n);
        assert_eq!(fast_fft_len(n), want, "n = {n}");
    }
}

/// Brute force `v(c, N) = (1/N^2) sum_{i,j} c^|i-j|` (exact analytical definition).
fn brute_mean_bias(c: f64, n: usize) -> f64 {
    let mut sum = 0.0;
    for i in 0..n {
        for j in 0..n {
            sum += c.powi(i.abs_diff(j) as i32);
        }
    }
    sum / (n * n) as f64
}

#[track_caller]
fn check_mean_bias(c: f64, n: usize) {
    let want = brute_mean_bias(c, n);
    let got = mean_bias_ar1(c, n);
    assert!(
        (got - want).abs() <= 1e-12 * want.abs().max(1e-300),
        "c = {c}, N = {n}: {got} vs {want}"
    );
}

#[test]
fn mean_bias_equals_brute_force_double_sum() {
    for n in [1, 2, 3, 5, 8, 13, 64, 500] {
        for c in [
            -1.0,
            -0.9,
            -0.3,
            0.0,
            0.3,
            0.9,
            0.99,
            0.999_999,
            1.0 - 1e-9,
            1.0,
        ] {
            check_mean_bias(c, n);
        }
    }
}

#[test]
fn mean_bias_is_nan_outside_its_domain() {
    assert!(mean_bias_ar1(1.5, 10).is_nan());
    assert!(mean_bias_ar1(f64::NAN, 10).is_nan());
    assert!(mean_bias_ar1(0.5, 0).is_nan());
}

#[test]
fn mean_bias_approaches_two_tau_over_record_length() {
    // Var(xbar)/sigma^2 -> (1+c)/((1-c) N) ~ 2 tau/T_msr for tau << T_msr (the large-N limit of the
    // closed form; exact analytical result).
    let (c, n) = (0.9_f64, 1_000_000);
    let want = (1.0 + c) / ((1.0 - c) * n as f64);
    assert!((mean_bias_ar1(c, n) / want - 1.0).abs() < 1e-4);
}

#[track_caller]
fn check_mean_bias_derivative(c: f64, n: usize) {
    // Step 3e-4 (1-c): rounding in v (about 2e-13) and truncation both stay near 1e-6 relative.
    let h = 3e-4 * (1.0 - c);
    let numeric = (mean_bias_ar1(c + h, n) - mean_bias_ar1(c - h, n)) / (2.0 * h);
    let (_, analytic) = mean_bias_ar1_with_derivative(c, n);
    assert!(
        (analytic - numeric).abs() <= 1e-5 * analytic.abs().max(1e-12),
        "c = {c}, N = {n}: analytic {analytic} vs central difference {numeric}"
    );
}

#[test]
fn mean_bias_derivative_matches_central_difference() {
    for n in [2, 10, 1000, 65536] {
        for c in [-0.5, 0.1, 0.5, 0.9, 0.975, 0.999] {
            check_mean_bias_derivative(c, n);
        }
    }
    // Expansion branch (N ln(1/c) < 1e-3).
    check_mean_bias_derivative(1.0 - 1e-7, 1000);
}

#[track_caller]
fn check_bartlett(d: usize, c: f64) {
    // Direct truncated sum over m of c^|m| c^|m+d|; the tail beyond |m| = 4000 is below 1e-30 here.
    let d_i = d as i64;
    let direct: f64 = (-4000_i64..=4000)
        .map(|m| c.powi(m.abs() as i32) * c.powi((m + d_i).abs() as i32))
        .sum();
    let closed = bartlett_lag_sum(d, c);
    assert!(
        (closed - direct).abs() <= 1e-12 * direct.abs(),
        "d = {d}, c = {c}: {closed} vs {direct}"
    );
}

#[test]
fn bartlett_closed_form_equals_direct_sum() {
    for c in [0.1, 0.5, 0.8, 0.95, -0.6] {
        for d in [0, 1, 2, 7, 40] {
            check_bartlett(d, c);
        }
    }
}

/// Brute-force covariance of the count-normalised lag sums of a zero-mean Gaussian AR(1) process
/// with unit amplitude: `(1/((N-k)(N-l))) sum_{j<N-k} sum_{i<N-l} [g(i-j) g(i-j+l-k) +
/// g(i-j+l) g(i-j-k)]` (Isserlis' theorem for Gaussian fourth moments, summed over every pair).
fn brute_autocovariance_covariance(c: f64, n: usize, k: usize, l: usize) -> f64 {
    let g = |d: i64| c.powi(d.unsigned_abs() as i32);
    let (k_i, l_i) = (k as i64, l as i64);
    let mut sum = 0.0;
    for j in 0..(n - k) as i64 {
        for i in 0..(n - l) as i64 {
            let d = i - j;
            sum += g(d).mul_add(g(d + l_i - k_i), g(d + l_i) * g(d - k_i));
        }
    }
    sum / ((n - k) * (n - l)) as f64
}

#[test]
fn autocovariance_covariance_equals_brute_force_count_sum() {
    // N - l is kept large enough that the neglected clamp n(d) >= 0 (terms of order
    // c^(2(N-l))) stays below 1e-14.
    for (c, n) in [(0.93, 300), (0.5, 80), (-0.4, 60)] {
        let lags: Vec<usize> = (0..12).map(|i| 2 * i + 1).chain([0]).collect();
        let cov = autocovariance_covariance(1.0, c, &lags, n, 0.0);
        for (i, &k) in lags.iter().enumerate() {
            for (j, &l) in lags.iter().enumerate() {
                let want = brute_autocovariance_covariance(c, n, k, l);
                let got = cov[(i, j)];
                assert!(
                    (got - want).abs() <= 1e-12 * cov[(i, i)].abs(),
                    "c = {c}, N = {n}, lags {k}, {l}: {got} vs {want}"
                );
            }
        }
    }
}

/// The model expectation `A c^k - A v(c, N)` at lags `0..=max_lag`.
fn model_acov(amplitude: f64, c: f64, n_samples: usize, max_lag: usize) -> Vec<f64> {
    let v = mean_bias_ar1(c, n_samples);
    (0..=max_lag)
        .map(|k| amplitude * (c.powi(k as i32) - v))
        .collect()
}

#[track_caller]
fn check_exact_recovery(tau_over_dt: f64, n_samples: usize, options: &AcfFitOptions) {
    let sample_rate_hz = 20_000.0;
    let c = (-1.0 / tau_over_dt).exp();
    let amplitude = 4.2;
    let acov = model_acov(amplitude, c, n_samples, 400);
    let fit = fit_exponential(&acov, sample_rate_hz, n_samples, options);
    let Ok(fit) = fit else {
        panic!("fit failed: {fit:?}");
    };
    let tau_s = tau_over_dt / sample_rate_hz;
    assert!(
        (fit.relaxation_time_s / tau_s - 1.0).abs() < 1e-8,
        "tau {} vs {tau_s}",
        fit.relaxation_time_s
    );
    assert!(
        (fit.amplitude / amplitude - 1.0).abs() < 1e-8,
        "A {} vs {amplitude}",
        fit.amplitude
    );
    assert!(fit.chi_square < 1e-10, "chi square {}", fit.chi_square);
    assert_eq!(fit.degrees_of_freedom, fit.lags.len() - 2);
    assert!(fit.lags.len() <= options.max_lags_used);
}

#[test]
fn fit_recovers_parameters_from_the_exact_model_expectation() {
    // Noise-free input equal to the model (exact analytical result): the fit must return the
    // parameters it was built from with zero residual.
    let defaults = AcfFitOptions::default();
    check_exact_recovery(5.0, 65536, &defaults);
    check_exact_recovery(40.0, 65536, &defaults);
    check_exact_recovery(
        150.0,
        4096,
        &AcfFitOptions {
            last_lag: Some(400),
            ..defaults.clone()
        },
    );
    check_exact_recovery(0.7, 100_000, &defaults);
    // c close to 1: tau = 2000 samples, window capped by the 400 lags given.
    check_exact_recovery(2000.0, 1 << 22, &defaults);
    check_exact_recovery(
        20.0,
        65536,
        &AcfFitOptions {
            first_lag: 0,
            last_lag: Some(60),
            max_lags_used: 7,
            white_noise_variance: 0.0,
        },
    );
}

#[test]
fn tau_influence_matches_finite_difference_of_the_fit() {
    // At noise-free data the residuals vanish, so the derivative of tau_hat with respect to each
    // datum is exactly the tau row of (J^T W J)^-1 J^T W times dtau/dc (linearisation of the GLS
    // estimating equation; checked here against a central finite difference of the whole fit).
    let (sample_rate_hz, n_samples, c) = (10_000.0, 65536, (-1.0_f64 / 12.0).exp());
    let acov = model_acov(2.0, c, n_samples, 200);
    let options = AcfFitOptions::default();
    let Ok(fit) = fit_exponential(&acov, sample_rate_hz, n_samples, &options) else {
        panic!("fit failed");
    };
    let options = AcfFitOptions {
        last_lag: fit.lags.last().copied(),
        ..options
    };
    for &(lag, weight) in fit.tau_influence.iter().step_by(3) {
        let h = 1e-7;
        let tau_at = |delta: f64| {
            let mut perturbed = acov.clone();
            perturbed[lag] += delta;
            fit_exponential(&perturbed, sample_rate_hz, n_samples, &options)
                .map(|f| f.relaxation_time_s)
                .unwrap_or(f64::NAN)
        };
        let numeric = (tau_at(h) - tau_at(-h)) / (2.0 * h);
        assert!(
            (numeric - weight).abs()
                <= 1e-5
                    * fit
                        .tau_influence
                        .iter()
                        .map(|w| w.1.abs())
                        .fold(0.0, f64::max),
            "lag {lag}: influence {weight} vs finite difference {numeric}"
        );
    }
    // A datum changing by the model's own tau-derivative moves tau_hat by exactly that change
    // (the estimator reproduces the model: sum_i w_i dm_i/dtau = 1; exact algebraic identity).
    let dtau = 1e-3 / sample_rate_hz;
    let c2 = (-1.0 / (sample_rate_hz * (fit.relaxation_time_s + dtau))).exp();
    let shifted = model_acov(2.0, c2, n_samples, 200);
    let predicted: f64 = fit
        .tau_influence
        .iter()
        .map(|&(lag, w)| w * (shifted[lag] - acov[lag]))
        .sum();
    assert!(
        (predicted / dtau - 1.0).abs() < 1e-3,
        "predicted shift {predicted} vs {dtau}"
    );
}

/// Mean and sample standard deviation.
fn mean_and_sd(values: &[f64]) -> (f64, f64) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let var = values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / (n - 1.0);
    (mean, var.sqrt())
}

#[track_caller]
fn check_fit_is_unbiased_and_honest(tau_over_dt: f64) {
    // Exact AR(1) simulations with fixed seeds. Bias test: the mean over seeds lies within three
    // standard errors of the mean of the truth. Honesty test: the mean reported standard error is
    // within 25% of the empirical standard deviation (which itself scatters by about 10% with 50
    // seeds). Truth is the simulation input (exact analytical result).
    let (sample_rate_hz, n_samples, n_seeds, sigma) = (10_000.0, 1 << 16, 60, 1.7);
    let c = (-1.0 / tau_over_dt).exp();
    let tau_s = tau_over_dt / sample_rate_hz;
    let mut taus = Vec::new();
    let mut tau_ses = Vec::new();
    let mut amps = Vec::new();
    let mut amp_ses = Vec::new();
    let mut chi_per_dof = Vec::new();
    let mut lag0s = Vec::new();
    let mut predicted_covs = Vec::new();
    for seed in 0..n_seeds {
        let x = ar1(n_samples, c, sigma, 1000 + seed);
        let acov = autocovariance(&x, 400);
        let fit = fit_exponential(&acov, sample_rate_hz, n_samples, &AcfFitOptions::default());
        let Ok(fit) = fit else {
            panic!("seed {seed}: {fit:?}");
        };
        taus.push(fit.relaxation_time_s);
        tau_ses.push(fit.relaxation_time_se_s);
        amps.push(fit.amplitude);
        amp_ses.push(fit.amplitude_se);
        chi_per_dof.push(fit.chi_square / fit.degrees_of_freedom as f64);
        lag0s.push(acov[0]);
        predicted_covs.push(
            fit.tau_influence
                .iter()
                .map(|&(lag, w)| {
                    w * autocovariance_covariance_ar1(sigma * sigma, c, lag, 0, n_samples)
                })
                .sum::<f64>(),
        );
    }
    let (tau_mean, tau_sd) = mean_and_sd(&taus);
    let (tau_se_mean, _) = mean_and_sd(&tau_ses);
    let tau_sem = tau_sd / (n_seeds as f64).sqrt();
    assert!(
        (tau_mean - tau_s).abs() < 3.0 * tau_sem,
        "tau mean {tau_mean} vs {tau_s} (sem {tau_sem})"
    );
    assert!(
        (tau_se_mean / tau_sd - 1.0).abs() < 0.25,
        "tau se {tau_se_mean} vs sd {tau_sd}"
    );
    let (amp_mean, amp_sd) = mean_and_sd(&amps);
    let (amp_se_mean, _) = mean_and_sd(&amp_ses);
    let amp_sem = amp_sd / (n_seeds as f64).sqrt();
    let a_true = sigma * sigma;
    assert!(
        (amp_mean - a_true).abs() < 3.0 * amp_sem,
        "A mean {amp_mean} vs {a_true} (sem {amp_sem})"
    );
    assert!(
        (amp_se_mean / amp_sd - 1.0).abs() < 0.25,
        "A se {amp_se_mean} vs sd {amp_sd}"
    );
    // The generalised chi-square has mean K - 2 if the Bartlett weights are right; its average per
    // degree of freedom over 60 records scatters by well under 0.1 (chi-square distribution).
    let (chi_mean, _) = mean_and_sd(&chi_per_dof);
    // Cross-covariance of tau_hat with the variance acov[0], predicted from tau_influence and the
    // covariance of the sample autocovariances, against the empirical correlation over seeds.
    // Compared in Fisher's z = atanh(r), whose standard error is 1/sqrt(n - 3) (R. A. Fisher,
    // Metron 1, 3 (1921); reference from memory, unverified); 3.5 standard errors allowed.
    let (lag0_mean, lag0_sd) = mean_and_sd(&lag0s);
    let empirical_cov = taus
        .iter()
        .zip(&lag0s)
        .map(|(t, v)| (t - tau_mean) * (v - lag0_mean))
        .sum::<f64>()
        / (n_seeds as f64 - 1.0);
    let (predicted_cov, _) = mean_and_sd(&predicted_covs);
    let lag0_sd_predicted = autocovariance_covariance_ar1(sigma * sigma, c, 0, 0, n_samples).sqrt();
    let rho_predicted = predicted_cov / (tau_se_mean * lag0_sd_predicted);
    let rho_empirical = empirical_cov / (tau_sd * lag0_sd);
    let z_distance =
        (rho_empirical.atanh() - rho_predicted.atanh()) * (n_seeds as f64 - 3.0).sqrt();
    assert!(
        z_distance.abs() < 3.5,
        "correlation of tau and variance: predicted {rho_predicted}, seen {rho_empirical}"
    );
    assert!(
        (chi_mean - 1.0).abs() < 0.2,
        "chi square per dof {chi_mean}"
    );
}

#[test]
fn fit_is_unbiased_with_honest_errors_at_tau_five_samples() {
    check_fit_is_unbiased_and_honest(5.0);
}

#[test]
fn fit_is_unbiased_with_honest_errors_at_tau_forty_samples() {
    check_fit_is_unbiased_and_honest(40.0);
}

#[track_caller]
fn check_error(
    acov: &[f64],
    sample_rate_hz: f64,
    n_samples: usize,
    options: &AcfFitOptions,
    want: &str,
) {
    match fit_exponential(acov, sample_rate_hz, n_samples, options) {
        Ok(fit) => panic!("expected an error containing {want:?}, got {fit:?}"),
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
fn fit_rejects_unusable_input_with_errors_not_panics() {
    let defaults = AcfFitOptions::default();
    let n = 65536;
    // White noise: lag-1 correlation inside the white-noise band (or negative).
    let noise = white(n, 7);
    check_error(
        &autocovariance(&noise, 50),
        1e4,
        n,
        &defaults,
        "correlation",
    );
    // Constant data: zero variance.
    check_error(
        &autocovariance(&[2.0; 1000], 50),
        1e4,
        1000,
        &defaults,
        "constant",
    );
    // Alternating data: acov[1] < 0.
    let alternating: Vec<f64> = (0..1000)
        .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
        .collect();
    check_error(
        &autocovariance(&alternating, 50),
        1e4,
        1000,
        &defaults,
        "does not decay",
    );
    // Too short: four samples give lags 0..=2 at most, too few for a fit with a spare degree of
    // freedom.
    check_error(
        &autocovariance(&[1.0, 2.0, 3.0, 4.0], 2),
        1e4,
        4,
        &defaults,
        "too few lags",
    );
    check_error(&[], 1e4, 0, &defaults, "too few lags");
    // Lag window beyond the data, record too short for the lags, bad options.
    let acov = model_acov(1.0, 0.9, n, 30);
    check_error(
        &acov,
        1e4,
        n,
        &AcfFitOptions {
            last_lag: Some(31),
            ..defaults.clone()
        },
        "beyond",
    );
    check_error(&acov, 1e4, 30, &defaults, "too few for lags");
    check_error(
        &acov,
        1e4,
        n,
        &AcfFitOptions {
            max_lags_used: 2,
            ..defaults.clone()
        },
        "max_lags_used",
    );
    check_error(
        &acov,
        1e4,
        n,
        &AcfFitOptions {
            first_lag: 29,
            ..defaults.clone()
        },
        "too few lags",
    );
    check_error(&acov, 0.0, n, &defaults, "sample_rate_hz");
    check_error(&acov, f64::NAN, n, &defaults, "sample_rate_hz");
    let mut with_nan = acov.clone();
    with_nan[3] = f64::NAN;
    check_error(&with_nan, 1e4, n, &defaults, "lag 3");
}

#[test]
fn default_last_lag_is_twice_the_lag_one_relaxation_time() {
    // tau1/dt = -1/ln(r) with r = acov[1]/acov[0]; r = exp(-1/10) gives tau1/dt = 10, so lag 20.
    let acov: Vec<f64> = (0..100).map(|k| (-(k as f64) / 10.0).exp()).collect();
    assert_eq!(default_last_lag(&acov, 1e4), Some(20));
    // Clamped to at least first_lag + 2 = 3 and at most the last lag given.
    let fast: Vec<f64> = (0..100).map(|k| (-(k as f64) * 3.0).exp()).collect();
    assert_eq!(default_last_lag(&fast, 1e4), Some(3));
    assert_eq!(default_last_lag(&acov[..8], 1e4), Some(7));
    assert_eq!(default_last_lag(&acov[..3], 1e4), None);
    assert_eq!(default_last_lag(&[1.0, -0.1, 0.0, 0.0], 1e4), None);
    assert_eq!(default_last_lag(&acov, -1.0), None);
}

#[test]
fn fit_returns_finite_results_or_errors_on_arbitrary_input() {
    // Robustness: seeded arbitrary autocovariances (growing, oscillating, tiny, huge, with
    // non-finite values) and options must give an error or finite results, never a panic.
    use rand::RngExt;
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(99);
    let specials = [0.0, -0.0, 1e-300, 1e300, f64::NAN, f64::INFINITY, -1.0];
    let mut n_ok = 0;
    for case in 0..400 {
        let len = rng.random_range(0..40_usize);
        let decay: f64 = rng.random_range(-1.2..1.2);
        let mut acov: Vec<f64> = (0..len)
            .map(|k| 0.3f64.mul_add(rng.random_range(-1.0..1.0), decay.powi(k as i32)))
            .collect();
        if case % 5 == 0 && len > 0 {
            let at = rng.random_range(0..len);
            acov[at] = specials[case % specials.len()];
        }
        let options = AcfFitOptions {
            first_lag: rng.random_range(0..4),
            last_lag: if case % 3 == 0 {
                Some(rng.random_range(0..45))
            } else {
                None
            },
            max_lags_used: rng.random_range(0..10),
            white_noise_variance: 0.0,
        };
        let n_samples = rng.random_range(0..100_000);
        if let Ok(fit) = fit_exponential(&acov, 1e4, n_samples, &options) {
            n_ok += 1;
            assert!(fit.relaxation_time_s.is_finite() && fit.relaxation_time_s > 0.0);
            assert!(fit.relaxation_time_se_s.is_finite() && fit.amplitude.is_finite());
            assert!(fit.chi_square.is_finite(), "case {case}: {fit:?}");
            assert!(fit.tau_influence.iter().all(|w| w.1.is_finite()));
        }
    }
    // Some arbitrary inputs are usable, so the success branch above is exercised too.
    assert!(n_ok > 0);
}

#[test]
fn blocked_autocovariance_equals_the_direct_sum_on_long_records() {
    // Records longer than a block take the blocked path; compare it with the obviously correct
    // O(N L) double loop, including a record that is not a whole number of blocks.
    let mut state = 0x2545_f491_4f6c_dd1du64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    for n in [20_000usize, 16_384, 9_001] {
        let x: Vec<f64> = (0..n).map(|_| next() + 3.0).collect();
        let max_lag = 150;
        let fast = autocovariance(&x, max_lag);
        let mean = x.iter().sum::<f64>() / n as f64;
        for (k, value) in fast.iter().enumerate() {
            let direct: f64 = (0..n - k)
                .map(|j| (x[j] - mean) * (x[j + k] - mean))
                .sum::<f64>()
                / (n - k) as f64;
            assert!(
                (value - direct).abs() <= 1e-10 * fast[0],
                "n {n} lag {k}: {value} vs {direct}"
            );
        }
    }
}

#[test]
fn compensated_sum_recovers_what_cancellation_hides_from_a_plain_sum() {
    // Neumaier's example: 1 + 1e100 + 1 - 1e100 = 2 exactly, where a plain sum gives 0, in every
    // rotation of the order.
    let values = [1.0, 1e100, 1.0, -1e100];
    for shift in 0..values.len() {
        let rotated: Vec<f64> = (0..values.len())
            .map(|i| values[(i + shift) % values.len()])
            .collect();
        assert_eq!(compensated_sum(rotated.iter().copied()), 2.0, "{rotated:?}");
    }
    assert_eq!(compensated_sum(std::iter::empty()), 0.0);
    assert_eq!(compensated_sum([3.5]), 3.5);
}

#[test]
fn compensated_sum_of_a_long_record_equals_the_exact_sum_rounded_once() {
    // Oracle: exact integer arithmetic. Every value is an integer multiple of 2^-30 below 2^53
    // units, so the exact sum is an integer (in i128) times 2^-30; the compensated sum of 2^20
    // such values with a large common offset must equal that exact sum to within one unit in
    // the last place, where a plain running sum drifts by many.
    let unit = (-30f64).exp2();
    let n = 1usize << 20;
    let ticks = |i: usize| 1_000_000i64 * (1 << 30) + ((i * 7919) % 1000) as i64;
    let exact_ticks: i128 = (0..n).map(|i| i128::from(ticks(i))).sum();
    let exact = exact_ticks as f64 * unit;
    let sum = compensated_sum((0..n).map(|i| ticks(i) as f64 * unit));
    let ulp = exact.abs() * f64::EPSILON;
    assert!((sum - exact).abs() <= ulp, "{sum} vs exact {exact}");
    let plain: f64 = (0..n).map(|i| ticks(i) as f64 * unit).sum();
    assert!(
        (plain - exact).abs() > 4.0 * ulp,
        "the plain sum was expected to drift (it did not, so this test shows nothing): {plain}"
    );
}
