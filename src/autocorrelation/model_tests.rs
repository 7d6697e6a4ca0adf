//! Tests of the time-domain models: the quadrature rules against exact integrals, every closed
//! form against a brute-force cosine transform of its spectrum (and the blur against a direct
//! double integral), the hydrodynamic model against the fluctuation-dissipation theorem, its
//! long-time tail and a scipy fixture, and the generalised Bartlett sums against direct sums.

use super::autocovariance_covariance_ar1;
use super::model::{HydroTail, LagSeries, SeriesEvaluator, box_variance_factor};
use super::quadrature::{cosine_rule, gauss_legendre, integral_rule};
use super::{AcfError, TimeDomainModel, mean_bias_ar1, variance_factor};
use crate::spectrum::{DetectorFilter, HydroTerms};
use std::f64::consts::PI;

/// 10-point Gauss-Legendre integral of `s` over [a, b].
fn gauss_panel(s: &dyn Fn(f64) -> f64, a: f64, b: f64, nodes: &[f64], weights: &[f64]) -> f64 {
    let (mid, half) = (0.5 * (a + b), 0.5 * (b - a));
    nodes
        .iter()
        .zip(weights)
        .map(|(x, w)| w * s(half.mul_add(*x, mid)))
        .sum::<f64>()
        * half
}

/// Slow, obviously correct reference for `integral_0^inf s(f) cos(2 pi f t) df` when s decays
/// at least as f^-2: composite 10-point Gauss-Legendre, on geometric panels from
/// 1e-9 `scale_hz` up to the cosine's period P = 1/t (the first panel from 0), then on panels
/// of P/4 up to F, a multiple of P at least 1e4 max(scale_hz, P). The tail beyond F, where
/// sin(2 pi F t) = 0, is -s'(F)/omega^2 to leading order (integration by parts), added with
/// s' by a central difference. For t = 0 the panels stay geometric up to 1e9 `scale_hz` and the
/// tail is F s(F) (exact for an f^-2 tail); if s itself oscillates with period `oscillation_hz`
/// (a blur's sinc^2, which then decays as f^-4), the panels are capped at a quarter of it up
/// to 1e4 times it, where the rest is below 1e-13 of the integral and left out.
fn brute_cosine_transform(
    s: &dyn Fn(f64) -> f64,
    t: f64,
    scale_hz: f64,
    oscillation_hz: Option<f64>,
) -> f64 {
    let (nodes, weights) = gauss_legendre(10);
    let integrand = |f: f64| s(f) * (2.0 * PI * f * t).cos();
    let mut total = 0.0;
    let mut lo = 1e-9 * scale_hz;
    total += gauss_panel(&integrand, 0.0, lo, &nodes, &weights);
    if t == 0.0 {
        if let Some(q) = oscillation_hz {
            let top = 1e4 * q.max(scale_hz);
            while lo < top {
                let hi = lo + (0.25 * lo).min(0.25 * q);
                total += gauss_panel(&integrand, lo, hi, &nodes, &weights);
                lo = hi;
            }
            return total;
        }
        let top = 1e9 * scale_hz;
        while lo < top {
            let hi = lo * 1.25;
            total += gauss_panel(&integrand, lo, hi, &nodes, &weights);
            lo = hi;
        }
        return lo.mul_add(s(lo), total);
    }
    let period = 1.0 / t;
    while lo < period {
        let hi = (lo * 1.25).min(period);
        total += gauss_panel(&integrand, lo, hi, &nodes, &weights);
        lo = hi;
    }
    let n_periods = (1e4 * scale_hz.max(period) / period).ceil();
    let n_panels = 4 * n_periods as usize;
    let quarter = period / 4.0;
    for i in 0..n_panels {
        let a = (i as f64).mul_add(quarter, period);
        total += gauss_panel(&integrand, a, a + quarter, &nodes, &weights);
    }
    let top = (n_panels as f64).mul_add(quarter, period);
    let step = 1e-3 * top;
    let slope = (s(top + step) - s(top - step)) / (2.0 * step);
    let omega = 2.0 * PI * t;
    total - slope / (omega * omega)
}

