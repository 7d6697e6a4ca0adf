//! Plain-language findings on data quality. Each finding is a value returned beside the result,
//! never an error: a recording with findings still gets its numbers, and the findings say how
//! far to trust them.

mod drive;
pub use drive::{DRAG_MISMATCH_Z, DriveEvidence, drive, height_for};

use crate::drag;
use crate::estimate::Estimate;
use crate::recording::PositionUnit;
use crate::spectrum::{NarrowPeak, Periodogram, SpectrumFit};

/// How much a finding matters.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    /// Worth knowing; the calibration stands.
    Info,
    /// The calibration may be biased or less precise than it looks; check before relying on it.
    Warning,
    /// The recording is not fit for calibration as analysed.
    Error,
}

impl Severity {
    /// Wire name.
    pub fn name(self) -> &'static str {
        match self {
            Severity::Info => "info",
            Severity::Warning => "warning",
            Severity::Error => "error",
        }
    }
}

/// One finding: a stable code for machines, a severity and a message for people.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    /// Stable kebab-case code (documented in the README; never renamed).
    pub code: &'static str,
    pub severity: Severity,
    pub message: String,
}

fn finding(code: &'static str, severity: Severity, message: String) -> Finding {
    Finding {
        code,
        severity,
        message,
    }
}

/// Two methods whose stiffness estimates differ by `z` combined standard errors, beyond the
/// limit the consensus uses.
#[derive(Clone, Debug, PartialEq)]
pub struct MethodDisagreement {
    pub first: &'static str,
    pub second: &'static str,
    pub z: f64,
}

/// What the checks look at, all from one axis: plain data, so the findings know nothing of how
/// the calibration computed it.
pub struct FindingInputs<'a> {
    pub axis: &'a str,
    pub samples: &'a [f64],
    pub sample_rate_hz: f64,
    pub unit: PositionUnit,
    pub periodogram: &'a Periodogram,
    /// The spectral fit, `None` when it failed.
    pub spectrum: Option<&'a SpectrumFit>,
    pub peaks: &'a [NarrowPeak],
    /// The consensus stiffness, pN/nm.
    pub consensus: Estimate,
    /// Pairs of methods whose estimates disagree beyond the consensus's limit.
    pub disagreements: &'a [MethodDisagreement],
    pub target_relative_precision: f64,
    pub diffusion_theory_m2_per_s: f64,
    pub radius_m: f64,
    pub height_m: Option<f64>,
    pub hydrodynamics: bool,
    /// The frequency scales of the drag under the run's conditions, whether the spectral model
    /// holds them or not (the motion-blur check compares against a model with them).
    pub hydro_terms: Option<crate::spectrum::HydroTerms>,
    /// The autocorrelation method's relaxation time, s, `None` when it failed.
    pub relaxation_time_s: Option<f64>,
    /// Lines fitted and subtracted from the record, and peaks left in (over the work budget).
    pub lines_removed: usize,
    pub lines_kept: usize,
    /// Methods that failed on this axis, with the error's message.
    pub failed_methods: &'a [(&'a str, String)],
    /// Why the power-spectrum method was left out of the consensus, if it was (beta in volts
    /// rests on the same fit).
    pub spectrum_excluded: Option<&'a str>,
    /// What the calibration found of low-frequency drift, `None` when it found none.
    pub drift: Option<&'a DriftEvidence>,
}

