//! Unit tests of the camera-exposure (motion blur) terms of the spectral model: the blurred
//! aliased spectrum against its definition as a sum over alias images weighted by the box-car's
//! power gain, against the simulator's independent implementation, against the variance it must
//! integrate to, and the finite-segment term of the expected periodogram against the double sum
//! of the blurred autocovariance.

// Reference formulas stay written as in their sources, not rearranged into fused multiply-adds.
#![allow(clippy::suboptimal_flops)]

use super::model::{Params, Segments};
use super::*;
use std::f64::consts::PI;

#[track_caller]
fn check_close(actual: f64, expected: f64, rel_tol: f64) {
    let rel = ((actual - expected) / expected).abs();
    assert!(
        rel <= rel_tol,
        "actual {actual:e}, expected {expected:e}, relative error {rel:e} > {rel_tol:e}"
    );
}

fn camera_model(sample_rate_hz: f64, exposure_s: f64) -> SpectrumModel {
    SpectrumModel {
        sample_rate_hz,
        aliasing: true,
        filter: FilterSetting::None,
        hydro: None,
        exposure_s: Some(exposure_s),
        noise_floor: false,
    }
}

/// sin^2(x)/x^2 written out.
fn sinc2(x: f64) -> f64 {
    if x == 0.0 { 1.0 } else { (x.sin() / x).powi(2) }
}

/// The definition of the blurred aliased spectrum (Wong & Halvorsen, Opt. Express 14, 12517
/// (2006); shared PHYSICS.md section 2): sum_n H(f + n fs) sinc^2(pi (f + n fs) W) summed
/// directly over |n| <= 200000, H the unaliased one-sided spectrum. The images left out fall as
/// n^-4 (H as n^-2 times sinc^2 as n^-2), so the rest is below 1e-15 of the total.
fn brute_force_blurred_sum(h: impl Fn(f64) -> f64, f: f64, fs: f64, w: f64) -> f64 {
    let m = 200_000i64;
    (-m..=m)
        .map(|n| {
            let g = f + n as f64 * fs;
            h(g.abs()) * sinc2(PI * g * w)
        })
        .sum()
}

fn lorentzian(f: f64, fc: f64, d: f64) -> f64 {
    d / (PI * PI * (fc * fc + f * f))
}

#[test]
fn blurred_spectrum_in_closed_form_equals_the_direct_sinc_squared_alias_sum() {
    // Cameras of 2-5 kHz with exposures of a whole or part of a frame, beads of 190-380 Hz
    // (the camera row of issue 11), and a fast camera watching a stiff trap.
    let d = 3.0e5;
    for (fs, fc, w_frames) in [
        (2_000.0, 190.0, 1.0),
        (4_000.0, 300.0, 1.0),
        (5_000.0, 380.0, 0.5),
        (100_000.0, 2_000.0, 0.2),
    ] {
        let w = w_frames / fs;
        let model = camera_model(fs, w);
        let theta = [f64::ln(fc), f64::ln(d)];
        for f in [1.0, 0.1 * fs, 0.3 * fs, 0.499 * fs] {
            let reference = brute_force_blurred_sum(|g| lorentzian(g, fc, d), f, fs, w);
            check_close(model.one_sided_psd(f, &theta), reference, 1e-9);
        }
    }
}

#[test]
fn blurred_and_filtered_spectrum_equals_the_direct_alias_sum() {
    // A photodiode filter (Berg-Sorensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93,
    // 3167 (2003), recalled from memory, unverified) with an integrating exposure: the closed
    // form is the sum of the blurred forms of the two partial fractions; the reference sums
    // g(f) L(f) sinc^2(pi f W) over the images. One filter corner far above the frame rate
    // (W/tau_3 = 31) checks that the fast component stays accurate.
    let (fs, fc, d) = (4_000.0, 300.0, 3.0e5);
    let w = 1.0 / fs;
    for f3 in [2_500.0, 20_000.0] {
        let filter = DetectorFilter {
            f3db_hz: f3,
            alpha: 0.3,
        };
        let model = SpectrumModel {
            filter: FilterSetting::Fixed(filter),
            ..camera_model(fs, w)
        };
        let theta = [f64::ln(fc), f64::ln(d)];
        for f in [5.0, 400.0, 1_200.0, 1_990.0] {
            let reference =
                brute_force_blurred_sum(|g| filter.gain(g) * lorentzian(g, fc, d), f, fs, w);
            check_close(model.one_sided_psd(f, &theta), reference, 1e-9);
        }
    }
}