/// One-sided Lorentzian D / (pi^2 (fc^2 + f^2)).
fn lorentzian(f: f64, fc: f64, d: f64) -> f64 {
    d / (PI * PI * fc.mul_add(fc, f * f))
}

/// sinc^2(pi f W), the power transfer of a box-car average of width W.
fn sinc_squared(f: f64, w: f64) -> f64 {
    let x = PI * f * w;
    if x == 0.0 { 1.0 } else { (x.sin() / x).powi(2) }
}

const FILTER: DetectorFilter = DetectorFilter {
    f3db_hz: 6000.0,
    alpha: 0.15,
};

#[test]
fn gauss_legendre_is_exact_for_polynomials_of_degree_below_twice_the_points() {
    // integral_{-1}^{1} x^k dx = 2/(k+1) for even k, 0 for odd k (exact).
    for n_points in [1, 2, 5, 8, 10, 16] {
        let (nodes, weights) = gauss_legendre(n_points);
        assert!((weights.iter().sum::<f64>() - 2.0).abs() < 1e-14);
        for k in 0..2 * n_points {
            let got: f64 = nodes
                .iter()
                .zip(&weights)
                .map(|(x, w)| w * x.powi(k as i32))
                .sum();
            let want = if k % 2 == 0 {
                2.0 / (k as f64 + 1.0)
            } else {
                0.0
            };
            assert!(
                (got - want).abs() < 1e-14,
                "{n_points} points, x^{k}: {got} vs {want}"
            );
        }
    }
}

#[test]
fn cosine_rule_reproduces_the_exact_transform_of_a_lorentzian() {
    // integral_0^inf cos(a x)/(b^2 + x^2) dx = pi e^(-a b)/(2 b) (I. S. Gradshteyn and
    // I. M. Ryzhik, Table of Integrals, 3.723.2, recalled from memory, unverified; it is the
    // textbook Fourier pair of the Lorentzian), so the one-sided Lorentzian transforms to
    // sigma^2 exp(-2 pi fc t). Tolerance 1e-11 sigma^2 over fc t from 1e-4 to 1e2: the rule's
    // error grows as fc t falls (2.2e-12 at fc t = 1e-4, where the Lorentzian's whole weight
    // sits far inside the first period); the fit applies it only to the hydrodynamic remainder,
    // whose weight lies at the higher frequency scales f_nu and f_m.
    for fc in [10.0, 100.0, 1000.0, 10_000.0, 30_000.0] {
        let d = 2.0 * PI * fc; // sigma^2 = 1
        for k in [1u32, 2, 5, 20, 100, 1000, 10_000] {
            let t = f64::from(k) * 1e-5;
            if fc * t < 1e-4 {
                continue;
            }
            let rule = cosine_rule(t);
            let got = rule.apply(|f| lorentzian(f, fc, d));
            let want = (-2.0 * PI * fc * t).exp();
            assert!(
                (got - want).abs() < 1e-11,
                "fc {fc}, t {t}: {got} vs {want}, error {:e}",
                got - want
            );
        }
    }
}

#[test]
fn integral_rule_integrates_a_lorentzian_to_its_variance() {
    // integral_0^inf D/(pi^2 (fc^2 + f^2)) df = D/(2 pi fc) exactly; the rule covers
    // [1e-14, 1e14] Hz, the part below is S(0) f_lo (relative 2 f_lo/(pi fc) < 1e-14 here)
    // and the tail above is D/(pi^2 f_hi) (exact for the f^-2 tail to relative order
    // (fc/f_hi)^2).
    let (lo, hi) = (1e-14, 1e14);
    let rule = integral_rule(lo, hi);
    for fc in [1.0, 100.0, 1000.0, 100_000.0] {
        let d = 2.0 * PI * fc;
        let got = rule.apply(|f| lorentzian(f, fc, d)) + d / (PI * PI * hi);
        assert!((got - 1.0).abs() < 1e-12, "fc {fc}: {got}");
    }
}

