//! Tests of the general autocorrelation fit: agreement with `fit_exponential` on the plain
//! model, exact recovery from noise-free expectations, the influence weights, errors, and
//! ensembles of exact synthetic records (random-phase synthesis of published spectra) showing
//! that the fitted corner frequency is unbiased and its standard error honest for plain,
//! filtered, hydrodynamic and camera-blurred data, and that the old exponential fit is not.

use super::model::SeriesEvaluator;
use super::{
    AcfError, AcfFitOptions, ModelAcfFit, TimeDomainModel, autocovariance,
    fit_autocovariance_model, fit_exponential, mean_bias_ar1,
};
use crate::simulate::{gaussian_record, generator};
use crate::spectrum::{
    DetectorFilter, FilterSetting, HydroTerms, SpectrumModel, aliased_lorentzian_one_sided,
};
use statrs::distribution::{Binomial, ChiSquared, ContinuousCDF, DiscreteCDF, StudentsT};
use std::f64::consts::PI;

/// The expectation of the sample autocovariance under `model`, lags `0..=max_lag`:
/// `C_model(k) - Var(xbar)`.
fn expected_acov(
    model: &TimeDomainModel,
    fc: f64,
    d: f64,
    n_samples: usize,
    max_lag: usize,
) -> Vec<f64> {
    let mut evaluator = SeriesEvaluator::new(model, 2 * max_lag + 1, fc);
    let series = evaluator.series(fc, d);
    let mean_variance = series.mean_variance(n_samples);
    (0..=max_lag)
        .map(|lag| series.at(lag) - mean_variance)
        .collect()
}

/// Polystyrene bead in water at 25 C (drag module's f_nu and f_m with the water module's
/// IAPWS 2008 viscosity and Tanaka density).
fn bead_hydro(diameter_m: f64) -> HydroTerms {
    let viscosity = crate::water::water_viscosity_pa_s(25.0).unwrap_or(f64::NAN);
    let density = crate::water::water_density_kg_per_m3(25.0).unwrap_or(f64::NAN);
    let h = crate::drag::hydrodynamic_frequencies(
        viscosity,
        density,
        crate::drag::POLYSTYRENE_DENSITY_KG_PER_M3,
        diameter_m / 2.0,
    );
    HydroTerms {
        f_nu_hz: h.f_nu_hz,
        f_m_hz: h.f_m_hz,
    }
}

const FILTER: DetectorFilter = DetectorFilter {
    f3db_hz: 6000.0,
    alpha: 0.15,
};

#[track_caller]
fn check_recovery(model: &TimeDomainModel, fc: f64) {
    let d = 2.0 * PI * fc * 2.3;
    let n_samples = 1 << 16;
    let tau_lags = model.sample_rate_hz / (2.0 * PI * fc);
    let max_lag = ((8.0 * tau_lags).ceil() as usize).max(16);
    let acov = expected_acov(model, fc, d, n_samples, max_lag);
    let options = AcfFitOptions::default();
    let fit = fit_autocovariance_model(&acov, n_samples, model, &options, 1.2 * fc, 0.8 * d);
    let Ok(fit) = fit else {
        panic!("{model:?}: {fit:?}");
    };
    assert!(
        (fit.corner_frequency_hz / fc - 1.0).abs() < 1e-8,
        "{model:?}: fc {} vs {fc}",
        fit.corner_frequency_hz
    );
    assert!(
        (fit.diffusion / d - 1.0).abs() < 1e-8,
        "{model:?}: D {} vs {d}",
        fit.diffusion
    );
    assert!(
        fit.decay.chi_square < 1e-10,
        "chi square {}",
        fit.decay.chi_square
    );
    assert!(fit.corner_frequency_se_hz > 0.0 && fit.diffusion_se > 0.0);
}

