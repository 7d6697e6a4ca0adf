//! Time-domain models of the autocovariance a detector records, matching the spectral models:
//! the photodiode's parasitic filter, frequency-dependent (hydrodynamic) drag and the box-car
//! averaging of a camera exposure, alone or together.
//!
//! Convention: the one-sided spectrum S(f) = D / (pi^2 (fc^2 + f^2)) of the bead (Berg-Sorensen
//! & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004), written one-sided), whose cosine transform
//! C(t) = integral_0^inf S(f) cos(2 pi f t) df is the autocovariance, C(0) = D/(2 pi fc) = sigma^2.
//! Instantaneous sampling does not alias the autocovariance: samples dt apart have exactly the
//! covariance C(k dt) (shared/PHYSICS.md section 12). Blur, the filter and the drag all act
//! before sampling, so each model is the cosine transform of its unaliased spectrum, sampled.
//!
//! Where the transform has a closed form (plain, filtered and blurred Ornstein-Uhlenbeck motion)
//! it is a sum of at most two sampled exponentials; the hydrodynamic part is the numerical
//! cosine transform of the difference between the hydrodynamic spectrum and the Lorentzian
//! (see `quadrature`).

use super::AcfError;
use super::quadrature::{self, FrequencyRule};
use crate::spectrum::{DetectorFilter, FilterSetting, HydroTerms, Params, SpectrumModel};
use std::collections::BTreeMap;
use std::f64::consts::PI;

/// What the autocovariance model includes besides the trapped bead's Ornstein-Uhlenbeck motion.
///
/// Plain data: the calibration fills it from what the spectral fit used (the filter the spectrum
/// fitted or was given, the drag's frequency scales) and from the recording (a camera's
/// exposure time).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TimeDomainModel {
    /// Sampling rate, Hz.
    pub sample_rate_hz: f64,
    /// The photodiode's parasitic filter, fixed (not fitted here).
    pub filter: Option<DetectorFilter>,
    /// Frequency-dependent drag, or `None` for constant Stokes drag.
    pub hydro: Option<HydroTerms>,
    /// Exposure time W of a camera (box-car average of the position over W before each
    /// sample), seconds, `0 < W <= 1/sample_rate_hz`; `None` for instantaneous samples.
    pub exposure_s: Option<f64>,
}

/// Relative distance |f3dB - fc| / ((f3dB + fc)/2) below which the two exponentials of the
/// filtered model are not split (their amplitudes grow as 1/|f3dB - fc| and cancel), and the
/// filtered part is evaluated as a divided difference instead.
const SPLIT_MIN_SEPARATION: f64 = 1e-3;

/// Below this relative half-width the divided difference of the filtered part is taken over the
/// widened interval mid * (1 +- 1e-5): rounding then stays near 1e-11 and the change of the
/// divided difference is of order 1e-10 relative (second order in the width).
const DIVIDED_DIFFERENCE_MIN_HALF_WIDTH: f64 = 1e-5;

/// The hydrodynamic remainder is computed out to this many relaxation times beyond the lags
/// used; beyond it, it is below about 1e-4 sigma^2 for the beads of this crate and its effect on
/// the weights and on the mean-removal bias is neglected.
const REMAINDER_RELAXATION_TIMES: f64 = 30.0;

/// The remainder of a degenerate filter decays as exp(-2 pi min(fc, f3dB) t); it is kept until
/// that is below exp(-40).
const DEGENERATE_DECAY: f64 = 40.0;

/// At most this many lags of a numerical remainder.
const MAX_REMAINDER_LAGS: usize = 1 << 15;

/// Beyond the exactly evaluated lags (at least twice the last lag fitted) the hydrodynamic
/// remainder is computed every tau/`GRID_PER_RELAXATION_TIME` and interpolated by cubics: for
/// the smooth decay there the error is of order (1/4)^4/384 ~ 1e-5 of the remainder (itself a
/// few per cent of sigma^2), and it enters only the weights and the mean-removal bias.
const GRID_PER_RELAXATION_TIME: f64 = 4.0;

impl TimeDomainModel {
    /// The plain model: instantaneous samples of Ornstein-Uhlenbeck motion with Stokes drag.
    pub fn plain(sample_rate_hz: f64) -> Self {
        Self {
            sample_rate_hz,
            filter: None,
            hydro: None,
            exposure_s: None,
        }
    }

