//! Unit tests of the simulators: the Ornstein-Uhlenbeck relaxation facts on the exact AR(1)
//! path, the closed-form spectra against the numerical image sums and against Parseval, the
//! frequency-dependent drag against the spectrum module's model and equipartition, camera blur
//! by spectrum against blur in the time domain, and synthetic records against their spectra.

// Test code states tolerances as written (a * se + b), not as fused multiply-adds.
#![allow(clippy::suboptimal_flops)]

use super::spectra::{gauss_legendre_24, image_sum};
use super::*;
use crate::spectrum::{
    DetectorFilter, FilterSetting, HydroTerms, SpectrumModel, aliased_lorentzian_one_sided,
};
use std::f64::consts::{LN_2, PI};

/// Relative difference |a / b - 1|.
fn rel(a: f64, b: f64) -> f64 {
    (a / b - 1.0).abs()
}

/// Exact variance of the sample autocovariance (1 / L) sum_{i<L} x_i x_{i+k}, L = n - k, of a
/// zero-mean stationary Gaussian record of n samples with autocovariance `cov` (Isserlis'
/// theorem: Cov(x_i x_{i+k}, x_j x_{j+k}) = C(i-j)^2 + C(i-j+k) C(i-j-k); exact, not an
/// approximation).
fn autocovariance_estimate_variance(cov: &impl Fn(i64) -> f64, n: usize, lag: usize) -> f64 {
    let l = (n - lag) as i64;
    let k = lag as i64;
    let mut sum = 0.0;
    for m in -(l - 1)..l {
        let count = (l - m.abs()) as f64;
        sum += count * (cov(m) * cov(m) + cov(m + k) * cov(m - k));
    }
    sum / (l as f64 * l as f64)
}

/// Mean over records of the sample autocovariance at `lag` with the known zero mean.
fn mean_autocovariance(records: &[Vec<f64>], lag: usize) -> f64 {
    let per_record: f64 = records
        .iter()
        .map(|x| {
            let l = x.len() - lag;
            x.iter().zip(&x[lag..]).map(|(a, b)| a * b).sum::<f64>() / l as f64
        })
        .sum();
    per_record / records.len() as f64
}

// ---------------------------------------------------------------------------------------------
// Relaxation of the Ornstein-Uhlenbeck process (facts of the trade: the Langevin equation of an
// overdamped bead in a harmonic trap is the Ornstein-Uhlenbeck process, Uhlenbeck & Ornstein,
// Phys. Rev. 36, 823 (1930), whose transition density from x0 is Gaussian with mean
// x0 exp(-t/tau) and variance sigma^2 (1 - exp(-2t/tau)); the stationary autocovariance is
// sigma^2 exp(-|t|/tau)).
//
// Each check is a z-test with z = 4.5 against an exact standard error (the ensemble mean of
// independent Gaussian beads is exactly Gaussian; a variance about the known mean is exactly
// chi-square, near Gaussian at 40,000 degrees of freedom, skewness 0.014). A two-sided 4.5-sigma
// excursion has probability 6.8e-6; the relaxation tests make 13 such checks on one seed each
// (8 means, the crossing, 3 variances and the half-sd point: 13 x 6.8e-6 = 9e-5 by Bonferroni,
// whatever their dependence) and the autocovariance test 6, so a correct simulator fails these
// tests in fewer than 1 in 5,000 seeds, well under the 1 in 1,000 asked.
// ---------------------------------------------------------------------------------------------

/// Beads released from one point: `beads` AR(1) records from `Start::Fixed(x0)`.
fn released_ensemble(
    x0: f64,
    corner_frequency_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    n_samples: usize,
    beads: usize,
    seed: u64,
) -> Vec<Vec<f64>> {
    let mut rng = generator(seed);
    (0..beads)
        .map(|_| {
            ou_series_from(
                Start::Fixed(x0),
                corner_frequency_hz,
                variance,
                sample_rate_hz,
                n_samples,
                &mut rng,
            )
        })
        .collect()
}

const Z: f64 = 4.5;