#[test]
fn general_fit_recovers_the_parameters_of_every_model_from_its_expectation() {
    // Noise-free input equal to the model's expectation: the fit must return the parameters
    // it was made from (exact), from a start 20 % off in fc and D.
    let plain = TimeDomainModel::plain(100_000.0);
    let filtered = TimeDomainModel {
        filter: Some(FILTER),
        ..plain
    };
    let camera = TimeDomainModel {
        exposure_s: Some(1.0 / 4000.0),
        ..TimeDomainModel::plain(4000.0)
    };
    let hydro = TimeDomainModel {
        hydro: Some(bead_hydro(3e-6)),
        ..plain
    };
    check_recovery(&plain, 1000.0);
    check_recovery(&filtered, 1000.0);
    // The fit crosses and ends at fc = f3dB, where the filtered form is a divided difference.
    check_recovery(&filtered, 6000.0);
    check_recovery(&camera, 300.0);
    check_recovery(&hydro, 1000.0);
    check_recovery(
        &TimeDomainModel {
            filter: Some(FILTER),
            ..hydro
        },
        2000.0,
    );
    check_recovery(
        &TimeDomainModel {
            hydro: Some(bead_hydro(3e-6)),
            ..camera
        },
        300.0,
    );
}

#[test]
fn general_fit_of_ornstein_uhlenbeck_autocovariance_returns_its_relaxation_time_and_variance() {
    // Fact of the trade (check value): the stationary autocovariance of the Ornstein-Uhlenbeck
    // process is var exp(-|t|/tau) (e.g. shared/PHYSICS.md section 7). Input var exp(-k dt/tau)
    // lowered by the exact mean-removal bias var v(c, N) (`mean_bias_ar1`); the fit must give
    // tau and var back.
    let (fs, n_samples, tau, var) = (20_000.0_f64, 1 << 16, 7.5e-4_f64, 3.1e-3);
    let dt = 1.0 / fs;
    let c = (-dt / tau).exp();
    let v = mean_bias_ar1(c, n_samples);
    let acov: Vec<f64> = (0..200)
        .map(|k| var * ((-(k as f64) * dt / tau).exp() - v))
        .collect();
    let model = TimeDomainModel::plain(fs);
    let start_fc = 1.0 / (2.0 * PI * tau) * 0.7;
    let fit = fit_autocovariance_model(
        &acov,
        n_samples,
        &model,
        &AcfFitOptions::default(),
        start_fc,
        var * 2.0 * PI * start_fc,
    );
    let Ok(fit) = fit else {
        panic!("{fit:?}");
    };
    assert!((fit.decay.relaxation_time_s / tau - 1.0).abs() < 1e-8);
    assert!((fit.decay.amplitude / var - 1.0).abs() < 1e-8);
    assert!(
        (fit.diffusion / (var / tau) - 1.0).abs() < 1e-8,
        "D = var/tau"
    );
}

/// Exact AR(1) samples of Ornstein-Uhlenbeck motion (`simulate::ou_series`).
fn ou_record(fs: f64, fc: f64, variance: f64, n_samples: usize, seed: u64) -> Vec<f64> {
    let mut rng = generator(seed);
    crate::simulate::ou_series(fc, variance, fs, n_samples, &mut rng)
}

#[track_caller]
fn check_relative(name: &str, general: f64, exponential: f64, tolerance: f64) {
    assert!(
        (general / exponential - 1.0).abs() < tolerance,
        "{name}: general {general} vs exponential {exponential}"
    );
}

#[test]
fn general_fit_of_the_plain_model_agrees_with_fit_exponential() {
    // Same estimator (same lags, Bartlett weights and mean-removal bias), two codes and two
    // parameterisations: tau, its standard error, the amplitude and its error, chi-square and
    // the influence weights must agree to 1e-6 relative on exact AR(1) records.
    let (fs, n_samples) = (10_000.0, 1 << 16);
    for (tau_lags, seed) in [(5.0, 1u64), (5.0, 2), (40.0, 3), (40.0, 4), (150.0, 5)] {
        let fc = fs / (2.0 * PI * tau_lags);
        let x = ou_record(fs, fc, 2.7, n_samples, seed);
        let acov = autocovariance(&x, 600);
        let options = AcfFitOptions::default();
        let Ok(old) = fit_exponential(&acov, fs, n_samples, &options) else {
            panic!("exponential fit failed");
        };
        let model = TimeDomainModel::plain(fs);
        let fit = fit_autocovariance_model(&acov, n_samples, &model, &options, 1.3 * fc, 2.0);
        let Ok(new) = fit else {
            panic!("{fit:?}");
        };
        assert_eq!(new.decay.lags, old.lags);
        check_relative(
            "tau",
            new.decay.relaxation_time_s,
            old.relaxation_time_s,
            1e-6,
        );
        check_relative(
            "tau se",
            new.decay.relaxation_time_se_s,
            old.relaxation_time_se_s,
            1e-6,
        );
        check_relative("amplitude", new.decay.amplitude, old.amplitude, 1e-6);
        check_relative(
            "amplitude se",
            new.decay.amplitude_se,
            old.amplitude_se,
            1e-6,
        );
        check_relative("chi square", new.decay.chi_square, old.chi_square, 1e-6);
        let largest = old
            .tau_influence
            .iter()
            .map(|w| w.1.abs())
            .fold(0.0, f64::max);
        for (a, b) in new.decay.tau_influence.iter().zip(&old.tau_influence) {
            assert_eq!(a.0, b.0);
            assert!(
                (a.1 - b.1).abs() < 1e-6 * largest,
                "influence {a:?} vs {b:?}"
            );
        }
    }
}

