//! The coupled-axes stage of a recording: which axes are calibrated (the detector's, or with
//! `principal_axes` the trap's principal axes of the lateral plane), the correlation of every
//! pair of them, and the `axes-coupled` findings. The numerics are in `principal`.

use super::conditions::orientation_of;
use super::principal::{self, COUPLING_FALSE_ALARM};
use super::{
    AnalysisOptions, AxisCalibration, AxisCoupling, CalibrationError, Estimate, PrincipalRotation,
};
use crate::drag::AxisOrientation;
use crate::equipartition::detrended;
use crate::findings::{self, CouplingInputs};
use crate::recording::{AxisTrace, PositionUnit, Recording};
use crate::spectrum::{SpectralLine, subtract_lines};
use std::borrow::Cow;

fn refuse(reason: String) -> CalibrationError {
    CalibrationError::PrincipalAxes { reason }
}

/// The axes to calibrate: the recording's own, or with `principal_axes` the two lateral axes
/// replaced in place by the principal axes of their plane (named with a prime), an axial axis
/// left as it is. Both lateral axes have the same drag (bulk Stokes or Faxen's lateral factor),
/// so a rotation within that plane leaves every axis's drag as it was.
///
/// Refused, with the reason, for volt data (each axis has its own sensitivity and the detector
/// may couple its channels, so a rotation of volts is not a rotation of positions) and unless
/// exactly two axes are lateral.
pub(crate) fn axes_to_calibrate<'a>(
    recording: &'a Recording,
    options: &AnalysisOptions,
) -> Result<(Cow<'a, [AxisTrace]>, Option<PrincipalRotation>), CalibrationError> {
    if !options.principal_axes {
        return Ok((Cow::Borrowed(&recording.axes), None));
    }
    if recording.unit == PositionUnit::Volt {
        return Err(refuse(
            "the recording is in volts: each axis has its own sensitivity and the detector may couple its channels, so a rotation of volts is not a rotation of positions; calibrate without principal_axes, convert each axis to nm with its sensitivity and calibrate the nanometre record with principal_axes".into(),
        ));
    }
    let lateral: Vec<usize> = (0..recording.axes.len())
        .filter(|&i| {
            orientation_of(&recording.axes[i].name, &options.axial_axes) == AxisOrientation::Lateral
        })
        .collect();
    let [i, j] = lateral[..] else {
        let names: Vec<&str> = lateral
            .iter()
            .map(|&i| recording.axes[i].name.as_str())
            .collect();
        return Err(refuse(format!(
            "it rotates the plane of two lateral axes, and the recording has {} lateral ({}); name the axial axes with axial_axes or leave principal_axes out",
            lateral.len(),
            if names.is_empty() {
                "none".to_string()
            } else {
                names.join(", ")
            }
        )));
    };
    let (first, second) = (&recording.axes[i], &recording.axes[j]);
    let angle = principal::principal_angle(
        &detrended(&first.samples, options.detrend),
        &detrended(&second.samples, options.detrend),
    )
    .ok_or_else(|| {
        refuse(format!(
            "the principal axes of {} and {} cannot be found: an axis never moves, holds a non-finite sample, or has fewer than {} samples",
            first.name,
            second.name,
            principal::MIN_SAMPLES
        ))
    })?;
    let (u, v) = principal::rotate(&first.samples, &second.samples, angle.angle_rad.value);
    let names = [format!("{}'", first.name), format!("{}'", second.name)];
    let mut axes = recording.axes.clone();
    axes[i] = AxisTrace {
        name: names[0].clone(),
        samples: u,
    };
    axes[j] = AxisTrace {
        name: names[1].clone(),
        samples: v,
    };
    Ok((
        Cow::Owned(axes),
        Some(PrincipalRotation {
            detector_axes: [first.name.clone(), second.name.clone()],
            rotated_axes: names,
            angle_rad: angle.angle_rad,
        }),
    ))
}

/// The correlation of every pair of `axes` (detrended as equipartition detrends them, and
/// without the sinusoids the calibration fitted and subtracted on each axis, `lines[i]`: a
/// pickup line common to two channels is not a coupling of the trap), with the principal angle
/// of each significant pair of nanometre data.
pub(crate) fn measure(
    axes: &[AxisTrace],
    lines: &[&[SpectralLine]],
    sample_rate_hz: f64,
    unit: PositionUnit,
    options: &AnalysisOptions,
) -> Vec<AxisCoupling> {
    if axes.len() < 2 {
        return Vec::new();
    }
    let prepared: Vec<Vec<f64>> = axes
        .iter()
        .zip(lines)
        .map(|(a, l)| {
            let mut y = detrended(&a.samples, options.detrend);
            subtract_lines(&mut y, sample_rate_hz, l);
            y
        })
        .collect();
    let acov: Vec<Vec<f64>> = prepared
        .iter()
        .map(|x| principal::axis_autocovariance(x))
        .collect();
    let mut out = Vec::new();
    for i in 0..axes.len() {
        for j in i + 1..axes.len() {
            let Some(c) = principal::correlation(&prepared[i], &prepared[j], &acov[i], &acov[j])
            else {
                continue;
            };
            let significant = principal::is_significant(c.z);
            let principal_angle_rad = if significant && unit == PositionUnit::Nanometre {
                principal::principal_angle(&prepared[i], &prepared[j]).map(|p| p.angle_rad)
            } else {
                None
            };
            out.push(AxisCoupling {
                first: axes[i].name.clone(),
                second: axes[j].name.clone(),
                correlation: c.coefficient,
                z: c.z,
                significant,
                principal_angle_rad,
            });
        }
    }
    out
}

/// Adds an `axes-coupled` finding to both axes of every significant pair; `rotation` is the
/// turn `principal_axes` made, if any.
pub(crate) fn add_findings(
    axes: &mut [AxisCalibration],
    coupling: &[AxisCoupling],
    unit: PositionUnit,
    options: &AnalysisOptions,
    rotation: Option<&PrincipalRotation>,
) {
    for pair in coupling.iter().filter(|p| p.significant) {
        let rotated =
            |name: &str| rotation.is_some_and(|r| r.rotated_axes.iter().any(|n| n == name));
        let lateral =
            |name: &str| orientation_of(name, &options.axial_axes) == AxisOrientation::Lateral;
        let finding = findings::axes_coupled(&CouplingInputs {
            first: &pair.first,
            second: &pair.second,
            unit,
            correlation: pair.correlation,
            z: pair.z,
            critical_z: principal::critical_z(COUPLING_FALSE_ALARM),
            false_alarm: COUPLING_FALSE_ALARM,
            angle_deg: pair
                .principal_angle_rad
                .map(|a| Estimate::new(a.value.to_degrees(), a.se.to_degrees())),
            both_lateral: lateral(&pair.first) && lateral(&pair.second),
            already_rotated: rotated(&pair.first) && rotated(&pair.second),
        });
        for axis in axes
            .iter_mut()
            .filter(|a| a.axis == pair.first || a.axis == pair.second)
        {
            axis.findings.push(finding.clone());
            axis.findings.sort_by_key(|f| std::cmp::Reverse(f.severity));
        }
    }
}