    /// Checks the model's numbers.
    ///
    /// # Errors
    /// [`AcfError::InvalidSampleRate`] or [`AcfError::InvalidModel`] naming the field.
    pub fn validate(&self) -> Result<(), AcfError> {
        let fs = self.sample_rate_hz;
        if !(fs.is_finite() && fs > 0.0) {
            return Err(AcfError::InvalidSampleRate { value: fs });
        }
        let invalid = |field: &'static str, value: f64, requirement: &'static str| {
            Err(AcfError::InvalidModel {
                field,
                value,
                requirement,
            })
        };
        if let Some(filter) = self.filter {
            if !(filter.f3db_hz.is_finite() && filter.f3db_hz > 0.0) {
                return invalid(
                    "filter.f3db_hz",
                    filter.f3db_hz,
                    "a positive frequency in Hz",
                );
            }
            if !(filter.alpha > 0.0 && filter.alpha <= 1.0) {
                return invalid("filter.alpha", filter.alpha, "in (0, 1]");
            }
        }
        if let Some(hydro) = self.hydro {
            if !(hydro.f_nu_hz.is_finite() && hydro.f_nu_hz > 0.0) {
                return invalid("hydro.f_nu_hz", hydro.f_nu_hz, "a positive frequency in Hz");
            }
            if !(hydro.f_m_hz.is_finite() && hydro.f_m_hz > 0.0) {
                return invalid("hydro.f_m_hz", hydro.f_m_hz, "a positive frequency in Hz");
            }
        }
        if let Some(w) = self.exposure_s {
            // A relative allowance of 1e-9 lets W = dt computed in another way through.
            if !(w > 0.0 && w <= (1.0 + 1e-9) / fs) {
                return invalid(
                    "exposure_s",
                    w,
                    "in (0, 1/sample_rate_hz]: the exposure cannot exceed the frame interval",
                );
            }
        }
        Ok(())
    }

    /// Sampling interval, s.
    fn dt(&self) -> f64 {
        1.0 / self.sample_rate_hz
    }

    /// Exposure, clamped to the sampling interval.
    fn exposure(&self) -> Option<f64> {
        self.exposure_s.map(|w| w.min(self.dt()))
    }

    /// The expected autocovariance at `lag` samples (signal-unit^2) for corner frequency
    /// `corner_frequency_hz` and diffusion coefficient `diffusion` (signal-unit^2/s).
    ///
    /// Lag 0 is the detector's variance (see [`Self::detector_variance`]); lags `k >= 1` are
    /// C(k dt) of the (filtered, blurred) model:
    /// - plain: `sigma^2 c^k`, c = exp(-2 pi fc dt), sigma^2 = D/(2 pi fc);
    /// - filtered (g(f) = alpha^2 + (1 - alpha^2)/(1 + (f/f3)^2), Berg-Sorensen, Oddershede,
    ///   Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003), citation recalled from memory,
    ///   unverified): by partial fractions of g(f) S(f) (derived here),
    ///   `C(t) = sigma^2 [alpha^2 e^(-2 pi fc t) + (1 - alpha^2) f3^2/(f3^2 - fc^2)
    ///   (e^(-2 pi fc t) - (fc/f3) e^(-2 pi f3 t))]`;
    /// - camera blur of width W (box-car averages, derived here and checked against a numerical
    ///   double integral in the tests): each exponential sigma_i^2 e^(-|t|/tau_i) becomes
    ///   `sigma_i^2 (tau_i/W)^2 2 (cosh(W/tau_i) - 1) e^(-k dt/tau_i)` for k >= 1, written as
    ///   `sigma_i^2 ((1 - e^-a)/a)^2 e^(-(k dt - W)/tau_i)`, a = W/tau_i, to avoid overflow;
    /// - hydrodynamic drag: the closed form above plus the cosine transform of
    ///   (S_hydro(f) - S(f)) g(f) (and its blur average), computed numerically.
    ///
    /// NaN for an invalid model or non-positive parameters (check with [`Self::validate`]).
    pub fn autocovariance_at(&self, lag: usize, corner_frequency_hz: f64, diffusion: f64) -> f64 {
        if self.validate().is_err() || !(corner_frequency_hz > 0.0 && diffusion > 0.0) {
            return f64::NAN;
        }
        let closed = self.closed_form(lag, corner_frequency_hz, diffusion);
        match HydroIntegrand::new(self) {
            Some(integrand) => {
                let rule = integrand.rule(lag);
                closed
                    + rule.apply(|f| integrand.remainder(f, corner_frequency_hz, diffusion))
                    + integrand.lag0_tail(lag, diffusion)
            }
            None => closed,
        }
    }