#[test]
fn tau_influence_of_the_filtered_fit_matches_finite_differences() {
    // At noise-free data the derivative of tau_hat with respect to each datum is the tau row of
    // (J^T W J)^-1 J^T W (linearisation of the GLS estimating equation); checked against a
    // central difference of the whole fit.
    let model = TimeDomainModel {
        filter: Some(FILTER),
        ..TimeDomainModel::plain(100_000.0)
    };
    let (fc, n_samples) = (1500.0, 1 << 16);
    let d = 2.0 * PI * fc;
    let acov = expected_acov(&model, fc, d, n_samples, 120);
    let options = AcfFitOptions::default();
    let Ok(fit) = fit_autocovariance_model(&acov, n_samples, &model, &options, fc, d) else {
        panic!("fit failed");
    };
    let options = AcfFitOptions {
        last_lag: fit.decay.lags.last().copied(),
        ..options
    };
    let largest = fit
        .decay
        .tau_influence
        .iter()
        .map(|w| w.1.abs())
        .fold(0.0, f64::max);
    for &(lag, weight) in fit.decay.tau_influence.iter().step_by(3) {
        let h = 1e-6;
        let tau_at = |delta: f64| {
            let mut perturbed = acov.clone();
            perturbed[lag] += delta;
            fit_autocovariance_model(&perturbed, n_samples, &model, &options, fc, d)
                .map(|f| f.decay.relaxation_time_s)
                .unwrap_or(f64::NAN)
        };
        let numeric = (tau_at(h) - tau_at(-h)) / (2.0 * h);
        assert!(
            (numeric - weight).abs() <= 1e-4 * largest,
            "lag {lag}: influence {weight} vs finite difference {numeric}"
        );
    }
}

#[test]
fn general_fit_rejects_bad_models_and_starts() {
    let acov = expected_acov(&TimeDomainModel::plain(1e4), 100.0, 600.0, 1 << 14, 100);
    let options = AcfFitOptions::default();
    let bad_model = TimeDomainModel {
        exposure_s: Some(1.0),
        ..TimeDomainModel::plain(1e4)
    };
    let result = fit_autocovariance_model(&acov, 1 << 14, &bad_model, &options, 100.0, 600.0);
    assert!(matches!(
        result,
        Err(AcfError::InvalidModel {
            field: "exposure_s",
            ..
        })
    ));
    let plain = TimeDomainModel::plain(1e4);
    for (fc, d) in [(0.0, 600.0), (100.0, f64::NAN), (-1.0, 1.0)] {
        let result = fit_autocovariance_model(&acov, 1 << 14, &plain, &options, fc, d);
        let Err(error) = result else {
            panic!("start ({fc}, {d}) accepted");
        };
        assert!(matches!(error, AcfError::InvalidStart { .. }), "{error}");
        let message = error.to_string();
        assert!(message.starts_with("starting values") && !message.ends_with('.'));
    }
    // The lag-window checks are those of fit_exponential.
    let result = fit_autocovariance_model(&acov[..2], 1 << 14, &plain, &options, 100.0, 600.0);
    assert!(matches!(result, Err(AcfError::TooFewLags { .. })));
}

