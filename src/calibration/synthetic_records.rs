//! Shared pieces of the tests that calibrate exact synthetic records: the truth of the
//! reference trap and a one-axis recording around a sample vector.

use super::{RunConditions, physics};
use crate::recording::{AxisTrace, PositionUnit, Recording};
use std::f64::consts::PI;

/// Stiffness of the reference trap, pN/nm.
pub(crate) const KAPPA_PN_PER_NM: f64 = 0.05;

/// Corner frequency (Hz) and diffusion coefficient (nm^2/s) of a 1 um bead in water at 25 C in a
/// trap of `KAPPA_PN_PER_NM` (kappa = 2 pi gamma fc; Einstein's D = kB T / gamma).
pub(crate) fn truth() -> (f64, f64) {
    let phys = physics(&RunConditions::new(1.0e-6, 25.0)).expect("valid conditions");
    let gamma = phys.stokes_drag_kg_per_s.value;
    let fc = KAPPA_PN_PER_NM * 1e-3 / (2.0 * PI * gamma);
    (fc, phys.thermal_energy_j / gamma * 1e18)
}

/// A one-axis recording `x` in nanometres.
pub(crate) fn one_axis(samples: Vec<f64>, sample_rate_hz: f64) -> Recording {
    Recording {
        sample_rate_hz,
        unit: PositionUnit::Nanometre,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples,
        }],
    }
}
