//! Autocorrelation method: the sample autocovariance of a position trace and a generalised
//! least-squares fit of the exponential decay expected for a bead in a harmonic trap.
//!
//! A trapped bead is an Ornstein-Uhlenbeck process; sampled at `dt = 1/f_s` it is exactly an AR(1)
//! process with `c = exp(-dt/tau)` and autocovariance `C_k = sigma^2 c^k` (the overdamped limit of
//! S. F. Nørrelykke and H. Flyvbjerg, Phys. Rev. E 83, 041103 (2011)). Fitting that decay gives the
//! relaxation time `tau = gamma/kappa` and the amplitude `sigma^2 = k_B T/kappa` in signal units.
//! Sample autocovariances at neighbouring lags are strongly correlated, so the fit weights them by
//! the inverse of their asymptotic covariance (Bartlett's formula) rather than treating them as
//! independent points; this is what makes the reported standard errors honest.
//!
//! Real detectors do not record a plain exponential: the photodiode's parasitic filter, the
//! frequency dependence of the drag and a camera's exposure all change the autocovariance.
//! [`TimeDomainModel`] holds the same models the spectral fit has, as autocovariances (closed
//! forms, or a numerical cosine transform for hydrodynamic drag), and
//! [`fit_autocovariance_model`] fits fc and D to any of them with Bartlett weights computed from
//! the model itself; [`variance_factor`] corrects equipartition for the same effects.
//! The module is pure: plain slices in, plain structs out.

mod bartlett;
mod model;
mod model_fit;
mod quadrature;
mod series;

pub use model::{TimeDomainModel, variance_factor};
pub use model_fit::{ModelAcfFit, fit_autocovariance_model};

use nalgebra::{DMatrix, DVector, Matrix2, Vector2};
use realfft::num_complex::Complex;

/// Errors of the autocorrelation fit.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum AcfError {
    /// The sample rate is zero, negative or not finite.
    #[error(
        "sample_rate_hz = {value} is not a positive finite number; pass the recording's sampling rate in hertz"
    )]
    InvalidSampleRate {
        /// The rejected value.
        value: f64,
    },
    /// `max_lags_used` in the options is below 3, so no fit with a residual degree of freedom fits.
    #[error(
        "options.max_lags_used = {value} is below 3; at least 3 lags are needed to fit 2 parameters with a residual degree of freedom"
    )]
    InvalidMaxLags {
        /// The rejected value.
        value: usize,
    },
    /// The lag window holds fewer than 3 lags (2 parameters plus one degree of freedom).
    #[error(
        "too few lags for an exponential fit: lags {first_lag}..={last_lag} of an autocovariance with {n_lags} lags give {n_used} points, need at least 3; compute the autocovariance to a larger max_lag or widen options.first_lag..options.last_lag"
    )]
    TooFewLags {
        /// First lag of the window.
        first_lag: usize,
        /// Last lag of the window.
        last_lag: usize,
        /// Number of lags in the autocovariance given (lags 0..n_lags).
        n_lags: usize,
        /// Number of lags the window would use.
        n_used: usize,
    },
    /// `options.last_lag` lies beyond the autocovariance supplied.
    #[error(
        "options.last_lag = {last_lag} is beyond the autocovariance, which holds lags 0..={max_lag}; compute the autocovariance to a larger max_lag or lower options.last_lag"
    )]
    LagOutOfRange {
        /// The requested last lag.
        last_lag: usize,
        /// The largest lag available.
        max_lag: usize,
    },
    /// The record is too short for the lags used: lags beyond half the record are not used.
    #[error(
        "n_samples = {n_samples} is too few for lags up to {last_lag}; the record must be more than twice the last lag long, so record longer or lower options.last_lag"
    )]
    TooFewSamples {
        /// Number of samples the autocovariance came from.
        n_samples: usize,
        /// Last lag of the window.
        last_lag: usize,
    },
    /// An autocovariance value used by the fit is NaN or infinite.
    #[error(
        "autocovariance at lag {lag} is not finite ({value}); remove non-finite samples before computing it"
    )]
    NonFinite {
        /// The lag of the offending value.
        lag: usize,
        /// The offending value.
        value: f64,
    },
    /// The lag-0 autocovariance (the variance) is not positive: the data are constant.
    #[error(
        "autocovariance at lag 0 (the variance) is {value}, not positive; the trace is constant, check the channel and the detector"
    )]
    NonPositiveVariance {
        /// The lag-0 value.
        value: f64,
    },
    /// The autocovariance does not decay from lag 0 to lag 1 as an exponential must.
    #[error(
        "autocovariance does not decay: lag 1 holds {lag1} and lag 0 holds {lag0}, but an exponential decay needs 0 < acov[1] < acov[0]; the trace looks constant, white, oscillating or drifting rather than like trapped thermal motion"
    )]
    NotDecaying {
        /// The lag-0 value.
        lag0: f64,
        /// The lag-1 value.
        lag1: f64,
    },
    /// The lag-1 correlation is within the noise band of white noise, so no decay is resolved.
    #[error(
        "no resolved correlation: the lag-1 correlation {rho1:.3e} is below 3/sqrt(n_samples) = {threshold:.3e}, the level white noise reaches; the relaxation time is shorter than the sampling interval, so sample faster or use the spectrum"
    )]
    NoResolvedCorrelation {
        /// The lag-1 correlation `acov[1]/acov[0]`.
        rho1: f64,
        /// The significance threshold 3/sqrt(n_samples).
        threshold: f64,
    },
    /// A field of the [`TimeDomainModel`] is out of its range.
    #[error("model.{field} = {value} is invalid: it must be {requirement}")]
    InvalidModel {
        /// The field, e.g. `exposure_s`.
        field: &'static str,
        /// The rejected value.
        value: f64,
        /// What the field must be.
        requirement: &'static str,
    },
    /// The starting values of [`fit_autocovariance_model`] are not positive finite numbers.
    #[error(
        "starting values fc = {corner_frequency_hz} Hz, D = {diffusion} are not positive finite numbers; start from the spectral fit's corner frequency and diffusion coefficient"
    )]
    InvalidStart {
        /// The starting corner frequency, Hz.
        corner_frequency_hz: f64,
        /// The starting diffusion coefficient, signal-unit^2/s.
        diffusion: f64,
    },
    /// The Gauss-Newton iteration did not converge.
    #[error(
        "autocorrelation fit did not converge after {iterations} iterations ({reason}); inspect the autocovariance for drift or a decay the model does not describe, or set options.last_lag by hand"
    )]
    NotConverged {
        /// Iterations performed.
        iterations: usize,
        /// What stopped the iteration.
        reason: &'static str,
    },
}