/// The one-sided spectrum `psd` tabulated at the synthesis frequencies k fs/M of
/// `gaussian_record` (M = (4 N).next_power_of_two()), so an ensemble evaluates it once.
fn spectrum_table(psd: impl Fn(f64) -> f64, fs: f64, n_samples: usize) -> Vec<f64> {
    let m = (4 * n_samples).next_power_of_two();
    (0..=m / 2).map(|k| psd(k as f64 * fs / m as f64)).collect()
}

/// One exact record of the tabulated spectrum.
fn record(table: &[f64], fs: f64, n_samples: usize, seed: u64) -> Vec<f64> {
    let m = (4 * n_samples).next_power_of_two() as f64;
    let mut rng = generator(seed);
    gaussian_record(
        |f| {
            let index = (f * m / fs).round() as usize;
            table.get(index).copied().unwrap_or(0.0)
        },
        fs,
        n_samples,
        &mut rng,
    )
}

/// Fitted corner frequencies and standard errors over `n_seeds` records, and the old
/// exponential fit's corner frequencies 1/(2 pi tau) on the same records.
struct Ensemble {
    fc: Vec<f64>,
    se: Vec<f64>,
    old_fc: Vec<f64>,
    chi_per_dof: Vec<f64>,
}

fn run_ensemble(
    model: &TimeDomainModel,
    table: &[f64],
    n_samples: usize,
    n_seeds: u64,
    fc: f64,
    d: f64,
) -> Ensemble {
    let fs = model.sample_rate_hz;
    let tau_lags = fs / (2.0 * PI * fc);
    let max_lag = ((8.0 * tau_lags).ceil() as usize).max(16);
    let options = AcfFitOptions::default();
    let mut ensemble = Ensemble {
        fc: Vec::new(),
        se: Vec::new(),
        old_fc: Vec::new(),
        chi_per_dof: Vec::new(),
    };
    for seed in 0..n_seeds {
        let x = record(table, fs, n_samples, 7000 + seed);
        let acov = autocovariance(&x, max_lag);
        let result = fit_autocovariance_model(&acov, n_samples, model, &options, 1.1 * fc, 0.9 * d);
        let fit: ModelAcfFit = match result {
            Ok(fit) => fit,
            Err(error) => panic!("seed {seed}: {error}"),
        };
        ensemble.fc.push(fit.corner_frequency_hz);
        ensemble.se.push(fit.corner_frequency_se_hz);
        ensemble
            .chi_per_dof
            .push(fit.decay.chi_square / fit.decay.degrees_of_freedom as f64);
        let old = fit_exponential(&acov, fs, n_samples, &options)
            .map_or(f64::NAN, |old| 1.0 / (2.0 * PI * old.relaxation_time_s));
        ensemble.old_fc.push(old);
    }
    ensemble
}

/// Mean and sample standard deviation.
fn mean_and_sd(values: &[f64]) -> (f64, f64) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let var = values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / (n - 1.0);
    (mean, var.sqrt())
}

/// Two-sided false-alarm probability of each of the three checks of [`check_honest`]; three
/// checks give at most 7.5e-4 per ensemble, below the 1e-3 the project asks for.
const FALSE_ALARM_PER_CHECK: f64 = 2.5e-4;