/// Low-frequency drift as the calibration measured and allowed for it, in plain numbers.
#[derive(Clone, Debug, PartialEq)]
pub struct DriftEvidence {
    /// Mean ratio of the periodogram to the fitted model below the fit range, when that excess
    /// was significant.
    pub below_range_ratio: Option<f64>,
    /// The spectral fit's 1/f term, its density at 1 Hz (signal-units^2/Hz), when adopted.
    pub flicker_density_at_1_hz: Option<f64>,
    /// The likelihood-ratio test's p-value for that term, when adopted.
    pub flicker_p_value: Option<f64>,
    /// The drift's share of the record's variance, removed from equipartition.
    pub variance_fraction: Option<f64>,
    /// How far the drift moved each estimate (method, shift in its standard errors).
    pub shifts: Vec<(&'static str, f64)>,
    /// Whether the autocorrelation method was left out because of the drift.
    pub acf_left_out: bool,
}

/// Runs every check on one axis.
pub fn assess(inp: &FindingInputs<'_>) -> Vec<Finding> {
    let mut out = Vec::new();
    failed_methods(inp, &mut out);
    sensitivity(inp, &mut out);
    precision(inp, &mut out);
    nyquist(inp, &mut out);
    saturation(inp, &mut out);
    drift(inp, &mut out);
    peaks(inp, &mut out);
    fit_quality(inp, &mut out);
    motion_blur(inp, &mut out);
    drag_unmodelled(inp, &mut out);
    filter_unmodelled(inp, &mut out);
    identifiability(inp, &mut out);
    consistency(inp, &mut out);
    diffusion(inp, &mut out);
    geometry(inp, &mut out);
    out.sort_by_key(|f| std::cmp::Reverse(f.severity));
    out
}

/// A method failed while others stood: the calibration completes without it, and this says
/// which and why.
fn failed_methods(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    for (method, error) in inp.failed_methods {
        out.push(finding(
            "method-failed",
            Severity::Error,
            format!(
                "axis {}: the {method} method failed ({error}); the result rests on the other methods",
                inp.axis
            ),
        ));
    }
}

/// In volts, beta = sqrt(D_theory / D_V) comes from the spectral fit: when that fit was left out
/// of the consensus, beta is no more trustworthy than the fit.
fn sensitivity(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    if inp.unit != PositionUnit::Volt {
        return;
    }
    if let Some(reason) = inp.spectrum_excluded {
        out.push(finding(
            "sensitivity-unreliable",
            Severity::Error,
            format!(
                "axis {}: the sensitivity beta comes from the spectral fit, which was left out ({reason}); do not use this beta: model what the spectrum holds (detector filter, noise floor, drag) or remove the disturbance, and calibrate again",
                inp.axis
            ),
        ));
    }
}

/// The consensus stiffness is less precise than asked: the relative error of fc scales as
/// (pi fc T)^-1/2 (Berg-Sorensen & Flyvbjerg 2004), so the needed length scales as the square.
fn precision(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let rel = inp.consensus.relative_se();
    let target = inp.target_relative_precision;
    if rel.is_finite() && target > 0.0 && rel > target {
        let duration = inp.samples.len() as f64 / inp.sample_rate_hz;
        let needed = duration * (rel / target).powi(2);
        out.push(finding(
            "record-too-short",
            Severity::Warning,
            format!(
                "axis {}: the stiffness is known to {:.1} %, short of the {:.1} % asked; a record of about {:.0} s instead of {:.1} s would reach it",
                inp.axis,
                100.0 * rel,
                100.0 * target,
                needed.ceil(),
                duration
            ),
        ));
    }
}

fn nyquist(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    let nyquist = inp.sample_rate_hz / 2.0;
    let fc = fit.corner_frequency_hz;
    let ratio = fc / nyquist;
    if ratio > 0.8 {
        out.push(finding(
            "corner-near-nyquist",
            Severity::Error,
            format!(
                "axis {}: the corner frequency {:.0} Hz is {:.0} % of the Nyquist frequency {:.0} Hz; the spectrum barely bends within the band and the stiffness is poorly determined: sample at least four times faster",
                inp.axis, fc, 100.0 * ratio, nyquist
            ),
        ));
    } else if ratio > 0.4 {
        out.push(finding(
            "corner-near-nyquist",
            Severity::Warning,
            format!(
                "axis {}: the corner frequency {:.0} Hz is {:.0} % of the Nyquist frequency; aliasing is modelled, but precision suffers and detector filtering matters: sample faster if you can",
                inp.axis, fc, 100.0 * ratio
            ),
        ));
    }
    if fc < fit.f_min_hz * 1.5 {
        out.push(finding(
            "corner-below-fit-range",
            Severity::Warning,
            format!(
                "axis {}: the corner frequency {:.1} Hz lies near or below the lower fit limit {:.1} Hz; the plateau of the spectrum is not seen: lower the fit limit or record longer",
                inp.axis, fc, fit.f_min_hz
            ),
        ));
    }
    if fc > fit.f_max_hz {
        out.push(finding(
            "corner-above-fit-range",
            Severity::Warning,
            format!(
                "axis {}: the corner frequency {:.0} Hz lies above the upper fit limit {:.0} Hz; raise the limit or model the detector filter",
                inp.axis, fc, fit.f_max_hz
            ),
        ));
    }
}

/// Samples piled up at the extremes mean the detector or the converter clipped (common
/// practice: a Gaussian record has its extremes once each).
fn saturation(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let (lo, hi) = inp
        .samples
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &x| {
            (l.min(x), h.max(x))
        });
    let span = hi - lo;
    if span <= 0.0 || span.is_nan() {
        return;
    }
    let eps = span * 1e-9;
    let at_lo = inp.samples.iter().filter(|&&x| x - lo <= eps).count();
    let at_hi = inp.samples.iter().filter(|&&x| hi - x <= eps).count();
    let n = inp.samples.len();
    let limit = (n / 10_000).max(3);
    if at_lo >= limit || at_hi >= limit {
        out.push(finding(
            "clipping",
            Severity::Error,
            format!(
                "axis {}: {} samples sit at the lowest value {:.6} {u} and {} at the highest {:.6} {u}; the signal is clipped or saturated, which lowers the variance and distorts the spectrum: reduce the gain or centre the bead",
                inp.axis,
                at_lo,
                lo,
                at_hi,
                hi,
                u = inp.unit.suffix()
            ),
        ));
    }
}