#[test]
fn brute_force_reference_reproduces_the_exact_lorentzian_transform() {
    // Oracle chain: the slow reference is checked on the exact Lorentzian pair (previous test's
    // source) before it is used on the filtered and blurred spectra.
    let fc = 1000.0;
    let d = 2.0 * PI * fc;
    for t in [0.0, 1e-5, 3e-5, 2e-4, 1e-3] {
        let got = brute_cosine_transform(&|f| lorentzian(f, fc, d), t, fc, None);
        let want = (-2.0 * PI * fc * t).exp();
        assert!((got - want).abs() < 1e-11, "t {t}: {got} vs {want}");
    }
}

#[track_caller]
fn check_closed_form(
    model: &TimeDomainModel,
    fc: f64,
    spectrum: &dyn Fn(f64) -> f64,
    lags: &[usize],
) {
    let d = 2.0 * PI * fc;
    let oscillation_hz = model.exposure_s.map(|w| 1.0 / w);
    let dt = 1.0 / model.sample_rate_hz;
    for &lag in lags {
        let closed = model.autocovariance_at(lag, fc, d);
        let brute = brute_cosine_transform(spectrum, lag as f64 * dt, fc, oscillation_hz);
        assert!(
            (closed - brute).abs() < 1e-10,
            "{model:?}, fc {fc}, lag {lag}: closed form {closed} vs numerical transform {brute}"
        );
    }
}

#[test]
fn closed_forms_equal_the_numerical_cosine_transform_of_their_spectra() {
    // Each closed form against the brute-force cosine transform of its unaliased spectrum
    // (sampling does not alias the autocovariance): the filtered Lorentzian g(f) S(f)
    // (Berg-Sorensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003), citation
    // recalled from memory, unverified), the box-car blurred Lorentzian S(f) sinc^2(pi f W)
    // (Wong & Halvorsen, Opt. Express 14, 12517 (2006)) and both together. sigma^2 = 1;
    // tolerance 1e-10 (the reference's own error is near 1e-12, previous test).
    let lags = [0, 1, 2, 5, 20, 100];
    let plain = TimeDomainModel::plain(100_000.0);
    check_closed_form(
        &plain,
        1000.0,
        &|f| lorentzian(f, 1000.0, 2.0 * PI * 1000.0),
        &lags,
    );
    let filtered = TimeDomainModel {
        filter: Some(FILTER),
        ..plain
    };
    for fc in [1000.0, 3000.0] {
        let spectrum = move |f: f64| lorentzian(f, fc, 2.0 * PI * fc) * FILTER.gain(f);
        check_closed_form(&filtered, fc, &spectrum, &lags);
    }
    // fc next to f3dB: split exponentials just above the threshold, a divided difference below
    // it, and the limit fc = f3dB itself.
    for fc in [
        6000.0 * 1.002,
        6000.0 * (1.0 + 1e-4),
        6000.0 * (1.0 + 1e-7),
        6000.0,
    ] {
        let spectrum = move |f: f64| lorentzian(f, fc, 2.0 * PI * fc) * FILTER.gain(f);
        check_closed_form(&filtered, fc, &spectrum, &lags);
    }
    for (fs, exposure_fraction, fc) in [
        (4000.0, 1.0, 300.0),
        (2000.0, 0.4, 190.0),
        (5000.0, 1.0, 380.0),
    ] {
        let w = exposure_fraction / fs;
        let blurred = TimeDomainModel {
            exposure_s: Some(w),
            ..TimeDomainModel::plain(fs)
        };
        let spectrum = move |f: f64| lorentzian(f, fc, 2.0 * PI * fc) * sinc_squared(f, w);
        check_closed_form(&blurred, fc, &spectrum, &[0, 1, 2, 3, 7]);
        let both = TimeDomainModel {
            filter: Some(DetectorFilter {
                f3db_hz: 900.0,
                alpha: 0.3,
            }),
            ..blurred
        };
        let filter = both.filter.unwrap_or(FILTER);
        let spectrum =
            move |f: f64| lorentzian(f, fc, 2.0 * PI * fc) * sinc_squared(f, w) * filter.gain(f);
        check_closed_form(&both, fc, &spectrum, &[0, 1, 2, 3, 7]);
    }
}