/// The three ensemble checks of an unbiased estimator with honest standard errors, for n
/// independent records (each bound from the exact sampling distribution for normal estimates
/// with the reported standard error as their true spread, at a two-sided false-alarm
/// probability of [`FALSE_ALARM_PER_CHECK`]):
/// - bias: (mean - truth)/(sd/sqrt n) follows Student's t with n - 1 degrees of freedom;
/// - spread: (n - 1) sd^2 / se_rms^2 follows chi-square with n - 1 degrees of freedom;
/// - coverage: the count of |estimate - truth| <= se is binomial(n, 0.6827).
///
/// Returns the numbers for the failure message.
#[track_caller]
fn check_honest(name: &str, truth: f64, estimates: &[f64], ses: &[f64]) -> String {
    let n = estimates.len();
    let nf = n as f64;
    let (mean, sd) = mean_and_sd(estimates);
    let se_rms = (ses.iter().map(|s| s * s).sum::<f64>() / nf).sqrt();
    let tail = FALSE_ALARM_PER_CHECK / 2.0;
    let student =
        StudentsT::new(0.0, 1.0, nf - 1.0).map_or(f64::NAN, |t| t.inverse_cdf(1.0 - tail));
    let t = (mean - truth) / (sd / nf.sqrt());
    let chi2 = ChiSquared::new(nf - 1.0).ok();
    let (chi_lo, chi_hi) = chi2.map_or((f64::NAN, f64::NAN), |c| {
        (c.inverse_cdf(tail), c.inverse_cdf(1.0 - tail))
    });
    let spread = (nf - 1.0) * sd * sd / (se_rms * se_rms);
    let covered = estimates
        .iter()
        .zip(ses)
        .filter(|(e, s)| (*e - truth).abs() <= **s)
        .count() as u64;
    let one_sigma = statrs::function::erf::erf(1.0 / 2.0f64.sqrt());
    let binomial = Binomial::new(one_sigma, n as u64).ok();
    let (cover_lo, cover_hi) = binomial.map_or((0, 0), |b| {
        let lo = (0..=n as u64).find(|&k| b.cdf(k) > tail).unwrap_or(0);
        let hi = (0..=n as u64)
            .find(|&k| b.cdf(k) >= 1.0 - tail)
            .unwrap_or(n as u64);
        (lo, hi)
    });
    let summary = format!(
        "{name}: n {n}, truth {truth}, mean {mean:.6} (bias {:+.3} %, t {t:.2}, bound {student:.2}), \
         sd {sd:.4} vs rms se {se_rms:.4} (ratio {:.3}, chi2 {spread:.1} in [{chi_lo:.1}, {chi_hi:.1}]), \
         coverage {covered} in [{cover_lo}, {cover_hi}]",
        100.0 * (mean / truth - 1.0),
        sd / se_rms
    );
    assert!(t.abs() < student, "bias: {summary}");
    assert!(spread > chi_lo && spread < chi_hi, "spread: {summary}");
    assert!(
        covered >= cover_lo && covered <= cover_hi,
        "coverage: {summary}"
    );
    summary
}

/// The generalised chi-square has mean equal to its degrees of freedom when the Bartlett
/// weights are the inverse covariance of the data. With about 30 degrees of freedom (the
/// default window at tau = 16 samples) chi-square per degree of freedom has a standard
/// deviation near sqrt(2/30) = 0.26, so the mean of 100 scatters by 0.026: 0.2 is over seven
/// of those.
#[track_caller]
fn check_chi_square(ensemble: &Ensemble, summary: &str) {
    let (chi, _) = mean_and_sd(&ensemble.chi_per_dof);
    assert!(
        (chi - 1.0).abs() < 0.2,
        "chi square per dof {chi}; {summary}"
    );
}

#[test]
fn plain_ornstein_uhlenbeck_fit_is_unbiased_with_honest_errors() {
    // (a) Plain Ornstein-Uhlenbeck motion, synthesised from its exact aliased Lorentzian
    // (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004), one-sided):
    // fc = 1 kHz, fs = 100 kHz, 2^16 samples, 100 fixed seeds; bounds at `check_honest`.
    let (fs, fc, n_samples) = (100_000.0, 1000.0, 1 << 16);
    let d = 2.0 * PI * fc;
    let table = spectrum_table(
        |f| aliased_lorentzian_one_sided(f, fc, d, fs),
        fs,
        n_samples,
    );
    let model = TimeDomainModel::plain(fs);
    let ensemble = run_ensemble(&model, &table, n_samples, 100, fc, d);
    let summary = check_honest("plain", fc, &ensemble.fc, &ensemble.se);
    check_chi_square(&ensemble, &summary);
}

