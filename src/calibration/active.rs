//! Active calibration of one axis: the sample stage oscillates sinusoidally while the bead's
//! thermal motion is recorded, and the spike this adds at the drive frequency measures the
//! detector's scale, and with it the drag and the stiffness, with no bead radius, viscosity or
//! height needed (Tolic-Norrelykke, Schaffer, Howard, Pavone, Julicher & Flyvbjerg,
//! Rev. Sci. Instrum. 77, 103101 (2006); shared PHYSICS.md section 9).
//!
//! The spike is measured by harmonic regression at the drive frequency, on or off the Fourier
//! grid, and subtracted from the record before every passive method sees it. Its power, less
//! the background the regression picks up at that frequency, is compared with the power the
//! stage's motion must give: W_th = (A^2 / 2) |R(f_d)|^2, where R is the bead's response to the
//! moving fluid (`response_power`). Then scale^2 = W_th / W_ex (m^2 per signal unit^2),
//! D = scale^2 D_signal, gamma = kB T / D and kappa = 2 pi gamma fc.

use super::{AnalysisOptions, CalibrationError};
use crate::drag::AxisOrientation;
use crate::estimate::Estimate;
use crate::recording::AxisTrace;
use crate::spectrum::{self, HydroTerms, SpectralLine, SpectrumFit, SpectrumModel};
use std::f64::consts::PI;

/// The stage drive of a recording: what the stage did, and which axes it calibrates.
#[derive(Clone, Debug, PartialEq)]
pub struct Drive {
    /// Drive frequency f_d, Hz (0 < f_d < f_Nyquist).
    pub frequency_hz: f64,
    /// Stage amplitude A, zero to peak, m.
    pub amplitude_m: f64,
    /// Standard error of A from the stage's own calibration, m.
    pub amplitude_se_m: f64,
    /// The driven axis; `None` for the recording's first axis.
    pub axis: Option<String>,
    /// Other lateral axes of the same bead that take the driven axis's measured drag.
    pub drag_to: Vec<String>,
}

/// What the active calibration of one axis measured. SI, except the stiffness (pN/nm, as
/// the axis's other stiffness estimates).
#[derive(Clone, Debug, PartialEq)]
pub struct ActiveCalibration {
    pub drive_frequency_hz: f64,
    pub drive_amplitude_m: f64,
    /// The spike's power W_ex in the record (mean square of the driven motion, background at
    /// the drive frequency subtracted, before any detector correction), signal-unit^2.
    pub spike_power: Estimate,
    /// The power the stage's motion gives the bead, W_th = (A^2 / 2) |R(f_d)|^2, m^2.
    pub expected_power_m2: f64,
    /// Metres per signal unit, sqrt(W_th g / W_ex), with g the detector's and exposure's power
    /// gain at f_d: the sensitivity beta for volts, the length scale for nanometre data.
    pub metres_per_unit: Estimate,
    /// The measured drag kB T / (scale^2 D_signal), kg/s.
    pub drag_kg_per_s: Estimate,
    /// Measured drag over the drag the run conditions give this axis.
    pub drag_ratio: Estimate,
    /// Measured drag over the bulk Stokes drag of the given diameter and viscosity.
    pub drag_over_bulk: f64,
    /// The spectral stiffness 2 pi gamma fc with the measured drag, pN/nm.
    pub stiffness_pn_per_nm: Option<Estimate>,
}

/// How the measured drag depends on the spectral fit, for the propagation of errors:
/// ln gamma = ln kB T + ln W_ex - ln W_th(fc) - ln D + const.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct MeasuredDragTerms {
    /// d ln W_th / d ln fc at the fitted corner frequency.
    pub(crate) d_ln_expected_d_ln_fc: f64,
    /// Variance of ln W_ex - 2 ln A: the spike's noise and the amplitude's calibration error,
    /// independent of the spectral fit (the spike's bins are left out of it).
    pub(crate) spike_log_variance: f64,
}