#[test]
fn blurred_spectrum_with_frequency_dependent_drag_equals_the_direct_alias_sum() {
    // The numerical image sum (24 images a side, the rest from the blurred Lorentzian tail)
    // against the direct sum of S_hydro(f) sinc^2(pi f W) (Berg-Sorensen & Flyvbjerg, Rev. Sci.
    // Instrum. 75, 594 (2004), for S_hydro) for a 3 um bead's frequency scales.
    let (fs, fc, d) = (5_000.0, 380.0, 1.0e5);
    let w = 1.0 / fs;
    let hydro = HydroTerms {
        f_nu_hz: 126_000.0,
        f_m_hz: 183_000.0,
    };
    let model = SpectrumModel {
        hydro: Some(hydro),
        ..camera_model(fs, w)
    };
    let theta = [f64::ln(fc), f64::ln(d)];
    let s_hydro = |f: f64| {
        let s = (f / hydro.f_nu_hz).sqrt();
        let re = fc - f * s - f * f / hydro.f_m_hz;
        let im = f + f * s;
        d / (PI * PI) * (1.0 + s) / (re * re + im * im)
    };
    for f in [5.0, 400.0, 1_500.0, 2_490.0] {
        let reference = brute_force_blurred_sum(s_hydro, f, fs, w);
        check_close(model.one_sided_psd(f, &theta), reference, 1e-6);
    }
}

#[test]
fn blurred_spectrum_equals_the_simulators_form() {
    // The simulator's implementation of Wong & Halvorsen's blurred form (written separately, in
    // simulate/spectra.rs) must give the same numbers, with and without a filter.
    use crate::simulate::InstrumentAxis;
    let (fs, fc, d) = (4_000.0, 300.0, 3.0e5);
    let variance = d / (2.0 * PI * fc);
    for (w_frames, filter) in [
        (1.0, None),
        (0.4, None),
        (
            1.0,
            Some(DetectorFilter {
                f3db_hz: 2_500.0,
                alpha: 0.3,
            }),
        ),
    ] {
        let w = w_frames / fs;
        let model = SpectrumModel {
            filter: filter.map_or(FilterSetting::None, FilterSetting::Fixed),
            ..camera_model(fs, w)
        };
        let axis = InstrumentAxis {
            exposure_time_s: Some(w),
            detector_filter: filter,
            ..InstrumentAxis::new(fc, variance)
        };
        let theta = [f64::ln(fc), f64::ln(d)];
        for f in [0.5, 100.0, 900.0, 1_999.0] {
            check_close(
                model.one_sided_psd(f, &theta),
                axis.thermal_one_sided_psd(f, fs),
                1e-12,
            );
        }
    }
}

#[test]
fn blurred_spectrum_integrates_to_the_blurred_variance() {
    // Parseval: the one-sided spectrum of the samples integrates over 0..fs/2 to their
    // variance, which for box-car averages of width W is sigma^2 S(W/tau),
    // S(a) = 2/a - (2/a^2)(1 - e^-a) (Wong & Halvorsen, Opt. Express 14, 12517 (2006)).
    let (fs, fc, d) = (2_000.0, 190.0, 3.0e5);
    let w = 1.0 / fs;
    let model = camera_model(fs, w);
    let theta = [f64::ln(fc), f64::ln(d)];
    let n = 200_000;
    let df = fs / 2.0 / n as f64;
    let integral: f64 = (0..n)
        .map(|i| model.one_sided_psd((i as f64 + 0.5) * df, &theta) * df)
        .sum();
    let tau = 1.0 / (2.0 * PI * fc);
    let a = w / tau;
    let s = 2.0 / a - 2.0 / (a * a) * (1.0 - (-a).exp());
    check_close(integral, d / (2.0 * PI * fc) * s, 1e-8);
}

#[test]
fn without_aliasing_the_blurred_model_is_the_lorentzian_times_the_box_gain() {
    let (fs, fc, d) = (4_000.0, 300.0, 3.0e5);
    let w = 1.0 / fs;
    let model = SpectrumModel {
        aliasing: false,
        ..camera_model(fs, w)
    };
    let theta = [f64::ln(fc), f64::ln(d)];
    for f in [10.0, 1_000.0, 1_900.0] {
        check_close(
            model.one_sided_psd(f, &theta),
            lorentzian(f, fc, d) * sinc2(PI * f * w),
            1e-12,
        );
    }
}