/// Options of [`fit_exponential`] and [`fit_autocovariance_model`].
#[derive(Clone, Debug)]
pub struct AcfFitOptions {
    /// First lag used (default 1): lag 0 also holds the variance of white detection noise.
    pub first_lag: usize,
    /// Last lag used; `None` chooses it from the data with [`default_last_lag`].
    pub last_lag: Option<usize>,
    /// At most this many lags enter the fit (default 64); above it the lag grid is strided
    /// evenly, which also keeps the weight matrix well conditioned when `c` is close to 1.
    pub max_lags_used: usize,
    /// Variance sigma_n^2 of white detection noise in the record (signal-unit^2; default 0), as
    /// the spectral fit's noise floor gives it. It adds to lag 0 only, which the fit leaves out,
    /// but it adds to the scatter of every sample autocovariance, so the Bartlett weights of
    /// both fits include it (the plain exponential's through `add_white_noise_covariance`, the
    /// model fit's through the model's lag 0).
    pub white_noise_variance: f64,
}

impl Default for AcfFitOptions {
    fn default() -> Self {
        Self {
            first_lag: DEFAULT_FIRST_LAG,
            last_lag: None,
            max_lags_used: 64,
            white_noise_variance: 0.0,
        }
    }
}

/// The default first lag of the fit (lag 0 holds white detection noise).
const DEFAULT_FIRST_LAG: usize = 1;

/// Result of [`fit_exponential`].
#[derive(Clone, Debug)]
pub struct ExponentialFit {
    /// Relaxation time `tau = -dt/ln c` in seconds.
    pub relaxation_time_s: f64,
    /// Standard error of `tau` in seconds (delta method on the GLS covariance of `c`).
    pub relaxation_time_se_s: f64,
    /// Amplitude `A = sigma^2` in signal units squared.
    pub amplitude: f64,
    /// Standard error of the amplitude in signal units squared.
    pub amplitude_se: f64,
    /// The lags used in the fit.
    pub lags: Vec<usize>,
    /// The autocovariance at those lags (signal units squared).
    pub acov: Vec<f64>,
    /// The fitted model `A c^k - A v(c, N)` at those lags (signal units squared).
    pub model: Vec<f64>,
    /// Generalised chi-square `r^T W r` of the residuals at the fitted parameters.
    pub chi_square: f64,
    /// Degrees of freedom of `chi_square`: number of lags minus 2.
    pub degrees_of_freedom: usize,
    /// Linearised influence of the data on tau:
    /// `tau_hat - tau ~= sum_i weight_i (acov_i - E acov_i)`,
    /// as (lag, weight in s per signal-unit^2). Used by the calibration module to compute the
    /// correlation between this estimate and the spectral and variance estimates.
    pub tau_influence: Vec<(usize, f64)>,
}

/// Sample autocovariance for lags `0..=max_lag` of the mean-removed samples.
///
/// `C_k = (1/(N-k)) sum_{j=0}^{N-1-k} (x_j - xbar)(x_{j+k} - xbar)`, normalised per lag by the
/// number of products ("unbiased by count"; the mean removal still biases every lag by about
/// `-Var(xbar)`, see [`mean_bias_ar1`]). Units: signal units squared.
///
/// Computed with a zero-padded real FFT by the Wiener-Khinchin theorem (the inverse transform of
/// `|X_f|^2` is the circular autocorrelation; e.g. W. H. Press et al., Numerical Recipes, 3rd ed.
/// (2007), section 13.2, section number from memory, unverified): the mean-removed data are padded
/// with zeros to a 7-smooth length `>= N + max_lag`, so the circular correlation equals the linear
/// one at the lags returned.
///
/// `max_lag` is clamped to `N - 1`; the result has `min(max_lag, N - 1) + 1` values, and is empty
/// for empty input. Non-finite samples give non-finite values, never a panic. Memory: two buffers
/// of about `N + max_lag` f64 each (real data and half complex spectrum) plus the FFT scratch.
pub fn autocovariance(samples: &[f64], max_lag: usize) -> Vec<f64> {
    let n_samples = samples.len();
    if n_samples == 0 {
        return Vec::new();
    }
    let max_lag = max_lag.min(n_samples - 1);
    let mean = compensated_sum(samples.iter().copied()) / n_samples as f64;
    // Block length: a power of two at least four times the largest lag (and 4096), so each
    // block's transform is short, its plan cheap, and the lags fit in one block.
    let block = (4 * max_lag.max(1)).next_power_of_two().max(4096);
    let sums = if block >= n_samples {
        whole_record_lag_sums(samples, mean, max_lag)
    } else {
        blocked_lag_sums(samples, mean, max_lag, block)
    };
    sums.into_iter()
        .enumerate()
        .map(|(lag, sum)| sum / (n_samples - lag) as f64)
        .collect()
}