/// Low-frequency drift (found by the calibration's tests, see `DriftEvidence`): a warning when
/// it moved an estimate by more than that estimate's standard error, or took the
/// autocorrelation method out; otherwise worth knowing. The remedy is already applied, and the
/// message says which one: the spectral fit's 1/f term, equipartition corrected by the drift's
/// share of the variance (and out of the consensus), the autocorrelation method left out.
fn drift(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(d) = inp.drift else {
        return;
    };
    let moved: Vec<String> = d
        .shifts
        .iter()
        .filter(|(_, z)| *z > 1.0)
        .map(|(method, z)| format!("{method} by {z:.1} standard errors"))
        .collect();
    let severity = if moved.is_empty() && !d.acf_left_out {
        Severity::Info
    } else {
        Severity::Warning
    };
    let mut what = Vec::new();
    if let Some(ratio) = d.below_range_ratio {
        what.push(format!(
            "below the fit range the spectrum holds {ratio:.1} times the thermal power"
        ));
    }
    if let (Some(a), Some(p)) = (d.flicker_density_at_1_hz, d.flicker_p_value) {
        what.push(format!(
            "the spectral fit carries a 1/f term of {a:.3e} {u}^2/Hz at 1 Hz (likelihood-ratio test p = {p:.1e})",
            u = inp.unit.suffix()
        ));
    }
    if let Some(fraction) = d.variance_fraction {
        what.push(format!(
            "the drift holds {:.1} % of the variance, which equipartition removes (equipartition then rests on the spectral fit and stays out of the consensus)",
            100.0 * fraction
        ));
    }
    if d.acf_left_out {
        what.push("the autocorrelation method is left out".to_string());
    }
    let effect = if moved.is_empty() {
        "it moved no estimate by more than its standard error".to_string()
    } else {
        format!("it moved {}", moved.join(" and "))
    };
    out.push(finding(
        "low-frequency-drift",
        severity,
        format!(
            "axis {}: low-frequency drift is present: {}; {effect}. Use the consensus as reported (it rests on the methods that allow for the drift); a linear detrend does not remove 1/f drift. To keep every method, reduce the drift at its source and record again",
            inp.axis,
            what.join("; ")
        ),
    ));
}

fn peaks(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    if inp.peaks.is_empty() {
        return;
    }
    let variance = inp.stiffness_variance_hint();
    let mut mains = Vec::new();
    let mut other = Vec::new();
    for p in inp.peaks {
        let label = format!("{:.1} Hz", p.frequency_hz);
        match p.mains {
            Some((m, h)) => mains.push(format!("{label} ({h} x {m:.0} Hz)")),
            None => other.push(label),
        }
    }
    let total: f64 = inp.peaks.iter().map(|p| p.excess_power).sum();
    let share = variance.map(|v| 100.0 * total / v);
    let share_text = share
        .map(|s| format!("; together they carry {s:.2} % of the variance"))
        .unwrap_or_default();
    if !mains.is_empty() {
        out.push(finding(
            "mains-pickup",
            Severity::Warning,
            format!(
                "axis {}: narrow peaks at mains harmonics {}{}; {}: check grounding and shielding",
                inp.axis,
                mains.join(", "),
                share_text,
                inp.line_treatment()
            ),
        ));
    }
    if !other.is_empty() {
        out.push(finding(
            "narrow-peaks",
            Severity::Warning,
            format!(
                "axis {}: narrow spectral peaks at {} (mechanical resonance or pickup); {}",
                inp.axis,
                other.join(", "),
                inp.line_treatment()
            ),
        ));
    }
}

fn fit_quality(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    let reduced = fit.chi_square / fit.degrees_of_freedom as f64;
    if fit.p_value < 1e-6 {
        out.push(finding(
            "poor-spectral-fit",
            Severity::Error,
            format!(
                "axis {}: the spectral model does not describe the data (chi-square per degree of freedom {:.2}, p = {:.1e}); model the detector filter, narrow the fit range or check for disturbances",
                inp.axis, reduced, fit.p_value
            ),
        ));
    } else if fit.p_value < 0.01 {
        out.push(finding(
            "poor-spectral-fit",
            Severity::Warning,
            format!(
                "axis {}: the spectral fit is marginal (chi-square per degree of freedom {:.2}, p = {:.3})",
                inp.axis, reduced, fit.p_value
            ),
        ));
    }
}

/// Likelihood ratio in favour of the blurred model above which `motion-blur-suspected` fires:
/// 1000. For two simple hypotheses the ratio L_blur / L_instant exceeds k on data of the
/// instantaneous model with probability at most 1/k (Markov's inequality, since its expectation
/// under that model is 1; the universal bound on misleading evidence, common practice); with fc
/// and D refitted under each model the bound holds approximately. Twice its logarithm is
/// compared with the gain of `spectrum::likelihood_gain`.
pub const MOTION_BLUR_LIKELIHOOD_RATIO: f64 = 1000.0;

