//! Aliased one-sided spectra of what an instrument records of a trapped bead: closed forms where
//! they exist, and a numerical sum over alias images where they do not.
//!
//! Sampling folds every frequency f + n fs onto f, so the spectrum of the samples is the image
//! sum S_a(f) = sum_n H(|f + n fs|) of the spectrum H of the signal the sampler sees
//! (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)). For the plain
//! Ornstein-Uhlenbeck process this has their closed form (the aliased Lorentzian); a box-car
//! exposure of width W (a camera) multiplies H by sinc^2(pi f W) and also has a closed form
//! (Wong & Halvorsen, Opt. Express 14, 12517 (2006)); the photodiode's filter turns the
//! Lorentzian into a sum of two Lorentzians by partial fractions, so filtered, blurred and
//! filtered-and-blurred spectra are sums of those closed forms. Frequency-dependent drag has no
//! closed form: its images are summed numerically (see [`image_sum`]).
//!
//! Everything is one-sided (its integral over 0..fs/2 is the variance): S = 2 P with P the
//! two-sided density of Berg-Sorensen & Flyvbjerg 2004.

use crate::spectrum::{DetectorFilter, aliased_lorentzian_one_sided};
use std::f64::consts::PI;
use std::sync::OnceLock;

/// The variance of a box-car average over W of an Ornstein-Uhlenbeck process, as a fraction of
/// the process variance: S(a) = 2/a - (2/a^2)(1 - exp(-a)), a = W / tau (Wong & Halvorsen, Opt.
/// Express 14, 12517 (2006)). For a < 0.1 the series 2 sum_{k>=0} (-a)^k / (k+2)! is used,
/// which avoids the cancellation of the closed form (its terms fall by at least 10 each).
pub fn exposure_variance_factor(exposure_over_tau: f64) -> f64 {
    let a = exposure_over_tau;
    if a < 0.1 {
        // 2 (a + expm1(-a)) / a^2 = 2 sum_{k>=0} (-a)^k / (k+2)!.
        let mut term = 0.5; // 1 / 2!
        let mut sum = 0.0;
        for k in 0..12 {
            sum += term;
            term *= -a / f64::from(k + 3);
        }
        2.0 * sum
    } else {
        2.0 * (a + (-a).exp_m1()) / (a * a)
    }
}

/// One-sided spectrum of an Ornstein-Uhlenbeck process (corner `corner_frequency_hz`, variance
/// `variance` in signal-unit^2) averaged over an exposure of `exposure_time_s` ending within each
/// frame and sampled at `sample_rate_hz`, at `f_hz` in [0, fs/2] (signal-unit^2 / Hz).
///
/// Wong & Halvorsen, Opt. Express 14, 12517 (2006), with tau = 1 / (2 pi fc), a = W / tau,
/// c = exp(-dt / tau), theta = 2 pi f dt, written one-sided:
///
/// S(f) = 2 sigma^2 dt { S(a) + 2 (2 sinh(a/2) / a)^2 c (cos theta - c) / (1 + c^2 - 2 c cos theta) },
///
/// which equals sum_n S_Lorentz(f + n fs) sinc^2(pi (f + n fs) W) (the unit tests check it against
/// that sum). It needs 0 < W <= dt (the lag-one covariance assumes exposures that do not overlap);
/// as W -> 0 it becomes the aliased Lorentzian. 1 + c^2 - 2 c cos theta is evaluated as
/// (1 - c)^2 + 4 c sin^2(theta / 2) and cos theta - c as (1 - c) - 2 sin^2(theta / 2), which keep
/// their accuracy when fc dt and f dt are small.
pub fn blurred_aliased_lorentzian_one_sided(
    f_hz: f64,
    corner_frequency_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    exposure_time_s: f64,
) -> f64 {
    let dt = 1.0 / sample_rate_hz;
    let rate = 2.0 * PI * corner_frequency_hz; // 1 / tau
    let a = exposure_time_s * rate;
    let one_minus_c = -(-dt * rate).exp_m1();
    let c = 1.0 - one_minus_c;
    let half_theta_sin = (PI * f_hz * dt).sin();
    let sin2 = half_theta_sin * half_theta_sin;
    let denominator = one_minus_c.mul_add(one_minus_c, 4.0 * c * sin2);
    let cos_minus_c = 2.0f64.mul_add(-sin2, one_minus_c);
    let lag_weight = if a < 1e-4 {
        // (2 sinh(a/2) / a)^2 = 1 + a^2 / 12 + O(a^4).
        (a * a).mul_add(1.0 / 12.0, 1.0)
    } else {
        let r = 2.0 * (0.5 * a).sinh() / a;
        r * r
    };
    let braces = (2.0 * lag_weight * c * cos_minus_c)
        .mul_add(denominator.recip(), exposure_variance_factor(a));
    2.0 * variance * dt * braces
}

