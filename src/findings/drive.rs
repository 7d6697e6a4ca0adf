//! Findings of an active calibration (a stage drive): whether the measured drag agrees with the
//! drag the run conditions give, and whether the drive was strong enough for the precision
//! asked. Plain inputs; nothing from `calibration`.

use super::{Finding, Severity, finding};
use crate::drag::{self, AxisOrientation};
use crate::estimate::Estimate;

/// What the drive findings weigh, for one driven axis.
#[derive(Clone, Debug, PartialEq)]
pub struct DriveEvidence<'a> {
    pub axis: &'a str,
    pub orientation: AxisOrientation,
    /// Measured drag over the drag the run conditions give the axis.
    pub drag_ratio: Estimate,
    /// Measured drag over the bulk Stokes drag of the given diameter and viscosity.
    pub drag_over_bulk: f64,
    /// The given bead radius (m), viscosity (Pa s) and height of the bead's centre (m).
    pub radius_m: f64,
    pub viscosity_pa_s: f64,
    pub height_m: Option<f64>,
    /// The active stiffness (pN/nm) and the relative precision asked for.
    pub stiffness: Estimate,
    pub target_relative_precision: f64,
    /// The share of the stiffness's relative variance that the spike's noise makes (it falls as
    /// 1 / A^2 and 1 / T), and the amplitude calibration's (it falls with neither).
    pub spike_noise_relative_variance: f64,
    pub amplitude_relative_variance: f64,
    /// Stage amplitude (m) and the record's length (s).
    pub amplitude_m: f64,
    pub record_length_s: f64,
}

/// Standard errors beyond which the measured and assumed drags disagree.
pub const DRAG_MISMATCH_Z: f64 = 3.0;

/// `drag-mismatch` and `drive-too-weak`.
pub fn drive(e: &DriveEvidence<'_>) -> Vec<Finding> {
    let mut out = Vec::new();
    out.extend(drag_mismatch(e));
    out.extend(drive_too_weak(e));
    out
}

/// `drag-mismatch` (warning): the drag the drive measured differs from the drag assumed from
/// the run conditions by more than 3 standard errors. It says which height above the surface
/// (inverting Faxen's law for a lateral axis, Brenner's for an axial one), or which viscosity
/// or diameter, would explain the measured drag; the calibration already uses the measured one.
fn drag_mismatch(e: &DriveEvidence<'_>) -> Option<Finding> {
    let r = e.drag_ratio;
    let z = (r.value - 1.0) / r.se;
    if !(z.abs() > DRAG_MISMATCH_Z) {
        return None;
    }
    let mut causes = Vec::new();
    if e.drag_over_bulk > 1.0 {
        match height_for(e.orientation, e.radius_m, e.drag_over_bulk) {
            Some(h) => causes.push(format!(
                "a bead centre {:.2} um above the surface ({} wall correction)",
                h * 1e6,
                match e.orientation {
                    AxisOrientation::Lateral => "Faxen's lateral",
                    AxisOrientation::Axial => "Brenner's axial",
                }
            )),
            None => causes
                .push("a bead closer to the surface than the wall correction covers".to_string()),
        }
    }
    causes.push(format!(
        "a viscosity of {:.3} mPa s",
        e.viscosity_pa_s * r.value * 1e3
    ));
    causes.push(format!(
        "a bead diameter of {:.3} um",
        2.0 * e.radius_m * r.value * 1e6
    ));
    let given_height = e.height_m.map_or_else(
        || "no height given (bulk)".to_string(),
        |h| format!("height {:.2} um", h * 1e6),
    );
    Some(finding(
        "drag-mismatch",
        Severity::Warning,
        format!(
            "axis `{}`: the drag measured by the stage drive is {:.3} +- {:.3} times the drag expected from the run conditions ({given_height}), {z:+.1} standard errors from 1; it would be explained by {}; every method of this axis uses the measured drag",
            e.axis,
            r.value,
            r.se,
            causes.join(", or by ")
        ),
    ))
}

/// The height of the bead's centre above the surface (m) whose wall factor is `factor`, by
/// bisection on the monotonic wall factor; `None` when the factor lies beyond what the formula
/// covers.
pub fn height_for(orientation: AxisOrientation, radius_m: f64, factor: f64) -> Option<f64> {
    let f = |h: f64| drag::wall_factor(orientation, radius_m, Some(h)).ok();
    let (mut near, mut far) = (radius_m * 1.05, radius_m * 1e4);
    if f(near)? < factor || f(far)? > factor {
        return None;
    }
    for _ in 0..200 {
        let mid = (near * far).sqrt();
        match f(mid) {
            Some(v) if v > factor => near = mid,
            Some(_) => far = mid,
            None => near = mid,
        }
        if far / near - 1.0 < 1e-12 {
            break;
        }
    }
    Some((near * far).sqrt())
}

/// `drive-too-weak` (warning): the active stiffness is less precise than asked. The spike's
/// noise share of the relative variance falls as 1 / A^2 (PHYSICS.md section 9: the spike's
/// relative error is (2 S / (W T))^(1/2), W proportional to A^2), every statistical share as
/// 1 / T, the amplitude calibration's with neither; the message gives the amplitude, or the
/// record length, that would reach the precision.
fn drive_too_weak(e: &DriveEvidence<'_>) -> Option<Finding> {
    let rel = e.stiffness.relative_se();
    let target = e.target_relative_precision;
    if !(rel > target) {
        return None;
    }
    let total = rel * rel;
    let target2 = target * target;
    let other = total - e.spike_noise_relative_variance;
    let amplitude = (target2 > other)
        .then(|| e.amplitude_m * (e.spike_noise_relative_variance / (target2 - other)).sqrt());
    let statistical = total - e.amplitude_relative_variance;
    let length = (target2 > e.amplitude_relative_variance)
        .then(|| e.record_length_s * statistical / (target2 - e.amplitude_relative_variance));
    let remedy = match (amplitude, length) {
        (Some(a), Some(t)) => format!(
            "a stage amplitude of {:.0} nm, or a record of {:.1} s at this amplitude, would reach it",
            a * 1e9,
            t
        ),
        (None, Some(t)) => format!(
            "the spike is not what limits it: a record of {t:.1} s would reach it"
        ),
        _ => "the stage amplitude's own calibration error is larger than that: calibrate the stage more precisely".to_string(),
    };
    Some(finding(
        "drive-too-weak",
        Severity::Warning,
        format!(
            "axis `{}`: the active stiffness has a relative standard error of {:.1} %, more than the {:.1} % asked; {remedy}",
            e.axis,
            100.0 * rel,
            100.0 * target
        ),
    ))
}
