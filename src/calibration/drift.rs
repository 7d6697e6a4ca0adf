//! Low-frequency drift: whether a record holds it, how each method allows for it, and how far
//! it moved each estimate.
//!
//! Drift of the stage, the laser or the detector adds power at low frequencies. Its effect is
//! not confined to the lowest bins: a 1/f density that equals the thermal plateau at 10 Hz
//! still holds 10 % of the thermal power at 10 kHz and about 30 % near the Nyquist frequency of
//! a 100 kHz record with fc near 1 kHz, because the bead's spectrum falls as 1/f^2 above fc.
//! Raising the fit range's lower end does not remove it (a Whittle fit of the aliased Lorentzian
//! to the expected periodogram of that record gives fc +12 % over 10 Hz-40 kHz, +14 % over
//! 100 Hz-40 kHz and +18 % over 300 Hz-40 kHz, computed while designing this stage), so the
//! spectral fit carries an additive 1/f term instead, adopted when a likelihood-ratio test asks
//! for it. The variance is then corrected by the drift's share computed from the spectrum, and
//! the autocorrelation method, whose model has no term for the drift's slowly decaying
//! autocovariance, is left out.

use super::spectral::SpectralStage;
use super::time_domain::TimeDomainStage;
use crate::findings::DriftEvidence;
use crate::spectrum::{self, Periodogram, SpectrumFit, SpectrumFitOptions};
use statrs::distribution::{ChiSquared, ContinuousCDF, Gamma};

/// False-alarm probability of each drift test on a record without drift: the likelihood-ratio
/// test of the 1/f term and the test of excess power below the fit range. On clean records the
/// machinery below acts on at most about 0.2 % of axes (both tests together).
pub(crate) const DRIFT_TEST_P: f64 = 1e-3;

/// The likelihood-ratio test of the spectral fit's 1/f term: twice the drop of the Whittle cost
/// when the term is added, chi-square with one degree of freedom on data without drift (Wilks,
/// Ann. Math. Stat. 9, 60 (1938), citation from memory, unverified; the term's amplitude is
/// linear and may be negative, so zero is an interior point).
#[derive(Clone, Copy, Debug)]
pub(crate) struct FlickerTest {
    pub(crate) p_value: f64,
    /// The corner frequency of the fit without the term, Hz, for the shift the drift caused.
    pub(crate) plain_corner_frequency_hz: f64,
    /// Whether the excess below the fit range confirmed the term (see [`DRIFT_CONFIRM_P`]).
    pub(crate) confirmed_below_range: bool,
}

/// Upper-tail p-value of the excess below the fit range (`below_range_excess` against the plain
/// fit) below which that excess confirms the 1/f term. Other misfits at high frequencies (a
/// white detector floor, unmodelled drag or filtering) also make a 1/f term improve the fit, but
/// they add no power below the fit range, while drift adds most there; so a term that the
/// likelihood-ratio test asks for is kept only when the bins below the fit range, which the fit
/// did not see, show excess too. On records whose only misfit is at high frequencies this
/// confirmation passes by chance in 5 % of records; when no bin lies below the fit range (an
/// explicit range starting at the lowest bins) the likelihood-ratio test decides alone.
pub(crate) const DRIFT_CONFIRM_P: f64 = 0.05;

/// Goodness-of-fit p-value of the refit with the 1/f term below which the term is not kept: the
/// level at which `poor-spectral-fit` is an error. It is not the consensus's rejection level
/// (0.001): on drifting records the refit's p-value is uniform, so that level would drop the
/// term, and fall back to a fit biased by many standard errors, in 0.1 % of records (one of 300
/// records of the strong row did, measured while designing this check); here the fit with the
/// term stands and the consensus's own guard leaves it out instead.
pub(crate) const GROSS_MISFIT_P: f64 = 1e-6;

/// Refits the spectrum with the 1/f term, started from the plain fit, and tests it. Returns the
/// refit when the test adopts the term: p below [`DRIFT_TEST_P`], a positive amplitude, the
/// excess below the fit range confirming it at [`DRIFT_CONFIRM_P`], and the refit not grossly
/// misfitting (goodness-of-fit p-value at least [`GROSS_MISFIT_P`]: a term that only soaks up
/// part of a gross misfit, such as a strong white floor, is not drift). The test is returned
/// either way (`None` when the refit fails: the plain fit then stands).
pub(crate) fn flicker_refit(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    plain: &SpectrumFit,
) -> (Option<SpectrumFit>, Option<FlickerTest>) {
    let with_term = SpectrumFitOptions {
        flicker: true,
        ..options.clone()
    };
    let start = Some((plain.corner_frequency_hz, plain.diffusion));
    let Ok(refit) = spectrum::fit_spectrum(periodogram, &with_term, start) else {
        return (None, None);
    };
    decide(periodogram, plain, refit, false)
}