/// Camera motion blur not modelled: a camera averages the position over its exposure, which
/// lowers the spectrum towards the Nyquist frequency by sinc^2(pi f W) and the variance by
/// S(W/tau) (Wong & Halvorsen, Opt. Express 14, 12517 (2006)); fitted as instantaneous samples
/// this biases fc, D and equipartition by tens of per cent.
///
/// The rule: for nanometre data analysed without an exposure, the spectral model is refitted
/// with the longest exposure a camera can have, the frame interval W = 1/fs, on the same blocks,
/// and the finding fires when that raises the likelihood by at least a factor
/// [`MOTION_BLUR_LIKELIHOOD_RATIO`]. Frequency-dependent drag also lowers the top of the
/// spectrum (by about 1/(1 + sqrt(f/f_nu))), so when the model lacks it the blurred model must
/// also beat the model with the drag (and no blur) by the same factor. (A photodiode records
/// volts and its own filter has a similar shape, so volt data are not tested: the
/// detector-filter setting is the remedy there; the message names it for nm data too.)
fn motion_blur(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    if inp.unit != PositionUnit::Nanometre || fit.model.exposure_s.is_some() {
        return;
    }
    let frame_interval_s = 1.0 / inp.sample_rate_hz;
    let blurred = crate::spectrum::SpectrumModel {
        exposure_s: Some(frame_interval_s),
        ..fit.model
    };
    let Some(gain) = crate::spectrum::likelihood_gain(fit, inp.periodogram, &blurred) else {
        return;
    };
    let threshold = 2.0 * MOTION_BLUR_LIKELIHOOD_RATIO.ln();
    if let (None, Some(h)) = (fit.model.hydro, inp.hydro_terms) {
        let with_drag = crate::spectrum::SpectrumModel {
            hydro: Some(h),
            ..fit.model
        };
        let drag_gain = crate::spectrum::likelihood_gain(fit, inp.periodogram, &with_drag);
        if drag_gain.is_some_and(|g| gain - g < threshold) {
            return;
        }
    }
    if gain >= threshold {
        out.push(finding(
            "motion-blur-suspected",
            Severity::Warning,
            format!(
                "axis {}: the spectrum has the shape a camera's motion blur gives (the model with an exposure of one frame interval, {frame_interval_s:.3e} s, fits it better by a likelihood ratio of e^{:.0}); if this is camera data, give the exposure time with --exposure-time-s (HTTP field exposure_time_s), at most the frame interval, so that every method models the blur (for photodiode data the detector's filter lowers the top of the spectrum in a similar way: give --detector-filter instead)",
                inp.axis,
                gain / 2.0
            ),
        ));
    }
}

/// Frequency-dependent drag turned off while the spectrum shows it: the drag lowers the top of
/// the spectrum by about 1/(1 + sqrt(f/f_nu)) and lifts it near f_m (Stokes 1851, in the form
/// of Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)); fitted without it, fc and
/// D are biased by several per cent for 1 um beads and tens of per cent for 3 um beads.
///
/// The rule is the motion-blur check's: the model with the drag of the run's conditions (the
/// same number of parameters) is refitted on the same blocks, and the finding fires when it
/// raises the likelihood by at least [`MOTION_BLUR_LIKELIHOOD_RATIO`] (false-alarm rate at most
/// 1/1000 by Markov's inequality, approximately, since fc and D are refitted). For nanometre
/// data without an exposure a camera's blur has a similar shape, so there the drag must also
/// beat the blurred model by the same factor.
fn drag_unmodelled(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let (Some(fit), Some(h)) = (inp.spectrum, inp.hydro_terms) else {
        return;
    };
    if fit.model.hydro.is_some() {
        return;
    }
    let with_drag = crate::spectrum::SpectrumModel {
        hydro: Some(h),
        ..fit.model
    };
    let Some(gain) = crate::spectrum::likelihood_gain(fit, inp.periodogram, &with_drag) else {
        return;
    };
    let threshold = 2.0 * MOTION_BLUR_LIKELIHOOD_RATIO.ln();
    if gain < threshold {
        return;
    }
    if inp.unit == PositionUnit::Nanometre && fit.model.exposure_s.is_none() {
        let blurred = crate::spectrum::SpectrumModel {
            exposure_s: Some(1.0 / inp.sample_rate_hz),
            ..fit.model
        };
        let blur_gain = crate::spectrum::likelihood_gain(fit, inp.periodogram, &blurred);
        if blur_gain.is_some_and(|g| gain - g < threshold) {
            return;
        }
    }
    out.push(finding(
        "drag-unmodelled",
        Severity::Warning,
        format!(
            "axis {}: the spectrum has the shape frequency-dependent drag gives (the model with the drag of a {:.2} um bead in this medium fits it better by a likelihood ratio of e^{:.0}), but the drag is not modelled: calibrate with --hydrodynamics on (HTTP field hydrodynamics), the default, so that every method models it",
            inp.axis,
            2.0 * inp.radius_m * 1e6,
            gain / 2.0
        ),
    ));
}

/// Where the refit with a fitted photodiode filter starts, f3dB in Hz (alpha from
/// [`FILTER_START_ALPHA`]): the `fit` setting's own start (8 kHz) and two more, so that a filter
/// far from it is still found (a start too far from the optimum can stall on the ridge between
/// fc and f3dB). Starts above the Nyquist frequency are dropped.
const FILTER_STARTS_HZ: [f64; 3] = [2_000.0, 8_000.0, 25_000.0];

