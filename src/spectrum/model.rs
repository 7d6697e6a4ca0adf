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
    /// Exposure time W of a camera, s (each sample is the box-car average of the position over
    /// W within its frame, 0 < W <= 1/sample_rate_hz); `None` for instantaneous samples.
    pub exposure_s: Option<f64>,
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

/// One alias image f_n = f + n fs of a frequency, as the numerical image sum sees it, with
/// s = sqrt(|f_n| / f_nu) (0 without drag), g the fixed filter's gain and sinc^2 the camera's
/// box-car gain at f_n (1 without them).
#[derive(Clone, Copy, Debug)]
struct AliasImage {
    /// |f_n| s + f_n^2 / f_m, Hz.
    shift: f64,
    /// (|f_n| (1 + s))^2, Hz^2.
    damping_squared: f64,
    /// (1 + s) g sinc^2.
    weight: f64,
    /// f_n^2, Hz^2.
    f_squared: f64,
    /// sinc^2(pi f_n W).
    box_gain: f64,
}

/// The alias images of one frequency for the numerical image sum (see
/// `SpectrumModel::image_table`).
#[derive(Clone, Debug, Default)]
pub(crate) struct ImageTable {
    f_hz: f64,
    images: Vec<AliasImage>,
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

/// sin^2(x) / x^2, the power gain of a box-car average at x = pi f W.
fn sinc_squared(x: f64) -> f64 {
    if x.abs() < 1e-4 {
        // 1 - x^2/3 + O(x^4).
        (x * x).mul_add(-1.0 / 3.0, 1.0)
    } else {
        let s = x.sin() / x;
        s * s
    }
}

/// S(a) = 2 (a - 1 + e^-a) / a^2, the variance of a box-car average of width W = a tau of an
/// Ornstein-Uhlenbeck process relative to its variance (Wong & Halvorsen, Opt. Express 14,
/// 12517 (2006)); below a = 0.01 the series 1 - a/3 + a^2/12 - a^3/60 + a^4/360 (next term
/// below 1e-15) avoids the cancellation.
fn box_average_variance_factor(a: f64) -> f64 {
    if a < 0.01 {
        a.mul_add(
            a.mul_add(a.mul_add(a / 360.0, -1.0 / 60.0), 1.0 / 12.0),
            -1.0 / 3.0,
        )
        .mul_add(a, 1.0)
    } else {
        2.0 * (a + (-a).exp_m1()) / (a * a)
    }
}

/// The sampled autocovariance of one exponential component (variance `variance`, corner
/// `corner_hz`) seen through box-car exposures of width `exposure_s` every `dt`, as (lag 0,
/// lag 1) values, signal-unit^2. Lag 0 is variance S(a), a = W / tau (Wong & Halvorsen 2006);
/// two box-cars m dt >= W apart see variance e^(-|t - t'|/tau) averaged over both boxes,
/// variance ((1 - e^-a)/a)^2 e^(-(m dt - W)/tau) (derived here: the double integral of the
/// exponential over two disjoint intervals factorises), so lag m >= 1 is the lag-one value times
/// c^(m-1), c = e^(-dt/tau).
fn blurred_lags(corner_hz: f64, variance: f64, dt: f64, exposure_s: f64) -> (f64, f64) {
    let rate = 2.0 * PI * corner_hz;
    let a = rate * exposure_s;
    let mean_of_box = if a > 0.0 { -(-a).exp_m1() / a } else { 1.0 };
    let lag_one = variance * mean_of_box * mean_of_box * (-rate * (dt - exposure_s)).exp();
    (variance * box_average_variance_factor(a), lag_one)
}

/// One-sided aliased spectrum of one exponential component (variance `variance`, corner
/// `corner_hz`) sampled at `sample_rate_hz` as box-car averages over `exposure_s` (a camera),
/// signal-unit^2/Hz, at `f_hz` in [0, fs/2].
///
/// The samples' autocovariance is C_0 at lag 0 and E c^(|m|-1) at lags m != 0
/// ([`blurred_lags`]), so the one-sided spectrum 2 dt sum_m C_m cos(m theta) is
/// 2 dt {C_0 + 2 E (cos theta - c) / (1 + c^2 - 2 c cos theta)}, theta = 2 pi f dt. With
/// C_0 = sigma^2 S(a) and E = sigma^2 (2 sinh(a/2)/a)^2 c this is twice the two-sided form of
/// Wong & Halvorsen, Opt. Express 14, 12517 (2006) (shared PHYSICS.md section 2), which equals
/// sum_n S_Lorentz(f + n fs) sinc^2(pi (f + n fs) W); the tests check it against that sum. The
/// denominator is (1 - c)^2 + 4 c sin^2(theta/2) and cos theta - c is
/// (1 - c) - 2 sin^2(theta/2), which keep their accuracy when fc dt and f dt are small.
fn blurred_component_one_sided(
    f_hz: f64,
    corner_hz: f64,
    variance: f64,
    sample_rate_hz: f64,
    exposure_s: f64,
) -> f64 {
    let dt = 1.0 / sample_rate_hz;
    let (lag_zero, lag_one) = blurred_lags(corner_hz, variance, dt, exposure_s);
    let one_minus_c = -(-2.0 * PI * corner_hz * dt).exp_m1();
    let c = 1.0 - one_minus_c;
    let half = (PI * f_hz * dt).sin();
    let sin2 = half * half;
    let denominator = one_minus_c.mul_add(one_minus_c, 4.0 * c * sin2);
    let cos_minus_c = 2.0f64.mul_add(-sin2, one_minus_c);
    2.0 * dt * (2.0 * lag_one * cos_minus_c / denominator + lag_zero)
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
    /// Lorentzian (Berg-Sorensen & Flyvbjerg 2004), or, under a camera's exposure, to its blurred
    /// form (Wong & Halvorsen, Opt. Express 14, 12517 (2006); see
    /// [`blurred_component_one_sided`]), so the sum is exact. Otherwise the filter, the drag and
    /// the exposure act before sampling, so the aliases are summed numerically,
    /// sum_{|n| <= M} g(f + n fs) S(f + n fs) sinc^2(pi (f + n fs) W) (the box-car of width W
    /// has the power gain sinc^2(pi f W)), and the images beyond M are added as the exact
    /// Lorentzian tail (its closed form, blurred or not, minus its partial sum) scaled by the
    /// ratio of the full model to the Lorentzian at the cut-off, which is constant to first
    /// order out there (derived here; the tail is a few per cent of the total at f_Nyquist for
    /// M = 24, less under an exposure).
    ///
    /// The white noise floor P_n, when modelled, is added to the result: it is the same
    /// constant with and without aliasing.
    pub(crate) fn psd_params(&self, f_hz: f64, p: &Params) -> f64 {
        self.signal_psd(f_hz, p) + p.noise_floor
    }

    /// The bead's part of `psd_params`, without the white noise floor.
    fn signal_psd(&self, f_hz: f64, p: &Params) -> f64 {
        self.signal_psd_direct(f_hz, p)
    }

    /// Whether the numerical image sum of `signal_psd` can be tabled: aliasing on, drag
    /// modelled (without it the closed form applies, except for a fixed filter whose f3dB
    /// nearly meets fc), and a filter, if any, fixed (a fitted one changes each image's gain
    /// with theta).
    pub(crate) fn tables_images(&self) -> bool {
        self.aliasing && self.hydro.is_some()
    }

    /// The filter whose gain the image sum applies per image at evaluation time: a fitted one
    /// (its gain changes with theta, so it is not in the tabled weights; a fixed one is).
    fn gain_at_evaluation<'p>(&self, p: &'p Params) -> Option<&'p DetectorFilter> {
        match self.filter {
            FilterSetting::Fitted(_) => p.filter.as_ref(),
            _ => None,
        }
    }

    /// The alias images of `f_hz` with what `signal_psd` computes of them that does not depend
    /// on the parameters, or `None` when the model does not sum images it can table (see
    /// [`Self::tables_images`]). A fit evaluates the model at the same frequencies for every
    /// theta it tries, so it builds the tables once (`spectrum::fit`).
    pub(crate) fn image_table(&self, f_hz: f64) -> Option<ImageTable> {
        let mut table = ImageTable::default();
        self.fill_image_table(f_hz, &mut table).then_some(table)
    }

    /// [`Self::image_table`] written into `table`, reusing its storage; false (and `table`
    /// unchanged) when the model does not table its images.
    pub(crate) fn fill_image_table(&self, f_hz: f64, table: &mut ImageTable) -> bool {
        if !self.tables_images() {
            return false;
        }
        let filter = match self.filter {
            FilterSetting::Fixed(filter) => Some(filter),
            _ => None,
        };
        table.f_hz = f_hz;
        table.images.clear();
        table.images.extend(
            (-ALIAS_TERMS..=ALIAS_TERMS).map(|n| self.alias_image(f_hz, n, filter.as_ref())),
        );
        true
    }

    /// The alias image n of `f_hz` under `filter` (see [`AliasImage`]).
    fn alias_image(&self, f_hz: f64, n: i32, filter: Option<&DetectorFilter>) -> AliasImage {
        let (f_nu, f_m) = self
            .hydro
            .map_or((f64::INFINITY, f64::INFINITY), |h| (h.f_nu_hz, h.f_m_hz));
        let f_signed = f64::from(n).mul_add(self.sample_rate_hz, f_hz);
        let f = f_signed.abs();
        let box_gain = self
            .exposure_s
            .map_or(1.0, |w| sinc_squared(PI * f_signed * w));
        let gain = filter.map_or(1.0, |filter| filter.gain(f));
        let s = (f / f_nu).sqrt();
        let damping = f.mul_add(s, f);
        AliasImage {
            shift: f.mul_add(s, f * f / f_m),
            damping_squared: damping * damping,
            weight: (1.0 + s) * gain * box_gain,
            f_squared: f * f,
            box_gain,
        }
    }

    /// `signal_psd` at a tabled frequency: the sum of [`Self::signal_psd_direct`] with the
    /// images taken from the table, so the two agree bit for bit (the tests check it).
    pub(crate) fn signal_psd_tabled(&self, table: &ImageTable, p: &Params) -> f64 {
        self.image_sum(table.f_hz, p, table.images.iter().copied())
    }

    /// The power gain of a fitted filter from f^2 (see [`DetectorFilter::gain`]), the form the
    /// image sum applies to tabled and afresh images alike.
    #[allow(clippy::suboptimal_flops)]
    fn fitted_gain(filter: &DetectorFilter, f_squared: f64) -> f64 {
        let a2 = filter.alpha * filter.alpha;
        a2 + (1.0 - a2) / (f_squared / (filter.f3db_hz * filter.f3db_hz) + 1.0)
    }

    /// The numerically aliased spectrum from the images of `f_hz` (see `psd_params`): each
    /// image's term is (D / pi^2) w / ((fc - f s - f^2/f_m)^2 + f^2 (1 + s)^2),
    /// w = (1 + s) g sinc^2 (the drag spectrum of Berg-Sorensen & Flyvbjerg 2004 written per
    /// image, with D / pi^2 taken out of the sum), and the Lorentzian's
    /// (D / pi^2) sinc^2 / (fc^2 + f^2), for the tail estimate.
    // Plain products and sums, not mul_add: without FMA among the compile-time target features
    // each mul_add is a library call, and the loop below is most of a fit with drag.
    #[allow(clippy::suboptimal_flops)]
    fn image_sum(&self, f_hz: f64, p: &Params, images: impl Iterator<Item = AliasImage>) -> f64 {
        let fc = p.fc;
        let fc_squared = fc * fc;
        let fitted = self.gain_at_evaluation(p);
        let (mut drag_sum, mut lorentz_sum) = (0.0, 0.0);
        for image in images {
            let re = fc - image.shift;
            let weight = match fitted {
                Some(filter) => image.weight * Self::fitted_gain(filter, image.f_squared),
                None => image.weight,
            };
            drag_sum += weight / (re * re + image.damping_squared);
            lorentz_sum += image.box_gain / (fc_squared + image.f_squared);
        }
        let scale = p.d / (PI * PI);
        let fs = self.sample_rate_hz;
        let closed = match self.exposure_s {
            Some(w) => blurred_component_one_sided(f_hz, fc, p.d / (2.0 * PI * fc), fs, w),
            None => aliased_lorentzian_one_sided(f_hz, fc, p.d, fs),
        };
        let cutoff = (f64::from(ALIAS_TERMS) + 0.5) * fs;
        let ratio = self.unaliased(cutoff, p) / lorentzian(cutoff, fc, p.d);
        (closed - scale * lorentz_sum)
            .max(0.0)
            .mul_add(ratio, scale * drag_sum)
    }

    /// The bead's spectrum: the closed form when the autocovariance is a sum of exponentials,
    /// else the numerical image sum, its images computed afresh.
    fn signal_psd_direct(&self, f_hz: f64, p: &Params) -> f64 {
        if !self.aliasing {
            let box_gain = self.exposure_s.map_or(1.0, |w| sinc_squared(PI * f_hz * w));
            return self.unaliased(f_hz, p) * box_gain;
        }
        let fs = self.sample_rate_hz;
        if let Some(components) = self.exponential_components(p) {
            return components
                .iter()
                .filter(|(_, variance)| *variance != 0.0)
                .map(|&(f_j, variance)| match self.exposure_s {
                    Some(w) => blurred_component_one_sided(f_hz, f_j, variance, fs, w),
                    None => aliased_lorentzian_one_sided(f_hz, f_j, variance * 2.0 * PI * f_j, fs),
                })
                .sum();
        }
        // A fixed filter's gain is in each image's weight; a fitted one's is applied in the sum
        // (`gain_at_evaluation`), as for tabled images.
        let filter = match self.filter {
            FilterSetting::Fixed(_) => p.filter,
            _ => None,
        };
        let images =
            (-ALIAS_TERMS..=ALIAS_TERMS).map(|n| self.alias_image(f_hz, n, filter.as_ref()));
        self.image_sum(f_hz, p, images)
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
    /// Under a camera's exposure each component's sampled autocovariance is C_0 = A S(a) at lag
    /// 0 and E c^(m-1) at lags m >= 1, E = A ((1 - e^-a)/a)^2 e^(-(dt - W)/tau_j) its lag-one
    /// value (a = W/tau_j; see [`blurred_component_one_sided`]): an exponential plus a spike at
    /// lag 0. The finite-record term of the samples involves only the lags m != 0, so it is the
    /// one above with A c replaced by E. That of the differences also sees C_0 through
    /// C_y(1) = 2 E - C_0 - E c; written out (derived here) it is
    /// 4 dt / (L 4 sin^2(theta/2)) {E N(c) / d^2 - c^(L-1) E (1 - c)^2 [(1 + c^2) cos theta - 2 c]
    /// / d^2 + C_0 cos theta}, with N(c) = [(1 - c)^2 ((1 + c^2) cos theta - 2 c) - d^2 cos theta]
    /// / c, which is 4 u^2 - 2 u - 2 + c (4 - 4 u^3) + c^2 (4 u^2 - 2 u - 2) with u = cos theta,
    /// expanded so that no power of c divides (a fast component of a filter has c near 0).
    /// Without exposure (C_0 = A, E = A c) it is the form above; the tests check both against
    /// the double sums.
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
                    let Some(w) = self.exposure_s else {
                        let edge = 2.0 * (1.0 - c_l) / l * bracket / (d * d) * 2.0 * variance * dt;
                        return if differenced {
                            let one_minus_c = 1.0 - c;
                            edge * one_minus_c * one_minus_c / gain
                        } else {
                            -edge * c
                        };
                    };
                    let (lag_zero, lag_one) = blurred_lags(f_j, variance, dt, w);
                    if differenced {
                        let u = cos_theta;
                        let quadratic = (4.0 * u).mul_add(u, (-2.0f64).mul_add(u, -2.0));
                        let n_c = (c * c).mul_add(
                            quadratic,
                            c.mul_add((4.0 * u * u).mul_add(-u, 4.0), quadratic),
                        );
                        let one_minus_c = 1.0 - c;
                        let end = c.powf(l - 1.0) * one_minus_c * one_minus_c * bracket;
                        let braces = lag_zero.mul_add(u, lag_one * (n_c - end) / (d * d));
                        4.0 * dt / (l * gain) * braces
                    } else {
                        -2.0 * (1.0 - c_l) / l * bracket / (d * d) * 2.0 * lag_one * dt
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
    /// bins of a block. The fit uses [`Self::prepared_block_mean`]; this is what the tests check
    /// it against.
    #[cfg(test)]
    pub(crate) fn block_mean(
        &self,
        lower_hz: f64,
        upper_hz: f64,
        p: &Params,
        segments: Option<Segments>,
    ) -> f64 {
        let nodes = block_nodes(lower_hz, upper_hz);
        block_average(|i| self.expected_periodogram(nodes[i], p, segments))
    }

    /// A block's quadrature nodes with what the model computes at them that does not depend on
    /// the parameters: the image tables (see [`Self::image_table`]) and the block mean of
    /// dS/dP_n, the white floor's own gain (1, plus the differenced segments' finite-record term
    /// of `leakage_params`), so that a fit pays for them once.
    pub(crate) fn prepare_block(
        &self,
        lower_hz: f64,
        upper_hz: f64,
        segments: Option<Segments>,
    ) -> PreparedBlock {
        let nodes = block_nodes(lower_hz, upper_hz);
        let tables = self
            .tables_images()
            .then(|| nodes.map(|f| self.image_table(f)).map(Option::unwrap));
        PreparedBlock {
            nodes,
            tables,
            floor_gain: self.block_floor_gain(lower_hz, upper_hz, segments),
        }
    }

    /// The block mean of dS/dP_n over [lower, upper] (dimensionless): the expected block mean
    /// is linear in the white floor's level P_n with this slope, 1 plus the differenced
    /// segments' finite-record term of `leakage_params`, P_n cos theta / (L (1 - cos theta)).
    pub(crate) fn block_floor_gain(
        &self,
        lower_hz: f64,
        upper_hz: f64,
        segments: Option<Segments>,
    ) -> f64 {
        let nodes = block_nodes(lower_hz, upper_hz);
        let dt = 1.0 / self.sample_rate_hz;
        block_average(|i| {
            let f_hz = nodes[i];
            match segments {
                Some(seg) if self.aliasing && f_hz >= seg.differenced_from_hz => {
                    let cos_theta = (2.0 * PI * f_hz * dt).cos();
                    let gain = 2.0 * (1.0 - cos_theta);
                    if gain > 0.0 {
                        1.0 + 2.0 * cos_theta / (seg.len as f64 * gain)
                    } else {
                        1.0
                    }
                }
                _ => 1.0,
            }
        })
    }

    /// [`Self::block_mean`] of a prepared block: the same quadrature, with the image sums
    /// evaluated from their tables.
    pub(crate) fn prepared_block_mean(
        &self,
        block: &PreparedBlock,
        p: &Params,
        segments: Option<Segments>,
    ) -> f64 {
        let Some(tables) = &block.tables else {
            return block_average(|i| self.expected_periodogram(block.nodes[i], p, segments));
        };
        block_average(|i| {
            let f_hz = block.nodes[i];
            let s = self.signal_psd_tabled(&tables[i], p) + p.noise_floor;
            match segments {
                Some(seg) if self.aliasing => {
                    s + self.leakage_params(f_hz, p, seg.len, f_hz >= seg.differenced_from_hz)
                }
                _ => s,
            }
        })
    }
}

/// A block of a fit prepared for repeated evaluation (see `SpectrumModel::prepare_block`).
#[derive(Clone, Debug)]
pub(crate) struct PreparedBlock {
    nodes: [f64; 3],
    tables: Option<[ImageTable; 3]>,
    /// Block mean of dS/dP_n (dimensionless): the expected block mean is linear in the white
    /// floor's level with this slope.
    pub(crate) floor_gain: f64,
}

/// The three Gauss-Legendre nodes on [lower, upper], in the order `block_average` weighs them.
fn block_nodes(lower_hz: f64, upper_hz: f64) -> [f64; 3] {
    let mid = 0.5 * (lower_hz + upper_hz);
    let half = 0.5 * (upper_hz - lower_hz);
    let node = half * (3.0f64 / 5.0).sqrt();
    [mid - node, mid + node, mid]
}

/// The 3-point Gauss-Legendre mean (exact for cubics) of the values `at(i)` at the nodes of
/// [`block_nodes`].
fn block_average(at: impl Fn(usize) -> f64) -> f64 {
    let w_outer = 5.0 / 18.0;
    let w_mid = 8.0 / 18.0;
    w_outer * (at(0) + at(1)) + w_mid * at(2)
}
