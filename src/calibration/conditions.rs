//! Stage one of an axis calibration: the drag of this axis from the run conditions, with the
//! sensitivities of ln(drag) and ln(T) to the uncertain inputs (diameter, temperature, height)
//! that carry the input errors into every estimate.

use super::{CalibrationError, Physics, RunConditions, viscosity_at};
use crate::drag::{self, AxisOrientation};
use crate::estimate::Estimate;
use crate::water::ZERO_CELSIUS_K;

/// The drag of one axis and how it depends on the uncertain inputs.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct AxisDrag {
    pub(crate) orientation: AxisOrientation,
    /// Wall factor gamma / gamma0 (1 in bulk).
    pub(crate) wall_factor: f64,
    /// Drag of this axis, kg/s, with its standard error from the inputs.
    pub(crate) drag_kg_per_s: Estimate,
    /// Variance of ln(gamma) from the inputs.
    pub(crate) var_ln_gamma: f64,
    /// Covariance of ln(gamma) and ln(T) from the temperature's error.
    pub(crate) cov_ln_gamma_ln_t: f64,
    /// Variance of ln(T) from the temperature's error.
    pub(crate) var_ln_t: f64,
    /// Whether any input standard error was given.
    pub(crate) includes_input_errors: bool,
    /// Whether the drag comes from the run conditions or from a stage drive.
    pub(crate) source: DragSource,
}

/// Where an axis's drag comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DragSource {
    /// From the bead diameter, the viscosity and the height (Stokes with wall factors).
    Assumed,
    /// From the spike of a stage drive (`active`), on this axis or shared from the driven one.
    Measured,
}

impl DragSource {
    /// The wire name.
    pub fn name(self) -> &'static str {
        match self {
            DragSource::Assumed => "assumed",
            DragSource::Measured => "measured",
        }
    }
}

/// Whether an axis of this name moves perpendicular to the surface.
pub(crate) fn orientation_of(name: &str, axial_axes: &[String]) -> AxisOrientation {
    if axial_axes.iter().any(|a| a.eq_ignore_ascii_case(name)) {
        AxisOrientation::Axial
    } else {
        AxisOrientation::Lateral
    }
}

/// The drag of an axis with the given orientation and its input error terms.
pub(crate) fn axis_drag_stage(
    orientation: AxisOrientation,
    conditions: &RunConditions,
    physics: &Physics,
) -> Result<AxisDrag, CalibrationError> {
    let radius = conditions.bead_diameter_m / 2.0;
    let wall_factor = drag::wall_factor(orientation, radius, conditions.height_m)?;
    let gamma = physics.stokes_drag_kg_per_s.value * wall_factor;
    let (dln_gamma, dln_t) = input_sensitivities(conditions, orientation)?;
    let input_se = [
        conditions.bead_diameter_se_m,
        conditions.temperature_se_c,
        conditions.height_se_m,
    ];
    // The viscosity's own error enters ln gamma with sensitivity 1 (gamma is proportional to
    // eta), independent of the others.
    let rel_viscosity = conditions.viscosity_se_pa_s / physics.viscosity_pa_s;
    let var_ln_gamma: f64 = rel_viscosity.mul_add(
        rel_viscosity,
        dln_gamma
            .iter()
            .zip(&input_se)
            .map(|(g, s)| (g * s).powi(2))
            .sum::<f64>(),
    );
    Ok(AxisDrag {
        orientation,
        wall_factor,
        drag_kg_per_s: Estimate::new(gamma, gamma * var_ln_gamma.sqrt()),
        var_ln_gamma,
        cov_ln_gamma_ln_t: dln_gamma[1] * dln_t * conditions.temperature_se_c.powi(2),
        var_ln_t: (dln_t * conditions.temperature_se_c).powi(2),
        includes_input_errors: input_se.iter().any(|s| *s > 0.0) || rel_viscosity > 0.0,
        source: DragSource::Assumed,
    })
}

/// Drag (kg/s) of one axis for perturbed inputs: diameter (m), temperature (C), height (m).
fn axis_drag(
    conditions: &RunConditions,
    orientation: AxisOrientation,
    diameter_m: f64,
    temperature_c: f64,
    height_m: Option<f64>,
) -> Result<f64, CalibrationError> {
    let radius = diameter_m / 2.0;
    let eta = viscosity_at(conditions, temperature_c)?;
    let factor = drag::wall_factor(orientation, radius, height_m)?;
    Ok(drag::stokes_drag_kg_per_s(eta, radius) * factor)
}

/// Derivatives of ln(gamma_axis) with respect to (diameter m, temperature C, height m), and
/// of ln(T) with respect to temperature, by central differences.
fn input_sensitivities(
    conditions: &RunConditions,
    orientation: AxisOrientation,
) -> Result<([f64; 3], f64), CalibrationError> {
    let d = conditions.bead_diameter_m;
    let t = conditions.temperature_c;
    let h = conditions.height_m;
    // The unperturbed drag must exist; the perturbed ones below may fall outside a range.
    axis_drag(conditions, orientation, d, t, h)?;
    let rel = 1e-6;
    let dd = d * rel;
    let ln_d = (axis_drag(conditions, orientation, d + dd, t, h)?.ln()
        - axis_drag(conditions, orientation, d - dd, t, h)?.ln())
        / (2.0 * dd);
    let dt = 0.01;
    let ln_t = match (
        axis_drag(conditions, orientation, d, t + dt, h),
        axis_drag(conditions, orientation, d, t - dt, h),
    ) {
        (Ok(u), Ok(v)) => (u.ln() - v.ln()) / (2.0 * dt),
        _ => 0.0,
    };
    let ln_h = match h {
        Some(hv) => {
            let dh = hv * rel;
            match (
                axis_drag(conditions, orientation, d, t, Some(hv + dh)),
                axis_drag(conditions, orientation, d, t, Some(hv - dh)),
            ) {
                (Ok(u), Ok(v)) => (u.ln() - v.ln()) / (2.0 * dh),
                _ => 0.0,
            }
        }
        None => 0.0,
    };
    Ok(([ln_d, ln_t, ln_h], 1.0 / (t + ZERO_CELSIUS_K)))
}