/// sum_j y_j y_{j+k} for k = 0..=max_lag, y = x - mean, by one zero-padded FFT of the whole
/// record (short records).
fn whole_record_lag_sums(samples: &[f64], mean: f64, max_lag: usize) -> Vec<f64> {
    let n_samples = samples.len();
    let fft_len = fast_fft_len(n_samples.saturating_add(max_lag));
    let forward = crate::fft::forward(fft_len);
    let inverse = crate::fft::inverse(fft_len);
    let mut buffer = vec![0.0; fft_len];
    for (slot, &x) in buffer.iter_mut().zip(samples) {
        *slot = x - mean;
    }
    let mut spectrum = forward.make_output_vec();
    let mut scratch =
        vec![Complex::new(0.0, 0.0); forward.get_scratch_len().max(inverse.get_scratch_len())];
    if forward
        .process_with_scratch(&mut buffer, &mut spectrum, &mut scratch)
        .is_err()
    {
        // Unreachable: the buffers are made by the plan itself.
        return vec![f64::NAN; max_lag + 1];
    }
    for z in &mut spectrum {
        *z = Complex::new(z.norm_sqr(), 0.0);
    }
    if inverse
        .process_with_scratch(&mut spectrum, &mut buffer, &mut scratch)
        .is_err()
    {
        // Unreachable: the spectrum is real by construction, so the DC and Nyquist bins are real.
        return vec![f64::NAN; max_lag + 1];
    }
    buffer.truncate(max_lag + 1);
    // The unnormalised inverse FFT multiplies by the transform length.
    for value in &mut buffer {
        *value /= fft_len as f64;
    }
    buffer
}

/// The same lag sums for long records, block by block with O(block) memory.
///
/// Split y into blocks b of length B and let X_b be the length-2B transform of block b padded
/// with B zeros. The pairs (j, j + k) with j in block b and k <= B all lie in blocks b and b + 1,
/// and the length-2B transform of [block b, block b + 1] is X_b(m) + (-1)^m X_{b+1}(m) (a shift
/// by half the transform length multiplies bin m by e^{-i pi m}). So
/// sum_j y_j y_{j+k} = IFFT( sum_b conj(X_b) (X_b + (-1)^m X_{b+1}) )[k] for k <= B, with no
/// wrap-around because j + k < 2B within each pair of blocks (derived here; the circular
/// correlation theorem as in Press et al., Numerical Recipes, 3rd ed., sec. 13.2). Each block is
/// transformed once and one inverse transform ends the sum: about as much arithmetic as two
/// transforms of the whole record, with plans for length 2B only.
fn blocked_lag_sums(samples: &[f64], mean: f64, max_lag: usize, block: usize) -> Vec<f64> {
    let fft_len = 2 * block;
    let forward = crate::fft::forward(fft_len);
    let inverse = crate::fft::inverse(fft_len);
    let mut scratch =
        vec![Complex::new(0.0, 0.0); forward.get_scratch_len().max(inverse.get_scratch_len())];
    let mut buffer = vec![0.0; fft_len];
    let mut current = forward.make_output_vec();
    let mut next = forward.make_output_vec();
    let mut acc = forward.make_output_vec();
    let transform = |chunk: &[f64],
                     buffer: &mut Vec<f64>,
                     out: &mut Vec<Complex<f64>>,
                     scratch: &mut Vec<Complex<f64>>|
     -> bool {
        buffer.iter_mut().for_each(|v| *v = 0.0);
        for (slot, &x) in buffer.iter_mut().zip(chunk) {
            *slot = x - mean;
        }
        forward.process_with_scratch(buffer, out, scratch).is_ok()
    };
    let mut chunks = samples.chunks(block);
    let Some(first) = chunks.next() else {
        return vec![0.0; max_lag + 1];
    };
    if !transform(first, &mut buffer, &mut current, &mut scratch) {
        return vec![f64::NAN; max_lag + 1];
    }
    loop {
        let has_next = match chunks.next() {
            Some(chunk) => {
                if !transform(chunk, &mut buffer, &mut next, &mut scratch) {
                    return vec![f64::NAN; max_lag + 1];
                }
                true
            }
            None => false,
        };
        for (m, ((a, x), y)) in acc.iter_mut().zip(&current).zip(&next).enumerate() {
            let y = if !has_next {
                Complex::new(0.0, 0.0)
            } else if m % 2 == 0 {
                *y
            } else {
                -*y
            };
            *a += x.conj() * (*x + y);
        }
        if !has_next {
            break;
        }
        std::mem::swap(&mut current, &mut next);
    }
    // The accumulated cross spectrum is not Hermitian-real at DC and Nyquist in general only
    // through rounding; the real inverse transform needs those imaginary parts to be zero.
    if let Some(first) = acc.first_mut() {
        first.im = 0.0;
    }
    if let Some(last) = acc.last_mut() {
        last.im = 0.0;
    }
    if inverse
        .process_with_scratch(&mut acc, &mut buffer, &mut scratch)
        .is_err()
    {
        return vec![f64::NAN; max_lag + 1];
    }
    buffer.truncate(max_lag + 1);
    for value in &mut buffer {
        *value /= fft_len as f64;
    }
    buffer
}

/// Smallest 7-smooth integer (of the form 2^a 3^b 5^c 7^d) not below `n`, for which RustFFT is
/// fast (common practice). Returns `n` itself if the search would overflow.
fn fast_fft_len(n: usize) -> usize {
    if n <= 1 {
        return 1;
    }
    let mut best = usize::MAX;
    let mut p7: usize = 1;
    while p7 < best {
        let mut p5 = p7;
        while p5 < best {
            let mut p3 = p5;
            while p3 < best {
                let mut candidate = p3;
                while candidate < n {
                    match candidate.checked_mul(2) {
                        Some(next) => candidate = next,
                        None => break,
                    }
                }
                if candidate >= n && candidate < best {
                    best = candidate;
                }
                match p3.checked_mul(3) {
                    Some(next) => p3 = next,
                    None => break,
                }
            }
            match p5.checked_mul(5) {
                Some(next) => p5 = next,
                None => break,
            }
        }
        match p7.checked_mul(7) {
            Some(next) => p7 = next,
            None => break,
        }
    }
    if best == usize::MAX { n } else { best }
}