/// |X / X_stage|^2 at the drive frequency: the power of the bead's motion relative to the
/// trap per unit power of the stage's motion.
///
/// With constant drag the fluid moves the bead as X / X_s = -i f / (fc - i f), so
/// |R|^2 = 1 / (1 + fc^2 / f^2) (Tolic-Norrelykke et al. 2006). With frequency-dependent drag
/// (`hydro`), derived here from the equation of motion of a sphere in a uniformly oscillating
/// fluid (Maxey & Riley, Phys. Fluids 26, 883 (1983), with the unsteady Stokes drag of
/// Landau & Lifshitz, Fluid Mechanics, 2nd ed., section 24, in the form of Berg-Sorensen &
/// Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)): the drag acts on the velocity relative to
/// the fluid, and the pressure gradient that accelerates the fluid pushes on the bead with the
/// displaced fluid's mass. Dividing by 2 pi gamma0, with s = (f / f_nu)^(1/2):
///
/// R = [-i f (1 + (1 - i) s) - (2/3) f^2 / f_nu] / [fc - i f (1 + (1 - i) s) - f^2 / f_m],
///
/// where the 2/3 is the displaced mass (4/9) plus the added mass (2/9) in units of
/// 1 / (pi f_nu), and f_m holds the bead's mass plus the added mass as in the spectrum. The
/// tests check R against a time-domain solution of the same equation with the Basset history
/// integral.
pub fn response_power(drive_hz: f64, corner_hz: f64, hydro: Option<HydroTerms>) -> f64 {
    let f = drive_hz;
    match hydro {
        None => 1.0 / (corner_hz / f).mul_add(corner_hz / f, 1.0),
        Some(h) => {
            let s = (f / h.f_nu_hz).sqrt();
            // -i f (1 + (1 - i) s) = -f s - i f (1 + s)
            let (drag_re, drag_im) = (-f * s, -f * (1.0 + s));
            let num = (drag_re - 2.0 / 3.0 * f * f / h.f_nu_hz, drag_im);
            let den = (corner_hz + drag_re - f * f / h.f_m_hz, drag_im);
            num.0.mul_add(num.0, num.1 * num.1) / den.0.mul_add(den.0, den.1 * den.1)
        }
    }
}

/// Power gain of the detection at `f_hz` for the fitted model: the photodiode filter
/// (PHYSICS.md section 3) times the box-car exposure's sinc^2(pi f W) (Wong & Halvorsen,
/// Opt. Express 14, 12517 (2006)). A deterministic sinusoid is not aliased below Nyquist.
pub(crate) fn detection_gain(model: &SpectrumModel, theta: &[f64], f_hz: f64) -> f64 {
    let filter = model.decode(theta).filter.map_or(1.0, |f| f.gain(f_hz));
    let blur = model.exposure_s.map_or(1.0, |w| {
        let x = PI * f_hz * w;
        if x.abs() < 1e-8 {
            1.0
        } else {
            (x.sin() / x).powi(2)
        }
    });
    filter * blur
}

/// The drive's sinusoid fitted at its known frequency and subtracted: the record every
/// passive method then sees (mean removed), and the line.
pub(crate) fn remove_drive(
    samples: &[f64],
    sample_rate_hz: f64,
    drive_hz: f64,
) -> (Vec<f64>, SpectralLine) {
    let n = samples.len() as f64;
    let mean = samples.iter().sum::<f64>() / n;
    let mut y: Vec<f64> = samples.iter().map(|v| v - mean).collect();
    let line = spectrum::line_at(&y, sample_rate_hz, drive_hz);
    spectrum::subtract_lines(&mut y, sample_rate_hz, std::slice::from_ref(&line));
    (y, line)
}

/// What the active stage hands on: the summary (stiffness still to come) and the terms the
/// propagation needs.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct ActiveStage {
    pub(crate) summary: ActiveCalibration,
    pub(crate) terms: MeasuredDragTerms,
}