/// The box-car covariance by a direct double integral:
/// `(1/W^2) integral_0^W integral_0^W sigma^2 exp(-|k dt + a - b|/tau) da db` with sigma^2 = 1,
/// by 16-point Gauss-Legendre on 8 x 8 panels. For k = 0 the kink on the diagonal is avoided
/// by integrating over the triangle b < a (twice, by symmetry) with the inner variable scaled
/// to [0, a].
fn box_double_integral(lag: usize, dt: f64, w: f64, tau: f64) -> f64 {
    let (nodes, weights) = gauss_legendre(16);
    let panels = 8;
    let h = w / f64::from(panels);
    let mut points = Vec::new();
    for p in 0..panels {
        let lo = f64::from(p) * h;
        points.extend(nodes.iter().map(|x| (0.5 * h).mul_add(x + 1.0, lo)));
    }
    let point_weights: Vec<f64> = (0..panels)
        .flat_map(|_| weights.iter().map(|wt| 0.5 * h * wt))
        .collect();
    let mut total = 0.0;
    if lag == 0 {
        for (a, wa) in points.iter().zip(&point_weights) {
            // Inner integral over b in [0, a] of exp(-(a - b)/tau).
            let inner: f64 = nodes
                .iter()
                .zip(&weights)
                .map(|(x, wt)| {
                    let b = 0.5 * a * (x + 1.0);
                    0.5 * a * wt * (-(a - b) / tau).exp()
                })
                .sum();
            total += 2.0 * wa * inner;
        }
    } else {
        let t = lag as f64 * dt;
        for (a, wa) in points.iter().zip(&point_weights) {
            for (b, wb) in points.iter().zip(&point_weights) {
                total += wa * wb * (-(t + a - b).abs() / tau).exp();
            }
        }
    }
    total / (w * w)
}

#[test]
fn blurred_ornstein_uhlenbeck_equals_the_direct_double_integral() {
    // The covariance of box-car averages of an Ornstein-Uhlenbeck process is the double
    // integral of its autocovariance sigma^2 exp(-|t|/tau) over both windows (definition);
    // lag 0 is Wong & Halvorsen's S(W/tau). Tolerance 1e-13.
    for (fs, fraction, fc) in [
        (4000.0, 1.0, 300.0),
        (2000.0, 0.3, 190.0),
        (5000.0, 0.999, 380.0),
    ] {
        let dt = 1.0 / fs;
        let w = fraction * dt;
        let tau = 1.0 / (2.0 * PI * fc);
        let model = TimeDomainModel {
            exposure_s: Some(w),
            ..TimeDomainModel::plain(fs)
        };
        for lag in [0, 1, 2, 5] {
            let closed = model.autocovariance_at(lag, fc, 2.0 * PI * fc);
            let direct = box_double_integral(lag, dt, w, tau);
            assert!(
                (closed - direct).abs() < 1e-13,
                "fs {fs}, W/dt {fraction}, lag {lag}: {closed} vs {direct}"
            );
        }
    }
}

#[test]
fn box_variance_factor_series_and_closed_form_agree_at_the_switch() {
    // S(a) = 2(a - 1 + e^-a)/a^2 (Wong & Halvorsen 2006): the series below a = 0.05 and the
    // closed form above must join. Written with expm1, the closed form at a = 0.05 loses
    // about 2 eps/a = 9e-15 to cancellation; tolerance 3e-14.
    let below = box_variance_factor(0.05 * (1.0 - 1e-12));
    let a = 0.05_f64;
    let closed = 2.0 * (a + (-a).exp_m1()) / (a * a);
    assert!((below - closed).abs() < 3e-14, "{below} vs {closed}");
    assert_eq!(box_variance_factor(0.0), 1.0);
    // S(a) -> 2/a for large a.
    assert!((box_variance_factor(1e6) * 1e6 / 2.0 - 1.0).abs() < 1e-5);
}

/// Parameters of polystyrene beads in water at 25 C: f_nu and f_m from the drag module
/// (formulas of Berg-Sorensen & Flyvbjerg 2004) with the IAPWS 2008 viscosity and the Tanaka
/// density of the water module.
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

