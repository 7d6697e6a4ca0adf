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

/// Whether the methods that stand agree within their errors.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Verdict {
    /// Every pair of the methods left in agrees within 3 combined standard errors.
    Consistent,
    /// At least one pair of the methods left in differs by more.
    Inconsistent,
    /// Only one method is left in: there is nothing to cross-check it against.
    Unchecked,
    /// Every method was left out: the consensus is shown for reference only.
    Unreliable,
}

impl Verdict {
    /// Wire name.
    pub fn name(self) -> &'static str {
        match self {
            Verdict::Consistent => "consistent",
            Verdict::Inconsistent => "inconsistent",
            Verdict::Unchecked => "unchecked",
            Verdict::Unreliable => "unreliable",
        }
    }
}

/// What each method's estimate rests on, for verdicts that must say why two disagree.
pub fn depends_on(method: &str) -> &'static str {
    match method {
        "psd" => "the spectral model (detector filter, drag model, fit range) and the drag",
        "acf" => "the autocovariance model and the drag",
        _ => {
            "the variance of the record (drift, detector noise, the unit's scale) and the temperature"
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

/// The verdict and its reasons in plain words, over the methods not excluded.
///
/// `excluded[i]` holds the reason method i was left out of the consensus. Pairs with an
/// excluded method do not count. With three methods left and one of them in every
/// disagreeing pair while the other two agree, the verdict names it; with two left that
/// disagree, it says what each depends on.
pub fn verdict(
    discrepancies: &[Discrepancy],
    combined: &Combined,
    excluded: &[Option<String>; 3],
) -> (Verdict, Vec<String>) {
    let standing: Vec<&str> = (0..3)
        .filter(|&i| excluded[i].is_none())
        .map(|i| METHODS[i])
        .collect();
    let mut reasons = Vec::new();
    for (i, reason) in excluded.iter().enumerate() {
        if let Some(r) = reason {
            reasons.push(format!("{} left out of the consensus: {r}", METHODS[i]));
        }
    }
    if standing.is_empty() {
        reasons.push(
            "every method was left out; the consensus is shown for reference only and should not be used".to_string(),
        );
        return (Verdict::Unreliable, reasons);
    }
    if standing.len() == 1 {
        reasons.push(format!(
            "only {} is left, so nothing cross-checks it",
            standing[0]
        ));
        return (Verdict::Unchecked, reasons);
    }
    let counted: Vec<&Discrepancy> = discrepancies
        .iter()
        .filter(|d| standing.contains(&d.first) && standing.contains(&d.second))
        .collect();
    let bad: Vec<&&Discrepancy> = counted.iter().filter(|d| d.z.abs() > Z_LIMIT).collect();
    if bad.is_empty() {
        let worst = counted.iter().map(|d| d.z.abs()).fold(0.0f64, f64::max);
        reasons.push(format!(
            "{} agree within {Z_LIMIT} standard errors (largest {worst:.2}); consensus chi-square {:.2} on {} degrees of freedom",
            if standing.len() == 3 { "all three methods".to_string() } else { standing.join(" and ") },
            combined.chi_square,
            combined.degrees_of_freedom
        ));
        return (Verdict::Consistent, reasons);
    }
    for d in &bad {
        reasons.push(format!(
            "{} and {} differ by {:.2} standard errors of their difference ({:+.4} +- {:.4} pN/nm)",
            d.first,
            d.second,
            d.z.abs(),
            d.difference,
            d.difference_se
        ));
    }
    if standing.len() == 3 {
        if let Some(odd) = standing
            .iter()
            .find(|m| bad.iter().all(|d| d.first == **m || d.second == **m) && bad.len() == 2)
        {
            reasons.push(format!(
                "{odd} disagrees with the other two, which agree with each other; it rests on {}",
                depends_on(odd)
            ));
        }
    } else {
        reasons.push(format!(
            "with two methods left there is no third to tell which is off: {} rests on {}; {} rests on {}",
            standing[0],
            depends_on(standing[0]),
            standing[1],
            depends_on(standing[1])
        ));
    }
    (Verdict::Inconsistent, reasons)
}
