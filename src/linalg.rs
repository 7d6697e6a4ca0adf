//! Small dense linear algebra for the fits: symmetric positive-definite solves and inverses of
//! matrices of a few rows, through nalgebra's Cholesky factorisation.

/// Solves the symmetric positive-definite system `a x = b`; `None` when `a` is not positive
/// definite (a singular or indefinite information matrix).
pub(crate) fn solve_spd(a: &[Vec<f64>], b: &[f64]) -> Option<Vec<f64>> {
    let n = b.len();
    let m = nalgebra::DMatrix::from_fn(n, n, |i, j| a[i][j]);
    let chol = m.cholesky()?;
    let x = chol.solve(&nalgebra::DVector::from_column_slice(b));
    Some(x.iter().copied().collect())
}

/// Inverse of a symmetric positive-definite matrix; `None` when it is not positive definite.
pub(crate) fn invert_spd(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let m = nalgebra::DMatrix::from_fn(n, n, |i, j| a[i][j]);
    let inv = m.cholesky()?.inverse();
    Some(
        (0..n)
            .map(|i| (0..n).map(|j| inv[(i, j)]).collect())
            .collect(),
    )
}
