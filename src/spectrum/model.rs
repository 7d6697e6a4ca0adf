//! Models of the one-sided power spectrum of a trapped bead as the detector records it.
//!
//! The parameters travel as a plain vector `theta` in log space so the fit is unconstrained:
//! theta = [ln fc/Hz, ln D/(unit^2/s)] and, when the detector filter is fitted, also
//! [ln f3dB/Hz, logit(alpha^2)], and last, when the white noise floor is modelled,
//! [ln P_n/(unit^2/Hz)].

use std::f64::consts::PI;

/// The photodiode's parasitic low-pass filter (Berg-Sorensen, Oddershede, Florin & Flyvbjerg,
/// J. Appl. Phys. 93, 3167 (2003) (citation from memory, unverified)): a fraction alpha^2 of the
/// signal responds instantly, the rest through a first-order low-pass with corner f3dB:
/// g(f) = alpha^2 + (1 - alpha^2) / (1 + (f / f3dB)^2).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DetectorFilter {
    /// Corner frequency of the slow part, Hz.
    pub f3db_hz: f64,
    /// Amplitude fraction of the instantaneous response, 0 < alpha <= 1 (dimensionless).
    pub alpha: f64,
}

impl DetectorFilter {
    /// Power gain g(f) at frequency `f_hz`.
    pub fn gain(&self, f_hz: f64) -> f64 {
        let a2 = self.alpha * self.alpha;
        let x = f_hz / self.f3db_hz;
        a2 + (1.0 - a2) / x.mul_add(x, 1.0)
    }
}

/// Whether and how the detector filter enters the model.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum FilterSetting {
    /// No filter: the detector is taken as instantaneous (camera tracking, or a fast detector).
    None,
    /// A known filter, for instance calibrated separately.
    Fixed(DetectorFilter),
    /// A filter fitted together with fc and D, started from the given values.
    Fitted(DetectorFilter),
}

/// Frequency scales of the frequency-dependent drag on a sphere (Stokes 1851, in the form of
/// Berg-Sorensen & Flyvbjerg 2004): f_nu = nu / (pi R^2) and f_m = gamma0 / (2 pi m*).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HydroTerms {
    /// Frequency where the viscous penetration depth equals the radius, Hz.
    pub f_nu_hz: f64,
    /// Inertial frequency of bead plus half the displaced fluid, Hz.
    pub f_m_hz: f64,
}

/// A spectrum model: which physical terms it includes.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpectrumModel {
    /// Sampling rate, Hz (sets aliasing).
    pub sample_rate_hz: f64,
    /// Fold in the aliases of a discretely sampled signal (always on for real calibrations; off
    /// only to show what the plain Lorentzian gets wrong).
    pub aliasing: bool,
    /// Detector filter.
    pub filter: FilterSetting,
    /// Frequency-dependent drag, or `None` for constant Stokes drag.
    pub hydro: Option<HydroTerms>,
    /// A white background of constant one-sided level P_n (signal-unit^2/Hz), fitted as the last
    /// entry of theta: detector, amplifier and digitiser noise that is independent from sample
    /// to sample. White noise of variance sigma_n^2 adds 2 sigma_n^2 dt to the one-sided
    /// spectrum at every frequency, aliases included (shared PHYSICS.md section 12), and
    /// nothing to the autocovariance beyond lag 0.
    pub noise_floor: bool,
}

/// Number of alias images summed on each side when no closed form applies; the rest is added
/// as a tail estimate (see `SpectrumModel::one_sided_psd`).
const ALIAS_TERMS: i32 = 24;

/// Closed-form one-sided spectrum of an Ornstein-Uhlenbeck process sampled instantaneously:
/// S(f) = 2 sigma^2 dt (1 - c^2) / (1 + c^2 - 2 c cos(2 pi f dt)), sigma^2 = D / (2 pi fc),
/// c = exp(-2 pi fc dt). It equals sum_n S_Lorentz(f + n fs) exactly (Berg-Sorensen &
/// Flyvbjerg 2004, their aliased Lorentzian, written here one-sided).
pub fn aliased_lorentzian_one_sided(
    f_hz: f64,
    corner_frequency_hz: f64,
    diffusion: f64,
    sample_rate_hz: f64,
) -> f64 {
    let dt = 1.0 / sample_rate_hz;
    let c = (-2.0 * PI * corner_frequency_hz * dt).exp();
    let variance = diffusion / (2.0 * PI * corner_frequency_hz);
    let denom = (2.0 * c).mul_add(-(2.0 * PI * f_hz * dt).cos(), c.mul_add(c, 1.0));
    2.0 * variance * dt * c.mul_add(-c, 1.0) / denom
}

