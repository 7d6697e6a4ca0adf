//! Stage four of an axis calibration: from the methods' own estimates (fc, D, tau, variance),
//! their statistical correlations and the input errors (drag, temperature) to the three
//! stiffness estimates, their covariance and, for volt data, the sensitivity beta.
//!
//! Everything is first order in the logarithms: each ln(kappa) and ln(beta) is a linear
//! combination of (ln fc, ln D, ln tau, ln var) and of the inputs (ln gamma, ln T), so the
//! covariance follows by the usual propagation of errors (e.g. JCGM 100:2008, the Guide to the
//! Expression of Uncertainty in Measurement, section 5.2 on correlated input quantities).

use super::active::MeasuredDragTerms;
use crate::estimate::Estimate;
use std::f64::consts::PI;

/// 1 N/m expressed in pN/nm.
pub(crate) const PN_PER_NM_PER_N_PER_M: f64 = 1e3;

/// The plain numbers propagation needs, SI with the signal unit of the record. A method that
/// failed is `None`; the others are propagated without it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct PropagationInputs {
    /// Spectral corner frequency (Hz) and diffusion coefficient (signal-unit^2/s).
    pub(crate) corner_frequency_hz: Option<Estimate>,
    pub(crate) diffusion: Option<Estimate>,
    /// Relaxation time of the autocorrelation method, s.
    pub(crate) relaxation_time_s: Option<Estimate>,
    /// Variance of the record, signal-unit^2.
    pub(crate) variance: Option<Estimate>,
    /// Correlation matrix of (ln fc, ln D, ln tau, ln var) from the record.
    pub(crate) correlation: [[f64; 4]; 4],
    /// Drag of the axis, kg/s, and kB T, J.
    pub(crate) drag_kg_per_s: f64,
    pub(crate) thermal_energy_j: f64,
    /// Input covariance of (ln gamma, ln T).
    pub(crate) input_covariance: [[f64; 2]; 2],
    /// Metres per signal unit when the record is in a length unit (1e-9 for nm); `None` for
    /// volts, whose scale is the sensitivity from the spectral fit.
    pub(crate) metres_per_unit: Option<f64>,
    /// With a stage drive on this axis, `drag_kg_per_s` is the measured drag
    /// kB T W_ex / (W_th(fc) D): ln gamma is then no input of its own but
    /// ln T + ln W_ex - 2 ln A - g ln fc - ln D, and these are its terms (see `active`). The
    /// input variance of ln gamma is ignored.
    pub(crate) measured_drag: Option<MeasuredDragTerms>,
}

/// The three stiffness estimates (pN/nm) with their covariance, and beta (nm/V) for volts. A
/// method that could not be computed is `None`, with zero rows in the covariance.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct Propagated {
    /// psd, acf, equipartition.
    pub(crate) stiffness: [Option<Estimate>; 3],
    pub(crate) covariance: [[f64; 3]; 3],
    pub(crate) sensitivity_nm_per_v: Option<Estimate>,
}

/// Rows of the linear map: psd, acf, equipartition, ln beta. Columns: ln fc, ln D, ln tau,
/// ln var, ln gamma, ln T.
fn log_rows(volts: bool) -> [[f64; 6]; 4] {
    if volts {
        [
            [1.0, 0.0, 0.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, -1.0, 0.0, 1.0, 0.0],
            // kappa = kB T / (beta^2 var_V) = gamma D_V / var_V.
            [0.0, 1.0, 0.0, -1.0, 1.0, 0.0],
            // beta = sqrt(kB T / (gamma D_V)).
            [0.0, -0.5, 0.0, 0.0, -0.5, 0.5],
        ]
    } else {
        [
            [1.0, 0.0, 0.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, -1.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, 0.0, -1.0, 0.0, 1.0],
            [0.0; 6],
        ]
    }
}

/// Covariance of (ln kappa_psd, ln kappa_acf, ln kappa_eq, ln beta).
fn log_covariance(inp: &PropagationInputs) -> [[f64; 4]; 4] {
    let rel = [
        inp.corner_frequency_hz,
        inp.diffusion,
        inp.relaxation_time_s,
        inp.variance,
    ]
    .map(|e| e.map_or(0.0, |e| e.relative_se()));
    let mut rows = log_rows(inp.metres_per_unit.is_none());
    let mut input_covariance = inp.input_covariance;
    // The spike's own term, independent of everything else.
    let mut spike = [0.0f64; 4];
    if let Some(m) = inp.measured_drag {
        for (row, spike) in rows.iter_mut().zip(spike.iter_mut()) {
            let c_gamma = row[4];
            row[0] -= m.d_ln_expected_d_ln_fc * c_gamma;
            row[1] -= c_gamma;
            row[5] += c_gamma;
            row[4] = 0.0;
            *spike = c_gamma;
        }
        input_covariance = [[0.0, 0.0], [0.0, inp.input_covariance[1][1]]];
    }
    let spike_variance = inp.measured_drag.map_or(0.0, |m| m.spike_log_variance);
    let mut full = [[0.0f64; 4]; 4];
    for a in 0..4 {
        for b in 0..4 {
            let mut c = spike[a] * spike[b] * spike_variance;
            for i in 0..4 {
                for j in 0..4 {
                    c += rows[a][i] * rows[b][j] * inp.correlation[i][j] * rel[i] * rel[j];
                }
            }
            for i in 0..2 {
                for j in 0..2 {
                    c += rows[a][4 + i] * rows[b][4 + j] * input_covariance[i][j];
                }
            }
            full[a][b] = c;
        }
    }
    full
}

/// The stiffness estimates and beta with their covariance.
///
/// kappa_psd = 2 pi gamma fc (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004));
/// kappa_acf = gamma / tau; equipartition kappa = kB T / var in a length unit, and
/// kappa = kB T / (beta^2 var_V) with beta = sqrt(kB T / (gamma D_V)) for volts.
pub(crate) fn propagate(inp: &PropagationInputs) -> Propagated {
    let full = log_covariance(inp);
    let gamma = inp.drag_kg_per_s;
    let kt = inp.thermal_energy_j;
    let kappa_psd = inp
        .corner_frequency_hz
        .map(|fc| 2.0 * PI * gamma * fc.value);
    let kappa_acf = inp.relaxation_time_s.map(|tau| gamma / tau.value);
    let beta_m_per_v = match (inp.metres_per_unit, inp.diffusion) {
        (None, Some(d)) => Some((kt / gamma / d.value).sqrt()),
        _ => None,
    };
    let kappa_eq = match (inp.variance, inp.metres_per_unit, beta_m_per_v) {
        (Some(var), Some(scale), _) => Some(kt / (var.value * scale * scale)),
        (Some(var), None, Some(beta)) => Some(kt / (beta * beta * var.value)),
        _ => None,
    };
    let values = [kappa_psd, kappa_acf, kappa_eq].map(|k| k.map(|k| k * PN_PER_NM_PER_N_PER_M));
    let mut covariance = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            if let (Some(a), Some(b)) = (values[i], values[j]) {
                covariance[i][j] = full[i][j] * a * b;
            }
        }
    }
    Propagated {
        stiffness: std::array::from_fn(|i| {
            values[i].map(|v| Estimate::new(v, covariance[i][i].sqrt()))
        }),
        covariance,
        sensitivity_nm_per_v: beta_m_per_v.map(|beta| {
            let beta_nm = beta * 1e9;
            Estimate::new(beta_nm, beta_nm * full[3][3].sqrt())
        }),
    }
}