/// The plain inputs of the active stage.
pub(crate) struct ActiveInputs<'a> {
    pub(crate) drive: &'a Drive,
    /// The drive's line as fitted on the record.
    pub(crate) line: &'a SpectralLine,
    pub(crate) n_samples: usize,
    pub(crate) sample_rate_hz: f64,
    pub(crate) fit: &'a SpectrumFit,
    pub(crate) thermal_energy_j: f64,
    /// Variance of ln T and its covariance with ln gamma_assumed, from the inputs.
    pub(crate) var_ln_t: f64,
    /// The drag the run conditions give this axis (with its input variance of ln gamma and
    /// covariance with ln T), and the bulk Stokes drag.
    pub(crate) assumed_drag_kg_per_s: f64,
    pub(crate) var_ln_assumed: f64,
    pub(crate) cov_ln_assumed_ln_t: f64,
    pub(crate) bulk_drag_kg_per_s: f64,
}

/// The spike's power, the scale, the measured drag and how they depend on the spectral fit.
///
/// The regression's coefficients at f_d each carry background noise of variance
/// sigma^2 = S(f_d) / T (S the fitted one-sided spectrum of the record, with everything the
/// model holds, T the record's length), so the raw power (a^2 + b^2) / 2 is biased up by
/// sigma^2 and has variance 2 W sigma^2 + sigma^4 (the non-central chi-square with two degrees
/// of freedom; derived here, the one-sided form of PHYSICS.md section 9's precision).
/// Returns `None` when the spike is not above its background.
pub(crate) fn active_stage(inp: &ActiveInputs<'_>) -> Option<ActiveStage> {
    let fit = inp.fit;
    let fd = inp.drive.frequency_hz;
    let record_s = inp.n_samples as f64 / inp.sample_rate_hz;
    let flicker = fit.flicker.map_or(0.0, |term| term.psd_at(fd));
    let background = (fit.model.one_sided_psd(fd, &fit.theta) + flicker) / record_s;
    let raw = inp.line.amplitude * inp.line.amplitude / 2.0;
    let w_ex = raw - background;
    if !(w_ex > 0.0) {
        return None;
    }
    let var_w = (2.0 * w_ex).mul_add(background, background * background);
    let gain = detection_gain(&fit.model, &fit.theta, fd);
    let hydro = fit.model.hydro;
    let fc = fit.corner_frequency_hz;
    let a = inp.drive.amplitude_m;
    let w_th = a * a / 2.0 * response_power(fd, fc, hydro);
    let scale2 = w_th * gain / w_ex;
    let d_m2 = scale2 * fit.diffusion;
    let gamma = inp.thermal_energy_j / d_m2;

    let h = 1e-4_f64;
    let d_ln_expected_d_ln_fc = (response_power(fd, fc * h.exp(), hydro).ln()
        - response_power(fd, fc * (-h).exp(), hydro).ln())
        / (2.0 * h);
    let spike_log_variance = 4.0f64.mul_add(
        (inp.drive.amplitude_se_m / a).powi(2),
        var_w / (w_ex * w_ex),
    );
    // ln gamma = ln T + ln W_ex - 2 ln A - g ln fc - ln D + const, with (fc, D) from the fit.
    let rel_fc = fit.corner_frequency_se_hz / fc;
    let rel_d = fit.diffusion_se / fit.diffusion;
    let g = d_ln_expected_d_ln_fc;
    let var_ln_gamma = g.mul_add(
        g * rel_fc * rel_fc,
        rel_d.mul_add(
            rel_d,
            2.0 * g * fit.correlation_fc_diffusion * rel_fc * rel_d,
        ),
    ) + spike_log_variance
        + inp.var_ln_t;
    // ln(scale) = (ln W_th - ln W_ex) / 2: the fit enters only through W_th(fc).
    let var_ln_scale = (g * g * rel_fc).mul_add(rel_fc, spike_log_variance) / 4.0;
    // The assumed drag depends on T through the viscosity; both contain ln T.
    let var_ln_ratio = 2.0f64.mul_add(-inp.cov_ln_assumed_ln_t, var_ln_gamma + inp.var_ln_assumed);
    let ratio = gamma / inp.assumed_drag_kg_per_s;
    Some(ActiveStage {
        summary: ActiveCalibration {
            drive_frequency_hz: fd,
            drive_amplitude_m: a,
            spike_power: Estimate::new(w_ex, var_w.sqrt()),
            expected_power_m2: w_th,
            metres_per_unit: Estimate::new(scale2.sqrt(), scale2.sqrt() * var_ln_scale.sqrt()),
            drag_kg_per_s: Estimate::new(gamma, gamma * var_ln_gamma.sqrt()),
            drag_ratio: Estimate::new(ratio, ratio * var_ln_ratio.max(0.0).sqrt()),
            drag_over_bulk: gamma / inp.bulk_drag_kg_per_s,
            stiffness_pn_per_nm: None,
        },
        terms: MeasuredDragTerms {
            d_ln_expected_d_ln_fc,
            spike_log_variance,
        },
    })
}