#[test]
fn filtered_fit_is_unbiased_with_honest_errors_and_the_exponential_fit_is_not() {
    // (b) A photodiode with the parasitic filter g(f) = alpha^2 + (1 - alpha^2)/(1 + (f/f3)^2)
    // (Berg-Sorensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003), citation
    // recalled from memory, unverified), f3 = 6 kHz, alpha = 0.15, fc = 1 kHz, fs = 100 kHz:
    // records synthesised from the aliased filtered spectrum sum_n g S (f + n fs) of
    // `SpectrumModel::one_sided_psd`; 2^16 samples, 100 fixed seeds; bounds at `check_honest`.
    let (fs, fc, n_samples) = (100_000.0, 1000.0, 1 << 16);
    let d = 2.0 * PI * fc;
    let spectrum = SpectrumModel {
        sample_rate_hz: fs,
        aliasing: true,
        filter: FilterSetting::Fixed(FILTER),
        hydro: None,
        exposure_s: None,
        noise_floor: false,
    };
    let theta = [fc.ln(), d.ln()];
    let table = spectrum_table(|f| spectrum.one_sided_psd(f, &theta), fs, n_samples);
    let model = TimeDomainModel {
        filter: Some(FILTER),
        ..TimeDomainModel::plain(fs)
    };
    let ensemble = run_ensemble(&model, &table, n_samples, 100, fc, d);
    let summary = check_honest("filtered", fc, &ensemble.fc, &ensemble.se);
    check_chi_square(&ensemble, &summary);
    // Why this exists: the plain exponential fit on the same records puts fc (so kappa) far
    // too low (about 52 % here). Its mean must be more than 20 % low; the spread of the old
    // estimates is about 1.2 % of fc, so an unbiased old fit could not be 20 % low by chance.
    let (old_mean, _) = mean_and_sd(&ensemble.old_fc);
    assert!(
        old_mean < 0.8 * fc,
        "exponential fit mean fc {old_mean} is not biased low; {summary}"
    );
}

#[test]
fn exponential_fit_of_the_filtered_expectation_is_biased_by_tens_of_per_cent() {
    // The deterministic version of the previous test's last check: the plain exponential fit
    // applied to the exact expectation of the filtered autocovariance (f3 = 6 kHz,
    // alpha = 0.15, fc = 1 kHz, fs = 100 kHz) returns a corner frequency tens of per cent low,
    // (47 % for the default lag window) while the general fit with the filter returns it
    // exactly.
    let (fs, fc, n_samples) = (100_000.0, 1000.0, 1 << 16);
    let d = 2.0 * PI * fc;
    let model = TimeDomainModel {
        filter: Some(FILTER),
        ..TimeDomainModel::plain(fs)
    };
    let acov = expected_acov(&model, fc, d, n_samples, 200);
    let options = AcfFitOptions::default();
    let Ok(old) = fit_exponential(&acov, fs, n_samples, &options) else {
        panic!("exponential fit failed");
    };
    let old_fc = 1.0 / (2.0 * PI * old.relaxation_time_s);
    let bias = old_fc / fc - 1.0;
    assert!(bias < -0.2 && bias > -0.6, "exponential fit bias {bias}");
    let Ok(new) = fit_autocovariance_model(&acov, n_samples, &model, &options, fc, d) else {
        panic!("general fit failed");
    };
    assert!((new.corner_frequency_hz / fc - 1.0).abs() < 1e-8);
}

#[test]
fn hydrodynamic_fit_is_unbiased_with_honest_errors() {
    // (c) Frequency-dependent drag on a 3 um polystyrene bead in water at 25 C (Stokes 1851 in
    // the form of Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004); f_nu and f_m
    // from `drag::hydrodynamic_frequencies`), fc = 1 kHz, fs = 100 kHz: records synthesised from
    // the numerically aliased hydrodynamic spectrum of `SpectrumModel::one_sided_psd`; 2^16
    // samples, 100 fixed seeds; bounds at `check_honest`.
    let (fs, fc, n_samples) = (100_000.0, 1000.0, 1 << 16);
    let d = 2.0 * PI * fc;
    let hydro = bead_hydro(3e-6);
    let spectrum = SpectrumModel {
        sample_rate_hz: fs,
        aliasing: true,
        filter: FilterSetting::None,
        hydro: Some(hydro),
        exposure_s: None,
        noise_floor: false,
    };
    let theta = [fc.ln(), d.ln()];
    let table = spectrum_table(|f| spectrum.one_sided_psd(f, &theta), fs, n_samples);
    let model = TimeDomainModel {
        hydro: Some(hydro),
        ..TimeDomainModel::plain(fs)
    };
    let ensemble = run_ensemble(&model, &table, n_samples, 100, fc, d);
    let summary = check_honest("hydrodynamic", fc, &ensemble.fc, &ensemble.se);
    check_chi_square(&ensemble, &summary);
    // The plain exponential fit on the same records is biased low too (by about 22 % here,
    // against a spread of about 2 %): the t^(-3/2) tail and the changed short-time decay are not
    // exponential. Its mean must be more than 10 % low.
    let (old_mean, _) = mean_and_sd(&ensemble.old_fc);
    assert!(
        old_mean < 0.9 * fc,
        "exponential fit mean fc {old_mean} is not biased low; {summary}"
    );
}