#[test]
fn hydrodynamic_variance_is_kt_over_kappa() {
    // Fluctuation-dissipation theorem: the equilibrium variance of a bead in a harmonic trap is
    // k_B T/kappa = D/(2 pi fc) whatever the frequency dependence of the drag (equipartition of
    // the potential energy; an exact result). So C(0) of the hydrodynamic model equals sigma^2;
    // tolerance 1e-12 relative.
    for diameter in [0.5e-6, 1e-6, 3e-6] {
        let model = TimeDomainModel {
            hydro: Some(bead_hydro(diameter)),
            ..TimeDomainModel::plain(100_000.0)
        };
        for fc in [30.0, 300.0, 1000.0, 10_000.0] {
            let d = 2.0 * PI * fc * 3.7;
            let got = model.detector_variance(fc, d) / 3.7;
            assert!((got - 1.0).abs() < 1e-12, "{diameter} m, fc {fc}: {got}");
            assert_eq!(variance_factor(&model, fc), 1.0);
        }
    }
}

#[test]
fn hydrodynamic_autocovariance_has_the_negative_t_to_minus_three_halves_tail() {
    // The hydrodynamic long-time tail (B. J. Alder and T. E. Wainwright, Phys. Rev. A 1, 18
    // (1970), recalled from memory, unverified): for a trapped bead the position autocovariance
    // turns negative and decays as t^(-3/2) instead of exponentially. Checked against the
    // two-term asymptote derived at `HydroTail` (which the fit uses for the far part of the
    // mean-removal bias): at t = 50 to 400 tau the value must be negative, the leading term
    // alone must be off by 3 tau/t to within 20 % (the next order), and what the two terms
    // leave must shrink as (tau/t)^2.
    let hydro = bead_hydro(3e-6);
    let fs = 100_000.0;
    let model = TimeDomainModel {
        hydro: Some(hydro),
        ..TimeDomainModel::plain(fs)
    };
    let fc = 1000.0;
    let d = 2.0 * PI * fc;
    let tau = 1.0 / (2.0 * PI * fc);
    let mut scaled_residuals = Vec::new();
    for multiple in [400.0, 200.0, 100.0, 50.0] {
        let lag = (multiple * tau * fs).round() as usize;
        let t = lag as f64 / fs;
        let value = model.autocovariance_at(lag, fc, d);
        let tail = HydroTail::new(fc, d, hydro.f_nu_hz, 1.0 / fs);
        let two_terms = tail.at(lag as f64);
        let leading = tail.coefficient * (lag as f64).powf(-1.5);
        assert!(value < 0.0, "t = {multiple} tau: {value}");
        let next_order = (value / leading - 1.0) * t / tau;
        assert!(
            (next_order / 3.0 - 1.0).abs() < 0.2,
            "t = {multiple} tau: value {value:e}, leading {leading:e}, next order {next_order}"
        );
        // What the two terms leave is of order (tau/t)^2: scaled by (t/tau)^2 it is a constant
        // (11.3 here), the same at every t to a few per cent.
        let scaled = (value / two_terms - 1.0) * (t / tau).powi(2);
        scaled_residuals.push(scaled);
        assert!(
            scaled.abs() < 15.0,
            "t = {multiple} tau: scaled residual {scaled}"
        );
        // The exponential part alone is below 1e-21 here: the tail is all hydrodynamic.
        assert!((-t / tau).exp() < 1e-21);
    }
    let (far, near) = (scaled_residuals[0], scaled_residuals[2]);
    assert!((near / far - 1.0).abs() < 0.05, "{scaled_residuals:?}");
}

#[test]
fn hydrodynamic_autocovariance_matches_the_scipy_fixture() {
    // tests/data/acf_models/hydro_acf.csv: the whole hydrodynamic spectrum (with filter or
    // blur) integrated by scipy.integrate.quad(weight='cos') (QUADPACK QAWF), sigma^2 = 1; the
    // script's two evaluations agree to 6e-9, so the tolerance is 3e-8.
    let fixture = include_str!("../../tests/data/acf_models/hydro_acf.csv");
    let mut rows = 0;
    for line in fixture.lines().skip(1) {
        let fields: Vec<f64> = line
            .split(',')
            .map(|field| field.parse().unwrap_or(f64::NAN))
            .collect();
        let [_, f_nu, f_m, fc, d, f3, alpha, w, fs, lag, want] = fields[..] else {
            panic!("hydro_acf.csv: bad line {line}");
        };
        let model = TimeDomainModel {
            sample_rate_hz: fs,
            filter: (f3 > 0.0).then_some(DetectorFilter { f3db_hz: f3, alpha }),
            hydro: Some(HydroTerms {
                f_nu_hz: f_nu,
                f_m_hz: f_m,
            }),
            exposure_s: (w > 0.0).then_some(w),
        };
        let got = model.autocovariance_at(lag as usize, fc, d);
        assert!(
            (got - want).abs() < 3e-8,
            "{line}: got {got}, error {:e}",
            got - want
        );
        rows += 1;
    }
    assert_eq!(rows, 117, "hydro_acf.csv rows");
}