    /// The variance the detector reports, `C(0)` of the model (signal-unit^2).
    ///
    /// Plain and hydrodynamic: sigma^2 = D/(2 pi fc) (for hydrodynamic drag by the
    /// fluctuation-dissipation theorem the variance is k_B T/kappa whatever the frequency
    /// dependence of the drag; computed numerically here and tested against it). Filtered:
    /// `sigma^2 (alpha^2 + (1 - alpha^2) f3/(f3 + fc))`. Blurred: `sigma^2 S(W/tau)`,
    /// S(a) = 2/a - 2(1 - e^-a)/a^2 (Wong & Halvorsen, Opt. Express 14, 12517 (2006)).
    pub fn detector_variance(&self, corner_frequency_hz: f64, diffusion: f64) -> f64 {
        self.autocovariance_at(0, corner_frequency_hz, diffusion)
    }

    /// The closed-form part of the model at `lag`: everything except the hydrodynamic
    /// remainder.
    fn closed_form(&self, lag: usize, fc: f64, d: f64) -> f64 {
        let variance = d / (2.0 * PI * fc);
        let shape = |rate_hz: f64| exponential_shape(rate_hz, lag, self.dt(), self.exposure());
        match self.filter {
            None => variance * shape(fc),
            Some(filter) => {
                let a2 = filter.alpha * filter.alpha;
                let slow = filter_mix(
                    fc,
                    filter.f3db_hz,
                    lag == 0 && self.exposure_s.is_none(),
                    shape,
                );
                variance * a2.mul_add(shape(fc), (1.0 - a2) * slow)
            }
        }
    }

    /// The closed-form part at lags u >= 1 as sampled exponentials `b q^(u-1)`, returned as
    /// `(b, ln q)`, and whether the filtered part was left out because fc and f3dB nearly
    /// coincide (then it is evaluated lag by lag as a remainder).
    fn exponential_terms(&self, fc: f64, d: f64) -> (Vec<(f64, f64)>, bool) {
        let variance = d / (2.0 * PI * fc);
        let dt = self.dt();
        let term = |amplitude: f64, rate_hz: f64| {
            (
                amplitude * exponential_shape(rate_hz, 1, dt, self.exposure()),
                -2.0 * PI * rate_hz * dt,
            )
        };
        let Some(filter) = self.filter else {
            return (vec![term(variance, fc)], false);
        };
        let a2 = filter.alpha * filter.alpha;
        let f3 = filter.f3db_hz;
        if (f3 - fc).abs() < SPLIT_MIN_SEPARATION * 0.5 * (f3 + fc) {
            return (vec![term(variance * a2, fc)], true);
        }
        let kappa = f3 * f3 / ((f3 - fc) * (f3 + fc));
        (
            vec![
                term(variance * (1.0 - a2).mul_add(kappa, a2), fc),
                term(-(1.0 - a2) * variance * kappa * fc / f3, f3),
            ],
            false,
        )
    }

    /// The filtered part `sigma^2 (1 - alpha^2) mix` at `lag`, for a degenerate filter.
    fn degenerate_filter_part(&self, lag: usize, fc: f64, d: f64) -> f64 {
        let Some(filter) = self.filter else {
            return 0.0;
        };
        let variance = d / (2.0 * PI * fc);
        let a2 = filter.alpha * filter.alpha;
        let shape = |rate_hz: f64| exponential_shape(rate_hz, lag, self.dt(), self.exposure());
        variance * (1.0 - a2) * filter_mix(fc, filter.f3db_hz, false, shape)
    }
}