/// Neumaier's compensated sum (A. Neumaier, Z. Angew. Math. Mech. 54, 39 (1974); reference from
/// memory, unverified), used for means
/// and sums of squares of long records so that rounding does not grow with the record length.
pub(crate) fn compensated_sum(values: impl IntoIterator<Item = f64>) -> f64 {
    let mut sum = 0.0_f64;
    let mut compensation = 0.0_f64;
    for value in values {
        let total = sum + value;
        if sum.abs() >= value.abs() {
            compensation += (sum - total) + value;
        } else {
            compensation += (value - total) + sum;
        }
        sum = total;
    }
    sum + compensation
}

/// Relative variance of the sample mean of `n_samples` values of a stationary AR(1) process with
/// lag-one correlation `c`: `v(c, N) = Var(xbar)/sigma^2`.
///
/// `v(c, N) = (1/N^2) sum_{i,j} c^|i-j| = (1/N) [(1+c)/(1-c) - 2c(1-c^N)/(N(1-c)^2)]`, derived by
/// summing the geometric series of the AR(1) autocovariance `sigma^2 c^|k|` over the `N - |k|`
/// pairs at each lag. It is also the bias of mean removal: `E[(1/N) sum (x_i - xbar)^2] =
/// sigma^2 (1 - v)`, and each lag of [`autocovariance`] is lowered by about `sigma^2 v`.
/// Dimensionless; `v -> 2 tau/T_msr` for `tau << T_msr` and `v = 1` at `c = 1`.
///
/// Valid for `-1 <= c <= 1`; returns NaN for `c` outside it, for non-finite `c` or `n_samples = 0`.
/// Near `c = 1`, where the closed form cancels, a third-order expansion in `ln c` is used.
pub fn mean_bias_ar1(c: f64, n_samples: usize) -> f64 {
    mean_bias_ar1_with_derivative(c, n_samples).0
}

/// `v(c, N)` of [`mean_bias_ar1`] and its derivative `dv/dc`.
fn mean_bias_ar1_with_derivative(c: f64, n_samples: usize) -> (f64, f64) {
    if n_samples == 0 || !c.is_finite() || !(-1.0..=1.0).contains(&c) {
        return (f64::NAN, f64::NAN);
    }
    let n = n_samples as f64;
    let u = 1.0 - c;
    if c > 0.0 {
        // a = -ln c, computed without cancellation near c = 1.
        let a = -(-u).ln_1p();
        if n * a < 1e-3 {
            return mean_bias_near_one(a, c, n);
        }
        // 1 - c^N without cancellation.
        let one_minus_cn = -(n * (-u).ln_1p()).exp_m1();
        return mean_bias_closed_form(c, n, one_minus_cn);
    }
    // For c <= 0 no cancellation occurs; powf is exact in sign for integral exponents.
    let one_minus_cn = 1.0 - c.powf(n);
    mean_bias_closed_form(c, n, one_minus_cn)
}

/// The closed form of `v(c, N)` and `dv/dc`, given `1 - c^N`.
///
/// `dv/dc = (1/N) [2/(1-c)^2 - (2/N) ((1 - (N+1) c^N)(1-c) + 2c(1 - c^N))/(1-c)^3]`, derived by
/// differentiating the closed form.
fn mean_bias_closed_form(c: f64, n: f64, one_minus_cn: f64) -> (f64, f64) {
    let u = 1.0 - c;
    let cn = 1.0 - one_minus_cn;
    let value = ((1.0 + c) / u - 2.0 * c * one_minus_cn / (n * u * u)) / n;
    let numerator = (n + 1.0)
        .mul_add(-cn, 1.0)
        .mul_add(u, 2.0 * c * one_minus_cn);
    let derivative = (2.0 / (u * u) - 2.0 * numerator / (n * u * u * u)) / n;
    (value, derivative)
}

/// `v(c, N)` and `dv/dc` for `N ln(1/c) < 1e-3`, from the expansion
/// `v = (1/N^2) sum_m (-a)^m M_m / m!` with `a = -ln c` and the exact moments
/// `M_m = sum_{i,j} |i-j|^m` (M_0 = N^2, M_1 = (N^3-N)/3, M_2 = N^2(N^2-1)/6,
/// M_3 = 2[N^3(N-1)^2/4 - N(N-1)(2N-1)(3N^2-3N-1)/30], from the Faulhaber sums of d^3 and d^4).
/// The neglected terms are below `(N a)^4 / 24 < 5e-14` relative (derived).
fn mean_bias_near_one(a: f64, c: f64, n: f64) -> (f64, f64) {
    let m1 = (n - 1.0 / n) / 3.0;
    let m2 = n.mul_add(n, -1.0) / 6.0;
    let nm1 = n - 1.0;
    let m3 = 2.0
        * (nm1 * nm1 * n / 4.0
            - nm1 * 2.0_f64.mul_add(n, -1.0) * (3.0 * n).mul_add(n, -3.0f64.mul_add(n, 1.0))
                / (30.0 * n));
    let value = (a * a * a).mul_add(-m3 / 6.0, (a * a).mul_add(m2 / 2.0, a.mul_add(-m1, 1.0)));
    let dv_da = (a * a).mul_add(-m3 / 2.0, a.mul_add(m2, -m1));
    // da/dc = -1/c.
    (value, -dv_da / c)
}

/// Bartlett's lag sum for an AR(1) process, in units of `A^2`:
/// `S(d)/A^2 = sum_m c^|m| c^|m+d| = c^|d| (|d| + (1+c^2)/(1-c^2))`.
///
/// Derived here (and checked against the direct sum in the tests): for `d >= 0` the terms with
/// `m >= 0` and with `m <= -d` each give `c^d/(1-c^2)`, and the `d - 1` terms with `-d < m < 0`
/// each give `c^d`; hence `c^d (d - 1 + 2/(1-c^2))`.
fn bartlett_lag_sum(d: usize, c: f64) -> f64 {
    let d_f = d as f64;
    c.powf(d_f) * (d_f + c.mul_add(c, 1.0) / c.mul_add(-c, 1.0))
}