/// The finite-segment expectation of the periodogram of L samples (or of L first differences,
/// recoloured) by the double sum of the autocovariance, an exact identity:
/// E[P_k] = 2 dt sum_{|m| < L} (1 - |m|/L) C_m cos(2 pi k m / L) (for differences C_y(m) =
/// 2 C_m - C_{m+1} - C_{m-1} in place of C_m, divided by 4 sin^2(pi k / L)). The blurred
/// autocovariance of each exponential component A e^(-|t|/tau) is written as in shared PHYSICS.md
/// section 2 (Wong & Halvorsen 2006): C_0 = A S(W/tau) and, for m >= 1,
/// C_m = A (tau/W)^2 2 (cosh(W/tau) - 1) e^(-m dt/tau).
fn double_sum(components: &[(f64, f64)], dt: f64, w: f64, l: usize, k: usize, diff: bool) -> f64 {
    let acov = |m: i64| -> f64 {
        components
            .iter()
            .map(|&(f_j, amplitude)| {
                let tau = 1.0 / (2.0 * PI * f_j);
                let a = w / tau;
                if m == 0 {
                    amplitude * (2.0 / a - 2.0 / (a * a) * (1.0 - (-a).exp()))
                } else {
                    let t = m.unsigned_abs() as f64 * dt;
                    amplitude / (a * a) * 2.0 * (a.cosh() - 1.0) * (-t / tau).exp()
                }
            })
            .sum()
    };
    let seen = |m: i64| {
        if diff {
            2.0 * acov(m) - acov(m + 1) - acov(m - 1)
        } else {
            acov(m)
        }
    };
    let mut direct = seen(0);
    for m in 1..l as i64 {
        let weight = 1.0 - m as f64 / l as f64;
        direct += 2.0 * weight * seen(m) * (2.0 * PI * (k as i64 * m) as f64 / l as f64).cos();
    }
    direct *= 2.0 * dt;
    if diff {
        let half = (PI * k as f64 / l as f64).sin();
        direct /= 4.0 * half * half;
    }
    direct
}

#[test]
fn expected_periodogram_of_blurred_short_segments_equals_the_autocovariance_double_sum() {
    // Plain and filtered (partial fractions of shared PHYSICS.md section 12) camera spectra,
    // samples and recoloured differences, segments of 64 and 256 frames.
    let (fs, fc, d) = (4_000.0, 300.0, 3.0e5);
    let dt = 1.0 / fs;
    let variance = d / (2.0 * PI * fc);
    for (w_frames, filter) in [
        (1.0, None),
        (0.3, None),
        (
            1.0,
            Some(DetectorFilter {
                f3db_hz: 900.0,
                alpha: 0.3,
            }),
        ),
        (
            1.0,
            Some(DetectorFilter {
                f3db_hz: 20_000.0,
                alpha: 0.3,
            }),
        ),
    ] {
        let w = w_frames / fs;
        let model = SpectrumModel {
            filter: filter.map_or(FilterSetting::None, FilterSetting::Fixed),
            ..camera_model(fs, w)
        };
        let components: Vec<(f64, f64)> = match filter {
            None => vec![(fc, variance)],
            Some(g) => {
                let (f3, a2) = (g.f3db_hz, g.alpha * g.alpha);
                let slow = (1.0 - a2) * f3 * f3 / (f3 * f3 - fc * fc);
                vec![
                    (fc, variance * (a2 + slow)),
                    (f3, -slow * d / (2.0 * PI * f3)),
                ]
            }
        };
        let p: Params = model.decode(&[fc.ln(), d.ln()]);
        for l in [64usize, 256] {
            for differenced in [false, true] {
                for k in [1usize, 3, 10, l / 4, l / 2 - 1] {
                    let f = k as f64 * fs / l as f64;
                    let segments = Segments {
                        len: l,
                        differenced_from_hz: if differenced { 0.0 } else { f64::INFINITY },
                    };
                    check_close(
                        model.expected_periodogram(f, &p, Some(segments)),
                        double_sum(&components, dt, w, l, k, differenced),
                        1e-9,
                    );
                }
            }
        }
    }
}