/// Plain one-sided Lorentzian D / (pi^2 (fc^2 + f^2)).
fn lorentzian(f_hz: f64, fc: f64, d: f64) -> f64 {
    d / (PI * PI * fc.mul_add(fc, f_hz * f_hz))
}

/// One-sided spectrum with frequency-dependent drag (Berg-Sorensen & Flyvbjerg 2004):
/// S(f) = (D / pi^2) (1 + s) / ((fc - f s - f^2/f_m)^2 + (f + f s)^2), s = sqrt(f / f_nu).
fn hydro_spectrum(f_hz: f64, fc: f64, d: f64, hydro: &HydroTerms) -> f64 {
    let f = f_hz.abs();
    let s = (f / hydro.f_nu_hz).sqrt();
    let re = f.mul_add(-s, fc) - f * f / hydro.f_m_hz;
    let im = f.mul_add(s, f);
    d / (PI * PI) * (1.0 + s) / re.mul_add(re, im * im)
}

/// The periodogram's segments, for the finite-segment term of its expectation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct Segments {
    /// Samples (or differences) per segment.
    pub(crate) len: usize,
    /// From this frequency (Hz) up the ordinates are of recoloured first differences.
    pub(crate) differenced_from_hz: f64,
}

/// Decoded model parameters.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Params {
    pub(crate) fc: f64,
    pub(crate) d: f64,
    pub(crate) filter: Option<DetectorFilter>,
    /// One-sided level of the white noise floor, signal-unit^2/Hz (0 when not modelled).
    pub(crate) noise_floor: f64,
}

fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

impl SpectrumModel {
    /// Number of fitted parameters (2, or 4 with a fitted filter, plus 1 with the noise floor).
    pub fn n_params(&self) -> usize {
        let base = match self.filter {
            FilterSetting::Fitted(_) => 4,
            _ => 2,
        };
        base + usize::from(self.noise_floor)
    }

    /// Index of ln P_n in theta, when the noise floor is modelled.
    pub fn noise_floor_index(&self) -> Option<usize> {
        self.noise_floor.then(|| self.n_params() - 1)
    }

    /// Initial parameter vector from starting values of fc and D (and, with the noise floor, a
    /// starting level of one millionth of D / (pi^2 fc^2), the Lorentzian's plateau; the
    /// floor fit in `spectrum::floor` starts from a better value).
    pub(crate) fn initial_theta(&self, fc: f64, d: f64) -> Vec<f64> {
        let mut theta = vec![fc.ln(), d.ln()];
        if let FilterSetting::Fitted(f) = self.filter {
            let a2 = (f.alpha * f.alpha).clamp(1e-4, 1.0 - 1e-4);
            theta.push(f.f3db_hz.ln());
            theta.push((a2 / (1.0 - a2)).ln());
        }
        if self.noise_floor {
            theta.push((1e-6 * d / (PI * PI * fc * fc)).ln());
        }
        theta
    }

    pub(crate) fn decode(&self, theta: &[f64]) -> Params {
        let fc = theta.first().copied().unwrap_or(0.0).exp();
        let d = theta.get(1).copied().unwrap_or(0.0).exp();
        let filter = match self.filter {
            FilterSetting::None => None,
            FilterSetting::Fixed(f) => Some(f),
            FilterSetting::Fitted(_) => Some(DetectorFilter {
                f3db_hz: theta.get(2).copied().unwrap_or(0.0).exp(),
                alpha: logistic(theta.get(3).copied().unwrap_or(0.0)).sqrt(),
            }),
        };
        let noise_floor = match self.noise_floor_index() {
            Some(i) => theta.get(i).copied().map_or(0.0, f64::exp),
            None => 0.0,
        };
        Params {
            fc,
            d,
            filter,
            noise_floor,
        }
    }

    /// What the detector would see at one frequency without aliasing.
    fn unaliased(&self, f_hz: f64, p: &Params) -> f64 {
        let f = f_hz.abs();
        let s = match &self.hydro {
            Some(h) => hydro_spectrum(f, p.fc, p.d, h),
            None => lorentzian(f, p.fc, p.d),
        };
        match &p.filter {
            Some(filter) => s * filter.gain(f),
            None => s,
        }
    }