/// Covariance `Cov(C^_k, C^_l)` of two sample autocovariances (as from [`autocovariance`]) of
/// `n_samples` values of an AR(1) process with amplitude `amplitude` (`sigma^2`, signal units
/// squared) and correlation `c`, in signal units to the fourth: Bartlett's formula (M. S. Bartlett,
/// J. R. Stat. Soc. Suppl. 8, 27 (1946)) with the exact finite-record counts of products.
///
/// For Gaussian data, `Cov(T_k, T_l) = sum_d n(d) f(d)` for the lag sums `T_k = sum_j x_j x_(j+k)`
/// (Isserlis' theorem), with `f(d) = g(d) g(d+l-k) + g(d+l) g(d-k)`, `g(d) = A c^|d|`, and `n(d)`
/// the number of index pairs at offset `d`. For `k <= l` and `m = l - k`,
/// `n(d) = (N - l) - rho(d)` with `rho(d) = max(d, 0) + max(-d-m, 0)`, so (derived here, and
/// checked against the direct count sum in the tests)
///
/// `(N-k)(N-l) Cov(C^_k, C^_l) / A^2 = (N - l) [S(m) + S(l+k)] - G`,
/// `G = 2 c^m q/(1-q)^2 + 2 c^(l+k) [k(k-1)/2 + k/(1-q) + q/(1-q)^2]`, `q = c^2`,
///
/// where `S(d) = c^|d| (|d| + (1+c^2)/(1-c^2))` is Bartlett's lag sum in units of `A^2`. The
/// asymptotic form `N Cov = S(l-k) + S(l+k)` differs only by `O(tau/N)` relative, but that error
/// is far larger than the smallest eigenvalues of this nearly singular matrix: with it, the
/// generalised chi-square came out about 20% too small (0.80 per degree of freedom at
/// `tau = 40 dt`, `N = 2^16`, in our simulations). The clamp `n(d) >= 0` is neglected (terms of
/// order `c^(2(N-l))`). Mean removal changes the covariance only through `xbar^2`, at order
/// `(tau/N)^2` (derived to leading order).
///
/// Meant for propagating errors, e.g. `Cov(tau_hat, C^_0) = sum_i w_i Cov(C^_(k_i), C^_0)` with the
/// weights of [`ExponentialFit::tau_influence`]. Non-finite if a lag is `>= n_samples` or `c` is
/// outside `(-1, 1)`.
pub fn autocovariance_covariance_ar1(
    amplitude: f64,
    c: f64,
    lag_a: usize,
    lag_b: usize,
    n_samples: usize,
) -> f64 {
    let (k, l) = (lag_a.min(lag_b), lag_a.max(lag_b));
    let (k_f, l_f, n) = (k as f64, l as f64, n_samples as f64);
    let one_minus_q = c.mul_add(-c, 1.0);
    let tail = c * c / (one_minus_q * one_minus_q);
    let m = l - k;
    let lag_sum = bartlett_lag_sum(m, c) + bartlett_lag_sum(k + l, c);
    let count_correction = 2.0
        * c.powf(m as f64).mul_add(
            tail,
            c.powf(k_f + l_f) * (k_f * (k_f - 1.0) / 2.0 + k_f / one_minus_q + tail),
        );
    amplitude * amplitude * (n - l_f).mul_add(lag_sum, -count_correction) / ((n - k_f) * (n - l_f))
}

/// The matrix of [`autocovariance_covariance_ar1`] over `lags`, with a relative ridge of `ridge`
/// times the mean diagonal added to the diagonal.
fn autocovariance_covariance(
    amplitude: f64,
    c: f64,
    lags: &[usize],
    n_samples: usize,
    ridge: f64,
) -> DMatrix<f64> {
    let n_lags = lags.len();
    let mut cov = DMatrix::from_fn(n_lags, n_lags, |i, j| {
        autocovariance_covariance_ar1(amplitude, c, lags[i], lags[j], n_samples)
    });
    let mean_diagonal = cov.diagonal().sum() / n_lags.max(1) as f64;
    for i in 0..n_lags {
        cov[(i, i)] += ridge * mean_diagonal;
    }
    cov
}

/// Adds to the Bartlett covariance of the sample autocovariances at `lags` (all >= 1) what
/// white detection noise of variance `noise_variance` contributes when the autocovariance is
/// g(d) = A c^|d| + sigma_n^2 delta_d0 instead of A c^|d|.
///
/// In the count sum of `autocovariance_covariance_ar1`, f(d) = g(d) g(d+m) + g(d+l) g(d-k) with
/// m = l - k gains sigma_n^2 A c^m at d = 0 and d = -m (pair count N - l each),
/// sigma_n^2 A c^(k+l) at d = -l and d = k (count N - l - k each), and sigma_n^4 at d = 0 when
/// k = l (derived here from Isserlis' theorem, like that function), so
/// (N-k)(N-l) dCov = 2 sigma_n^2 A [c^m (N - l) + c^(k+l) (N - l - k)] + sigma_n^4 (N - l) [k = l].
fn add_white_noise_covariance(
    cov: &mut DMatrix<f64>,
    (amplitude, c): (f64, f64),
    noise_variance: f64,
    lags: &[usize],
    n_samples: usize,
) {
    if !(noise_variance > 0.0) {
        return;
    }
    let n = n_samples as f64;
    for (i, &lag_a) in lags.iter().enumerate() {
        for (j, &lag_b) in lags.iter().enumerate() {
            let (k, l) = (lag_a.min(lag_b) as f64, lag_a.max(lag_b) as f64);
            let m = l - k;
            let cross = 2.0
                * noise_variance
                * amplitude
                * c.powf(m).mul_add(n - l, c.powf(k + l) * (n - l - k));
            let white = if lag_a == lag_b {
                noise_variance * noise_variance * (n - l)
            } else {
                0.0
            };
            cov[(i, j)] += (cross + white) / ((n - k) * (n - l));
        }
    }
}