/// The factor by which the detector's variance differs from the positional variance
/// sigma^2 = D/(2 pi fc) for `model` at corner frequency `corner_frequency_hz`: C(0)/sigma^2.
///
/// Equipartition measures C(0), so kappa = k_B T / (sigma^2_measured / factor) in metres, and
/// for volt data the sensitivity uses sigma^2_volts / factor. Dimensionless:
/// - plain and hydrodynamic drag alone: 1 exactly (fluctuation-dissipation theorem: the
///   equilibrium variance is k_B T/kappa whatever the frequency dependence of the drag);
/// - filter alone: alpha^2 + (1 - alpha^2) f3/(f3 + fc) < 1 (closed form of the filtered model);
/// - blur alone: S(W/tau) = 2/a - 2(1 - e^-a)/a^2, a = W/tau (Wong & Halvorsen, Opt. Express 14,
///   12517 (2006));
/// - combined effects do not multiply in general, so C(0) of the combined model is computed
///   (closed form for filter and blur, numerical with hydrodynamic drag).
///
/// NaN for an invalid model or corner frequency.
pub fn variance_factor(model: &TimeDomainModel, corner_frequency_hz: f64) -> f64 {
    if model.filter.is_none() && model.exposure_s.is_none() {
        let valid = model.validate().is_ok() && corner_frequency_hz > 0.0;
        return if valid { 1.0 } else { f64::NAN };
    }
    // sigma^2 = 1 for D = 2 pi fc.
    model.detector_variance(corner_frequency_hz, 2.0 * PI * corner_frequency_hz)
}

/// The normalised autocovariance at `lag` of a process with covariance e^(-2 pi rate |t|),
/// sampled every `dt` either instantaneously or as box-car averages of width `exposure`
/// (derivation at [`TimeDomainModel::autocovariance_at`]).
pub(crate) fn exponential_shape(rate_hz: f64, lag: usize, dt: f64, exposure: Option<f64>) -> f64 {
    let Some(w) = exposure else {
        return (-2.0 * PI * rate_hz * lag as f64 * dt).exp();
    };
    let a = 2.0 * PI * rate_hz * w;
    if lag == 0 {
        return box_variance_factor(a);
    }
    let ratio = if a > 0.0 { -(-a).exp_m1() / a } else { 1.0 };
    ratio * ratio * (-2.0 * PI * rate_hz * (lag as f64).mul_add(dt, -w)).exp()
}

/// S(a) = 2/a - 2(1 - e^-a)/a^2 = 2(a - 1 + e^-a)/a^2, the variance of a box-car average of width
/// W = a tau of an Ornstein-Uhlenbeck process relative to its variance (Wong & Halvorsen, Opt.
/// Express 14, 12517 (2006)). Below a = 0.05 its Taylor series 2 sum_n (-a)^n/(n+2)! to a^7 is
/// used (truncation below 1e-16); above, rounding is below 1e-14 relative.
pub(crate) fn box_variance_factor(a: f64) -> f64 {
    if a < 0.05 {
        let coefficients = [
            1.0,
            -1.0 / 3.0,
            1.0 / 12.0,
            -1.0 / 60.0,
            1.0 / 360.0,
            -1.0 / 2520.0,
            1.0 / 20160.0,
            -1.0 / 181_440.0,
        ];
        return coefficients
            .iter()
            .rev()
            .fold(0.0, |acc, &c| acc.mul_add(a, c));
    }
    2.0 * (a + (-a).exp_m1()) / (a * a)
}

/// The slow part of the filtered model relative to sigma^2:
/// `fc f3^2 (shape(fc)/fc - shape(f3)/f3) / (f3^2 - fc^2)`, a divided difference of
/// shape(x)/x that stays finite as f3 -> fc (widened as described at
/// [`DIVIDED_DIFFERENCE_MIN_HALF_WIDTH`]). For the unblurred lag 0 (`at_unblurred_zero`) it is
/// f3/(f3 + fc) exactly.
fn filter_mix(fc: f64, f3: f64, at_unblurred_zero: bool, shape: impl Fn(f64) -> f64) -> f64 {
    if at_unblurred_zero {
        return f3 / (f3 + fc);
    }
    let mid = 0.5 * (fc + f3);
    let half = 0.5 * (f3 - fc);
    let (lo, hi) = if half.abs() >= DIVIDED_DIFFERENCE_MIN_HALF_WIDTH * mid {
        (fc, f3)
    } else {
        let widened = DIVIDED_DIFFERENCE_MIN_HALF_WIDTH * mid;
        (mid - widened, mid + widened)
    };
    let divided = (shape(lo) / lo - shape(hi) / hi) / ((hi - lo) * (hi + lo));
    fc * f3 * f3 * divided
}