#[test]
fn released_beads_relax_their_mean_as_exp_minus_t_over_tau_halving_at_ln2_tau() {
    // tau is chosen so that ln 2 tau is exactly 10 samples: tau = 10 dt / ln 2.
    let fs = 1000.0;
    let dt = 1.0 / fs;
    let tau = 10.0 * dt / LN_2;
    let fc = 1.0 / (2.0 * PI * tau);
    let (x0, variance, beads) = (100.0, 16.0, 40_000);
    let ensemble = released_ensemble(x0, fc, variance, fs, 60, beads, 2024);
    let mean_at = |j: usize| ensemble.iter().map(|x| x[j]).sum::<f64>() / beads as f64;
    // The first sample is the start itself.
    assert!(ensemble.iter().all(|x| x[0] == x0));
    for j in [1usize, 3, 5, 10, 15, 20, 30, 50] {
        let t = j as f64 * dt;
        let exact = x0 * (-t / tau).exp();
        let se = (variance * -(-2.0 * t / tau).exp_m1() / beads as f64).sqrt();
        let m = mean_at(j);
        assert!(
            (m - exact).abs() < Z * se,
            "sample {j}: mean {m} against {exact} (se {se})"
        );
    }
    // Sample 10 is t = ln 2 tau, where the exact mean is x0 / 2: the ensemble's half-time, by
    // linear interpolation of the mean between the samples around x0 / 2, is ln 2 tau within
    // Z se(mean) / |slope| (the interpolation error, tau^-2 x0 dt^2 / 8 / slope = 0.4 % of dt,
    // is added to the tolerance).
    let j = (1..60)
        .find(|&j| mean_at(j) <= x0 / 2.0)
        .expect("the mean halves");
    let (m_before, m_after) = (mean_at(j - 1), mean_at(j));
    let t_half = ((j - 1) as f64 + (m_before - x0 / 2.0) / (m_before - m_after)) * dt;
    let slope = x0 / 2.0 / tau;
    let se_mean = (variance * 0.75 / beads as f64).sqrt();
    let tolerance = Z * se_mean / slope + 0.004 * dt;
    assert!(
        (t_half - LN_2 * tau).abs() < tolerance,
        "half-time {t_half} s against ln 2 tau = {} s (tolerance {tolerance})",
        LN_2 * tau
    );
}

#[test]
fn released_beads_spread_as_var_1_minus_exp_minus_2t_over_tau_reaching_half_sd_at_tau_ln_4_3_over_2()
 {
    // tau is chosen so that tau ln(4/3) / 2 (about tau / 7) is exactly 5 samples.
    let fs = 1000.0;
    let dt = 1.0 / fs;
    let tau = 10.0 * dt / (4.0f64 / 3.0).ln();
    let fc = 1.0 / (2.0 * PI * tau);
    let (x0, variance, beads) = (-50.0, 9.0, 40_000);
    let ensemble = released_ensemble(x0, fc, variance, fs, 120, beads, 77);
    // Variance about the exact mean x0 exp(-t/tau): beads * v_hat / v is chi-square with
    // `beads` degrees of freedom, relative se sqrt(2 / beads) = 0.71 %.
    let variance_at = |j: usize| {
        let mean = x0 * (-(j as f64) * dt / tau).exp();
        ensemble.iter().map(|x| (x[j] - mean).powi(2)).sum::<f64>() / beads as f64
    };
    let rel_se = (2.0 / beads as f64).sqrt();
    for j in [2usize, 20, 100] {
        let exact = variance * -(-2.0 * j as f64 * dt / tau).exp_m1();
        let v = variance_at(j);
        assert!(
            rel(v, exact) < Z * rel_se,
            "sample {j}: variance {v} against {exact}"
        );
    }
    // At t = tau ln(4/3) / 2 the variance is sigma^2 / 4, so the sd is half its long-time value
    // sigma; the relative se of a sample sd is half that of the variance.
    let sd = variance_at(5).sqrt();
    assert!(
        rel(sd, variance.sqrt() / 2.0) < Z * rel_se / 2.0,
        "sd at tau ln(4/3)/2: {sd} against {}",
        variance.sqrt() / 2.0
    );
}

#[test]
fn stationary_records_have_the_autocovariance_var_exp_minus_lag_over_tau() {
    let fs = 1000.0;
    let dt = 1.0 / fs;
    let tau = 10.0 * dt;
    let fc = 1.0 / (2.0 * PI * tau);
    let variance = 4.0;
    let (n, records) = (4096usize, 64usize);
    let mut rng = generator(5150);
    let ensemble: Vec<Vec<f64>> = (0..records)
        .map(|_| ou_series(fc, variance, fs, n, &mut rng))
        .collect();
    let c = (-dt / tau).exp();
    let cov = |m: i64| variance * c.powi(m.unsigned_abs() as i32);
    for lag in [0usize, 1, 5, 10, 20, 30] {
        let exact = cov(lag as i64);
        let se = (autocovariance_estimate_variance(&cov, n, lag) / records as f64).sqrt();
        let measured = mean_autocovariance(&ensemble, lag);
        assert!(
            (measured - exact).abs() < Z * se,
            "lag {lag}: {measured} against {exact} (se {se})"
        );
    }
}