    /// The model's autocovariance as a sum of exponentials, as (corner frequency Hz, variance
    /// signal-unit^2) pairs, when it is one: the plain Lorentzian is one exponential, and the
    /// photodiode-filtered Lorentzian two, by partial fractions of g(f) S(f):
    /// C(t) = A1 exp(-2 pi fc |t|) + A2 exp(-2 pi f3 |t|) with
    /// A1 = (D / 2 pi fc) [alpha^2 + (1 - alpha^2) f3^2 / (f3^2 - fc^2)] and
    /// A2 = -(1 - alpha^2) f3^2 / (f3^2 - fc^2) (D / 2 pi f3) (derived; the form is that of
    /// shared PHYSICS.md section 12, checked there against a numerical cosine transform).
    /// `None` with frequency-dependent drag, and when fc and f3 nearly coincide (the partial
    /// fractions cancel badly there).
    fn exponential_components(&self, p: &Params) -> Option<[(f64, f64); 2]> {
        if self.hydro.is_some() {
            return None;
        }
        let variance = p.d / (2.0 * PI * p.fc);
        let Some(filter) = p.filter else {
            return Some([(p.fc, variance), (p.fc, 0.0)]);
        };
        let f3 = filter.f3db_hz;
        let a2 = filter.alpha * filter.alpha;
        let gap = f3.mul_add(f3, -(p.fc * p.fc));
        if !(gap.abs() > 1e-3 * f3 * f3) {
            return None;
        }
        let ratio = (1.0 - a2) * f3 * f3 / gap;
        Some([
            (p.fc, variance * (a2 + ratio)),
            (f3, -ratio * p.d / (2.0 * PI * f3)),
        ])
    }

    /// Expected one-sided PSD at `f_hz` (0 <= f <= f_Nyquist) for parameters `theta`.
    ///
    /// With aliasing and an autocovariance that is a sum of exponentials (no hydrodynamics) the
    /// closed form is used: each exponential of variance A and corner f_j samples to an aliased
    /// Lorentzian (Berg-Sorensen & Flyvbjerg 2004), so the sum is exact. Otherwise the filter
    /// and the drag act before sampling, so the aliases are summed numerically,
    /// sum_{|n| <= M} g(f + n fs) S(f + n fs), and the images beyond M are added as the exact
    /// Lorentzian tail (closed form minus its partial sum) scaled by the ratio of the full model
    /// to the Lorentzian at the cut-off, which is constant to first order out there
    /// (derived here; the tail is a few per cent of the total at f_Nyquist for M = 24).
    ///
    /// The white noise floor P_n, when modelled, is added to the result: it is the same
    /// constant with and without aliasing.
    pub(crate) fn psd_params(&self, f_hz: f64, p: &Params) -> f64 {
        self.signal_psd(f_hz, p) + p.noise_floor
    }

    /// The bead's part of `psd_params`, without the white noise floor.
    fn signal_psd(&self, f_hz: f64, p: &Params) -> f64 {
        if !self.aliasing {
            return self.unaliased(f_hz, p);
        }
        let fs = self.sample_rate_hz;
        if let Some(components) = self.exponential_components(p) {
            return components
                .iter()
                .filter(|(_, variance)| *variance != 0.0)
                .map(|&(f_j, variance)| {
                    aliased_lorentzian_one_sided(f_hz, f_j, variance * 2.0 * PI * f_j, fs)
                })
                .sum();
        }
        let closed = aliased_lorentzian_one_sided(f_hz, p.fc, p.d, fs);
        let mut sum = 0.0;
        let mut lorentz_partial = 0.0;
        for n in -ALIAS_TERMS..=ALIAS_TERMS {
            let f = f64::from(n).mul_add(fs, f_hz);
            sum += self.unaliased(f, p);
            lorentz_partial += lorentzian(f, p.fc, p.d);
        }
        let cutoff = (f64::from(ALIAS_TERMS) + 0.5) * fs;
        let ratio = self.unaliased(cutoff, p) / lorentzian(cutoff, p.fc, p.d);
        (closed - lorentz_partial).max(0.0).mul_add(ratio, sum)
    }

