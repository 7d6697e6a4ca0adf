//! Coupled axes: the zero-lag correlation between two axes of one recording, whether it is
//! significant, and the angle between the detector axes and the trap's principal axes in their
//! plane.
//!
//! A trap stiffer along one direction than another, seen by detector axes turned against those
//! directions, puts a mix of two Lorentzians into each detector axis: every method then
//! calibrates a stiffness between the two true ones, and nothing in one axis alone shows it. The
//! two axes are correlated, though, and the covariance of the positions (nm) is diagonal in the
//! trap's principal axes (the eigenvectors of the 2x2 covariance: the potential
//! (1/2) x^T K x gives the Boltzmann covariance kB T K^-1, which K's eigenvectors diagonalise).
//!
//! Significance. For two independent stationary series with autocovariances gx(k), gy(k), the
//! sample cross-covariance at lag 0, (1/N) sum_t x_t y_t, has mean 0 and variance
//! (1/N) sum_{|k|<N} (1 - |k|/N) gx(k) gy(k): square the sum and take the expectation term by
//! term (E[x_s y_s x_t y_t] = gx(s-t) gy(s-t) by independence), exact for known means. Dividing
//! by the standard deviations gives the variance of the correlation coefficient under
//! independence, (1/N) sum (1 - |k|/N) rx(k) ry(k): Bartlett's formula for the null variance of
//! a cross-correlation of two autocorrelated series (M. S. Bartlett, J. R. Stat. Soc. 98, 536
//! (1935); also G. E. P. Box, G. M. Jenkins & G. C. Reinsel, Time Series Analysis, section on
//! cross-correlation; both recalled from memory, unverified; the derivation above is this
//! module's own). The sums use the sample autocovariances up to `MAX_LAG` lags of the first
//! `VARIANCE_RECORD` samples, whose products are unbiased under independence.
//!
//! Angle. With C = [[a, c], [c, b]] the angle of the major axis from the first axis towards the
//! second is phi = atan2(2c, a - b) / 2; the rotation reported is the one of at most 45 degrees
//! in size, so each rotated axis is the principal axis nearest a detector axis. Its standard
//! error is first-order eigenvector perturbation (common practice, no source): in the principal
//! frame (u, v) the angle moves by c_uv / (l_u - l_v), and c_uv, the sample cross-covariance of
//! two independent series, has the variance above. Near a round trap (l_u close to l_v) the
//! angle is undetermined and its standard error says so.
//!
//! Pure: plain slices in, plain numbers out, no IO.

use crate::autocorrelation::autocovariance;
use crate::estimate::Estimate;
use statrs::distribution::{ContinuousCDF, Normal};
use std::f64::consts::{FRAC_PI_2, FRAC_PI_4};

/// False-alarm rate of the coupling test per pair of axes (two-sided): one recording of
/// uncoupled axes in a thousand is reported as coupled.
pub const COUPLING_FALSE_ALARM: f64 = 1e-3;

/// Lags of the autocovariances that enter the variance sums. The products decay at the sum of
/// the two relaxation rates, so lags beyond a few relaxation times add only noise; 2^15 lags
/// cover relaxation times of thousands of samples (an fc of a few hertz at 100 kHz), and the
/// noise they add is a relative sqrt(MAX_LAG tau) / N of the sum (tau in samples).
pub const MAX_LAG: usize = 1 << 15;

/// Samples from the start of the record whose autocovariances estimate the variance sums. The
/// sums are properties of the process, not of the record's length: 2^17 samples estimate them
/// to a relative sqrt(tau / 2^17) (about 1.5 % for tau of 28 samples), and the variances they
/// give are then divided by the whole record's length. Longer records would only make the
/// transforms dearer (on 2^20 samples the whole-record sums cost about half a calibration).
pub const VARIANCE_RECORD: usize = 1 << 17;

/// Fewest samples the coupling is measured on (below it the normal approximation of the test
/// is poor).
pub const MIN_SAMPLES: usize = 64;

/// The zero-lag correlation of two axes and its test against independence.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Correlation {
    /// Correlation coefficient r of the mean-removed samples, and its standard error were the
    /// axes independent (Bartlett's null variance, see the module docs).
    pub coefficient: Estimate,
    /// r divided by that standard error.
    pub z: f64,
}

/// The principal axes of a plane of two axes.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PrincipalAngle {
    /// Rotation, rad, from the detector axes to the principal axes (positive from the first
    /// axis towards the second), at most pi/4 in size, with its standard error.
    pub angle_rad: Estimate,
    /// Variances along the rotated first and second axes, signal units squared.
    pub variances: [f64; 2],
}

/// Two-sided critical value of a standard normal at false-alarm rate `alpha` (0 < alpha < 1).
pub fn critical_z(alpha: f64) -> f64 {
    let normal = Normal::new(0.0, 1.0).expect("the standard normal exists");
    normal.inverse_cdf(1.0 - alpha / 2.0)
}

/// Whether `z` exceeds the critical value at `COUPLING_FALSE_ALARM`.
pub fn is_significant(z: f64) -> bool {
    z.abs() > critical_z(COUPLING_FALSE_ALARM)
}

