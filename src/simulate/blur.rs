//! Exact time-domain simulation of camera samples: the Ornstein-Uhlenbeck position averaged
//! over an exposure within each frame.
//!
//! This is the independent route to blurred data, beside the spectral one
//! ([`super::InstrumentAxis`] with an exposure): the unit tests compare the two.
//!
//! Given the position x0 at the start of an exposure of length h, the end position x_h and the
//! integral I = int_0^h x dt are jointly Gaussian (shared/PHYSICS.md section 2, derived there and
//! checked by simulation; the box-car average is the camera model of Wong & Halvorsen, Opt.
//! Express 14, 12517 (2006)), with c = exp(-h / tau), D = sigma^2 / tau:
//!
//! - means c x0 and tau (1 - c) x0;
//! - Var x_h = sigma^2 (1 - c^2);
//! - Var I = 2 D tau^2 [h - 2 tau (1 - c) + (tau / 2)(1 - c^2)];
//! - Cov(x_h, I) = D tau^2 (1 - c)^2.
//!
//! The sample is I / h; between the end of one exposure and the start of the next (dt - h) the
//! position moves by the exact AR(1) step.

use rand_distr::{Distribution, StandardNormal};
use std::f64::consts::PI;

/// q(a) = a - 2 (1 - e^-a) + (1 - e^-2a) / 2, so that Var I = 2 sigma^2 tau^2 q(h / tau).
///
/// Its Taylor series starts at a^3 / 3 (the leading terms cancel), so below a = 1 the series
/// sum_{k>=3} (-1)^k (2 - 2^(k-1)) a^k / k! is summed instead of the closed form (derived here
/// from the exponential series; its terms fall at least as (2a)^k / k!).
fn integral_variance_factor(a: f64) -> f64 {
    if a >= 1.0 {
        return closed_integral_variance_factor(a);
    }
    let mut sum = 0.0;
    let mut power_over_factorial = a * a / 2.0; // a^2 / 2!
    for k in 3..40 {
        power_over_factorial *= a / f64::from(k);
        let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
        let term = sign * (2.0 - 2f64.powi(k - 1)) * power_over_factorial;
        sum += term;
        if term.abs() < 1e-18 * sum.abs() {
            break;
        }
    }
    sum
}

/// The closed form of q(a), accurate for a >= 1 (see [`integral_variance_factor`]).
fn closed_integral_variance_factor(a: f64) -> f64 {
    0.5f64.mul_add(-(-2.0 * a).exp_m1(), 2.0f64.mul_add((-a).exp_m1(), a))
}

/// One exact record of `n_samples` camera samples: the Ornstein-Uhlenbeck position (corner
/// `corner_frequency_hz`, variance `variance`) averaged over an exposure of `exposure_time_s`
/// at the start of each frame of 1 / `sample_rate_hz`, from a stationary start.
///
/// Each frame draws two standard normals for the exposure (end position, then integral, by the
/// Cholesky factor of their conditional covariance) and one more for the gap when the exposure
/// is shorter than the frame. `exposure_time_s` must lie in (0, 1 / fs]; it is clamped there.
pub fn blurred_ou_series<R: rand::Rng + ?Sized>(
    corner_frequency_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    exposure_time_s: f64,
    n_samples: usize,
    rng: &mut R,
) -> Vec<f64> {
    let dt = 1.0 / sample_rate_hz;
    let h = exposure_time_s.clamp(f64::MIN_POSITIVE, dt);
    let tau = 1.0 / (2.0 * PI * corner_frequency_hz);
    let a = h / tau;
    let sigma = variance.sqrt();
    let one_minus_c = -(-a).exp_m1();
    let c = 1.0 - one_minus_c;
    // Moments in units of sigma (position) and sigma tau (integral).
    let var_end = -(-2.0 * a).exp_m1();
    let cov = one_minus_c * one_minus_c;
    let var_integral = 2.0 * integral_variance_factor(a);
    let sd_end = var_end.sqrt();
    let loading = cov / sd_end;
    let sd_integral_given_end = loading.mul_add(-loading, var_integral).max(0.0).sqrt();
    let gap = dt - h;
    let c_gap = (-gap / tau).exp();
    let kick_gap = sigma * c_gap.mul_add(-c_gap, 1.0).sqrt();
    let z0: f64 = StandardNormal.sample(rng);
    let mut x = sigma * z0;
    let mut out = Vec::with_capacity(n_samples);
    for _ in 0..n_samples {
        let z1: f64 = StandardNormal.sample(rng);
        let z2: f64 = StandardNormal.sample(rng);
        let end = sigma.mul_add(sd_end * z1, c * x);
        let integral = tau
            * sigma.mul_add(
                loading.mul_add(z1, sd_integral_given_end * z2),
                one_minus_c * x,
            );
        out.push(integral / h);
        x = end;
        if gap > 0.0 {
            let xi: f64 = StandardNormal.sample(rng);
            x = c_gap.mul_add(x, kick_gap * xi);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The series of q(a) and its closed form agree where both are accurate (derived identity;
    /// at a = 0.5 to 1 the closed form's rounding, a few 1e-16 against q(0.5) = 0.03, is at most
    /// about 1e-14 relative).
    #[test]
    fn integral_variance_series_matches_the_closed_form() {
        for a in [0.5f64, 0.7, 0.999_999] {
            let closed = closed_integral_variance_factor(a);
            let series = integral_variance_factor(a);
            assert!(
                (series / closed - 1.0).abs() < 1e-13,
                "{a}: {series} vs {closed}"
            );
        }
        // Leading term a^3 / 3 - a^4 / 4 at small a.
        let a = 1e-4f64;
        let leading = a.powi(3) / 3.0 - a.powi(4) / 4.0;
        assert!((integral_variance_factor(a) / leading - 1.0).abs() < 1e-8);
    }
}