/// Most Fisher-scoring steps of each refit with the filter. On filtered records the refit
/// converges in far fewer (the test's 20 records); on unfiltered ones alpha runs off towards 1
/// and scoring would use its whole budget of 200 steps from every start, which made a volt
/// calibration of 2^18 samples with the drag on some 15 times slower (7 s against 0.5 s here).
const FILTER_REFIT_STEPS: usize = 20;

/// The attenuation depth 1 - alpha^2 at which the screen of [`filter_screen_passes`] evaluates
/// the filtered model: small enough that the model is the fitted one to 1e-5 (the score's shift
/// from it is about 1e-5 sqrt(N/2) of its standard deviation, 0.01 at a million samples), large
/// enough that the central differences of `logit(alpha^2)` (step 1e-5) keep about seven digits.
const FILTER_SCREEN_DEPTH: f64 = 1e-5;

/// The score statistic below which no refit with a filter is tried: the chi-square (one degree
/// of freedom) 0.9 quantile, so about 5 % of clean records per start pass the one-sided screen
/// and pay for the refit. The finding's own rule needs a likelihood-ratio statistic of
/// 2 ln 1000 = 13.8, and the score and likelihood-ratio statistics agree to first order near the
/// null (Rao 1948; Wilks 1938, from memory); the margin covers the f3dB that the refit frees and
/// the screen holds at its starts. The tests check that every record the refit flags passes the
/// screen.
pub(crate) const FILTER_SCREEN_STATISTIC: f64 = 2.706;

/// The fitted model with a fitted photodiode filter added, started at the `fit` setting's own
/// values.
fn filter_model(fit: &SpectrumFit) -> crate::spectrum::SpectrumModel {
    crate::spectrum::SpectrumModel {
        filter: crate::spectrum::FilterSetting::Fitted(crate::spectrum::DetectorFilter {
            f3db_hz: FILTER_STARTS_HZ[1],
            alpha: FILTER_START_ALPHA,
        }),
        ..fit.model
    }
}

/// The parameters of [`filter_model`] at each start of [`FILTER_STARTS_HZ`] below Nyquist, with
/// alpha^2 = `alpha2` and the rest from `theta`, the fitted model's:
/// [ln fc, ln D, ln f3dB, logit(alpha^2), then ln P_n with a floor] (the layout of
/// `spectrum::SpectrumModel`).
fn filter_points(theta: &[f64], alpha2: f64, sample_rate_hz: f64) -> Vec<Vec<f64>> {
    FILTER_STARTS_HZ
        .iter()
        .filter(|f| **f < sample_rate_hz / 2.0)
        .map(|f| {
            let mut t = theta[..2].to_vec();
            t.push(f.ln());
            t.push((alpha2 / (1.0 - alpha2)).ln());
            t.extend_from_slice(&theta[2..]);
            t
        })
        .collect()
}

/// Whether a filter could explain the spectrum's shape: Rao's score statistic of alpha^2 at the
/// fitted model (alpha^2 all but 1, f3dB held at each start of [`FILTER_STARTS_HZ`]) reaches
/// [`FILTER_SCREEN_STATISTIC`] with the data pulling towards a stronger filter (alpha^2 < 1) at
/// one start at least. With a 1/f term in the fit the screen cannot be made and passes.
pub(crate) fn filter_screen_passes(
    fit: &SpectrumFit,
    periodogram: &Periodogram,
    sample_rate_hz: f64,
) -> bool {
    if fit.flicker.is_some() {
        return true;
    }
    let with_filter = filter_model(fit);
    let points = filter_points(&fit.theta, 1.0 - FILTER_SCREEN_DEPTH, sample_rate_hz);
    // f3dB (index 2) is undetermined at alpha = 1 and held; logit(alpha^2) is then kept index 2.
    points.iter().any(|theta| {
        crate::spectrum::score_statistic(fit, periodogram, &with_filter, theta, &[2])
            .is_some_and(|(statistic, step)| statistic >= FILTER_SCREEN_STATISTIC && step[2] < 0.0)
    })
}

/// The refit with a filter from every start: twice the log-likelihood gain over the fitted model
/// and the filtered model's parameters, as `spectrum::likelihood_gain_from` gives them.
pub(crate) fn filter_refit(
    fit: &SpectrumFit,
    periodogram: &Periodogram,
    sample_rate_hz: f64,
) -> Option<(f64, Vec<f64>)> {
    let starts = |theta: &[f64]| {
        filter_points(
            theta,
            FILTER_START_ALPHA * FILTER_START_ALPHA,
            sample_rate_hz,
        )
    };
    crate::spectrum::likelihood_gain_from(
        fit,
        periodogram,
        &filter_model(fit),
        &starts,
        FILTER_REFIT_STEPS,
    )
}

/// The filter's starting alpha: the `fit` setting's own (0.4; PHYSICS.md section 3 gives 0.3 to
/// 0.5 for silicon, from memory).
const FILTER_START_ALPHA: f64 = 0.4;

