//! Combination of correlated stiffness estimates and the consistency verdict.

use super::Estimate;
use crate::linalg::solve_spd as solve_symmetric;
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Names of the three methods, in the order used by every array here.
pub const METHODS: [&str; 3] = ["psd", "acf", "equipartition"];

/// The difference between two methods in units of its own standard error.
#[derive(Clone, Debug, PartialEq)]
pub struct Discrepancy {
    pub first: &'static str,
    pub second: &'static str,
    /// kappa_first - kappa_second, pN/nm.
    pub difference: f64,
    /// Standard error of the difference, sqrt(var_a + var_b - 2 cov_ab), pN/nm.
    pub difference_se: f64,
    /// difference / difference_se.
    pub z: f64,
}

/// Whether the methods agree within their errors.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Verdict {
    /// Every pair of methods agrees within 3 combined standard errors.
    Consistent,
    /// At least one pair differs by more.
    Inconsistent,
}

impl Verdict {
    /// Wire name.
    pub fn name(self) -> &'static str {
        match self {
            Verdict::Consistent => "consistent",
            Verdict::Inconsistent => "inconsistent",
        }
    }
}

/// A pair differing by more than this many combined standard errors is inconsistent. Three
/// standard errors is the usual threshold (two-sided p ~ 0.003 per pair; common practice).
pub const Z_LIMIT: f64 = 3.0;

/// The consensus of several correlated estimates.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Combined {
    pub estimate: Estimate,
    /// Weights of (psd, acf, equipartition); zero for a method left out.
    pub weights: [f64; 3],
    /// Generalised chi-square of the included estimates about the consensus, its degrees of
    /// freedom and upper-tail p-value.
    pub chi_square: f64,
    pub degrees_of_freedom: usize,
    pub p_value: f64,
}

/// Best linear unbiased combination of correlated estimates (generalised least squares with the
/// full covariance; Aitken, Proc. R. Soc. Edinburgh 55, 42 (1935) (citation from memory,
/// unverified)): w = C^-1 1 / (1^T C^-1 1), variance 1 / (1^T C^-1 1).
///
/// Strongly correlated estimates with unequal errors can get a negative weight; the unconstrained
/// optimum then extrapolates beyond the estimates, which is only right if every method is
/// unbiased, and the verdict exists because sometimes one is not. So the weights are kept
/// non-negative: a method whose weight comes out negative is dropped and the rest recombined
/// (an active-set step; with three methods this finds the best convex combination), and the
/// variance is w^T C w for the weights used (common practice for a combination that must stay
/// within the range of its inputs). Estimates with `include[i] == false` are left out.
pub fn combine(values: &[f64; 3], cov: &[[f64; 3]; 3], include: &[bool; 3]) -> Combined {
    let mut active = *include;
    loop {
        let Some(weights) = blue_weights(cov, &active) else {
            return best_single(values, cov, &active);
        };
        match (0..3).find(|&i| active[i] && weights[i] < 0.0) {
            Some(i) => active[i] = false,
            None => return finish(values, cov, include, weights),
        }
    }
}

/// Unconstrained BLUE weights over the active methods, or `None` for a singular covariance.
fn blue_weights(cov: &[[f64; 3]; 3], active: &[bool; 3]) -> Option<[f64; 3]> {
    let idx: Vec<usize> = (0..3).filter(|i| active[*i]).collect();
    if idx.is_empty() {
        return None;
    }
    let sub: Vec<Vec<f64>> = idx
        .iter()
        .map(|&i| idx.iter().map(|&j| cov[i][j]).collect())
        .collect();
    let cinv_one = solve_symmetric(&sub, &vec![1.0; idx.len()])?;
    let total: f64 = cinv_one.iter().sum();
    if !(total > 0.0) {
        return None;
    }
    let mut w = [0.0; 3];
    for (k, &i) in idx.iter().enumerate() {
        w[i] = cinv_one[k] / total;
    }
    Some(w)
}

