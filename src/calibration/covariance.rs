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

use crate::spectrum::{FilterSetting, ImageTable, Params, SpectrumModel};
use std::cell::RefCell;
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
    /// The white noise variance sigma_n^2 = P_n / (2 dt) that equipartition subtracted from the
    /// sample variance, with the index of ln P_n in theta; `None` without a fitted floor.
    pub(crate) noise_floor: Option<(usize, f64)>,
}

/// Covariance matrix of (ln fc, ln D, ln tau, ln variance), dimensionless.
///
/// The integral is the trapezoid rule on an even grid over 0..f_Nyquist. Per grid point the work
/// is shared: the spectrum and d ln S / d theta come from one evaluation (analytically for the
/// closed-form aliased Lorentzian, else by central differences of parameters decoded once), the
/// fit-range weights are formed only inside the fit band, and the lag cosines of the
/// autocorrelation weight advance by a rotating phasor (see `LagCosines`).
// Index loops mirror the matrix formula.
#[allow(clippy::needless_range_loop)]
pub(crate) fn log_covariance(inp: &InfluenceInputs<'_>) -> [[f64; 4]; 4] {
    let nyquist = inp.sample_rate_hz / 2.0;
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
    let spectrum = SpectrumAndGradient::new(inp.model, inp.theta);
    let mut lag_cosines = LagCosines::new(inp.tau_influence, n_grid);
    let mut dlns = vec![0.0; inp.theta.len()];
    let mut acc = [[0.0f64; 4]; 4];
    for i in 0..=n_grid {
        let f = i as f64 * df;
        // Trapezoid rule weights.
        let w = if i == 0 || i == n_grid { 0.5 } else { 1.0 } * df;
        let in_band = f >= inp.fit_min_hz && f <= inp.fit_max_hz;
        let s = if in_band {
            spectrum.value_and_log_gradient(f, &mut dlns)
        } else {
            spectrum.value(f)
        };
        let mut a = [0.0f64; 4];
        if in_band {
            for (slot, row) in a.iter_mut().zip(inp.theta_covariance.iter().take(2)) {
                let proj: f64 = row.iter().zip(&dlns).map(|(c, d)| c * d).sum();
                *slot = inp.record_length_s * proj / s;
            }
        }
        a[2] = lag_cosines.weighted_sum() / inp.relaxation_time_s;
        // Equipartition's variance less the fitted floor, s^2 - sigma_n^2: its influence is
        // 1 - sigma_n^2 a_{ln P_n}(f), so it shares the spectral fit's scatter in the band.
        let floor_influence = match inp.noise_floor {
            Some((index, noise_variance)) if in_band => {
                let row = &inp.theta_covariance[index];
                let proj: f64 = row.iter().zip(&dlns).map(|(c, d)| c * d).sum();
                noise_variance * inp.record_length_s * proj / s
            }
            _ => 0.0,
        };
        a[3] = (1.0 - floor_influence) / inp.variance;
        let s2 = s * s * w / inp.record_length_s;
        // Outside the band a[0] = a[1] = 0, so only the lower-right block gains anything.
        let first = if in_band { 0 } else { 2 };
        for p in first..4 {
            for q in p..4 {
                acc[p][q] += a[p] * a[q] * s2;
            }
        }
    }
    for p in 0..4 {
        for q in 0..p {
            acc[p][q] = acc[q][p];
        }
    }
    acc
}

/// Correlation matrix of (ln fc, ln D, ln tau, ln variance) for the methods that exist on this
/// record (a failed method is `None`; its row and column are zero off the diagonal).
///
/// Without a spectral fit the spectrum S(f) that sets the periodogram's scatter is the plain
/// aliased Lorentzian at the autocorrelation fit's estimate, which is what that fit assumes.
pub(crate) fn method_correlation(
    model: &SpectrumModel,
    fit: Option<&crate::spectrum::SpectrumFit>,
    acf: Option<&crate::autocorrelation::ExponentialFit>,
    variance: Option<f64>,
    record_length_s: f64,
    sample_rate_hz: f64,
) -> [[f64; 4]; 4] {
    let mut identity = [[0.0; 4]; 4];
    for (i, row) in identity.iter_mut().enumerate() {
        row[i] = 1.0;
    }
    let (model, theta, theta_covariance, fit_min_hz, fit_max_hz) = match (fit, acf) {
        (Some(f), _) => (
            *model,
            f.theta.clone(),
            f.covariance.clone(),
            f.f_min_hz,
            f.f_max_hz,
        ),
        (None, Some(a)) => {
            let fc = 1.0 / (2.0 * PI * a.relaxation_time_s);
            let d = a.amplitude * 2.0 * PI * fc;
            let plain = SpectrumModel {
                sample_rate_hz,
                aliasing: true,
                filter: FilterSetting::None,
                hydro: None,
                exposure_s: None,
                noise_floor: false,
            };
            // An empty fit band: no spectral weights.
            (
                plain,
                vec![fc.ln(), d.ln()],
                vec![vec![0.0; 2]; 2],
                1.0,
                0.0,
            )
        }
        (None, None) => return identity,
    };
    let (tau_influence, relaxation_time_s): (&[(usize, f64)], f64) = match acf {
        Some(a) => (&a.tau_influence, a.relaxation_time_s),
        None => (&[], 1.0),
    };
    let cov = log_covariance(&InfluenceInputs {
        model: &model,
        theta: &theta,
        theta_covariance: &theta_covariance,
        fit_min_hz,
        fit_max_hz,
        record_length_s,
        sample_rate_hz,
        tau_influence,
        relaxation_time_s,
        variance: variance.unwrap_or(1.0),
        noise_floor: fit.and_then(|f| {
            let index = f.model.noise_floor_index()?;
            Some((index, f.noise_floor()?.variance))
        }),
    });
    let mut r = correlation(&cov);
    let present = [
        fit.is_some(),
        fit.is_some(),
        acf.is_some(),
        variance.is_some(),
    ];
    for i in 0..4 {
        for j in 0..4 {
            if !(present[i] && present[j]) {
                r[i][j] = identity[i][j];
            }
        }
    }
    r
}