#[track_caller]
fn check_series_against_single_lags(model: &TimeDomainModel, fc: f64, max_lag: usize) {
    let d = 2.0 * PI * fc * 0.8;
    let mut evaluator = SeriesEvaluator::new(model, max_lag, fc);
    let series = evaluator.series(fc, d);
    for lag in 0..=max_lag {
        let single = model.autocovariance_at(lag, fc, d);
        let from_series = series.at(lag);
        assert!(
            (single - from_series).abs() < 1e-12 * series.at(0).abs(),
            "{model:?} fc {fc} lag {lag}: {single} vs {from_series}"
        );
    }
}

#[test]
fn lag_series_equals_the_single_lag_evaluation() {
    // The series (sampled exponentials plus numerical remainder, used by the fit) and
    // `autocovariance_at` (divided differences, one rule per lag) are two computations of the
    // same closed forms and quadratures; they must agree to rounding.
    let plain = TimeDomainModel::plain(100_000.0);
    let filtered = TimeDomainModel {
        filter: Some(FILTER),
        ..plain
    };
    let blurred = TimeDomainModel {
        exposure_s: Some(1.0 / 4000.0),
        ..TimeDomainModel::plain(4000.0)
    };
    let hydro = TimeDomainModel {
        hydro: Some(bead_hydro(3e-6)),
        ..plain
    };
    let everything = TimeDomainModel {
        filter: Some(DetectorFilter {
            f3db_hz: 2000.0,
            alpha: 0.3,
        }),
        hydro: Some(bead_hydro(1e-6)),
        exposure_s: Some(0.8 / 4000.0),
        ..TimeDomainModel::plain(4000.0)
    };
    check_series_against_single_lags(&plain, 1000.0, 40);
    check_series_against_single_lags(&filtered, 1000.0, 40);
    check_series_against_single_lags(&filtered, 6000.0, 40);
    check_series_against_single_lags(&filtered, 6000.0 * (1.0 + 5e-4), 40);
    check_series_against_single_lags(&blurred, 300.0, 10);
    check_series_against_single_lags(
        &TimeDomainModel {
            filter: Some(FILTER),
            ..blurred
        },
        300.0,
        10,
    );
    check_series_against_single_lags(&hydro, 1000.0, 40);
    check_series_against_single_lags(&everything, 250.0, 8);
}

#[test]
fn variance_factor_has_the_closed_forms_of_each_effect() {
    // Filter: alpha^2 + (1 - alpha^2) f3/(f3 + fc) (value at t = 0 of the filtered closed form,
    // shared/PHYSICS.md section 12); blur: S(W/tau) (Wong & Halvorsen 2006); plain: 1.
    let fc = 1000.0;
    let filtered = TimeDomainModel {
        filter: Some(FILTER),
        ..TimeDomainModel::plain(100_000.0)
    };
    let a2 = 0.15 * 0.15;
    let want = a2 + (1.0 - a2) * 6000.0 / 7000.0;
    assert!((variance_factor(&filtered, fc) - want).abs() < 1e-15);
    assert!(variance_factor(&filtered, fc) < 1.0);
    let fs = 4000.0;
    let blurred = TimeDomainModel {
        exposure_s: Some(1.0 / fs),
        ..TimeDomainModel::plain(fs)
    };
    let a = 2.0 * PI * 300.0 / fs;
    let want = 2.0 / a - 2.0 * (1.0 - (-a).exp()) / (a * a);
    assert!((variance_factor(&blurred, 300.0) - want).abs() < 1e-14);
    assert_eq!(variance_factor(&TimeDomainModel::plain(fs), 300.0), 1.0);
    // Filter and blur together do not multiply: the combined factor is C(0) of the combined
    // model, checked against the brute-force transform of g(f) sinc^2 S(f).
    let both = TimeDomainModel {
        filter: Some(DetectorFilter {
            f3db_hz: 900.0,
            alpha: 0.3,
        }),
        ..blurred
    };
    let filter = both.filter.unwrap_or(FILTER);
    let brute = brute_cosine_transform(
        &|f| lorentzian(f, 300.0, 2.0 * PI * 300.0) * filter.gain(f) * sinc_squared(f, 1.0 / fs),
        0.0,
        300.0,
        Some(fs),
    );
    let combined = variance_factor(&both, 300.0);
    assert!((combined - brute).abs() < 1e-10, "{combined} vs {brute}");
    let product = variance_factor(&blurred, 300.0)
        * variance_factor(
            &TimeDomainModel {
                exposure_s: None,
                ..both
            },
            300.0,
        );
    assert!(
        (combined - product).abs() > 1e-3,
        "{combined} vs product {product}"
    );
}

