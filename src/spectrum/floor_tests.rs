//! Tests of the white noise floor in the spectral model and of its likelihood-ratio test.

// The double sums mirror their formulas term by term.
#![allow(clippy::suboptimal_flops)]

use super::model::Segments;
use super::*;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::f64::consts::PI;

#[track_caller]
fn check_close(got: f64, want: f64, rel: f64) {
    assert!(
        (got - want).abs() <= rel * want.abs(),
        "got {got}, want {want} (relative tolerance {rel})"
    );
}

fn model(filter: FilterSetting, noise_floor: bool) -> SpectrumModel {
    SpectrumModel {
        sample_rate_hz: 100_000.0,
        aliasing: true,
        filter,
        hydro: None,
        exposure_s: None,
        noise_floor,
    }
}

#[test]
fn the_model_with_a_floor_is_the_model_without_it_plus_the_constant() {
    // White noise of variance sigma_n^2 adds the constant 2 sigma_n^2 dt to the one-sided
    // spectrum (shared PHYSICS.md section 12): exact, at every frequency, with and without the
    // photodiode filter (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004) for the
    // aliased Lorentzian).
    let (fc, d, p_n): (f64, f64, f64) = (950.0, 4.9e5, 1.6e-5);
    let filter = DetectorFilter {
        f3db_hz: 6_000.0,
        alpha: 0.3,
    };
    for f in [FilterSetting::None, FilterSetting::Fixed(filter)] {
        let without = model(f, false);
        let with = model(f, true);
        for freq in [0.0, 10.0, 950.0, 12_345.0, 40_000.0, 50_000.0] {
            check_close(
                with.one_sided_psd(freq, &[fc.ln(), d.ln(), p_n.ln()]),
                without.one_sided_psd(freq, &[fc.ln(), d.ln()]) + p_n,
                1e-13,
            );
        }
    }
    // With a fitted filter the floor is the last entry, after f3dB and logit(alpha^2).
    let fitted = model(FilterSetting::Fitted(filter), true);
    assert_eq!(fitted.n_params(), 5);
    assert_eq!(fitted.noise_floor_index(), Some(4));
    let theta = [
        fc.ln(),
        d.ln(),
        6_000f64.ln(),
        (0.09f64 / 0.91).ln(),
        p_n.ln(),
    ];
    check_close(
        fitted.one_sided_psd(20_000.0, &theta),
        model(FilterSetting::Fixed(filter), false).one_sided_psd(20_000.0, &[fc.ln(), d.ln()])
            + p_n,
        1e-12,
    );
}

#[test]
fn the_floor_leaks_only_into_the_differenced_segments_as_their_double_sum_says() {
    // The expected periodogram of a finite segment is the double sum of the autocovariance,
    // 2 dt sum_{|m| < L} (1 - |m|/L) C(m) cos(2 pi k m / L) (an exact identity), and for
    // recoloured first differences the same with C_y(m) = 2 C(m) - C(m + 1) - C(m - 1), divided
    // by 4 sin^2(pi k / L). White noise adds sigma_n^2 to C(0) only (shared PHYSICS.md
    // section 12); the bead's part is the aliased Lorentzian's exponential autocovariance.
    let fs = 100_000.0;
    let dt = 1.0 / fs;
    let (fc, d): (f64, f64) = (950.0, 4.9e5);
    let sigma2_n: f64 = 0.8;
    let p_n = 2.0 * sigma2_n * dt;
    let l = 256usize;
    let with = model(FilterSetting::None, true);
    let p = with.decode(&[fc.ln(), d.ln(), p_n.ln()]);
    let acov = |m: i64| {
        let t = m.unsigned_abs() as f64 * dt;
        let bead = d / (2.0 * PI * fc) * (-2.0 * PI * fc * t).exp();
        if m == 0 { bead + sigma2_n } else { bead }
    };
    for differenced in [false, true] {
        let seen = |m: i64| {
            if differenced {
                2.0 * acov(m) - acov(m + 1) - acov(m - 1)
            } else {
                acov(m)
            }
        };
        for k in [1usize, 3, 10, 40, 127] {
            let f = k as f64 * fs / l as f64;
            let mut direct = seen(0);
            for m in 1..l as i64 {
                let w = 1.0 - m as f64 / l as f64;
                direct += 2.0 * w * seen(m) * (2.0 * PI * (k as i64 * m) as f64 / l as f64).cos();
            }
            direct *= 2.0 * dt;
            if differenced {
                let half = (PI * k as f64 / l as f64).sin();
                direct /= 4.0 * half * half;
            }
            let segments = Segments {
                len: l,
                differenced_from_hz: if differenced { 0.0 } else { f64::INFINITY },
            };
            check_close(
                with.expected_periodogram(f, &p, Some(segments)),
                direct,
                1e-9,
            );
        }
    }
}

#[test]
fn the_critical_value_is_the_upper_one_per_cent_point_of_the_boundary_mixture() {
    // Self & Liang, J. Am. Stat. Assoc. 82, 605 (1987): one parameter on the boundary gives
    // LR ~ 0.5 chi2_0 + 0.5 chi2_1, so P(LR > c) = 0.5 P(chi2_1 > c); statrs's chi-square is the
    // outside reference. z_0.99 = 2.326348 (normal table) squared is the constant.
    let tail = 0.5
        * ChiSquared::new(1.0)
            .expect("one degree")
            .sf(NOISE_FLOOR_CRITICAL_LR);
    check_close(tail, NOISE_FLOOR_FALSE_INCLUSION, 1e-5);
    check_close(NOISE_FLOOR_CRITICAL_LR, 2.326_348f64.powi(2), 1e-6);
    assert_eq!(boundary_mixture_p_value(0.0), 1.0);
    check_close(
        boundary_mixture_p_value(NOISE_FLOOR_CRITICAL_LR),
        0.01,
        1e-5,
    );
}