/// The hydrodynamic part of a model: the integrand (S_hydro(f) - S(f)) g(f) and its rules.
pub(crate) struct HydroIntegrand {
    spectrum: SpectrumModel,
    filter: Option<DetectorFilter>,
    dt: f64,
    exposure: Option<f64>,
    /// Lower and upper end of the t = 0 rule, Hz.
    band_hz: (f64, f64),
    /// The highest frequency scale of the integrand, Hz (for the blur panels).
    highest_hz: f64,
}

impl HydroIntegrand {
    /// `None` when the model has constant drag.
    pub(crate) fn new(model: &TimeDomainModel) -> Option<Self> {
        let hydro = model.hydro?;
        let spectrum = SpectrumModel {
            sample_rate_hz: model.sample_rate_hz,
            aliasing: false,
            filter: model
                .filter
                .map_or(FilterSetting::None, FilterSetting::Fixed),
            hydro: Some(hydro),
            exposure_s: None,
            noise_floor: false,
        };
        let f3 = model.filter.map_or(0.0, |f| f.f3db_hz);
        let highest_hz = hydro
            .f_nu_hz
            .max(hydro.f_m_hz)
            .max(f3)
            .max(model.sample_rate_hz);
        let lowest_hz = hydro.f_nu_hz.min(hydro.f_m_hz).min(model.sample_rate_hz);
        Some(Self {
            spectrum,
            filter: model.filter,
            dt: model.dt(),
            exposure: model.exposure(),
            // Below f_lo = 1e-15 of the lowest scale the integrand, ~ S(0) sqrt(f/f_nu), adds
            // (4/(3 pi)) f_lo^(3/2)/(fc f_nu^(1/2)) sigma^2, below 1e-16 sigma^2 for fc >= 1 mHz;
            // above f_hi = 1e12 times the highest scale the remainder is -g(f) S(f), whose
            // integral is added in closed form by `lag0_tail`. The trapezoid rule's end
            // correction there (Euler-Maclaurin, (h^2/12) D/(pi^2 f_hi)) is below
            // 1e-3 (fc/f_hi) sigma^2 and left out.
            band_hz: (1e-15 * lowest_hz, 1e12 * highest_hz),
            highest_hz,
        })
    }

    /// (S_hydro(f) - S(f)) g(f) for f > 0 (signal-unit^2/Hz), one-sided.
    pub(crate) fn remainder(&self, f_hz: f64, fc: f64, d: f64) -> f64 {
        let params = Params {
            fc,
            d,
            filter: self.filter,
            noise_floor: 0.0,
        };
        let hydro = self.spectrum.psd_params(f_hz, &params);
        let gain = self.filter.map_or(1.0, |filter| filter.gain(f_hz));
        let lorentzian = d / (PI * PI * fc.mul_add(fc, f_hz * f_hz));
        lorentzian.mul_add(-gain, hydro)
    }

    /// The rule at `lag` with everything that does not depend on fc and D worked out per node.
    pub(crate) fn prepared_rule(&self, lag: usize) -> PreparedRule {
        let rule = self.rule(lag);
        let hydro = self.spectrum.hydro.unwrap_or(HydroTerms {
            f_nu_hz: f64::INFINITY,
            f_m_hz: f64::INFINITY,
        });
        let mut nodes = Vec::with_capacity(rule.nodes.len());
        for (&f, &w) in rule.nodes.iter().zip(&rule.weights) {
            let s = (f / hydro.f_nu_hz).sqrt();
            let gain = self.filter.map_or(1.0, |filter| filter.gain(f));
            nodes.push(PreparedNode {
                shift: f.mul_add(s, f * f / hydro.f_m_hz),
                damping: f.mul_add(s, f),
                numerator: w * (1.0 + s) * gain,
                lorentzian: w * gain,
                f_squared: f * f,
            });
        }
        PreparedRule { nodes }
    }

    /// The quadrature rule for the remainder at `lag`.
    pub(crate) fn rule(&self, lag: usize) -> FrequencyRule {
        let t_s = lag as f64 * self.dt;
        match self.exposure {
            Some(w) => quadrature::blurred_cosine_rule(t_s, w, self.highest_hz),
            None if lag == 0 => quadrature::integral_rule(self.band_hz.0, self.band_hz.1),
            None => quadrature::cosine_rule(t_s),
        }
    }