#[test]
fn invalid_models_are_rejected_with_the_field_named() {
    let base = TimeDomainModel::plain(1000.0);
    let check = |model: TimeDomainModel, field: &str| {
        let Err(error) = model.validate() else {
            panic!("{model:?} accepted");
        };
        assert!(error.to_string().contains(field), "{error}");
        assert!(model.autocovariance_at(1, 10.0, 1.0).is_nan());
    };
    check(
        TimeDomainModel {
            exposure_s: Some(2e-3),
            ..base
        },
        "exposure_s",
    );
    check(
        TimeDomainModel {
            exposure_s: Some(0.0),
            ..base
        },
        "exposure_s",
    );
    check(
        TimeDomainModel {
            filter: Some(DetectorFilter {
                f3db_hz: 1e3,
                alpha: 1.5,
            }),
            ..base
        },
        "filter.alpha",
    );
    check(
        TimeDomainModel {
            hydro: Some(HydroTerms {
                f_nu_hz: f64::NAN,
                f_m_hz: 1.0,
            }),
            ..base
        },
        "hydro.f_nu_hz",
    );
    assert!(matches!(
        TimeDomainModel::plain(-1.0).validate(),
        Err(AcfError::InvalidSampleRate { .. })
    ));
    assert!(
        TimeDomainModel {
            exposure_s: Some(1e-3),
            ..base
        }
        .validate()
        .is_ok()
    );
}

/// Brute-force `Cov(C^_k, C^_l)` of count-normalised sample autocovariances of a zero-mean
/// Gaussian process with autocovariance `g`: `(1/((N-k)(N-l))) sum_{j<N-k} sum_{i<N-l}
/// [g(i-j) g(i-j+l-k) + g(i-j+l) g(i-j-k)]` (Isserlis' theorem, every pair summed).
fn brute_covariance(g: &dyn Fn(usize) -> f64, n: usize, k: usize, l: usize) -> f64 {
    let at = |d: i64| g(d.unsigned_abs() as usize);
    let (k_i, l_i) = (k as i64, l as i64);
    let mut sum = 0.0;
    for j in 0..(n - k) as i64 {
        for i in 0..(n - l) as i64 {
            let d = i - j;
            sum += at(d).mul_add(at(d + l_i - k_i), at(d + l_i) * at(d - k_i));
        }
    }
    sum / ((n - k) * (n - l)) as f64
}

/// A series with two exponential terms of opposite sign, a remainder of 30 lags and a lag 0
/// that is not the sum of the terms (like the blurred or noisy lag 0): arbitrary numbers.
fn mixed_series() -> LagSeries {
    LagSeries {
        lag0: 1.3,
        terms: vec![(0.7, 0.9_f64.ln()), (-0.2, 0.4_f64.ln())],
        remainder: (1..=30)
            .map(|u| 0.05 * (f64::from(u) * 0.7).sin() / f64::from(u))
            .collect(),
        tail: None,
    }
}