/// Step of the central differences of ln S in theta (log-space parameters), used when the model
/// has no closed form.
const DERIVATIVE_STEP: f64 = 1e-5;

/// The model spectrum at fixed theta, evaluated with everything that does not depend on the
/// frequency worked out once.
enum SpectrumAndGradient<'a> {
    /// The closed-form aliased Lorentzian (aliasing on, no filter, no hydrodynamics, no
    /// exposure):
    /// S(f) = num / (1 + c^2 - 2 c cos(2 pi f dt)), num = 2 sigma^2 dt (1 - c^2),
    /// sigma^2 = D / (2 pi fc), c = exp(-a), a = 2 pi fc dt, exactly as
    /// `spectrum::aliased_lorentzian_one_sided` computes it. In theta = (ln fc, ln D):
    /// d ln S / d ln D = 1 and
    /// d ln S / d ln fc = -1 + 2 a c^2 / (1 - c^2) + 2 a c (c - cos(2 pi f dt)) / den
    /// (derived here from dc / d ln fc = -a c; checked against central differences in the tests).
    ClosedForm {
        dt: f64,
        c: f64,
        numerator: f64,
        /// -1 + 2 a c^2 / (1 - c^2), the frequency-independent part of d ln S / d ln fc.
        dlns_dlnfc_constant: f64,
        /// 2 a c.
        two_a_c: f64,
    },
    /// Any other model: S from `psd_params` (from the frequency's image table, built once for
    /// the 1 + 2 n evaluations, when the model tables its alias images: see
    /// `SpectrumModel::image_table`), d ln S / d theta by central differences with the
    /// parameters of theta and of theta +- h e_j decoded once.
    Numerical {
        model: &'a SpectrumModel,
        centre: Params,
        /// (theta + h e_j, theta - h e_j) decoded, for each parameter j.
        steps: Vec<(Params, Params)>,
        /// The image table of the frequency last evaluated (reused storage).
        table: RefCell<ImageTable>,
    },
}

impl<'a> SpectrumAndGradient<'a> {
    fn new(model: &'a SpectrumModel, theta: &[f64]) -> Self {
        let closed_form = model.aliasing
            && model.filter == FilterSetting::None
            && model.hydro.is_none()
            && model.exposure_s.is_none()
            && theta.len() == 2;
        if closed_form {
            let p = model.decode(theta);
            let dt = 1.0 / model.sample_rate_hz;
            let a = 2.0 * PI * p.fc * dt;
            let c = (-2.0 * PI * p.fc * dt).exp();
            let variance = p.d / (2.0 * PI * p.fc);
            let one_minus_c2 = c.mul_add(-c, 1.0);
            return SpectrumAndGradient::ClosedForm {
                dt,
                c,
                numerator: 2.0 * variance * dt * one_minus_c2,
                dlns_dlnfc_constant: (2.0 * a * c * c / one_minus_c2) - 1.0,
                two_a_c: 2.0 * a * c,
            };
        }
        let mut t = theta.to_vec();
        let steps = (0..theta.len())
            .map(|j| {
                t[j] = theta[j] + DERIVATIVE_STEP;
                let up = model.decode(&t);
                t[j] = theta[j] - DERIVATIVE_STEP;
                let down = model.decode(&t);
                t[j] = theta[j];
                (up, down)
            })
            .collect();
        SpectrumAndGradient::Numerical {
            model,
            centre: model.decode(theta),
            steps,
            table: RefCell::new(ImageTable::default()),
        }
    }

    /// S(f), signal-units^2/Hz.
    fn value(&self, f_hz: f64) -> f64 {
        match self {
            &SpectrumAndGradient::ClosedForm {
                dt, c, numerator, ..
            } => {
                let cos = (2.0 * PI * f_hz * dt).cos();
                numerator / (2.0 * c).mul_add(-cos, c.mul_add(c, 1.0))
            }
            SpectrumAndGradient::Numerical {
                model,
                centre,
                table,
                ..
            } => {
                let mut table = table.borrow_mut();
                if model.fill_image_table(f_hz, &mut table) {
                    model.signal_psd_tabled(&table, centre) + centre.noise_floor
                } else {
                    model.psd_params(f_hz, centre)
                }
            }
        }
    }