#[test]
fn stationary_start_is_the_old_recursion_draw_for_draw() {
    // The demo data's bytes depend on the AR(1) stream: the stationary path must draw z0 first
    // and then one normal per step, exactly as before the fixed start was added.
    let (fc, variance, fs, n) = (300.0, 2.5, 20_000.0, 1000);
    let new = ou_series(fc, variance, fs, n, &mut generator(9));
    let mut rng = generator(9);
    let c = (-2.0 * PI * fc / fs).exp();
    let sigma = f64::sqrt(variance);
    let kick = sigma * c.mul_add(-c, 1.0).sqrt();
    let z0: f64 = rand_distr::Distribution::sample(&rand_distr::StandardNormal, &mut rng);
    let mut x = sigma * z0;
    for (j, &v) in new.iter().enumerate() {
        assert_eq!(v.to_bits(), x.to_bits(), "sample {j}");
        let xi: f64 = rand_distr::Distribution::sample(&rand_distr::StandardNormal, &mut rng);
        x = c.mul_add(x, kick * xi);
    }
}

// ---------------------------------------------------------------------------------------------
// Spectra: closed forms against numerical image sums and Parseval.
// ---------------------------------------------------------------------------------------------

#[test]
fn gauss_legendre_rule_integrates_polynomials_to_degree_47_and_smooth_functions() {
    let (nodes, weights) = gauss_legendre_24();
    // int_{-1}^{1} x^k dx = 2 / (k + 1) for even k, 0 for odd k (exact).
    for k in 0..48 {
        let q: f64 = nodes.iter().zip(weights).map(|(x, w)| w * x.powi(k)).sum();
        let exact = if k % 2 == 0 {
            2.0 / f64::from(k + 1)
        } else {
            0.0
        };
        assert!((q - exact).abs() < 1e-14, "x^{k}: {q} against {exact}");
    }
    // int_{-1}^{1} e^x dx = e - 1/e.
    let q: f64 = nodes.iter().zip(weights).map(|(x, w)| w * x.exp()).sum();
    assert!((q - (1f64.exp() - (-1f64).exp())).abs() < 1e-14);
}

#[test]
fn image_sum_of_the_lorentzian_equals_the_closed_form_aliased_lorentzian() {
    // Berg-Sorensen & Flyvbjerg 2004: sum_n L(f + n fs) has the closed form of
    // `aliased_lorentzian_one_sided`. The numerical sum (64 images and the Euler-Maclaurin
    // tail) must reproduce it to 1e-10 relative over [0, fs/2] (measured 8e-12), for corners
    // from 0.2 % to 40 % of fs.
    let fs = 50_000.0;
    for fc in [100.0, 1_000.0, 20_000.0] {
        let d = 3.0;
        let l = |f: f64| d / (PI * PI * (fc * fc + f * f));
        for i in 0..=50 {
            let f = fs / 2.0 * f64::from(i) / 50.0;
            let sum = image_sum(l, l, f, fs, 64);
            let closed = aliased_lorentzian_one_sided(f, fc, d, fs);
            assert!(
                rel(sum, closed) < 1e-10,
                "fc {fc}, f {f}: {sum} vs {closed}"
            );
        }
    }
}

/// An axis with the given filter and exposure.
fn axis_with(
    fc: f64,
    variance: f64,
    filter: Option<DetectorFilter>,
    exposure_time_s: Option<f64>,
) -> InstrumentAxis {
    let mut axis = InstrumentAxis::new(fc, variance);
    axis.detector_filter = filter;
    axis.exposure_time_s = exposure_time_s;
    axis
}