    /// What the t = 0 rule leaves out above its band: integral_{f_hi}^inf -g(f) S(f) df
    /// = -g(inf) D/(pi^2 f_hi) to relative order (fc/f_hi)^2 and (f3/f_hi)^2, where the
    /// hydrodynamic spectrum (~ f^-7/2) is negligible. Zero for other lags and with blur.
    pub(crate) fn lag0_tail(&self, lag: usize, d: f64) -> f64 {
        if lag != 0 || self.exposure.is_some() {
            return 0.0;
        }
        let high_gain = self.filter.map_or(1.0, |f| f.alpha * f.alpha);
        -high_gain * d / (PI * PI * self.band_hz.1)
    }
}

/// One node of a [`PreparedRule`]: with s = sqrt(f/f_nu), g the filter gain and w the weight,
/// the terms of [`HydroIntegrand::remainder`] that do not depend on fc and D.
#[derive(Clone, Copy, Debug)]
pub(crate) struct PreparedNode {
    /// f s + f^2/f_m, Hz.
    shift: f64,
    /// f (1 + s), Hz.
    damping: f64,
    /// w (1 + s) g, Hz.
    numerator: f64,
    /// w g, Hz.
    lorentzian: f64,
    /// f^2, Hz^2.
    f_squared: f64,
}

/// A quadrature rule of the hydrodynamic remainder with its nodes prepared, so that evaluating
/// it at (fc, D) costs two divisions per node:
/// `sum_i (D/pi^2) [w (1+s) g / ((fc - f s - f^2/f_m)^2 + f^2 (1+s)^2) - w g/(fc^2 + f^2)]`,
/// the same sum as applying the rule to [`HydroIntegrand::remainder`].
#[derive(Clone, Debug)]
pub(crate) struct PreparedRule {
    nodes: Vec<PreparedNode>,
}

impl PreparedRule {
    /// The rule applied to the remainder at `(fc, d)`.
    pub(crate) fn apply(&self, fc: f64, d: f64) -> f64 {
        let fc2 = fc * fc;
        let sum: f64 = self
            .nodes
            .iter()
            .map(|node| {
                let re = fc - node.shift;
                let hydro = node.numerator / re.mul_add(re, node.damping * node.damping);
                hydro - node.lorentzian / (fc2 + node.f_squared)
            })
            .sum();
        d / (PI * PI) * sum
    }
}

/// The expected autocovariance of a model as a series over all lags, in the form the weights
/// and the mean-removal bias need: `g(0)`, and for u >= 1
/// `g(u) = sum_i b_i q_i^(u-1) + r(u)` with a numerical remainder r (hydrodynamic part, or the
/// filtered part of a degenerate filter) stored for `u = 1..=remainder.len()` and zero beyond.
#[derive(Clone, Debug)]
pub(crate) struct LagSeries {
    /// g(0), signal-unit^2.
    pub(crate) lag0: f64,
    /// Sampled exponentials `(b, ln q)`.
    pub(crate) terms: Vec<(f64, f64)>,
    /// r(u) at index u - 1.
    pub(crate) remainder: Vec<f64>,
    /// The hydrodynamic long-time tail beyond the stored remainder, if any (see
    /// [`HydroTail`]).
    pub(crate) tail: Option<HydroTail>,
}

/// The two leading terms of the hydrodynamic autocovariance at long lags u (in samples),
/// `r(u) ~ coefficient u^(-3/2) (1 + 3 tau_lags/u)`, derived here from the low-frequency
/// expansion of the spectrum, S(f) = S(0) [1 + (f/f_nu)^(1/2) + 2 f^(3/2)/(fc f_nu^(1/2)) +
/// O(f^2)], S(0) = D/(pi^2 fc^2), and the cosine transform of f^(nu - 1),
/// Gamma(nu) cos(pi nu/2) omega^(-nu), which sets the large-t behaviour of non-analytic terms
/// (e.g. M. J. Lighthill, Introduction to Fourier Analysis and Generalised Functions (1958),
/// recalled from memory, unverified):
/// `coefficient = -S(0) f_nu^(-1/2) sqrt(pi)/(2 sqrt 2) (2 pi dt)^(-3/2)`. The filter gain and
/// the blur are 1 + O(f^2) at low frequency and leave both terms unchanged. Tested against the
/// numerical transform. Used for the part of Var(xbar) beyond the stored remainder.
#[derive(Clone, Copy, Debug)]
pub(crate) struct HydroTail {
    /// Coefficient of u^(-3/2), signal-unit^2.
    pub(crate) coefficient: f64,
    /// tau/dt.
    pub(crate) tau_lags: f64,
}