/// The single active estimate with the smallest variance (singular covariance).
fn best_single(values: &[f64; 3], cov: &[[f64; 3]; 3], active: &[bool; 3]) -> Combined {
    let best = (0..3)
        .filter(|i| active[*i])
        .min_by(|a, b| cov[*a][*a].total_cmp(&cov[*b][*b]))
        .unwrap_or(0);
    let mut weights = [0.0; 3];
    weights[best] = 1.0;
    Combined {
        estimate: Estimate::new(values[best], cov[best][best].sqrt()),
        weights,
        chi_square: 0.0,
        degrees_of_freedom: 0,
        p_value: 1.0,
    }
}

/// Value, variance w^T C w, and the chi-square of all included estimates about the value.
fn finish(
    values: &[f64; 3],
    cov: &[[f64; 3]; 3],
    include: &[bool; 3],
    weights: [f64; 3],
) -> Combined {
    let value: f64 = (0..3).map(|i| weights[i] * values[i]).sum();
    let variance: f64 = (0..3)
        .flat_map(|i| (0..3).map(move |j| (i, j)))
        .map(|(i, j)| weights[i] * weights[j] * cov[i][j])
        .sum();
    let idx: Vec<usize> = (0..3).filter(|i| include[*i]).collect();
    let sub: Vec<Vec<f64>> = idx
        .iter()
        .map(|&i| idx.iter().map(|&j| cov[i][j]).collect())
        .collect();
    let residuals: Vec<f64> = idx.iter().map(|&i| values[i] - value).collect();
    let chi_square = solve_symmetric(&sub, &residuals)
        .map(|x| x.iter().zip(&residuals).map(|(a, b)| a * b).sum())
        .unwrap_or(0.0);
    let degrees_of_freedom = idx.len().saturating_sub(1);
    let p_value = if degrees_of_freedom > 0 {
        ChiSquared::new(degrees_of_freedom as f64)
            .map(|d| d.sf(chi_square))
            .unwrap_or(f64::NAN)
    } else {
        1.0
    };
    Combined {
        estimate: Estimate::new(value, variance.max(0.0).sqrt()),
        weights,
        chi_square,
        degrees_of_freedom,
        p_value,
    }
}

/// Every pair's difference in units of its combined standard error, which accounts for the
/// covariance: sd(a - b) = sqrt(var_a + var_b - 2 cov_ab).
pub fn discrepancies(values: &[f64; 3], cov: &[[f64; 3]; 3]) -> Vec<Discrepancy> {
    let mut out = Vec::new();
    for i in 0..3 {
        for j in (i + 1)..3 {
            let difference = values[i] - values[j];
            let var = 2.0f64.mul_add(-cov[i][j], cov[i][i] + cov[j][j]).max(0.0);
            let difference_se = var.sqrt();
            out.push(Discrepancy {
                first: METHODS[i],
                second: METHODS[j],
                difference,
                difference_se,
                z: if difference_se > 0.0 {
                    difference / difference_se
                } else {
                    0.0
                },
            });
        }
    }
    out
}

/// The verdict and its reasons in plain words.
pub fn verdict(discrepancies: &[Discrepancy], combined: &Combined) -> (Verdict, Vec<String>) {
    let mut reasons = Vec::new();
    for d in discrepancies {
        if d.z.abs() > Z_LIMIT {
            reasons.push(format!(
                "{} and {} differ by {:.2} standard errors of their difference ({:+.4} +- {:.4} pN/nm)",
                d.first,
                d.second,
                d.z.abs(),
                d.difference,
                d.difference_se
            ));
        }
    }
    if reasons.is_empty() {
        let worst = discrepancies
            .iter()
            .map(|d| d.z.abs())
            .fold(0.0f64, f64::max);
        reasons.push(format!(
            "all pairs agree within {Z_LIMIT} standard errors (largest {worst:.2}); consensus chi-square {:.2} on {} degrees of freedom",
            combined.chi_square, combined.degrees_of_freedom
        ));
        (Verdict::Consistent, reasons)
    } else {
        (Verdict::Inconsistent, reasons)
    }
}