/// One-sided spectrum of box-car averages of width W of Ornstein-Uhlenbeck motion sampled
/// every dt, aliasing included: twice the two-sided form
/// sigma^2 dt {S(a) + 4 (tau/W)^2 (cosh(W/tau) - 1) (c cos th - c^2)/(1 + c^2 - 2 c cos th)},
/// a = W/tau, th = 2 pi f dt (Wong & Halvorsen, Opt. Express 14, 12517 (2006), for S; the
/// whole form as written in shared/PHYSICS.md section 2, checked against the alias sum of
/// S(f) sinc^2(pi f W) in `blurred_aliased_spectrum_equals_the_alias_sum`).
fn blurred_aliased_spectrum(f: f64, fc: f64, d: f64, fs: f64, w: f64) -> f64 {
    let dt = 1.0 / fs;
    let tau = 1.0 / (2.0 * PI * fc);
    let variance = d * tau;
    let c = (-dt / tau).exp();
    let a = w / tau;
    let s = 2.0 / a - 2.0 * (1.0 - (-a).exp()) / (a * a);
    let cos_th = (2.0 * PI * f * dt).cos();
    let coupling = 4.0 * (tau / w).powi(2) * (a.cosh() - 1.0);
    let denominator = (2.0 * c).mul_add(-cos_th, c.mul_add(c, 1.0));
    let correlated = c * c.mul_add(-1.0, cos_th);
    2.0 * variance * dt * (coupling * correlated / denominator + s)
}

#[test]
fn blurred_aliased_spectrum_equals_the_alias_sum() {
    // sum_n S(|f + n fs|) sinc^2(pi (f + n fs) W) with S the one-sided Lorentzian
    // D/(pi^2 (fc^2 + f^2)): blur and aliasing act in this order on the continuous spectrum
    // (definition). 4001 images; the rest is below 1e-12 relative (terms fall as n^-4).
    let (fs, fc, d) = (4000.0, 300.0_f64, 2.0 * PI * 300.0);
    for w in [1.0 / fs, 0.5 / fs] {
        for f in [0.0, 17.0, 300.0, 1234.5, 2000.0] {
            let mut sum = 0.0;
            for n in -2000..=2000 {
                let g = f64::from(n).mul_add(fs, f);
                let x = PI * g * w;
                let sinc2 = if x == 0.0 { 1.0 } else { (x.sin() / x).powi(2) };
                sum += d / (PI * PI * fc.mul_add(fc, g * g)) * sinc2;
            }
            let closed = blurred_aliased_spectrum(f, fc, d, fs, w);
            assert!(
                (closed / sum - 1.0).abs() < 1e-10,
                "W {w}, f {f}: {closed} vs {sum}"
            );
        }
    }
}

#[test]
fn camera_blurred_fit_is_unbiased_with_honest_errors() {
    // (d) A camera with exposure W = dt at fs = 4 kHz watching a bead with fc = 300 Hz: records
    // synthesised from the aliased blurred spectrum of Wong & Halvorsen 2006
    // (`blurred_aliased_spectrum`); 2^15 samples (8 s), 100 fixed seeds; bounds at
    // `check_honest`.
    let (fs, fc, n_samples) = (4000.0, 300.0, 1 << 15);
    let d = 2.0 * PI * fc;
    let w = 1.0 / fs;
    let table = spectrum_table(|f| blurred_aliased_spectrum(f, fc, d, fs, w), fs, n_samples);
    let model = TimeDomainModel {
        exposure_s: Some(w),
        ..TimeDomainModel::plain(fs)
    };
    let ensemble = run_ensemble(&model, &table, n_samples, 100, fc, d);
    check_honest("camera", fc, &ensemble.fc, &ensemble.se);
}