impl HydroTail {
    /// The tail at corner frequency `fc`, diffusion `d`, for samples `dt` apart.
    pub(crate) fn new(fc: f64, d: f64, f_nu_hz: f64, dt: f64) -> Self {
        let s0 = d / (PI * PI * fc * fc);
        let coefficient =
            -s0 / f_nu_hz.sqrt() * PI.sqrt() / (2.0 * 2.0f64.sqrt()) * (2.0 * PI * dt).powf(-1.5);
        Self {
            coefficient,
            tau_lags: 1.0 / (2.0 * PI * fc * dt),
        }
    }

    /// The tail's value at lag `u` (used by the tests).
    #[cfg(test)]
    pub(crate) fn at(&self, u: f64) -> f64 {
        self.coefficient * u.powf(-1.5) * (1.0 + 3.0 * self.tau_lags / u)
    }

    /// `sum_{u=first}^{n-1} (1 - u/n) r(u)` by the midpoint rule, i.e. the integral over
    /// [first - 1/2, n - 1/2] in closed form; for the u^(-3/2) decay its error is below 1e-5 of
    /// the sum for first >= 100.
    pub(crate) fn weighted_sum(&self, first: usize, n_samples: usize) -> f64 {
        if first + 1 > n_samples {
            return 0.0;
        }
        let (a, b, n) = (first as f64 - 0.5, n_samples as f64 - 0.5, n_samples as f64);
        let tau = self.tau_lags;
        let (ra, rb) = (a.powf(-0.5), b.powf(-0.5));
        let (ra3, rb3) = (a.powf(-1.5), b.powf(-1.5));
        // Terms of (1 - x/n) x^(-3/2) (1 + 3 tau/x), integrated one by one.
        let terms = [
            2.0 * (ra - rb),
            2.0 * tau * (ra3 - rb3),
            -2.0 / n * (b.sqrt() - a.sqrt()),
            -6.0 * tau / n * (ra - rb),
        ];
        let integral: f64 = terms.iter().sum();
        self.coefficient * integral
    }
}

impl LagSeries {
    /// g(u).
    pub(crate) fn at(&self, lag: usize) -> f64 {
        if lag == 0 {
            return self.lag0;
        }
        let exponential: f64 = self
            .terms
            .iter()
            .map(|&(b, ln_q)| b * (ln_q * (lag - 1) as f64).exp())
            .sum();
        exponential + self.remainder.get(lag - 1).copied().unwrap_or(0.0)
    }
}

/// Builds [`LagSeries`] of one model for many parameter values, keeping the quadrature rules of
/// the hydrodynamic remainder (which depend on the lag only) between calls.
pub(crate) struct SeriesEvaluator {
    model: TimeDomainModel,
    hydro: Option<HydroIntegrand>,
    /// Lags 1..=exact_until are evaluated exactly; beyond, on a grid.
    exact_until: usize,
    /// Grid step beyond `exact_until`, in lags.
    stride: usize,
    rules: BTreeMap<usize, PreparedRule>,
}

impl SeriesEvaluator {
    /// `exact_until`: the largest lag whose value is needed exactly (the fit's lags and the
    /// lag sums of the weights); `reference_fc_hz` sets the grid step of the remainder beyond.
    pub(crate) fn new(model: &TimeDomainModel, exact_until: usize, reference_fc_hz: f64) -> Self {
        let tau_in_lags = model.sample_rate_hz / (2.0 * PI * reference_fc_hz);
        let stride = (tau_in_lags / GRID_PER_RELAXATION_TIME).floor();
        let stride = if (1.0..1e6).contains(&stride) {
            stride as usize
        } else {
            1
        };
        Self {
            model: *model,
            hydro: HydroIntegrand::new(model),
            exact_until,
            stride,
            rules: BTreeMap::new(),
        }
    }