#[test]
fn closed_forms_of_blurred_and_filtered_spectra_equal_their_sinc2_and_gain_weighted_image_sums() {
    // The blurred aliased Lorentzian (Wong & Halvorsen 2006) equals
    // sum_n L(f + n fs) sinc^2(pi (f + n fs) W) (shared/PHYSICS.md section 2 found 1e-15 with
    // direct sums); the filtered one by partial fractions equals sum_n g L (f + n fs). The
    // numerical sums (images plus tail) must agree with them to 1e-7 relative (measured 4e-8
    // with W = dt, where the tail's mean sinc^2 is the largest error, and 5e-12 without blur).
    let fs = 20_000.0;
    let dt = 1.0 / fs;
    let filter = DetectorFilter {
        f3db_hz: 3_000.0,
        alpha: 0.3,
    };
    for (fc, filter, exposure) in [
        (400.0, None, Some(dt)),
        (400.0, None, Some(0.3 * dt)),
        (2_500.0, None, Some(0.05 * dt)),
        (400.0, Some(filter), None),
        (6_000.0, Some(filter), None),
        (400.0, Some(filter), Some(0.5 * dt)),
    ] {
        let axis = axis_with(fc, 7.0, filter, exposure);
        for i in 0..=40 {
            let f = fs / 2.0 * f64::from(i) / 40.0;
            let closed = axis.thermal_one_sided_psd(f, fs);
            let summed = axis.thermal_by_image_sum(f, fs);
            assert!(
                rel(summed, closed) < 1e-7,
                "fc {fc} filter {filter:?} W {exposure:?} f {f}: {summed} vs {closed}"
            );
        }
    }
}

#[test]
fn blurred_spectrum_tends_to_the_aliased_lorentzian_as_the_exposure_vanishes() {
    // W -> 0: S(a) -> 1 and the lag weight -> 1, leaving the aliased Lorentzian (exact limit);
    // at W = 1e-9 dt the blur changes the spectrum by O((W / tau)) ~ 1e-9.
    let (fs, fc, variance) = (10_000.0, 700.0, 2.0);
    let d = 2.0 * PI * fc * variance;
    for i in 0..=10 {
        let f = fs / 2.0 * f64::from(i) / 10.0;
        let blurred = blurred_aliased_lorentzian_one_sided(f, fc, variance, fs, 1e-13);
        assert!(rel(blurred, aliased_lorentzian_one_sided(f, fc, d, fs)) < 1e-8);
    }
}

/// int_0^{fs/2} S(f) df by 24-point Gauss-Legendre on `panels` equal panels.
fn integrate_to_nyquist(s: impl Fn(f64) -> f64, fs: f64, panels: usize) -> f64 {
    let (nodes, weights) = gauss_legendre_24();
    let width = fs / 2.0 / panels as f64;
    (0..panels)
        .map(|p| {
            let mid = (p as f64 + 0.5) * width;
            nodes
                .iter()
                .zip(weights)
                .map(|(x, w)| 0.5 * width * w * s(mid + 0.5 * width * x))
                .sum::<f64>()
        })
        .sum()
}

#[test]
fn recorded_variances_are_the_integrals_of_the_spectra() {
    // Parseval: the integral of a one-sided spectrum over [0, fs/2] is the variance of the
    // samples. Outside truths: the blurred variance sigma^2 S(W/tau) (Wong & Halvorsen 2006),
    // the filtered variance C(0) = alpha^2 sigma^2 + (1 - alpha^2) f3^2 / (f3^2 - fc^2)
    // (sigma^2 - D / (2 pi f3)) (shared/PHYSICS.md section 12, checked there by a numerical
    // cosine transform), and a white floor of rms r adds r^2. Quadrature to 1e-9.
    let fs = 20_000.0;
    let dt = 1.0 / fs;
    let (fc, variance) = (900.0, 5.0);
    let d = 2.0 * PI * fc * variance;
    let tau = 1.0 / (2.0 * PI * fc);
    let blurred = axis_with(fc, variance, None, Some(0.8 * dt));
    let integral = integrate_to_nyquist(|f| blurred.one_sided_psd(f, fs), fs, 200);
    let expected = variance * exposure_variance_factor(0.8 * dt / tau);
    assert!(rel(integral, expected) < 1e-9, "{integral} vs {expected}");

    let (f3, alpha) = (4_000.0, 0.4);
    let mut filtered = axis_with(
        fc,
        variance,
        Some(DetectorFilter { f3db_hz: f3, alpha }),
        None,
    );
    filtered.noise_floor_rms = 0.3;
    let integral = integrate_to_nyquist(|f| filtered.one_sided_psd(f, fs), fs, 200);
    let a2 = alpha * alpha;
    let c0 = a2 * variance
        + (1.0 - a2) * f3 * f3 / (f3 * f3 - fc * fc) * (variance - d / (2.0 * PI * f3));
    assert!(
        rel(integral, c0 + 0.09) < 1e-9,
        "{integral} vs {}",
        c0 + 0.09
    );
    let lag0 = thermal_autocovariance(&filtered, 0.0).expect("closed form");
    assert!(rel(lag0, c0) < 1e-12, "{lag0} vs {c0}");
}