/// The index of the driven axis among the axes calibrated, after checking the drive against
/// the recording: a frequency inside (0, f_Nyquist), a positive amplitude, axes that exist, and
/// a drag shared only between lateral axes (the axial drag near a surface differs from the
/// lateral one). `None` without a drive.
pub(crate) fn driven_axis(
    traces: &[AxisTrace],
    sample_rate_hz: f64,
    options: &AnalysisOptions,
) -> Result<Option<usize>, CalibrationError> {
    let Some(drive) = options.drive.as_ref() else {
        return Ok(None);
    };
    let invalid =
        |field: &'static str, reason: String| CalibrationError::InvalidDrive { field, reason };
    let nyquist = sample_rate_hz / 2.0;
    if !(drive.frequency_hz > 0.0 && drive.frequency_hz < nyquist) {
        return Err(invalid(
            "drive_frequency_hz",
            format!(
                "{} Hz is not between 0 and the Nyquist frequency {nyquist} Hz of this recording",
                drive.frequency_hz
            ),
        ));
    }
    if !(drive.amplitude_m > 0.0 && drive.amplitude_se_m >= 0.0) {
        return Err(invalid(
            "drive_amplitude_nm",
            "the stage amplitude must be positive and its standard error zero or positive"
                .to_string(),
        ));
    }
    let names: Vec<&str> = traces.iter().map(|t| t.name.as_str()).collect();
    let find = |name: &str| names.iter().position(|n| *n == name);
    let index = match drive.axis.as_deref() {
        None => 0,
        Some(name) => find(name).ok_or_else(|| {
            invalid(
                "drive_axis",
                format!(
                    "no axis `{name}` in this recording (its axes: {})",
                    names.join(", ")
                ),
            )
        })?,
    };
    let lateral = |name: &str| {
        super::conditions::orientation_of(name, &options.axial_axes) == AxisOrientation::Lateral
    };
    if !drive.drag_to.is_empty() && !lateral(names[index]) {
        return Err(invalid(
            "drive_drag_to",
            format!(
                "the driven axis `{}` is axial; only a lateral drag can be shared, with lateral axes",
                names[index]
            ),
        ));
    }
    for target in &drive.drag_to {
        let reason = match find(target) {
            None => Some(format!(
                "no axis `{target}` in this recording (its axes: {})",
                names.join(", ")
            )),
            Some(i) if i == index => Some(format!("`{target}` is the driven axis itself")),
            Some(_) if !lateral(target) => Some(format!(
                "`{target}` is axial: its drag near a surface differs from the lateral drag measured"
            )),
            Some(_) => None,
        };
        if let Some(reason) = reason {
            return Err(invalid("drive_drag_to", reason));
        }
    }
    Ok(Some(index))
}