    /// S(f), and d ln S / d theta written into `dlns` (one slot per parameter).
    fn value_and_log_gradient(&self, f_hz: f64, dlns: &mut [f64]) -> f64 {
        match self {
            &SpectrumAndGradient::ClosedForm {
                dt,
                c,
                numerator,
                dlns_dlnfc_constant,
                two_a_c,
            } => {
                let cos = (2.0 * PI * f_hz * dt).cos();
                let den = (2.0 * c).mul_add(-cos, c.mul_add(c, 1.0));
                dlns[0] = (two_a_c * (c - cos) / den) + dlns_dlnfc_constant;
                dlns[1] = 1.0;
                numerator / den
            }
            SpectrumAndGradient::Numerical {
                model,
                centre,
                steps,
                table,
            } => {
                let mut table = table.borrow_mut();
                let tabled = model.fill_image_table(f_hz, &mut table);
                let psd = |p: &Params| {
                    if tabled {
                        model.signal_psd_tabled(&table, p) + p.noise_floor
                    } else {
                        model.psd_params(f_hz, p)
                    }
                };
                for (d, (up, down)) in dlns.iter_mut().zip(steps) {
                    *d = (psd(up).ln() - psd(down).ln()) / (2.0 * DERIVATIVE_STEP);
                }
                psd(centre)
            }
        }
    }
}

/// Grid points between exact re-evaluations of the lag cosines. The rotation accumulates about
/// two rounding errors per step, so the cosines stay within ~1e-14 of the exact ones (checked in
/// the tests).
const RESEED_INTERVAL: usize = 32;

/// g(f_i) = sum_lag weight cos(2 pi f_i lag dt) on the grid f_i = i f_Nyquist / n_grid,
/// i = 0, 1, 2, ..., where the phase is 2 pi f_i lag dt = pi i lag / n_grid.
///
/// Along the grid each lag's phase advances by the same angle pi lag / n_grid, so its cosine and
/// sine follow from the previous point by one rotation, (cos, sin) <- (cos cr - sin sr,
/// sin cr + cos sr) with (cr, sr) = (cos, sin)(pi lag / n_grid) (the angle-addition formulas),
/// instead of a cos() per lag and point. The three-term recurrence
/// cos((m+1)x) = 2 cos x cos(mx) - cos((m-1)x) would be cheaper still, but its error grows like
/// eps / sin x, too fast for the low lags on a fine grid; the rotation's grows only linearly in the
/// steps. Every `RESEED_INTERVAL` points the phasors are set afresh from sin_cos of the phase
/// reduced exactly in integers, pi ((i lag) mod 2 n_grid) / n_grid, which is more accurate than
/// cos(2 pi f lag dt) itself for large lags (common practice for recursive oscillators).
struct LagCosines {
    /// lag, weight, rotation cosine, rotation sine, current cosine, current sine.
    lags: Vec<(u64, [f64; 5])>,
    n_grid: u64,
    /// Index of the next grid point.
    next_idx: u64,
}

impl LagCosines {
    fn new(tau_influence: &[(usize, f64)], n_grid: usize) -> Self {
        let n_grid = n_grid as u64;
        let lags = tau_influence
            .iter()
            .map(|&(lag, weight)| {
                let lag = lag as u64;
                let (sr, cr) = Self::phase(lag, n_grid).sin_cos();
                (lag, [weight, cr, sr, 1.0, 0.0])
            })
            .collect();
        LagCosines {
            lags,
            n_grid,
            next_idx: 0,
        }
    }

    /// pi (m mod 2 n_grid) / n_grid, rad.
    fn phase(m: u64, n_grid: u64) -> f64 {
        PI * (m % (2 * n_grid)) as f64 / n_grid as f64
    }

    /// g at the next grid point.
    #[allow(clippy::suboptimal_flops)]
    fn weighted_sum(&mut self) -> f64 {
        let idx = self.next_idx;
        let reseed = idx % RESEED_INTERVAL as u64 == 0;
        self.next_idx += 1;
        let mut g = 0.0;
        for (lag, [weight, cr, sr, cos, sin]) in &mut self.lags {
            if reseed {
                (*sin, *cos) = Self::phase(idx.wrapping_mul(*lag), self.n_grid).sin_cos();
            }
            // Plain products and sums, not mul_add: without FMA among the compile-time target
            // features every mul_add is a call into a library fma (about 5 % of a 2^16-sample
            // calibration in a perf profile); the error bound above holds either way (checked in
            // the tests).
            g += *weight * *cos;
            let next_cos = *cos * *cr - *sin * *sr;
            *sin = *sin * *cr + *cos * *sr;
            *cos = next_cos;
        }
        g
    }
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

#[cfg(test)]
#[path = "covariance_tests.rs"]
mod tests;