/// The lag window used by default.
///
/// From a quick estimate of tau from the lag-1 ratio, `tau1 = -dt/ln(acov[1]/acov[0])`, the last
/// lag is `ceil(2 tau1/dt)` clamped to `[first_lag + 2, acov.len() - 1]` with the default
/// `first_lag = 1` (common practice: beyond about two relaxation times the autocovariance holds
/// little information on tau and mostly noise). `dt = 1/sample_rate_hz` cancels; the rate is
/// validated only. `None` if the sample rate is invalid, fewer than 4 lags are given, or
/// `acov[1]/acov[0]` is not in `(0, 1)`.
pub fn default_last_lag(acov: &[f64], sample_rate_hz: f64) -> Option<usize> {
    if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
        return None;
    }
    let (&lag0, &lag1) = (acov.first()?, acov.get(1)?);
    let ratio = lag1 / lag0;
    if !(ratio > 0.0 && ratio < 1.0) {
        return None;
    }
    let max_lag = acov.len() - 1;
    let min_lag = DEFAULT_FIRST_LAG + 2;
    if max_lag < min_lag {
        return None;
    }
    let tau1_over_dt = -1.0 / ratio.ln();
    let last = (2.0 * tau1_over_dt).ceil();
    // Compare in floating point before converting, so huge values cannot wrap.
    let last = if last >= max_lag as f64 {
        max_lag
    } else {
        last as usize
    };
    Some(last.clamp(min_lag, max_lag))
}

/// Upper bound on Gauss-Newton iterations (each re-evaluates the weights).
const MAX_ITERATIONS: usize = 100;
/// Relative change in tau and A below which the iteration has converged.
const CONVERGENCE_TOLERANCE: f64 = 1e-10;

/// Fits `acov[k] ~ A c^k - A v(c, N)` by generalised least squares and returns tau and A.
///
/// The second term is the expected bias of the mean-removed autocovariance to leading order in
/// `1/N` (see [`mean_bias_ar1`]). The weight matrix `W` is the inverse of the asymptotic covariance
/// of the sample autocovariances by Bartlett's formula (M. S. Bartlett, J. R. Stat. Soc. Suppl. 8,
/// 27 (1946)), closed form for AR(1) `N Cov(C^_k, C^_l) = S(l-k) + S(l+k)`,
/// `S(d) = A^2 c^|d| (|d| + (1+c^2)/(1-c^2))`, here with the exact finite-record counts of products
/// (see [`autocovariance_covariance_ar1`]), evaluated at the current estimate. Gauss-Newton steps
/// on `(A, c)` with step halving alternate with re-evaluating `W` until the relative changes fall
/// below 1e-10 (iteratively reweighted GLS; e.g. P. McCullagh and J. A. Nelder, Generalized Linear
/// Models, 2nd ed. (1989), ch. 9 on quasi-likelihood, chapter from memory, unverified). The
/// `K x K` system is solved by Cholesky; a relative ridge of 1e-12 (raised if Cholesky fails)
/// guards the near-singular case `c -> 1`.
///
/// `tau = -dt/ln c` with `dt = 1/sample_rate_hz`. Standard errors come from `(J^T W J)^-1`, for tau
/// by the delta method with `dtau/dc = dt/(c ln^2 c)`. `tau_influence` is the tau row of
/// `(J^T W J)^-1 J^T W` times `dtau/dc`. `chi_square = r^T W r` on `K - 2` degrees of freedom.
///
/// `acov` holds lags `0..` as returned by [`autocovariance`] of `n_samples` samples. Lags
/// `options.first_lag..=last_lag` are used, strided to at most `options.max_lags_used` lags;
/// `last_lag` defaults to [`default_last_lag`] (at least `first_lag + 2`, at most the last lag
/// given). The record must be more than twice the last lag long.
///
/// # Errors
/// See [`AcfError`]: invalid rate or options, too few lags or samples, non-finite values, a
/// non-positive variance, no decay (`acov[1] <= 0` or `acov[1] >= acov[0]`), a lag-1 correlation
/// below the white-noise level `3/sqrt(N)`, or no convergence.
pub fn fit_exponential(
    acov: &[f64],
    sample_rate_hz: f64,
    n_samples: usize,
    options: &AcfFitOptions,
) -> Result<ExponentialFit, AcfError> {
    let LagWindow {
        lags,
        data,
        lag0,
        lag1,
    } = lag_window(acov, sample_rate_hz, n_samples, options)?;
    let problem = Problem {
        lags: &lags,
        data: &data,
        n_samples,
        white_noise_variance: options.white_noise_variance.max(0.0),
    };
    let (amplitude, c, iterations) = problem.solve(lag1, lag0)?;
    let system = problem
        .weighted_system(amplitude, c)
        .ok_or(AcfError::NotConverged {
            iterations,
            reason: "weight matrix not positive definite at the solution",
        })?;
    let covariance = system
        .normal_matrix
        .try_inverse()
        .ok_or(AcfError::NotConverged {
            iterations,
            reason: "singular normal matrix at the solution",
        })?;

    let dt_s = 1.0 / sample_rate_hz;
    let ln_c = c.ln();
    let relaxation_time_s = -dt_s / ln_c;
    let dtau_dc = dt_s / (c * ln_c * ln_c);
    let relaxation_time_se_s = dtau_dc.abs() * covariance[(1, 1)].max(0.0).sqrt();
    let amplitude_se = covariance[(0, 0)].max(0.0).sqrt();
    // Row of (J^T W J)^-1 J^T W for c: covariance row 1 times B^T, with B = W J.
    let tau_influence = lags
        .iter()
        .enumerate()
        .map(|(i, &lag)| {
            let weight = covariance[(1, 0)].mul_add(
                system.weighted_jacobian[(i, 0)],
                covariance[(1, 1)] * system.weighted_jacobian[(i, 1)],
            );
            (lag, dtau_dc * weight)
        })
        .collect();
    let degrees_of_freedom = lags.len() - 2;
    if !(relaxation_time_s.is_finite() && relaxation_time_se_s.is_finite()) {
        return Err(AcfError::NotConverged {
            iterations,
            reason: "non-finite relaxation time or standard error",
        });
    }
    Ok(ExponentialFit {
        relaxation_time_s,
        relaxation_time_se_s,
        amplitude,
        amplitude_se,
        model: system.model,
        acov: data,
        lags,
        chi_square: system.chi_square,
        degrees_of_freedom,
        tau_influence,
    })
}