/// A photodiode's parasitic filter not modelled: silicon photodiodes at 1064 nm pass a fraction
/// alpha^2 of the power at once and the rest through a low-pass of corner f3dB,
/// g(f) = alpha^2 + (1 - alpha^2) / (1 + (f / f3dB)^2) (Berg-Sorensen, Oddershede, Florin &
/// Flyvbjerg, J. Appl. Phys. 93, 3167 (2003), and Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum.
/// 75, 594 (2004), citations from memory), which lowers the top of the spectrum; fitted without
/// it, fc and D are biased by several per cent or more.
///
/// The rule is the motion-blur check's, for volt data analysed without a filter: the axis's
/// model with a fitted filter (two more parameters, f3dB and alpha, from the starts in
/// [`FILTER_STARTS_HZ`]) is refitted on the same blocks, and the finding fires when it raises
/// the likelihood by at least [`MOTION_BLUR_LIKELIHOOD_RATIO`]. With two free parameters the
/// statistic is about chi-square with two degrees of freedom on unfiltered data (Wilks 1938,
/// from memory), whose tail beyond 2 ln 1000 is exactly 1/1000; the boundary (alpha = 1) and the
/// f3dB that is then undetermined make this approximate, and the test pins the rate on clean
/// records. When the model lacks the drag, whose shape is similar, the filter must also beat the
/// model with the drag of the run's conditions by the same factor. Nanometre data are left to the
/// motion-blur check (a camera's blur has a similar shape; its message names the filter too).
/// A score test at the fitted model screens the refit out where no filter could explain the
/// shape ([`filter_screen_passes`]), so clean records (about 19 in 20) do not pay for it.
fn filter_unmodelled(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    if inp.unit != PositionUnit::Volt || fit.model.filter != crate::spectrum::FilterSetting::None {
        return;
    }
    let with_filter = filter_model(fit);
    if !filter_screen_passes(fit, inp.periodogram, inp.sample_rate_hz) {
        return;
    }
    let Some((gain, theta)) = filter_refit(fit, inp.periodogram, inp.sample_rate_hz) else {
        return;
    };
    let threshold = 2.0 * MOTION_BLUR_LIKELIHOOD_RATIO.ln();
    if gain < threshold {
        return;
    }
    if let (None, Some(h)) = (fit.model.hydro, inp.hydro_terms) {
        let with_drag = crate::spectrum::SpectrumModel {
            hydro: Some(h),
            ..fit.model
        };
        let drag_gain = crate::spectrum::likelihood_gain(fit, inp.periodogram, &with_drag);
        if drag_gain.is_some_and(|g| gain - g < threshold) {
            return;
        }
    }
    let Some(filter) = with_filter.decode(&theta).filter else {
        return;
    };
    out.push(finding(
        "filter-unmodelled",
        Severity::Warning,
        format!(
            "axis {}: the spectrum has the shape a photodiode's low-pass filter gives (the model with a fitted filter, f3dB {:.0} Hz and alpha {:.2}, fits it better by a likelihood ratio of e^{:.0}), but no filter is modelled: calibrate with --detector-filter fit (HTTP field detector_filter), or give the filter as F3DB:ALPHA when it was calibrated separately, so that every method models it",
            inp.axis,
            filter.f3db_hz,
            filter.alpha,
            gain / 2.0
        ),
    ));
}

/// The spectral fit sits on a ridge of its likelihood (see `SpectrumFit::unidentified_reason`):
/// its stiffness is left out of the consensus, and this says how to get a fit that stands.
fn identifiability(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    let Some(reason) = fit.unidentified_reason() else {
        return;
    };
    let advice = if fit.fitted_filter.is_some() {
        "measure the photodiode filter's f3dB and alpha separately and give them as fixed values, or raise the corner frequency (a stiffer trap) or the sample rate so the corner and the filter separate"
    } else {
        "record longer, widen the fit range or raise the sample rate"
    };
    out.push(finding(
        "spectrum-unidentified",
        Severity::Error,
        format!(
            "axis {}: {reason}; the power-spectrum stiffness is left out of the consensus: {advice}",
            inp.axis
        ),
    ));
}

fn consistency(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let bad: Vec<String> = inp
        .disagreements
        .iter()
        .map(|d| {
            format!(
                "{} vs {} ({:.1} standard errors)",
                d.first,
                d.second,
                d.z.abs()
            )
        })
        .collect();
    if !bad.is_empty() {
        out.push(finding(
            "methods-inconsistent",
            Severity::Warning,
            format!(
                "axis {}: the methods disagree: {}; the trap may be anharmonic, the detector nonlinear or filtered, or the run conditions wrong",
                inp.axis,
                bad.join(", ")
            ),
        ));
    }
}