/// The 1/f term tested once the noise floor's test has put a white floor into a model that the
/// test before the floor left without the term: the same test ([`flicker_refit`]'s rules) of
/// the term beside the floor, from the fit with the floor (`fit`, no term). Needed because a
/// floor the model lacks makes the refit with the term alone misfit grossly at high frequencies
/// (its goodness-of-fit p-value below [`GROSS_MISFIT_P`]), so the first test cannot adopt the
/// term even when the record drifts: on exact records with a filtered photodiode (f3dB 8 kHz,
/// alpha 0.3), drag, a 1 % floor and the drift row's 1/f drift, the term was refused on every
/// record and the spectral stiffness came out 14 % high (`combined_effects_tests.rs`).
/// `confirmed_before` is whether the excess below the fit range confirmed the term in the test
/// before the floor; it counts as confirmation here too, since a floor adds nothing below the
/// range (without it, records of 2^17 samples of that row lost the term in 2 of 150, the
/// excess against the fit with the floor, whose fc had risen to take up the drift, falling
/// short by chance, and their stiffness came out 17 and 24 % high). Returns the fit with the
/// floor and the term, and its test, when the term is adopted.
pub(crate) fn test_beside_floor(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    fit: &SpectrumFit,
    confirmed_before: bool,
) -> Option<(SpectrumFit, FlickerTest)> {
    if fit.flicker.is_some() || !fit.model.noise_floor {
        return None;
    }
    let with_term = SpectrumFitOptions {
        flicker: true,
        model: fit.model,
        ..options.clone()
    };
    let refit =
        spectrum::fit_spectrum_from_theta(periodogram, &with_term, fit.theta.clone()).ok()?;
    match decide(periodogram, fit, refit, confirmed_before) {
        (Some(adopted), Some(test)) => Some((adopted, test)),
        _ => None,
    }
}

/// The likelihood-ratio test of `refit` (with the 1/f term) against `plain` (the same model
/// without it) and the rules of [`flicker_refit`], the excess below the fit range taken as
/// confirmed when `confirmed_before`: the refit when they adopt the term, and the test.
fn decide(
    periodogram: &Periodogram,
    plain: &SpectrumFit,
    refit: SpectrumFit,
    confirmed_before: bool,
) -> (Option<SpectrumFit>, Option<FlickerTest>) {
    let statistic = (2.0 * (plain.whittle_cost - refit.whittle_cost)).max(0.0);
    let p_value = ChiSquared::new(1.0).map_or(f64::NAN, |d| d.sf(statistic));
    let positive = refit.flicker.is_some_and(|t| t.density_at_1_hz > 0.0);
    let confirmed = confirmed_before
        || below_range_excess(periodogram, plain).is_none_or(|b| b.p_value < DRIFT_CONFIRM_P);
    let test = FlickerTest {
        p_value,
        plain_corner_frequency_hz: plain.corner_frequency_hz,
        confirmed_below_range: confirmed,
    };
    let describes = refit.p_value >= GROSS_MISFIT_P;
    let adopted = (p_value < DRIFT_TEST_P && positive && confirmed && describes).then_some(refit);
    (adopted, Some(test))
}

/// The 1/f term tested again once the noise floor's test has put a white floor into the model:
/// the two terms compete for the power at high frequencies, so the term adopted against the
/// model without a floor must still improve the fit with the floor (the same likelihood-ratio
/// test, p < `DRIFT_TEST_P`) unless the bins below the fit range, where a floor adds nothing,
/// show excess power against the fit without the term at the same level (then the floor took
/// up drift power above the range and the term stays). Returns the fit with the floor and
/// without the term when the term is no longer asked for; `None` keeps `fit` as it is.
pub(crate) fn retest_beside_floor(
    periodogram: &Periodogram,
    options: &SpectrumFitOptions,
    fit: &SpectrumFit,
) -> Option<SpectrumFit> {
    if fit.flicker.is_none() || !fit.model.noise_floor {
        return None;
    }
    let without_term = SpectrumFitOptions {
        flicker: false,
        model: fit.model,
        ..options.clone()
    };
    let refit =
        spectrum::fit_spectrum_from_theta(periodogram, &without_term, fit.theta.clone()).ok()?;
    let statistic = (2.0 * (refit.whittle_cost - fit.whittle_cost)).max(0.0);
    let p_value = ChiSquared::new(1.0).map_or(f64::NAN, |d| d.sf(statistic));
    let below_range_drift =
        below_range_excess(periodogram, &refit).is_some_and(|b| b.p_value < DRIFT_TEST_P);
    (p_value >= DRIFT_TEST_P && !below_range_drift).then_some(refit)
}