/// The lags a fit uses and the autocovariance there.
pub(crate) struct LagWindow {
    /// Lags used, ascending.
    pub(crate) lags: Vec<usize>,
    /// The autocovariance at those lags.
    pub(crate) data: Vec<f64>,
    /// The autocovariance at lag 0.
    pub(crate) lag0: f64,
    /// The autocovariance at lag 1.
    pub(crate) lag1: f64,
}

/// The checks and the lag window shared by [`fit_exponential`] and
/// [`fit_autocovariance_model`]: lags `options.first_lag..=last_lag`, strided to at most
/// `options.max_lags_used`, `last_lag` from [`default_last_lag`] unless given.
///
/// # Errors
/// As listed at [`fit_exponential`].
pub(crate) fn lag_window(
    acov: &[f64],
    sample_rate_hz: f64,
    n_samples: usize,
    options: &AcfFitOptions,
) -> Result<LagWindow, AcfError> {
    if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
        return Err(AcfError::InvalidSampleRate {
            value: sample_rate_hz,
        });
    }
    if options.max_lags_used < 3 {
        return Err(AcfError::InvalidMaxLags {
            value: options.max_lags_used,
        });
    }
    let first_lag = options.first_lag;
    let too_few = |last_lag: usize, n_used: usize| AcfError::TooFewLags {
        first_lag,
        last_lag,
        n_lags: acov.len(),
        n_used,
    };
    let (Some(&lag0), Some(&lag1)) = (acov.first(), acov.get(1)) else {
        return Err(too_few(acov.len().saturating_sub(1), 0));
    };
    for (lag, &value) in acov.iter().enumerate().take(2) {
        if !value.is_finite() {
            return Err(AcfError::NonFinite { lag, value });
        }
    }
    if lag0 <= 0.0 {
        return Err(AcfError::NonPositiveVariance { value: lag0 });
    }
    if lag1 <= 0.0 || lag1 >= lag0 {
        return Err(AcfError::NotDecaying { lag0, lag1 });
    }
    let max_lag = acov.len() - 1;
    let last_lag = match options.last_lag {
        Some(last) if last > max_lag => {
            return Err(AcfError::LagOutOfRange {
                last_lag: last,
                max_lag,
            });
        }
        Some(last) => last,
        None => default_last_lag(acov, sample_rate_hz)
            .unwrap_or(max_lag)
            .max(first_lag.saturating_add(2))
            .min(max_lag),
    };
    if last_lag < first_lag || last_lag - first_lag < 2 {
        let n_used = if last_lag >= first_lag {
            last_lag - first_lag + 1
        } else {
            0
        };
        return Err(too_few(last_lag, n_used));
    }
    if n_samples / 2 <= last_lag {
        return Err(AcfError::TooFewSamples {
            n_samples,
            last_lag,
        });
    }
    let rho1 = lag1 / lag0;
    let threshold = 3.0 / (n_samples as f64).sqrt();
    if rho1 <= threshold {
        return Err(AcfError::NoResolvedCorrelation { rho1, threshold });
    }

    let span = last_lag - first_lag + 1;
    let stride = span.div_ceil(options.max_lags_used);
    let lags: Vec<usize> = (first_lag..=last_lag).step_by(stride).collect();
    let mut data = Vec::with_capacity(lags.len());
    for &lag in &lags {
        // In range: last_lag <= max_lag was checked above.
        let value = acov.get(lag).copied().unwrap_or(f64::NAN);
        if !value.is_finite() {
            return Err(AcfError::NonFinite { lag, value });
        }
        data.push(value);
    }
    if lags.len() < 3 {
        return Err(too_few(last_lag, lags.len()));
    }

    Ok(LagWindow {
        lags,
        data,
        lag0,
        lag1,
    })
}

/// The data of one fit.
struct Problem<'a> {
    lags: &'a [usize],
    data: &'a [f64],
    n_samples: usize,
    /// sigma_n^2 of white detection noise, signal-unit^2.
    white_noise_variance: f64,
}

/// The GLS quantities at one parameter point.
struct WeightedSystem {
    /// Model values at the lags.
    model: Vec<f64>,
    /// `J^T W J` for parameters `(A, c)`.
    normal_matrix: Matrix2<f64>,
    /// `J^T W r` with `r = data - model`.
    gradient: Vector2<f64>,
    /// `W J` (`K x 2`).
    weighted_jacobian: DMatrix<f64>,
    /// `r^T W r`.
    chi_square: f64,
    /// The Cholesky factor of the covariance (for re-using `W` in step halving).
    cholesky: nalgebra::Cholesky<f64, nalgebra::Dyn>,
}