    /// The series at `(fc, d)`.
    pub(crate) fn series(&mut self, fc: f64, d: f64) -> LagSeries {
        let (terms, degenerate) = self.model.exponential_terms(fc, d);
        let mut lag0 = self.model.closed_form(0, fc, d);
        let dt = self.model.dt();
        let mut remainder = Vec::new();
        if degenerate {
            let slowest = self.model.filter.map_or(fc, |f| f.f3db_hz.min(fc));
            let length = self.remainder_length(DEGENERATE_DECAY / (2.0 * PI * slowest * dt));
            remainder = (1..=length)
                .map(|lag| self.model.degenerate_filter_part(lag, fc, d))
                .collect();
        }
        let mut tail = None;
        if let Some(hydro) = self.model.hydro {
            tail = Some(HydroTail::new(fc, d, hydro.f_nu_hz, dt));
        }
        if self.hydro.is_some() {
            lag0 += self.hydro_value(0, fc, d);
            let length = self.remainder_length(REMAINDER_RELAXATION_TIMES / (2.0 * PI * fc * dt));
            let hydro = self.hydro_remainder(length, fc, d);
            if remainder.len() < hydro.len() {
                remainder.resize(hydro.len(), 0.0);
            }
            for (slot, value) in remainder.iter_mut().zip(hydro) {
                *slot += value;
            }
        }
        LagSeries {
            lag0,
            terms,
            remainder,
            tail,
        }
    }

    /// `exact_until` plus `extra_lags`, capped at [`MAX_REMAINDER_LAGS`].
    fn remainder_length(&self, extra_lags: f64) -> usize {
        let extra = if extra_lags.is_finite() && extra_lags < MAX_REMAINDER_LAGS as f64 {
            extra_lags.ceil() as usize
        } else {
            MAX_REMAINDER_LAGS
        };
        (self.exact_until + extra).min(MAX_REMAINDER_LAGS)
    }

    /// The hydrodynamic remainder (with its lag-0 tail) at one lag.
    fn hydro_value(&mut self, lag: usize, fc: f64, d: f64) -> f64 {
        let Some(integrand) = &self.hydro else {
            return 0.0;
        };
        let rule = self
            .rules
            .entry(lag)
            .or_insert_with(|| integrand.prepared_rule(lag));
        rule.apply(fc, d) + integrand.lag0_tail(lag, d)
    }

    /// r(u) for u = 1..=length: exact up to `exact_until`, then on the grid of step `stride`,
    /// interpolated by the cubic through the four nearest grid values (Lagrange form).
    fn hydro_remainder(&mut self, length: usize, fc: f64, d: f64) -> Vec<f64> {
        let exact = length.min(self.exact_until);
        let mut values: Vec<f64> = (1..=exact)
            .map(|lag| self.hydro_value(lag, fc, d))
            .collect();
        if values.len() >= length {
            return values;
        }
        let stride = self.stride;
        // Knots exact - stride, exact, exact + stride, ... up to one beyond the end.
        let n_knots = (length - exact).div_ceil(stride) + 3;
        let knot_lag = |j: usize| (exact + j * stride).checked_sub(stride);
        let knots: Vec<f64> = (0..n_knots)
            .map(|j| match knot_lag(j) {
                Some(lag) if lag >= 1 && lag <= exact => values[lag - 1],
                Some(lag) => self.hydro_value(lag, fc, d),
                // Below lag 0: mirror (the autocovariance is even).
                None => self.hydro_value(stride - exact, fc, d),
            })
            .collect();
        for lag in exact + 1..=length {
            // Knot j sits at exact + (j - 1) stride; lag lies in (knot i, knot i + 1].
            let offset = lag - exact;
            let i = (offset - 1) / stride + 1;
            let x = (offset - (i - 1) * stride) as f64 / stride as f64;
            let [p0, p1, p2, p3] = [knots[i - 1], knots[i], knots[i + 1], knots[i + 2]];
            // Cubic through (-1, p0), (0, p1), (1, p2), (2, p3) at x in (0, 1].
            let basis = [
                -x * (x - 1.0) * (x - 2.0) / 6.0,
                (x + 1.0) * (x - 1.0) * (x - 2.0) / 2.0,
                -(x + 1.0) * x * (x - 2.0) / 2.0,
                (x + 1.0) * x * (x - 1.0) / 6.0,
            ];
            let value: f64 = basis.iter().zip([p0, p1, p2, p3]).map(|(b, p)| b * p).sum();
            values.push(value);
        }
        values
    }
}
