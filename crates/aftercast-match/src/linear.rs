//! Weighted least squares on design rows (outcome models of the bias-corrected matching
//! estimator and of AIPW).

use crate::design::Design;
use nalgebra::{DMatrix, DVector};

/// Coefficients of the weighted least-squares fit of `y` on the design rows `rows`
/// (intercept included), weights `w` (same length as `rows`). A tiny ridge (1e-8 of the
/// largest diagonal entry) keeps the solve defined when a column is constant within the subset.
pub fn wls(design: &Design, rows: &[usize], y: &[f64], w: &[f64]) -> DVector<f64> {
    let k = design.width();
    let mut xtx = DMatrix::<f64>::zeros(k, k);
    let mut xty = DVector::<f64>::zeros(k);
    for (r, &i) in rows.iter().enumerate() {
        let wi = w[r];
        if wi == 0.0 {
            continue;
        }
        let row = design.row(i);
        for a in 0..k {
            let va = wi * row[a];
            xty[a] += va * y[r];
            for b in 0..=a {
                xtx[(a, b)] += va * row[b];
            }
        }
    }
    for a in 0..k {
        for b in 0..a {
            xtx[(b, a)] = xtx[(a, b)];
        }
    }
    let scale = (0..k).map(|a| xtx[(a, a)]).fold(0.0, f64::max).max(1e-300);
    for a in 0..k {
        xtx[(a, a)] += 1e-8 * scale;
    }
    match xtx.clone().cholesky() {
        Some(c) => c.solve(&xty),
        None => xtx.lu().solve(&xty).unwrap_or_else(|| DVector::zeros(k)),
    }
}

/// Prediction of a linear model at design row `i`.
pub fn predict(design: &Design, beta: &DVector<f64>, i: usize) -> f64 {
    design.row(i).iter().zip(beta.iter()).map(|(a, b)| a * b).sum()
}