/// Excess power below the fit range: the mean over the plain periodogram's bins from the first
/// up to the fit range's lower end of P_k / S(f_k), S the fitted model, and its upper-tail
/// p-value under the Gamma(n, n) distribution of a mean of n independent exponential
/// ordinates of unit mean (n = bins times windows; Berg-Sorensen & Flyvbjerg, Rev. Sci.
/// Instrum. 75, 594 (2004), for the exponential statistics). `None` when no bin lies there.
#[derive(Clone, Copy, Debug)]
pub(crate) struct BelowRangeExcess {
    pub(crate) ratio: f64,
    pub(crate) p_value: f64,
}

pub(crate) fn below_range_excess(pg: &Periodogram, fit: &SpectrumFit) -> Option<BelowRangeExcess> {
    let df = pg.resolution_hz();
    let k_hi = ((fit.f_min_hz / df).floor() as usize).min(pg.psd.len());
    let mut ratio_sum = 0.0;
    let mut n = 0usize;
    for (k, p) in pg.psd.iter().enumerate().take(k_hi).skip(1) {
        let s = fit.model_psd_at(k as f64 * df);
        if s > 0.0 {
            ratio_sum += p / s;
            n += 1;
        }
    }
    if n == 0 {
        return None;
    }
    let n_avg = (n * pg.n_windows) as f64;
    let ratio = ratio_sum / n as f64;
    let gamma = Gamma::new(n_avg, n_avg).ok()?;
    Some(BelowRangeExcess {
        ratio,
        p_value: gamma.sf(ratio),
    })
}

/// The drift's share of the record's variance, signal-units^2, and its standard error.
///
/// With P_k the periodogram of the whole record as one segment (so that sum_{k >= 1} P_k df is
/// the variance of the mean-removed samples, Parseval), f_hp the fit range's lower end, S the
/// fitted model without its 1/f term and A that term's density at 1 Hz (0 when not fitted):
///   share = sum_{1 <= k, f_k < f_hp} (P_k - S(f_k)) df + A sum_{f_k >= f_hp} df / f_k.
/// Below f_hp the data say what the drift holds whatever its shape (the thermal part is the
/// model's); above it the fitted term does. Subtracting the share from the sample variance is
/// the variance above a high-pass at f_hp with the thermal part below it taken from the model,
/// which makes equipartition depend on the spectral fit. Its standard error is the 1/f term's,
/// A's se times sum_{f_k >= f_hp} df / f_k (the data part below f_hp replaces the record's own
/// power there, so its scatter is the thermal model's, which is small and left out).
/// The periodogram's segment is the longest fast FFT length in the record, a little shorter
/// than the record when its length is not a product of small primes.
#[derive(Clone, Copy, Debug)]
pub(crate) struct VarianceShare {
    pub(crate) share: f64,
    pub(crate) share_se: f64,
}

pub(crate) fn variance_share(
    samples: &[f64],
    sample_rate_hz: f64,
    fit: &SpectrumFit,
) -> Option<VarianceShare> {
    let pg = spectrum::periodogram(samples, sample_rate_hz, 1)?;
    let df = pg.resolution_hz();
    let (a, a_se) = fit
        .flicker
        .map_or((0.0, 0.0), |t| (t.density_at_1_hz, t.density_at_1_hz_se));
    let mut below = 0.0;
    let mut harmonic = 0.0;
    for (k, p) in pg.psd.iter().enumerate().skip(1) {
        let f = k as f64 * df;
        if f < fit.f_min_hz {
            below += (p - fit.thermal_psd_at(f)) * df;
        } else {
            harmonic += df / f;
        }
    }
    Some(VarianceShare {
        share: a.mul_add(harmonic, below),
        share_se: a_se * harmonic,
    })
}

