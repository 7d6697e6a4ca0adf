//! Tests of the covariance integrals: the fast evaluation against a direct reference on seeded
//! random influence weights, the analytic derivative and the rotating lag cosines against their
//! definitions, and the integrals against the inverse Fisher information and Bartlett's formula.

// Index loops mirror the matrix formulas.
#![allow(clippy::needless_range_loop)]

use super::*;
use crate::spectrum::{DetectorFilter, HydroTerms};

const FS: f64 = 50_000.0;
const FC: f64 = 950.0;
/// Variance of the trace, nm^2 (a 1 um bead in a 0.05 pN/nm trap at 25 C).
const SIGMA2: f64 = 82.3;

/// The straightforward evaluation the fast one replaces: every model value from theta, central
/// differences of ln S with steps of 1e-5 in each parameter, and one cos() per lag and grid point.
fn reference_log_covariance(inp: &InfluenceInputs<'_>) -> [[f64; 4]; 4] {
    let nyquist = inp.sample_rate_hz / 2.0;
    let dt = 1.0 / inp.sample_rate_hz;
    let max_lag = inp
        .tau_influence
        .iter()
        .map(|(lag, _)| *lag)
        .max()
        .unwrap_or(1);
    let n_grid = (16 * max_lag).clamp(4096, 1 << 20);
    let df = nyquist / n_grid as f64;
    let n_theta = inp.theta.len();
    let mut acc = [[0.0f64; 4]; 4];
    let h = 1e-5;
    let mut t = inp.theta.to_vec();
    for i in 0..=n_grid {
        let f = i as f64 * df;
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

/// SplitMix64 (Steele, Lea & Flood, OOPSLA 2014), mapped to [0, 1): a seeded stream for weights.
fn uniform_stream(seed: u64) -> impl FnMut() -> f64 {
    let mut state = seed;
    move || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64
    }
}

fn closed_form_model() -> SpectrumModel {
    SpectrumModel {
        sample_rate_hz: FS,
        aliasing: true,
        filter: FilterSetting::None,
        hydro: None,
        exposure_s: None,
        noise_floor: false,
    }
}

/// theta of the closed-form model: (ln fc, ln D) with D = 2 pi fc sigma^2.
fn closed_form_theta() -> Vec<f64> {
    vec![FC.ln(), (2.0 * PI * FC * SIGMA2).ln()]
}

/// Compares the fast and the reference covariance entry by entry, relative to the scale
/// sqrt(C_pp C_qq) of each entry (off-diagonal entries may be near zero).
#[track_caller]
fn check_fast_matches_reference(
    model: &SpectrumModel,
    theta: &[f64],
    lags: &[usize],
    seed: u64,
    tolerance: f64,
) {
    let mut uniform = uniform_stream(seed);
    let n_theta = theta.len();
    // A symmetric positive definite covariance of theta: diagonal plus a small rank-one part.
    let v: Vec<f64> = (0..n_theta).map(|_| uniform() - 0.5).collect();
    let theta_covariance: Vec<Vec<f64>> = (0..n_theta)
        .map(|i| {
            (0..n_theta)
                .map(|j| 1e-4 * v[i].mul_add(v[j], if i == j { 1.0 } else { 0.0 }))
                .collect()
        })
        .collect();
    let tau_influence: Vec<(usize, f64)> = lags
        .iter()
        .map(|&lag| (lag, 1e-7 * (uniform() - 0.3)))
        .collect();
    let inp = InfluenceInputs {
        model,
        theta,
        theta_covariance: &theta_covariance,
        fit_min_hz: 50.0,
        fit_max_hz: 15_000.0,
        record_length_s: 1.31,
        sample_rate_hz: FS,
        tau_influence: &tau_influence,
        relaxation_time_s: 1.0 / (2.0 * PI * FC),
        variance: SIGMA2,
        noise_floor: None,
    };
    let fast = log_covariance(&inp);
    let reference = reference_log_covariance(&inp);
    for p in 0..4 {
        for q in 0..4 {
            let scale = (reference[p][p] * reference[q][q]).sqrt();
            let error = (fast[p][q] - reference[p][q]).abs() / scale;
            assert!(
                error <= tolerance,
                "entry ({p}, {q}): fast {} vs reference {} (relative {error:.2e})",
                fast[p][q],
                reference[p][q]
            );
        }
    }
}

#[test]
fn fast_covariance_matches_the_direct_formula_for_the_closed_form_spectrum() {
    // Oracle: the direct evaluation above. The fast path uses the analytic derivative, which
    // differs from the reference's central differences by their truncation and rounding error
    // (~1e-10 relative), and rotated lag cosines (~1e-14).
    let model = closed_form_model();
    let theta = closed_form_theta();
    let short: Vec<usize> = (1..=17).collect();
    let strided: Vec<usize> = (1..=2000).step_by(32).collect();
    check_fast_matches_reference(&model, &theta, &short, 1, 1e-8);
    check_fast_matches_reference(&model, &theta, &strided, 2, 1e-8);
}

#[test]
fn fast_covariance_matches_the_direct_formula_for_filtered_and_hydrodynamic_spectra() {
    // Oracle: the direct evaluation above. Here the fast path takes the same central differences
    // with the parameters decoded once, so only the lag cosines and the summation order differ.
    let lags: Vec<usize> = (2..=200).step_by(3).collect();
    let filtered = SpectrumModel {
        filter: FilterSetting::Fitted(DetectorFilter {
            f3db_hz: 8_000.0,
            alpha: 0.3,
        }),
        ..closed_form_model()
    };
    let mut theta = closed_form_theta();
    theta.extend([8_000.0f64.ln(), (0.09f64 / 0.91).ln()]);
    check_fast_matches_reference(&filtered, &theta, &lags, 3, 1e-12);
    // Frequency scales of a 1 um polystyrene bead in water (f_nu = nu / (pi R^2),
    // f_m = gamma0 / (2 pi m*); values rounded, computed by hand).
    let hydrodynamic = SpectrumModel {
        hydro: Some(HydroTerms {
            f_nu_hz: 1.27e6,
            f_m_hz: 1.8e6,
        }),
        ..closed_form_model()
    };
    check_fast_matches_reference(&hydrodynamic, &closed_form_theta(), &lags, 4, 1e-12);
}

#[test]
fn analytic_log_gradient_of_the_aliased_lorentzian_matches_central_differences() {
    // Oracle: central differences of `one_sided_psd` with a step of 1e-4 in theta (truncation
    // error ~1e-8 relative to the second derivative's scale).
    let model = closed_form_model();
    let theta = closed_form_theta();
    let fast = SpectrumAndGradient::new(&model, &theta);
    assert!(matches!(fast, SpectrumAndGradient::ClosedForm { .. }));
    let h = 1e-4;
    for f in [0.0, 1.0, 100.0, 949.0, 5_000.0, 24_999.0, 25_000.0] {
        let mut dlns = [0.0; 2];
        let s = fast.value_and_log_gradient(f, &mut dlns);
        let direct = model.one_sided_psd(f, &theta);
        assert!(
            (s - direct).abs() <= 1e-14 * direct,
            "S({f}): {s} vs {direct}"
        );
        assert_eq!(
            fast.value(f),
            s,
            "value and value_and_log_gradient agree at {f}"
        );
        let numeric_gradient = numeric_log_gradient(&model, f, &theta, h);
        for (j, &numeric) in numeric_gradient.iter().enumerate() {
            assert!(
                (dlns[j] - numeric).abs() <= 1e-7,
                "d ln S / d theta_{j} at {f} Hz: {} vs {numeric}",
                dlns[j]
            );
        }
    }
}

#[test]
fn rotated_lag_cosines_match_exact_cosines_to_1e_13() {
    // Oracle: cos(pi m / n_grid) with the phase reduced exactly in integers, m = (i lag) mod
    // 2 n_grid, at every point of a 2^16-point grid. (The direct cos(2 pi f lag dt) is itself off
    // by its argument's rounding, ~2.5e-12 at lag 4096 on this grid.)
    let n_grid = 1usize << 16;
    for lag in [1usize, 7, 64, 1000, 4096, 65_535] {
        let mut cosines = LagCosines::new(&[(lag, 1.0)], n_grid);
        let mut worst = 0.0f64;
        for i in 0..=n_grid {
            let m = (i * lag) % (2 * n_grid);
            let exact = (PI * m as f64 / n_grid as f64).cos();
            worst = worst.max((cosines.weighted_sum() - exact).abs());
        }
        assert!(worst <= 1e-13, "lag {lag}: worst error {worst:.2e}");
    }
}

#[test]
fn rotated_lag_cosines_sum_the_weights_like_direct_cosines() {
    // Oracle: the direct sum of weight cos(2 pi f lag dt) over three lags, on a 4096-point grid
    // where the direct argument's rounding is below 1e-14.
    let n_grid = 4096usize;
    let df = FS / 2.0 / n_grid as f64;
    let dt = 1.0 / FS;
    let weights = [(1usize, 0.5), (5, -1.25), (17, 2.0)];
    let mut cosines = LagCosines::new(&weights, n_grid);
    for i in 0..=n_grid {
        let f = i as f64 * df;
        let direct: f64 = weights
            .iter()
            .map(|&(lag, w)| w * (2.0 * PI * f * lag as f64 * dt).cos())
            .sum();
        let fast = cosines.weighted_sum();
        assert!(
            (fast - direct).abs() <= 1e-13,
            "point {i}: {fast} vs {direct}"
        );
    }
}

/// Covariance of the closed-form model with the given theta covariance and lag weights, over a
/// fit band of 50 Hz to 20 kHz.
fn closed_form_covariance(
    theta_covariance: &[Vec<f64>],
    record_length_s: f64,
    fit_band_hz: (f64, f64),
) -> [[f64; 4]; 4] {
    let model = closed_form_model();
    let theta = closed_form_theta();
    log_covariance(&InfluenceInputs {
        model: &model,
        theta: &theta,
        theta_covariance,
        fit_min_hz: fit_band_hz.0,
        fit_max_hz: fit_band_hz.1,
        record_length_s,
        sample_rate_hz: FS,
        tau_influence: &[(1, 1e-7), (2, -5e-8)],
        relaxation_time_s: 1.0 / (2.0 * PI * FC),
        variance: SIGMA2,
        noise_floor: None,
    })
}

#[test]
fn variance_of_the_spectral_parameters_is_the_inverse_fisher_information() {
    // Outside truth: the Whittle likelihood's Fisher information for exponential periodogram
    // ordinates, F = sum_k grad ln S_k grad ln S_k^T over the fitted Fourier bins
    // (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004), sec. IV), summed here bin by
    // bin with central-difference gradients. With theta_covariance = F^-1 the influence integral
    // must give Var(theta) = F^-1 again, up to the integral-versus-sum difference at the band edges
    // (the band edges fall between grid points 6 Hz apart, and the periodogram bins 0.76 Hz apart
    // sample the steep low-frequency end of d ln S / d ln fc: under 5e-3 here).
    let model = closed_form_model();
    let theta = closed_form_theta();
    let record_length_s: f64 = 1.31;
    let band: (f64, f64) = (50.0, 20_000.0);
    let mut fisher = [[0.0f64; 2]; 2];
    let h = 1e-5;
    let k_lo = (band.0 * record_length_s).ceil() as usize;
    let k_hi = (band.1 * record_length_s).floor() as usize;
    for k in k_lo..=k_hi {
        let f = k as f64 / record_length_s;
        let grad = numeric_log_gradient(&model, f, &theta, h);
        for p in 0..2 {
            for q in 0..2 {
                fisher[p][q] += grad[p] * grad[q];
            }
        }
    }
    let det = fisher[0][0].mul_add(fisher[1][1], -(fisher[0][1] * fisher[1][0]));
    let inverse = vec![
        vec![fisher[1][1] / det, -fisher[0][1] / det],
        vec![-fisher[1][0] / det, fisher[0][0] / det],
    ];
    let cov = closed_form_covariance(&inverse, record_length_s, band);
    for p in 0..2 {
        for q in 0..2 {
            let scale = (inverse[p][p] * inverse[q][q]).sqrt();
            let error = (cov[p][q] - inverse[p][q]).abs() / scale;
            assert!(
                error < 5e-3,
                "Var(theta)[{p}][{q}] = {} vs F^-1 = {} (relative {error:.2e})",
                cov[p][q],
                inverse[p][q]
            );
        }
    }
}

#[test]
fn variance_of_the_log_variance_follows_bartletts_formula() {
    // Outside truth: Bartlett's formula Var(s^2) = (2/N) sum_k C_k^2 (M. S. Bartlett, J. R. Stat.
    // Soc. Suppl. 8, 27 (1946)) for the AR(1) autocovariance C_k = sigma^2 c^|k| of the sampled
    // Ornstein-Uhlenbeck process, where the geometric sum gives
    // Var(ln s^2) = (2/N) (1 + c^2) / (1 - c^2), c = exp(-2 pi fc dt).
    let record_length_s = 1.31;
    let cov = closed_form_covariance(
        &[vec![1e-4, 0.0], vec![0.0, 1e-4]],
        record_length_s,
        (50.0, 20_000.0),
    );
    let n_samples = record_length_s * FS;
    let c = (-2.0 * PI * FC / FS).exp();
    let bartlett = 2.0 / n_samples * c.mul_add(c, 1.0) / c.mul_add(-c, 1.0);
    let error = (cov[3][3] - bartlett).abs() / bartlett;
    assert!(
        error < 1e-9,
        "Var(ln s^2) = {} vs Bartlett {bartlett} (relative {error:.2e})",
        cov[3][3]
    );
}

/// d ln S(f) / d (theta_0, theta_1) by central differences of step `h`, the check on the
/// analytic gradient and the Fisher information of the reference.
fn numeric_log_gradient(model: &SpectrumModel, f: f64, theta: &[f64], h: f64) -> [f64; 2] {
    let mut grad = [0.0; 2];
    for (j, slot) in grad.iter_mut().enumerate() {
        let mut t = theta.to_vec();
        t[j] = theta[j] + h;
        let up = model.one_sided_psd(f, &t).ln();
        t[j] = theta[j] - h;
        let down = model.one_sided_psd(f, &t).ln();
        *slot = (up - down) / (2.0 * h);
    }
    grad
}