/// Frequency scales of a polystyrene bead (1050 kg/m^3) of diameter `diameter_m` in water at
/// 25 C, from the drag module.
fn hydro_terms(diameter_m: f64) -> HydroTerms {
    let eta = crate::water::water_viscosity_pa_s(25.0).expect("viscosity");
    let rho = crate::water::water_density_kg_per_m3(25.0).expect("density");
    let h = crate::drag::hydrodynamic_frequencies(eta, rho, 1050.0, diameter_m / 2.0);
    HydroTerms {
        f_nu_hz: h.f_nu_hz,
        f_m_hz: h.f_m_hz,
    }
}

#[test]
fn hydrodynamic_spectrum_folds_to_the_equipartition_variance() {
    // Whatever the drag's memory, the position variance is kB T / kappa (equipartition; by the
    // fluctuation-dissipation theorem the integral of the spectrum is kB T times the static
    // response 1 / kappa), and aliasing folds the spectrum without changing its integral. So
    // the aliased hydrodynamic spectrum integrates over [0, fs/2] to sigma^2. Beads of 1 and
    // 3 um, fc 300 Hz and 3 kHz; measured within 5e-9, checked to 1e-7.
    let fs = 100_000.0;
    for (diameter_m, fc) in [(1e-6, 300.0), (3e-6, 3_000.0), (3e-6, 300.0)] {
        let mut axis = InstrumentAxis::new(fc, 11.0);
        axis.hydrodynamics = Some(hydro_terms(diameter_m));
        // The spectrum is sharp near 0 for small fc: 2,000 panels of 25 Hz.
        let integral = integrate_to_nyquist(|f| axis.thermal_one_sided_psd(f, fs), fs, 2000);
        assert!(
            rel(integral, 11.0) < 1e-7,
            "{diameter_m} m, fc {fc}: {integral}"
        );
    }
}

#[test]
fn hydrodynamic_spectrum_equals_a_brute_force_image_sum_and_agrees_with_the_fitting_model() {
    // Reference: the images of the Berg-Sorensen & Flyvbjerg (2004) hydrodynamic spectrum (times
    // the filter's gain) summed term by term, 20,000 a side (the terms fall as f^-3.5 beyond
    // f_m, so the rest is below 1e-11). The simulator's 64 images and integral tail must match
    // it to 1e-9 (measured 7e-12).
    //
    // The fitting model (spectrum::SpectrumModel: 24 images and a Lorentzian tail scaled by the
    // ratio at the cut-off) sums the same series more roughly: measured here, it lies above the
    // reference by up to 8.9e-4 at Nyquist for the 1 um bead (2e-4 for the larger ones, below
    // 2e-6 under 5 kHz). The check against it is 1.5e-3: agreement to its own approximation.
    let fs = 100_000.0;
    let filter = DetectorFilter {
        f3db_hz: 7_000.0,
        alpha: 0.3,
    };
    for (diameter_m, fc, filter) in [
        (1e-6, 800.0, None),
        (2.5e-6, 2_000.0, Some(filter)),
        (3e-6, 400.0, None),
    ] {
        let hydro = hydro_terms(diameter_m);
        let mut axis = InstrumentAxis::new(fc, 3.0);
        axis.hydrodynamics = Some(hydro);
        axis.detector_filter = filter;
        let d = axis.diffusion();
        let unaliased = |f: f64| {
            let s = (f / hydro.f_nu_hz).sqrt();
            let re = fc - f * s - f * f / hydro.f_m_hz;
            let im = f + f * s;
            let gain = filter.map_or(1.0, |g| g.gain(f));
            gain * d / (PI * PI) * (1.0 + s) / (re * re + im * im)
        };
        let model = SpectrumModel {
            sample_rate_hz: fs,
            aliasing: true,
            filter: filter.map_or(FilterSetting::None, FilterSetting::Fixed),
            hydro: Some(hydro),
            exposure_s: None,
            noise_floor: false,
        };
        let theta = [fc.ln(), d.ln()];
        for i in 0..=50 {
            let f = fs / 2.0 * f64::from(i) / 50.0;
            let mut reference = unaliased(f);
            for n in 1..=20_000 {
                let offset = f64::from(n) * fs;
                reference += unaliased(f + offset) + unaliased(offset - f);
            }
            let simulated = axis.thermal_one_sided_psd(f, fs);
            assert!(
                rel(simulated, reference) < 1e-9,
                "{diameter_m} m fc {fc} f {f}: {simulated} vs {reference}"
            );
            if f > 0.0 {
                let fitted = model.one_sided_psd(f, &theta);
                assert!(
                    rel(fitted, reference) < 1.5e-3,
                    "{diameter_m} m fc {fc} f {f}: model {fitted} vs {reference}"
                );
            }
        }
    }
}