/// What the calibration knows of the drift on one axis, when it found any.
#[derive(Clone, Debug)]
pub(crate) struct DriftAccount {
    /// The excess below the fit range, when significant.
    pub(crate) below_range: Option<BelowRangeExcess>,
    /// The 1/f term's test, when the term was adopted.
    pub(crate) flicker: Option<FlickerTest>,
    pub(crate) variance_share: VarianceShare,
    /// The variance before the correction, signal-units^2 divided by the model's variance
    /// factor (as `TimeDomainStage::variance` holds it).
    pub(crate) raw_variance: Option<f64>,
    /// The share removed, as a fraction of that variance.
    pub(crate) variance_fraction: Option<f64>,
}

/// Whether the record holds drift (the 1/f term adopted, or excess power below the fit range at
/// p below [`DRIFT_TEST_P`]), and its share of the variance. `None` without a spectral fit or
/// without drift: nothing then changes.
pub(crate) fn drift_account(
    spectral: &SpectralStage,
    plain_periodogram: &Periodogram,
    time_samples: &[f64],
    sample_rate_hz: f64,
) -> Option<DriftAccount> {
    let fit = spectral.fit.as_ref().ok()?;
    let flicker = spectral.flicker_test.filter(|_| fit.flicker.is_some());
    let below_range =
        below_range_excess(plain_periodogram, fit).filter(|b| b.p_value < DRIFT_TEST_P);
    if flicker.is_none() && below_range.is_none() {
        return None;
    }
    let variance_share = variance_share(time_samples, sample_rate_hz, fit)?;
    Some(DriftAccount {
        below_range,
        flicker,
        variance_share,
        raw_variance: None,
        variance_fraction: None,
    })
}

/// Corrects equipartition's variance by the drift's share (see [`variance_share`]): the value
/// drops by share / factor and the share's standard error adds in quadrature, factor being the
/// model's C(0) / sigma^2 by which the time-domain stage already divided.
pub(crate) fn correct_variance(time: &mut TimeDomainStage, account: &mut DriftAccount) {
    let factor = time.variance_factor;
    if let Ok(v) = time.variance.as_mut() {
        let removed = account.variance_share.share / factor;
        account.raw_variance = Some(v.variance);
        account.variance_fraction = Some(removed / v.variance);
        v.variance -= removed;
        v.variance_se = v
            .variance_se
            .hypot(account.variance_share.share_se / factor);
    }
}

/// How far the drift moved each estimate, in that estimate's (corrected) standard errors:
/// the power-spectrum stiffness by the change of fc when the 1/f term was added (kappa = 2 pi
/// gamma fc, so the relative shift is fc's), equipartition by the share removed from the
/// variance (kappa = kB T / variance).
pub(crate) fn shifts(
    account: &DriftAccount,
    spectral: &SpectralStage,
    time: &TimeDomainStage,
) -> Vec<(&'static str, f64)> {
    let mut out = Vec::new();
    if let (Some(test), Ok(fit)) = (&account.flicker, &spectral.fit) {
        let z = (fit.corner_frequency_hz - test.plain_corner_frequency_hz).abs()
            / fit.corner_frequency_se_hz;
        out.push(("psd", z));
    }
    if let (Some(raw), Ok(v)) = (account.raw_variance, &time.variance) {
        out.push(("equipartition", (raw - v.variance).abs() / v.variance_se));
    }
    out
}

/// Why the autocorrelation method leaves the consensus under drift, if it does: when the 1/f
/// term was adopted (its autocovariance falls only logarithmically across the lag window), or
/// when the drift moved equipartition by more than its standard error (the drift then adds
/// about as much, relative to its error, to every lag the fit reads).
pub(crate) fn acf_exclusion(
    account: &DriftAccount,
    shifts: &[(&'static str, f64)],
) -> Option<String> {
    let moved_variance = shifts
        .iter()
        .any(|(method, z)| *method == "equipartition" && *z > 1.0);
    (account.flicker.is_some() || moved_variance).then(|| {
        "not applicable: the record holds low-frequency drift, whose slowly decaying autocovariance its model lacks".to_string()
    })
}

/// The plain evidence the findings report.
pub(crate) fn evidence(
    account: &DriftAccount,
    fit: Option<&SpectrumFit>,
    shifts: Vec<(&'static str, f64)>,
    acf_left_out: bool,
) -> DriftEvidence {
    DriftEvidence {
        below_range_ratio: account.below_range.map(|b| b.ratio),
        flicker_density_at_1_hz: fit.and_then(|f| f.flicker).map(|t| t.density_at_1_hz),
        flicker_p_value: account.flicker.map(|t| t.p_value),
        variance_fraction: account.variance_fraction,
        shifts,
        acf_left_out,
    }
}