/// The autocovariance of one axis for the variance sums (`MAX_LAG` lags at most, from the
/// first `VARIANCE_RECORD` samples), signal units squared, normalised by the count of products
/// per lag.
pub fn axis_autocovariance(samples: &[f64]) -> Vec<f64> {
    autocovariance(&samples[..samples.len().min(VARIANCE_RECORD)], MAX_LAG)
}

/// sum_{|k|<N} (1 - |k|/N) gx(k) gy(k) over the lags both autocovariances hold.
/// `n_samples` is the whole record's length; the weights are those of the part the
/// autocovariances were taken from.
fn lag_product_sum(acov_x: &[f64], acov_y: &[f64], n_samples: usize) -> f64 {
    let n = n_samples.min(VARIANCE_RECORD) as f64;
    let tail: f64 = acov_x
        .iter()
        .zip(acov_y)
        .enumerate()
        .skip(1)
        .map(|(k, (gx, gy))| (1.0 - k as f64 / n) * gx * gy)
        .sum();
    match (acov_x.first(), acov_y.first()) {
        (Some(gx), Some(gy)) => 2.0f64.mul_add(tail, gx * gy),
        _ => f64::NAN,
    }
}

/// Mean-removed second moments (var x, var y, cov xy), signal units squared.
fn second_moments(x: &[f64], y: &[f64]) -> [f64; 3] {
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        let (dx, dy) = (a - mx, b - my);
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    [sxx / n, syy / n, sxy / n]
}

fn usable(x: &[f64], y: &[f64]) -> bool {
    x.len() == y.len() && x.len() >= MIN_SAMPLES && x.iter().chain(y).all(|v| v.is_finite())
}

/// The zero-lag correlation of `x` and `y` (same length, equally spaced) and its test against
/// independence, given each axis's autocovariance from [`axis_autocovariance`]. `None` when the
/// axes differ in length, are shorter than `MIN_SAMPLES`, hold a non-finite sample or one never
/// moves.
pub fn correlation(x: &[f64], y: &[f64], acov_x: &[f64], acov_y: &[f64]) -> Option<Correlation> {
    if !usable(x, y) {
        return None;
    }
    let [vx, vy, cxy] = second_moments(x, y);
    if !(vx > 0.0 && vy > 0.0) {
        return None;
    }
    let r = cxy / (vx * vy).sqrt();
    let (gx0, gy0) = (*acov_x.first()?, *acov_y.first()?);
    // Normalise by the autocovariances' own lag 0 so the sum is of correlations.
    let null_var = lag_product_sum(acov_x, acov_y, x.len()) / (gx0 * gy0) / x.len() as f64;
    if !(null_var.is_finite() && null_var > 0.0) {
        return None;
    }
    let se = null_var.sqrt();
    Some(Correlation {
        coefficient: Estimate::new(r, se),
        z: r / se,
    })
}

/// The rotation (rad) of at most pi/4 in size that diagonalises [[a, c], [c, b]].
pub fn diagonalising_angle(a: f64, b: f64, c: f64) -> f64 {
    let major = 0.5 * (2.0 * c).atan2(a - b);
    if major > FRAC_PI_4 {
        major - FRAC_PI_2
    } else if major < -FRAC_PI_4 {
        major + FRAC_PI_2
    } else {
        major
    }
}

/// The samples of the two axes expressed along axes turned by `angle_rad` (from the first
/// towards the second): u = x cos + y sin, v = -x sin + y cos.
pub fn rotate(x: &[f64], y: &[f64], angle_rad: f64) -> (Vec<f64>, Vec<f64>) {
    let (s, c) = angle_rad.sin_cos();
    x.iter()
        .zip(y)
        .map(|(a, b)| (c.mul_add(*a, s * b), c.mul_add(*b, -s * a)))
        .unzip()
}

/// The principal axes of the plane of `x` and `y` (nanometres: a rotation of volts is not a
/// rotation of positions), with the angle's standard error from the rotated series'
/// autocovariances. `None` for the inputs [`correlation`] refuses.
pub fn principal_angle(x: &[f64], y: &[f64]) -> Option<PrincipalAngle> {
    if !usable(x, y) {
        return None;
    }
    let [a, b, c] = second_moments(x, y);
    if !(a > 0.0 && b > 0.0) {
        return None;
    }
    let angle = diagonalising_angle(a, b, c);
    // The variances along the turned axes, from the covariance (u = x cos + y sin).
    let (s, co) = angle.sin_cos();
    let cross = 2.0 * s * co * c;
    let lu = (co * co).mul_add(a, (s * s).mul_add(b, cross));
    let lv = (s * s).mul_add(a, (co * co).mul_add(b, -cross));
    // Only the part the variance sums use is turned.
    let m = x.len().min(VARIANCE_RECORD);
    let (u, v) = rotate(&x[..m], &y[..m], angle);
    let (acov_u, acov_v) = (axis_autocovariance(&u), axis_autocovariance(&v));
    let cross_var = lag_product_sum(&acov_u, &acov_v, x.len()) / x.len() as f64;
    let se = cross_var.max(0.0).sqrt() / (lu - lv).abs();
    Some(PrincipalAngle {
        angle_rad: Estimate::new(angle, se),
        variances: [lu, lv],
    })
}