    /// The finite-segment (leakage) term of the expected periodogram of untapered segments of
    /// `segment_len` samples, one-sided, signal-unit^2/Hz: of the samples themselves, or of
    /// their first differences recoloured (`differenced`, see `spectrum::difference_periodogram`).
    ///
    /// For one exponential component of variance A, c = exp(-2 pi f_j dt), theta = 2 pi f dt and
    /// d = 1 + c^2 - 2 c cos theta, the samples' expected periodogram is
    /// 2 A dt {(1 - c^2)/d - (2 c (1 - c^L) / L) [(1 + c^2) cos theta - 2 c] / d^2}
    /// (the double sum of the AR(1) autocovariance, checked against it to 1e-14 in shared
    /// PHYSICS.md section 2), whose second term is returned. The differences y_j = x_{j+1} - x_j
    /// have C_y(0) = 2 A (1 - c) and C_y(m) = -A (1 - c)^2 c^(m-1) for m >= 1; with the same
    /// geometric sums their finite-record term is
    /// 2 dt A (1 - c)^2 (2 (1 - c^L) / L) [(1 + c^2) cos theta - 2 c] / d^2 (derived here),
    /// divided by the recolouring gain 4 sin^2(theta / 2): the (1 - c)^2 is why differencing
    /// tames the leakage of steep spectra. Both are exact at the Fourier frequencies for sums of
    /// exponentials (the tests check them against the double sums); with frequency-dependent
    /// drag the plain Lorentzian of the same fc and D stands in (an approximation: the term
    /// comes from the slow, Lorentzian-like part of the motion).
    ///
    /// The white noise floor is the limit c -> 0 of an exponential component: the samples'
    /// term vanishes (the periodogram of white noise is unbiased at every segment length), and
    /// the differences' term is P_n cos theta / (L (1 - cos theta)) (the formula above with
    /// c = 0, 2 A dt = P_n; derived here).
    pub(crate) fn leakage_params(
        &self,
        f_hz: f64,
        p: &Params,
        segment_len: usize,
        differenced: bool,
    ) -> f64 {
        let components = self
            .exponential_components(p)
            .unwrap_or([(p.fc, p.d / (2.0 * PI * p.fc)), (p.fc, 0.0)]);
        let dt = 1.0 / self.sample_rate_hz;
        let l = segment_len as f64;
        let theta = 2.0 * PI * f_hz * dt;
        let cos_theta = theta.cos();
        let gain = 2.0 * (1.0 - cos_theta);
        if differenced && !(gain > 0.0) {
            return 0.0;
        }
        let floor_term = if differenced && p.noise_floor > 0.0 {
            2.0 * p.noise_floor * cos_theta / (l * gain)
        } else {
            0.0
        };
        floor_term
            + components
                .iter()
                .filter(|(_, variance)| *variance != 0.0)
                .map(|&(f_j, variance)| {
                    let c = (-2.0 * PI * f_j * dt).exp();
                    let d = (2.0 * c).mul_add(-cos_theta, c.mul_add(c, 1.0));
                    let c_l = c.powf(l);
                    let bracket = c.mul_add(c, 1.0).mul_add(cos_theta, -2.0 * c);
                    let edge = 2.0 * (1.0 - c_l) / l * bracket / (d * d) * 2.0 * variance * dt;
                    if differenced {
                        let one_minus_c = 1.0 - c;
                        edge * one_minus_c * one_minus_c / gain
                    } else {
                        -edge * c
                    }
                })
                .sum::<f64>()
    }

    /// Expected one-sided PSD at `f_hz` for parameters `theta`.
    pub fn one_sided_psd(&self, f_hz: f64, theta: &[f64]) -> f64 {
        self.psd_params(f_hz, &self.decode(theta))
    }

    /// The expected periodogram at `f_hz`: the model spectrum plus, for segments of
    /// `segment_len` samples, their leakage term (`leakage_params`).
    pub(crate) fn expected_periodogram(
        &self,
        f_hz: f64,
        p: &Params,
        segments: Option<Segments>,
    ) -> f64 {
        let s = self.psd_params(f_hz, p);
        match segments {
            Some(seg) if self.aliasing => {
                s + self.leakage_params(f_hz, p, seg.len, f_hz >= seg.differenced_from_hz)
            }
            _ => s,
        }
    }

    /// Mean of the expected periodogram over the frequency interval [lower, upper], by 3-point
    /// Gauss-Legendre quadrature (exact for cubics), which stands for the mean over the discrete
    /// bins of a block.
    pub(crate) fn block_mean(
        &self,
        lower_hz: f64,
        upper_hz: f64,
        p: &Params,
        segments: Option<Segments>,
    ) -> f64 {
        let mid = 0.5 * (lower_hz + upper_hz);
        let half = 0.5 * (upper_hz - lower_hz);
        let node = half * (3.0f64 / 5.0).sqrt();
        let w_outer = 5.0 / 18.0;
        let w_mid = 8.0 / 18.0;
        let at = |f| self.expected_periodogram(f, p, segments);
        w_outer * (at(mid - node) + at(mid + node)) + w_mid * at(mid)
    }
}