/// For nanometre data the fitted D can be compared with Einstein's kB T / gamma: a mismatch
/// points at the length scale of the camera, the bead size, the viscosity or the height.
fn diffusion(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    if inp.unit != PositionUnit::Nanometre {
        return;
    }
    let d_measured_m2 = fit.diffusion * 1e-18;
    let ratio = d_measured_m2 / inp.diffusion_theory_m2_per_s;
    let rel_se = fit.diffusion_se / fit.diffusion;
    if ((ratio - 1.0) / rel_se).abs() > 3.0 && (ratio - 1.0).abs() > 0.05 {
        out.push(finding(
            "diffusion-mismatch",
            Severity::Warning,
            format!(
                "axis {}: the measured diffusion coefficient is {:.3} times Einstein's kB T / gamma; the nm scale, the bead diameter, the viscosity or the height may be off",
                inp.axis, ratio
            ),
        ));
    }
}

fn geometry(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    if let Some(h) = inp.height_m {
        if !drag::faxen_valid(inp.radius_m, h) {
            out.push(finding(
                "close-to-surface",
                Severity::Warning,
                format!(
                    "axis {}: the bead centre is {:.2} radii above the surface; the lateral wall correction loses accuracy this close: calibrate further from the surface",
                    inp.axis,
                    h / inp.radius_m
                ),
            ));
        }
        if inp.hydrodynamics {
            out.push(finding(
                "hydrodynamics-in-bulk-form",
                Severity::Info,
                format!(
                    "axis {}: frequency-dependent drag is modelled in its bulk form while the wall correction sets the zero-frequency drag; near a wall this is an approximation",
                    inp.axis
                ),
            ));
        }
    }
    let dt = 1.0 / inp.sample_rate_hz;
    if let Some(tau) = inp.relaxation_time_s.filter(|tau| *tau < 2.0 * dt) {
        out.push(finding(
            "few-samples-per-relaxation",
            Severity::Warning,
            format!(
                "axis {}: the relaxation time {:.2e} s spans fewer than two samples; the autocorrelation estimate rests on very few lags",
                inp.axis, tau
            ),
        ));
    }
}

impl FindingInputs<'_> {
    /// How the peaks were handled, in words.
    fn line_treatment(&self) -> String {
        if self.lines_kept == 0 {
            "they are left out of the spectral fit and subtracted from the record (fitted sinusoids) before the autocorrelation and equipartition methods".to_string()
        } else {
            format!(
                "they are left out of the spectral fit; {} of them were subtracted from the record, {} stay in (the record is too long to fit them all) and add to the variance",
                self.lines_removed, self.lines_kept
            )
        }
    }

    /// The variance implied by the spectral fit, D / (2 pi fc), in signal units^2.
    fn stiffness_variance_hint(&self) -> Option<f64> {
        let fit = self.spectrum?;
        let v = fit.diffusion / (2.0 * std::f64::consts::PI * fit.corner_frequency_hz);
        v.is_finite().then_some(v)
    }
}

/// What the coupling finding says about one pair of axes: plain numbers from the calibration.
pub struct CouplingInputs<'a> {
    pub first: &'a str,
    pub second: &'a str,
    pub unit: PositionUnit,
    /// Zero-lag correlation coefficient, with its standard error were the axes independent.
    pub correlation: Estimate,
    pub z: f64,
    /// The two-sided limit on |z| and its false-alarm rate.
    pub critical_z: f64,
    pub false_alarm: f64,
    /// Rotation from the two axes to the principal axes of their plane, degrees, with its
    /// standard error (nanometre data only).
    pub angle_deg: Option<Estimate>,
    /// Whether both axes are lateral, so that `principal_axes` would rotate this plane.
    pub both_lateral: bool,
    /// Whether these two axes are already the principal axes `principal_axes` turned to.
    pub already_rotated: bool,
}

/// Two axes whose positions are correlated beyond the false-alarm limit: in nanometres the
/// trap's principal axes are turned against the detector's, so each axis mixes two stiffnesses
/// (the finding gives the angle and names the setting that calibrates along them); in volts the
/// correlation may as well be crosstalk between the detector's channels.
pub fn axes_coupled(inp: &CouplingInputs<'_>) -> Finding {
    let (a, b) = (inp.first, inp.second);
    let head = format!(
        "axes {a} and {b} are correlated (r = {:.3}, standard error {:.3} were they independent; |z| = {:.1} is beyond {:.2}, the {} % false-alarm limit)",
        inp.correlation.value,
        inp.correlation.se,
        inp.z.abs(),
        inp.critical_z,
        inp.false_alarm * 100.0
    );
    let body = match (inp.unit, inp.angle_deg) {
        (PositionUnit::Volt, _) => "in volts this is either crosstalk between the detector's channels or a trap whose principal axes are turned against the detector's, which cannot be told apart before each axis's sensitivity is known; if the trap is turned, each axis mixes two stiffnesses and every method calibrates a value between them; principal_axes needs nanometre data: convert each axis with its sensitivity and calibrate the nanometre record with --principal-axes (setting principal_axes)".to_string(),
        (PositionUnit::Nanometre, None) => "the principal axes of this plane could not be found".to_string(),
        (PositionUnit::Nanometre, Some(angle)) => {
            let round = if angle.se > 10.0 {
                " (the trap is nearly round in this plane: the angle is poorly determined and the mixing matters little)"
            } else {
                ""
            };
            let remedy = if inp.already_rotated {
                "these axes were already turned to the principal axes measured on the record as given, before the calibration subtracted its lines, so a disturbance common to both channels (a pickup line, drift) turned that measurement: remove it at its source and calibrate again"
                    .to_string()
            } else if inp.both_lateral {
                "calibrate along the principal axes with --principal-axes (setting principal_axes)"
                    .to_string()
            } else {
                "principal_axes turns only the lateral plane, so align the detector with the trap's axes or name the axial axes correctly (setting axial_axes)"
                    .to_string()
            };
            format!(
                "the trap's principal axes are turned {:.1} ± {:.1} degrees (from {a} towards {b}) against the detector axes{round}, so each axis mixes two stiffnesses and every method calibrates a value between them; {remedy}",
                angle.value, angle.se
            )
        }
    };
    finding("axes-coupled", Severity::Warning, format!("{head}: {body}"))
}