/// One Ornstein-Uhlenbeck component of a stationary signal: autocovariance
/// `variance` exp(-2 pi `corner_frequency_hz` |t|). The variance may be negative for a component
/// of a sum (the filter's partial fractions subtract one).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct OuComponent {
    pub(crate) corner_frequency_hz: f64,
    pub(crate) variance: f64,
}

/// Smallest relative gap |f3dB^2 - fc^2| / fc^2 at which the partial fractions of the filtered
/// Lorentzian are used; closer, their two terms grow as 1 / gap and cancel, losing about
/// 1e-16 / gap of relative accuracy, so the numerical image sum is used instead.
const MIN_PARTIAL_FRACTION_GAP: f64 = 1e-4;

/// The Ornstein-Uhlenbeck components whose sum is the bead's motion as the detector records it:
/// one for the plain process, two for the filtered one.
///
/// With the filter g(f) = alpha^2 + (1 - alpha^2) / (1 + (f/f3)^2) (Berg-Sorensen, Oddershede,
/// Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003), citation from memory, unverified) and
/// L(fc) = D / (pi^2 (fc^2 + f^2)), partial fractions give
/// g L(fc) = [alpha^2 + (1 - alpha^2) f3^2 / (f3^2 - fc^2)] L(fc) - (1 - alpha^2) f3^2 / (f3^2 - fc^2) L(f3),
/// the spectrum of the autocovariance of shared/PHYSICS.md section 12 (derived there and here).
/// Returns `None` when f3 is within [`MIN_PARTIAL_FRACTION_GAP`] of fc.
pub(crate) fn ou_components(
    corner_frequency_hz: f64,
    variance: f64,
    filter: Option<&DetectorFilter>,
) -> Option<Vec<OuComponent>> {
    let bead = OuComponent {
        corner_frequency_hz,
        variance,
    };
    let Some(filter) = filter else {
        return Some(vec![bead]);
    };
    let fc = corner_frequency_hz;
    let f3 = filter.f3db_hz;
    let difference_of_squares = f3.mul_add(f3, -(fc * fc));
    let gap = difference_of_squares / (fc * fc);
    if gap.abs() < MIN_PARTIAL_FRACTION_GAP {
        return None;
    }
    let a2 = filter.alpha * filter.alpha;
    let slow = (1.0 - a2) * f3 * f3 / difference_of_squares;
    // L(f3) with the bead's D has variance D / (2 pi f3) = variance fc / f3.
    Some(vec![
        OuComponent {
            corner_frequency_hz: fc,
            variance: (a2 + slow) * variance,
        },
        OuComponent {
            corner_frequency_hz: f3,
            variance: -slow * variance * fc / f3,
        },
    ])
}

/// The aliased one-sided spectrum of a sum of Ornstein-Uhlenbeck components, sampled
/// instantaneously (`exposure_time_s` = `None`) or averaged over an exposure, in closed form
/// (sum of [`aliased_lorentzian_one_sided`] or of [`blurred_aliased_lorentzian_one_sided`]).
pub(crate) fn components_one_sided(
    components: &[OuComponent],
    f_hz: f64,
    sample_rate_hz: f64,
    exposure_time_s: Option<f64>,
) -> f64 {
    components
        .iter()
        .map(|c| match exposure_time_s {
            Some(w) => blurred_aliased_lorentzian_one_sided(
                f_hz,
                c.corner_frequency_hz,
                c.variance,
                sample_rate_hz,
                w,
            ),
            None => aliased_lorentzian_one_sided(
                f_hz,
                c.corner_frequency_hz,
                c.variance * 2.0 * PI * c.corner_frequency_hz,
                sample_rate_hz,
            ),
        })
        .sum()
}

/// Number of alias images summed explicitly on each side by [`image_sum`] without an exposure.
pub(crate) const MIN_IMAGES: usize = 64;

/// Largest number of images summed explicitly on each side with an exposure.
pub(crate) const MAX_IMAGES: usize = 1024;

/// Images to sum explicitly for an exposure of `exposure_time_s`: enough that pi K fs W >= 50,
/// where sinc^2 oscillates fast enough for the tail to use its mean 1 / (2 (pi f W)^2), within
/// [`MIN_IMAGES`] and [`MAX_IMAGES`].
pub(crate) fn images_for(sample_rate_hz: f64, exposure_time_s: Option<f64>) -> usize {
    match exposure_time_s {
        None => MIN_IMAGES,
        Some(w) => {
            let needed = (50.0 / (PI * sample_rate_hz * w)).ceil();
            if needed.is_finite() {
                (needed as usize).clamp(MIN_IMAGES, MAX_IMAGES)
            } else {
                MAX_IMAGES
            }
        }
    }
}