impl Problem<'_> {
    /// Model `m_k = A (c^k - v)` and its Jacobian columns `(c^k - v, A (k c^(k-1) - v'))`.
    fn model_and_jacobian(&self, amplitude: f64, c: f64) -> (Vec<f64>, DMatrix<f64>) {
        let (v, dv_dc) = mean_bias_ar1_with_derivative(c, self.n_samples);
        let n_lags = self.lags.len();
        let mut model = Vec::with_capacity(n_lags);
        let mut jacobian = DMatrix::zeros(n_lags, 2);
        for (i, &lag) in self.lags.iter().enumerate() {
            let k = lag as f64;
            let ck = c.powf(k);
            let dck = if lag == 0 { 0.0 } else { k * c.powf(k - 1.0) };
            model.push(amplitude * (ck - v));
            jacobian[(i, 0)] = ck - v;
            jacobian[(i, 1)] = amplitude * (dck - dv_dc);
        }
        (model, jacobian)
    }

    /// Residuals `data - model`.
    fn residuals(&self, model: &[f64]) -> DVector<f64> {
        DVector::from_iterator(model.len(), self.data.iter().zip(model).map(|(d, m)| d - m))
    }

    /// Factorises the Bartlett covariance at `(amplitude, c)`, raising the ridge if needed.
    fn factorise(&self, amplitude: f64, c: f64) -> Option<nalgebra::Cholesky<f64, nalgebra::Dyn>> {
        let mut ridge = 1e-12;
        while ridge <= 1e-6 {
            let mut cov = autocovariance_covariance(amplitude, c, self.lags, self.n_samples, ridge);
            add_white_noise_covariance(
                &mut cov,
                (amplitude, c),
                self.white_noise_variance,
                self.lags,
                self.n_samples,
            );
            if let Some(cholesky) = cov.cholesky() {
                return Some(cholesky);
            }
            ridge *= 1e3;
        }
        None
    }

    /// Builds the GLS system at `(amplitude, c)`.
    fn weighted_system(&self, amplitude: f64, c: f64) -> Option<WeightedSystem> {
        let cholesky = self.factorise(amplitude, c)?;
        let (model, jacobian) = self.model_and_jacobian(amplitude, c);
        let residuals = self.residuals(&model);
        let weighted_jacobian = cholesky.solve(&jacobian);
        let weighted_residuals = cholesky.solve(&residuals);
        let normal = jacobian.transpose() * &weighted_jacobian;
        let gradient = weighted_jacobian.transpose() * &residuals;
        let chi_square = residuals.dot(&weighted_residuals);
        let normal_matrix = Matrix2::new(
            normal[(0, 0)],
            normal[(0, 1)],
            normal[(1, 0)],
            normal[(1, 1)],
        );
        Some(WeightedSystem {
            model,
            normal_matrix,
            gradient: Vector2::new(gradient[0], gradient[1]),
            weighted_jacobian,
            chi_square,
            cholesky,
        })
    }

    /// `r^T W r` at `(amplitude, c)` with a fixed weight matrix.
    fn objective(
        &self,
        amplitude: f64,
        c: f64,
        cholesky: &nalgebra::Cholesky<f64, nalgebra::Dyn>,
    ) -> f64 {
        let (model, _) = self.model_and_jacobian(amplitude, c);
        let residuals = self.residuals(&model);
        residuals.dot(&cholesky.solve(&residuals))
    }

    /// Iteratively reweighted Gauss-Newton from the lag ratio; returns `(A, c, iterations)`.
    fn solve(&self, lag1: f64, lag0: f64) -> Result<(f64, f64, usize), AcfError> {
        let (mut amplitude, mut c) = self.initial_guess(lag1, lag0);
        for iteration in 1..=MAX_ITERATIONS {
            let system = self
                .weighted_system(amplitude, c)
                .ok_or(AcfError::NotConverged {
                    iterations: iteration,
                    reason: "weight matrix not positive definite",
                })?;
            let step = system
                .normal_matrix
                .try_inverse()
                .map(|inverse| inverse * system.gradient)
                .ok_or(AcfError::NotConverged {
                    iterations: iteration,
                    reason: "singular normal matrix",
                })?;
            let small_step = |scale: f64| {
                (scale * step[0]).abs() <= CONVERGENCE_TOLERANCE * amplitude.abs()
                    && (scale * step[1]).abs() <= CONVERGENCE_TOLERANCE * c * c.ln().abs()
            };
            if small_step(1.0) {
                return Ok((amplitude, c, iteration));
            }
            let mut scale = 1.0_f64;
            let mut accepted = false;
            for _ in 0..60 {
                let (a_new, c_new) = (scale.mul_add(step[0], amplitude), scale.mul_add(step[1], c));
                if a_new > 0.0 && c_new > 0.0 && c_new < 1.0 {
                    let objective = self.objective(a_new, c_new, &system.cholesky);
                    if objective.is_finite() && objective <= system.chi_square {
                        amplitude = a_new;
                        c = c_new;
                        accepted = true;
                        break;
                    }
                }
                if small_step(scale) {
                    // No decrease within rounding: the current point is the optimum.
                    return Ok((amplitude, c, iteration));
                }
                scale *= 0.5;
            }
            if !accepted {
                return Err(AcfError::NotConverged {
                    iterations: iteration,
                    reason: "no step decreased the weighted residuals",
                });
            }
        }
        Err(AcfError::NotConverged {
            iterations: MAX_ITERATIONS,
            reason: "iteration limit reached",
        })
    }

    /// Starting point: `c` from the ratio of the first two lags of the window (insensitive to
    /// white noise at lag 0), falling back on `acov[1]/acov[0]`; `A` from the first lag.
    fn initial_guess(&self, lag1: f64, lag0: f64) -> (f64, f64) {
        let fallback = lag1 / lag0;
        let c = match (self.lags, self.data) {
            ([k0, k1, ..], [d0, d1, ..]) if *d0 > 0.0 && *d1 > 0.0 && d1 < d0 => {
                (d1 / d0).powf(1.0 / (k1 - k0) as f64)
            }
            _ => fallback,
        };
        let c = if c > 0.0 && c < 1.0 { c } else { fallback };
        let (first_lag, first_value) = (
            self.lags.first().copied().unwrap_or(0),
            self.data.first().copied().unwrap_or(lag0),
        );
        let shape = c.powf(first_lag as f64) - mean_bias_ar1(c, self.n_samples);
        let amplitude = first_value / shape;
        let amplitude = if amplitude.is_finite() && amplitude > 0.0 {
            amplitude
        } else {
            lag0
        };
        (amplitude, c)
    }
}

#[cfg(test)]
mod model_fit_tests;
#[cfg(test)]
mod model_tests;
#[cfg(test)]
mod tests;
