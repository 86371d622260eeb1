//! Small dense linear-algebra helpers on nalgebra.

use nalgebra::{DMatrix, DVector, SymmetricEigen};

fn to_mat(a: &[Vec<f64>]) -> DMatrix<f64> {
    let n = a.len();
    DMatrix::from_fn(n, n, |i, j| 0.5 * (a[i][j] + a[j][i]))
}

/// Pseudo-inverse of a symmetric matrix: eigenvalues at or below `rel_tol * max |eigenvalue|`
/// (or negative) are dropped. Returns the inverse and how many directions were dropped.
pub fn sym_pinv(a: &[Vec<f64>], rel_tol: f64) -> (Vec<Vec<f64>>, usize) {
    let n = a.len();
    if n == 0 {
        return (Vec::new(), 0);
    }
    if a.iter().flatten().any(|v| !v.is_finite()) {
        return (vec![vec![0.0; n]; n], n);
    }
    let eig = SymmetricEigen::new(to_mat(a));
    let max = eig.eigenvalues.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let mut dropped = 0;
    let mut out = vec![vec![0.0; n]; n];
    for k in 0..n {
        let l = eig.eigenvalues[k];
        if l <= rel_tol * max || l <= 0.0 {
            dropped += 1;
            continue;
        }
        for (i, row) in out.iter_mut().enumerate() {
            for (j, v) in row.iter_mut().enumerate() {
                *v += eig.eigenvectors[(i, k)] * eig.eigenvectors[(j, k)] / l;
            }
        }
    }
    (out, dropped)
}

/// A square root `S` of a symmetric positive semi-definite matrix (`S S' = A`), with negative
/// eigenvalues (round-off) set to zero.
pub fn cov_sqrt(a: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let n = a.len();
    if n == 0 {
        return Vec::new();
    }
    if a.iter().flatten().any(|v| !v.is_finite()) {
        return vec![vec![0.0; n]; n];
    }
    let eig = SymmetricEigen::new(to_mat(a));
    let mut out = vec![vec![0.0; n]; n];
    for k in 0..n {
        let s = eig.eigenvalues[k].max(0.0).sqrt();
        for (i, row) in out.iter_mut().enumerate() {
            row[k] = eig.eigenvectors[(i, k)] * s;
        }
    }
    out
}

/// Solve the ridge normal equations `(X'X + diag(pen)) b = X'y` for `X` given by rows.
/// Returns `None` when the system is singular.
pub fn ridge_solve(xtx: &DMatrix<f64>, xty: &DVector<f64>, pen: &[f64]) -> Option<DVector<f64>> {
    let mut a = xtx.clone();
    for (i, p) in pen.iter().enumerate() {
        a[(i, i)] += p;
    }
    a.cholesky().map(|c| c.solve(xty))
}