/// The alias image sum S_a(f) = sum_n H(|f + n fs|) of an unaliased one-sided spectrum H, at
/// `f_hz` in [0, fs/2].
///
/// The images |n| <= `images` are summed term by term. The rest on each side is replaced by the
/// Euler-Maclaurin form of the midpoint rule (common practice; e.g. Abramowitz & Stegun 23.1.30,
/// recalled from memory, unverified):
/// sum_{n > K} H(f + n fs) ~ (1/fs) int_F^inf `tail`(u) du + (fs / 24) `tail`'(F),
/// F = f + (K + 1/2) fs, whose next term is O(fs^3 H''' / 5760), far below 1e-9 of the total at
/// K = 64. The integral is evaluated by 24-point Gauss-Legendre quadrature after the change of
/// variable u = F / t, the derivative by a central difference. `tail` is H itself, or H with a
/// fast oscillating factor replaced by its mean (sinc^2 by 1 / (2 (pi u W)^2)) so that the
/// quadrature sees a smooth function. H must fall at least as 1/u^2 for the tail to be finite
/// (every spectrum here does).
pub(crate) fn image_sum(
    unaliased: impl Fn(f64) -> f64,
    tail: impl Fn(f64) -> f64,
    f_hz: f64,
    sample_rate_hz: f64,
    images: usize,
) -> f64 {
    let fs = sample_rate_hz;
    let k = images as f64;
    let mut sum = unaliased(f_hz.abs());
    for n in 1..=images {
        let offset = n as f64 * fs;
        sum += unaliased(f_hz + offset) + unaliased((f_hz - offset).abs());
    }
    let upper_start = (k + 0.5).mul_add(fs, f_hz);
    let lower_start = (k + 0.5).mul_add(fs, -f_hz);
    let integrals = (tail_integral(&tail, upper_start) + tail_integral(&tail, lower_start)) / fs;
    let slopes = slope(&tail, upper_start) + slope(&tail, lower_start);
    sum + slopes.mul_add(fs / 24.0, integrals)
}

/// h'(u) by a central difference over +/- 1e-4 u (its truncation, 1e-8 h''' u^2 / 6, and its
/// rounding, 1e-16 h / 1e-4 u, are both far below what the correction needs).
fn slope(h: &impl Fn(f64) -> f64, u: f64) -> f64 {
    let step = 1e-4 * u;
    (h(u + step) - h(u - step)) / (2.0 * step)
}

/// int_F^inf h(u) du = int_0^1 h(F/t) F / t^2 dt by Gauss-Legendre quadrature on [0, 1].
fn tail_integral(h: &impl Fn(f64) -> f64, start_hz: f64) -> f64 {
    let (nodes, weights) = gauss_legendre_24();
    nodes
        .iter()
        .zip(weights)
        .map(|(&x, &w)| {
            // Map [-1, 1] to (0, 1).
            let t = 0.5 * (x + 1.0);
            0.5 * w * h(start_hz / t) * start_hz / (t * t)
        })
        .sum()
}

/// Number of Gauss-Legendre nodes of [`gauss_legendre_24`].
const GL_NODES: usize = 24;

/// The nodes and weights of 24-point Gauss-Legendre quadrature on [-1, 1], exact for
/// polynomials of degree 47, computed once by Newton's method on the Legendre polynomial P_24
/// from the starting values cos(pi (i - 1/4) / (n + 1/2)) (common practice, e.g. Press et al.,
/// Numerical Recipes, section 4.6, recalled from memory, unverified; the unit tests check the
/// rule on exact integrals).
pub(crate) fn gauss_legendre_24() -> &'static ([f64; GL_NODES], [f64; GL_NODES]) {
    static RULE: OnceLock<([f64; GL_NODES], [f64; GL_NODES])> = OnceLock::new();
    RULE.get_or_init(|| {
        let n = GL_NODES;
        let mut nodes = [0.0; GL_NODES];
        let mut weights = [0.0; GL_NODES];
        for i in 0..n {
            let mut x = (PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
            let mut derivative = 1.0;
            for _ in 0..100 {
                let (p, dp) = legendre_with_derivative(n, x);
                derivative = dp;
                let step = p / dp;
                x -= step;
                if step.abs() < 1e-16 {
                    break;
                }
            }
            let (_, dp) = legendre_with_derivative(n, x);
            if dp.is_finite() {
                derivative = dp;
            }
            nodes[i] = x;
            weights[i] = 2.0 / ((1.0 - x * x) * derivative * derivative);
        }
        (nodes, weights)
    })
}

/// P_n(x) and P_n'(x) by the three-term recurrence (Bonnet's recursion).
fn legendre_with_derivative(n: usize, x: f64) -> (f64, f64) {
    let mut p_prev = 1.0;
    let mut p = x;
    for k in 2..=n {
        let kf = k as f64;
        let next = (2.0f64.mul_add(kf, -1.0) * x).mul_add(p, -((kf - 1.0) * p_prev)) / kf;
        p_prev = p;
        p = next;
    }
    let dp = n as f64 * x.mul_add(p, -p_prev) / x.mul_add(x, -1.0);
    (p, dp)
}