/// What the `noise-floor` finding reads: the floor fitted to one axis and how far it moved the
/// estimates it touches.
#[derive(Clone, Debug, PartialEq)]
pub struct NoiseFloorInputs<'a> {
    pub axis: &'a str,
    /// The record's unit, for the level's unit.
    pub unit: PositionUnit,
    /// sigma_n^2 over the measured variance.
    pub share: Option<f64>,
    /// The one-sided level P_n, signal-unit^2/Hz.
    pub level: Option<Estimate>,
    /// (estimate, relative change the floor caused, that estimate's relative standard error).
    pub shifts: Vec<(&'static str, f64, f64)>,
}

/// `noise-floor`: a white background is in the spectral model of this axis (only when it is).
///
/// The rule: a warning when the floor moved any estimate it touches (fc and so the psd
/// stiffness, beta, the equipartition variance) by more than that estimate's standard error,
/// since then a calibration without the floor would have been wrong by more than its error bar;
/// otherwise information (common practice, no source: the estimate's own error is the scale).
pub fn noise_floor(inputs: &NoiseFloorInputs<'_>) -> Option<Finding> {
    let level = inputs.level?;
    let share = inputs.share.map_or_else(String::new, |s| {
        format!(", {:.2} % of the measured variance", 100.0 * s)
    });
    let moved: Vec<String> = inputs
        .shifts
        .iter()
        .filter(|(_, shift, se)| shift.abs() > *se)
        .map(|(name, shift, se)| {
            format!("{name} by {:+.1} % (se {:.1} %)", 100.0 * shift, 100.0 * se)
        })
        .collect();
    let unit = match inputs.unit {
        PositionUnit::Nanometre => "nm^2/Hz",
        PositionUnit::Volt => "V^2/Hz",
    };
    let head = format!(
        "axis `{}`: a white noise floor of {:.3e} +- {:.1e} {unit} is in the spectral model{share}",
        inputs.axis, level.value, level.se
    );
    Some(if moved.is_empty() {
        finding(
            "noise-floor",
            Severity::Info,
            format!("{head}; it moved no estimate by more than its standard error"),
        )
    } else {
        finding(
            "noise-floor",
            Severity::Warning,
            format!(
                "{head}; accounting for it moved {}; equipartition has the floor subtracted and rests on the spectral fit; reduce detector noise (more light on the detector, less amplifier gain noise) for an independent check",
                moved.join(", ")
            ),
        )
    })
}

/// `drift-dominates`: from some averaging time the record's Allan deviation lies above the band
/// the fitted model of the thermal motion predicts, and above that model's curve up to the
/// longest averaging time (see `crate::allan::drift_onset`), so on those time scales the position is dominated by drift rather than by
/// the trap. `drift_onset_s` is that averaging time (s), `None` when there is none;
/// `record_s` the record's length (s). A warning: averages of the position over longer times
/// are limited by drift, and a longer record will not make them better (the minimum of the
/// Allan deviation marks the best averaging time; Czerwinski, Richardson & Oddershede, Opt.
/// Express 17, 13255 (2009)).
pub fn drift_dominates(
    axis: &str,
    unit: PositionUnit,
    drift_onset_s: Option<f64>,
    record_s: f64,
) -> Option<Finding> {
    let onset = drift_onset_s.filter(|t| t.is_finite() && *t > 0.0 && *t <= record_s)?;
    let unit = match unit {
        PositionUnit::Nanometre => "nm",
        PositionUnit::Volt => "V",
    };
    Some(finding(
        "drift-dominates",
        Severity::Warning,
        format!(
            "axis `{axis}`: from an averaging time of {onset:.3e} s the Allan deviation of the position ({unit}) lies above the band the fitted model of the trapped bead's motion allows (central 99.8 %), and it stays above that model's curve up to the longest averaging time measured (a third of the {record_s:.3e} s record): drift, not the trap, dominates the position on those time scales. Averaging the position for longer than that does not make it more precise; reduce the drift at its source (stage, temperature, laser pointing) or keep measurements shorter"
        ),
    ))
}