#[test]
fn general_bartlett_covariance_equals_the_direct_count_sum() {
    // Isserlis' theorem summed over every index pair (brute force) against the closed sums of
    // `LagSeries::autocovariance_covariance`; N - l is large enough that the neglected clamp
    // (terms of order g(N - l)^2 ~ 0.9^700) is far below rounding.
    let series = mixed_series();
    let n_samples = 400;
    let lags = [0, 1, 2, 3, 5, 8, 13, 21];
    let cov = series.autocovariance_covariance(&lags, n_samples, 0.0);
    let g = |d: usize| series.at(d);
    for (i, &k) in lags.iter().enumerate() {
        for (j, &l) in lags.iter().enumerate() {
            let want = brute_covariance(&g, n_samples, k, l);
            assert!(
                (cov[(i, j)] - want).abs() <= 1e-12 * cov[(i, i)].abs(),
                "lags {k}, {l}: {} vs {want}",
                cov[(i, j)]
            );
        }
    }
}

#[test]
fn general_bartlett_covariance_reduces_to_the_ar1_closed_form() {
    // A single exponential term b = A c, q = c is the AR(1) autocovariance A c^k, for which
    // `autocovariance_covariance_ar1` is the closed form (itself checked against brute force).
    for (c, n) in [(0.93_f64, 300), (0.5, 80), (0.999, 100_000)] {
        let amplitude = 2.5;
        let series = LagSeries {
            lag0: amplitude,
            terms: vec![(amplitude * c, c.ln())],
            remainder: Vec::new(),
            tail: None,
        };
        let lags: Vec<usize> = (0..12).map(|i| 2 * i + 1).chain([0]).collect();
        let cov = series.autocovariance_covariance(&lags, n, 0.0);
        for (i, &k) in lags.iter().enumerate() {
            for (j, &l) in lags.iter().enumerate() {
                let want = autocovariance_covariance_ar1(amplitude, c, k, l, n);
                assert!(
                    (cov[(i, j)] - want).abs() <= 1e-10 * cov[(i, i)].abs(),
                    "c {c}, lags {k}, {l}: {} vs {want}",
                    cov[(i, j)]
                );
            }
        }
    }
}

#[test]
fn mean_variance_equals_the_double_sum_over_pairs() {
    // Var(xbar) = (1/N^2) sum_i sum_j g(|i - j|) (definition), directly, for both branches of
    // the geometric sums (q above and below 1/2) and the remainder.
    let series = mixed_series();
    for n in [1usize, 2, 3, 17, 50, 300] {
        let mut sum = 0.0;
        for i in 0..n {
            for j in 0..n {
                sum += series.at(i.abs_diff(j));
            }
        }
        let want = sum / (n * n) as f64;
        let got = series.mean_variance(n);
        assert!((got - want).abs() < 1e-14, "N {n}: {got} vs {want}");
    }
    // One term A c^k reproduces A v(c, N) of `mean_bias_ar1`.
    let c = 0.97_f64;
    let ar1 = LagSeries {
        lag0: 2.0,
        terms: vec![(2.0 * c, c.ln())],
        remainder: Vec::new(),
        tail: None,
    };
    for n in [10usize, 1000, 1 << 16] {
        let want = 2.0 * mean_bias_ar1(c, n);
        assert!((ar1.mean_variance(n) / want - 1.0).abs() < 1e-13);
    }
}

#[test]
fn hydrodynamic_tail_sum_equals_the_direct_sum() {
    // The closed-form midpoint integral of `HydroTail::weighted_sum` against the direct sum
    // of (1 - u/N) r(u) over u = first..N-1; the midpoint rule's error for a u^(-3/2) decay
    // from first = 500 is of order 1e-7 relative (Euler-Maclaurin), tolerance 1e-6.
    let tail = HydroTail {
        coefficient: -2.0e-3,
        tau_lags: 16.0,
    };
    for (first, n) in [(500usize, 65_536usize), (500, 2000), (3000, 100_000)] {
        let direct: f64 = (first..n)
            .map(|u| (1.0 - u as f64 / n as f64) * tail.at(u as f64))
            .sum();
        let closed = tail.weighted_sum(first, n);
        assert!(
            (closed / direct - 1.0).abs() < 1e-6,
            "{first}, {n}: {closed} vs {direct}"
        );
    }
    assert_eq!(tail.weighted_sum(10, 10), 0.0);
}