#[test]
fn hydrodynamic_spectrum_with_a_vanishing_fluid_effect_is_the_aliased_lorentzian() {
    // f_nu, f_m -> infinity remove the frequency dependence (Berg-Sorensen & Flyvbjerg 2004):
    // the numerical sum must then give the closed-form aliased Lorentzian (1e-7, as above; the
    // residual terms are O(sqrt(f / f_nu)) = 3e-8 at 50 kHz for f_nu = 1e20 Hz... far below).
    let fs = 100_000.0;
    let mut axis = InstrumentAxis::new(1_500.0, 2.0);
    axis.hydrodynamics = Some(HydroTerms {
        f_nu_hz: 1e24,
        f_m_hz: 1e24,
    });
    for i in 0..=20 {
        let f = fs / 2.0 * f64::from(i) / 20.0;
        let closed = aliased_lorentzian_one_sided(f, 1_500.0, axis.diffusion(), fs);
        assert!(
            rel(axis.thermal_one_sided_psd(f, fs), closed) < 1e-7,
            "f {f}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Camera blur: the spectral route against the exact time-domain route.
// ---------------------------------------------------------------------------------------------

#[test]
fn blur_by_spectrum_and_blur_in_the_time_domain_give_the_same_variance_and_lag1_covariance() {
    // Two independent routes to blurred camera samples: random-phase synthesis from the
    // Wong & Halvorsen (2006) blurred spectrum, and the exact joint Gaussian step of the
    // position and its integral over the exposure (shared/PHYSICS.md section 2). Both must give
    // the closed-form variance sigma^2 S(a) and lag-1 covariance sigma^2 (2 sinh(a/2)/a)^2 c,
    // and each other. Standard errors are exact (Isserlis, with the blurred autocovariance);
    // z = 4.5 per check, 2 exposures x (2 routes x 2 lags + 2 differences) = 12 checks:
    // Bonferroni 12 x 6.8e-6 = 8e-5 per seed.
    let fs = 1_000.0;
    let dt = 1.0 / fs;
    let tau = 4.0 * dt;
    let fc = 1.0 / (2.0 * PI * tau);
    let variance = 3.0;
    let (n, records) = (2048usize, 100usize);
    for (exposure, seed) in [(dt, 31u64), (0.4 * dt, 32)] {
        let a = exposure / tau;
        let c = (-dt / tau).exp();
        let lag_weight = (2.0 * (a / 2.0).sinh() / a).powi(2);
        let cov = |m: i64| {
            if m == 0 {
                variance * exposure_variance_factor(a)
            } else {
                variance * lag_weight * c.powi(m.unsigned_abs() as i32)
            }
        };
        let mut rng = generator(seed);
        let axis = axis_with(fc, variance, None, Some(exposure));
        let plan = axis.plan(fs, n).expect("valid axis");
        let spectral: Vec<Vec<f64>> = (0..records).map(|_| plan.record(&mut rng)).collect();
        let temporal: Vec<Vec<f64>> = (0..records)
            .map(|_| blurred_ou_series(fc, variance, fs, exposure, n, &mut rng))
            .collect();
        for lag in [0usize, 1] {
            let exact = cov(lag as i64);
            let se = (autocovariance_estimate_variance(&cov, n, lag) / records as f64).sqrt();
            let by_spectrum = mean_autocovariance(&spectral, lag);
            let in_time = mean_autocovariance(&temporal, lag);
            for (route, value) in [("spectrum", by_spectrum), ("time domain", in_time)] {
                assert!(
                    (value - exact).abs() < Z * se,
                    "W {exposure}: {route} lag {lag}: {value} against {exact} (se {se})"
                );
            }
            assert!(
                (by_spectrum - in_time).abs() < Z * se * 2f64.sqrt(),
                "W {exposure} lag {lag}: routes differ {by_spectrum} vs {in_time}"
            );
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Records against their spectra; lines and drift.
// ---------------------------------------------------------------------------------------------

#[test]
fn synthesised_records_of_a_realistic_axis_have_its_spectrum() {
    // Filter, hydrodynamics, exposure and noise floor together (every stationary term but the
    // 1/f drift, whose leakage in short segments is large; the CLI tests check it in a band).
    // The periodogram of 20 records of 2^16 samples in 4 segments each (80 segments) is
    // averaged over blocks of 256 bins: each block mean is Gamma with 20,480 exponential
    // ordinates, relative se 0.7 %. Leakage of an untapered segment of 2^14 samples is
    // O(tau / T_segment) = 5e-4 (shared/PHYSICS.md section 2), allowed as 1e-3 on top. z = 4.5
    // on 32 blocks: 32 x 6.8e-6 = 2.2e-4 per seed.
    let fs = 100_000.0;
    let mut axis = InstrumentAxis::new(2_000.0, 4.0);
    axis.detector_filter = Some(DetectorFilter {
        f3db_hz: 7_000.0,
        alpha: 0.3,
    });
    axis.hydrodynamics = Some(hydro_terms(2e-6));
    axis.exposure_time_s = Some(0.5 / fs);
    axis.noise_floor_rms = 0.05;
    let n = 1 << 16;
    let windows = 4;
    let plan = axis.plan(fs, n).expect("valid axis");
    let mut rng = generator(404);
    let segment = n / windows;
    let mut mean_psd = vec![0.0; segment / 2 + 1];
    let records = 20;
    for _ in 0..records {
        let x = plan.record(&mut rng);
        let p = crate::spectrum::periodogram(&x, fs, windows).expect("periodogram");
        assert_eq!(p.segment_len, segment);
        for (m, v) in mean_psd.iter_mut().zip(&p.psd) {
            *m += v / f64::from(records);
        }
    }
    let block = 256;
    for b in 0..(segment / 2 / block) {
        let bins = (b * block).max(1)..((b + 1) * block).min(segment / 2);
        let count = bins.len() as f64;
        let measured: f64 = bins.clone().map(|k| mean_psd[k]).sum::<f64>() / count;
        let expected: f64 = bins
            .map(|k| axis.one_sided_psd(k as f64 * fs / segment as f64, fs))
            .sum::<f64>()
            / count;
        let ordinates = count * windows as f64 * f64::from(records);
        let tolerance = Z / ordinates.sqrt() + 1e-3;
        assert!(
            rel(measured, expected) < tolerance,
            "block {b}: {measured} vs {expected} (tolerance {tolerance})"
        );
    }
}

#[test]
fn lines_on_and_off_the_fourier_grid_carry_their_power_and_drift_is_exact() {
    // A sinusoid of amplitude A on the Fourier grid of an untapered segment puts all its power
    // in one bin: P_k = A^2 / (2 df) (one-sided, the normalisation of spectrum::periodogram;
    // exact). Off the grid the power spreads, but the total sum_k P_k df is the mean square of
    // the segment about its mean (Parseval), which for 8192 samples of a line at 1234.37 Hz is
    // A^2 / 2 within 1 / (4 pi f T) = 6e-5; bins 600 to 4095 hold all but about
    // 1 / (pi^2 634) = 1.6e-4 of it. Tolerance 1e-3.
    let fs = 8192.0;
    let n = 8192;
    let df = fs / n as f64;
    let line = |frequency_hz, amplitude, phase_rad| Sinusoid {
        frequency_hz,
        amplitude,
        phase_rad,
    };
    let mut on_grid = InstrumentAxis::new(100.0, 1e-30);
    on_grid.lines = vec![line(500.0, 2.0, 0.0)];
    let x = on_grid
        .plan(fs, n)
        .expect("valid")
        .record(&mut generator(1));
    let p = crate::spectrum::periodogram(&x, fs, 1).expect("periodogram");
    assert!(
        rel(p.psd[500], 4.0 / (2.0 * df)) < 1e-9,
        "on-grid bin {}",
        p.psd[500]
    );
    let mut off_grid = InstrumentAxis::new(100.0, 1e-30);
    off_grid.lines = vec![line(1234.37, 1.5, 1.0)];
    let y = off_grid
        .plan(fs, n)
        .expect("valid")
        .record(&mut generator(1));
    let p = crate::spectrum::periodogram(&y, fs, 1).expect("periodogram");
    let power: f64 = (600..4096).map(|k| p.psd[k] * df).sum();
    assert!(rel(power, 1.5 * 1.5 / 2.0) < 1e-3, "off-grid power {power}");
    // Samples are exactly A sin(2 pi f j / fs + phase) (plus motion of variance 1e-30).
    for j in [0usize, 1, 4095, 8191] {
        let t = j as f64 / fs;
        let expected = 1.5 * (2.0 * PI * 1234.37 * t + 1.0).sin();
        assert!((y[j] - expected).abs() < 1e-9, "sample {j}");
    }
    let mut drifting = InstrumentAxis::new(100.0, 1e-30);
    drifting.linear_drift_per_s = 3.0;
    let z = drifting
        .plan(fs, n)
        .expect("valid")
        .record(&mut generator(1));
    assert!((z[4096] - 1.5).abs() < 1e-9, "drift at 0.5 s: {}", z[4096]);
}

#[test]
fn flicker_drift_adds_its_variance() {
    // The 1/f density A / max(f, f_low) integrates over [0, fs/2] to A (1 + ln(fs / (2 f_low)))
    // (exact). The variance of the synthesis grid, sum_k S(f_k) fs / M, which is the records'
    // exact variance (the spectrum sampled on the grid, see synthesis.rs), must equal it to the
    // Riemann error of a 0.06 Hz grid against a cut at 0.24 Hz (measured 6e-4 relative, checked
    // to 2e-3); and the mean square of records about zero must equal the grid variance.
    let fs = 1_000.0;
    let n = 4096;
    let low_cut = fs / n as f64;
    let mut axis = InstrumentAxis::new(50.0, 1e-30);
    axis.flicker = Some(FlickerDrift {
        density_at_1_hz: 0.5,
        low_cut_hz: low_cut,
    });
    let exact = 0.5 * (1.0 + (fs / (2.0 * low_cut)).ln());
    let plan = axis.plan(fs, n).expect("valid");
    let m = plan.grid().period() as f64;
    let grid_variance: f64 = (0..=plan.grid().period() / 2)
        .map(|k| {
            let edge = k == 0 || k == plan.grid().period() / 2;
            let s = axis.one_sided_psd(k as f64 * fs / m, fs) * fs / m;
            if edge { s / 2.0 } else { s }
        })
        .sum();
    assert!(
        rel(grid_variance, exact) < 2e-3,
        "{grid_variance} vs {exact}"
    );
    // The mean square of one record of a long-memory process fluctuates a lot; over 1,000
    // records its mean is near Gaussian with the standard error estimated from their spread
    // (a t-test with 999 degrees of freedom, z = 4.5: fails in about 1e-5 of seeds).
    let mut rng = generator(8);
    let records = 1000;
    let squares: Vec<f64> = (0..records)
        .map(|_| {
            let x = plan.record(&mut rng);
            x.iter().map(|v| v * v).sum::<f64>() / n as f64
        })
        .collect();
    let mean = squares.iter().sum::<f64>() / f64::from(records);
    let spread =
        (squares.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / f64::from(records - 1)).sqrt();
    let se = spread / f64::from(records).sqrt();
    assert!(
        (mean - grid_variance).abs() < Z * se,
        "{mean} vs {grid_variance} (se {se})"
    );
}

#[test]
fn grid_records_equal_gaussian_record_draw_for_draw() {
    let s = |f: f64| 1.0 / (1.0 + f * f / 1e4);
    let a = gaussian_record(s, 1000.0, 777, &mut generator(3));
    let grid = SynthesisGrid::new(s, 1000.0, 777);
    let b = grid.record(&mut generator(3));
    assert_eq!(a, b);
    assert_eq!(grid.period(), 4096);
}

#[test]
fn impossible_descriptions_are_refused_with_their_reason() {
    let fs = 10_000.0;
    let mut axis = InstrumentAxis::new(100.0, 1.0);
    axis.exposure_time_s = Some(2e-4);
    assert!(matches!(
        axis.validate(fs),
        Err(SimulateError::ExposureTooLong { .. })
    ));
    let message = axis.validate(fs).expect_err("too long").to_string();
    assert!(message.contains("frame interval"), "{message}");
    axis.exposure_time_s = Some(1e-4);
    assert_eq!(axis.validate(fs), Ok(()));
    for alpha in [0.0, -0.1, 1.2, f64::NAN] {
        axis.detector_filter = Some(DetectorFilter {
            f3db_hz: 5000.0,
            alpha,
        });
        assert!(
            matches!(axis.validate(fs), Err(SimulateError::FilterAlpha { .. })),
            "alpha {alpha}"
        );
    }
    axis.detector_filter = None;
    axis.lines = vec![Sinusoid {
        frequency_hz: 6000.0,
        amplitude: 1.0,
        phase_rad: 0.0,
    }];
    assert!(matches!(
        axis.validate(fs),
        Err(SimulateError::LineFrequency { .. })
    ));
    axis.lines.clear();
    axis.noise_floor_rms = -1.0;
    assert!(matches!(
        axis.validate(fs),
        Err(SimulateError::Negative { .. })
    ));
}
