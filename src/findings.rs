//! Plain-language findings on data quality. Each finding is a value returned beside the result,
//! never an error: a recording with findings still gets its numbers, and the findings say how
//! far to trust them.

use crate::drag;
use crate::estimate::Estimate;
use crate::recording::PositionUnit;
use crate::spectrum::{NarrowPeak, Periodogram, SpectrumFit};
use statrs::distribution::{ContinuousCDF, Gamma};

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

/// Excess power below the fit range: the mean periodogram over those bins relative to the
/// fitted model, tested against the Gamma distribution of a mean of n exponential ordinates.
fn drift(inp: &FindingInputs<'_>, out: &mut Vec<Finding>) {
    let Some(fit) = inp.spectrum else {
        return;
    };
    let pg = inp.periodogram;
    let df = pg.resolution_hz();
    let k_hi = ((fit.f_min_hz / df).floor() as usize).min(pg.psd.len());
    if k_hi < 2 {
        return;
    }
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
        return;
    }
    let n_avg = (n * pg.n_windows) as f64;
    let ratio = ratio_sum / n as f64;
    let Ok(gamma) = Gamma::new(n_avg, n_avg) else {
        return;
    };
    let p_value = gamma.sf(ratio);
    if ratio > 2.0 && p_value < 1e-3 {
        let severity = if ratio > 10.0 {
            Severity::Warning
        } else {
            Severity::Info
        };
        out.push(finding(
            "low-frequency-drift",
            severity,
            format!(
                "axis {}: below {:.1} Hz the spectrum holds {:.1} times the thermal power; drift or stage motion is present (left out of the spectral fit, but it inflates the variance and the autocorrelation): let the sample settle, or use linear detrending",
                inp.axis, fit.f_min_hz, ratio
            ),
        ));
    }
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
