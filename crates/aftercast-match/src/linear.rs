//! Weighted least squares on design rows (outcome models of the bias-corrected matching
//! estimator and of AIPW).

use crate::design::Design;
use nalgebra::{DMatrix, DVector};

/// Coefficients of the weighted least-squares fit of `y` on the design rows `rows`
/// (intercept included), weights `w` (same length as `rows`). A tiny ridge (1e-8 of the
/// largest diagonal entry) keeps the solve defined when a column is constant within the subset.
pub fn wls(design: &Design, rows: &[usize], y: &[f64], w: &[f64]) -> DVector<f64> {
    let k = design.width();
    let (lower, xty) = cross_products(k, rows.len(), |r| design.row(rows[r]), y, w);
    let xty = DVector::from_vec(xty);
    let mut xtx = DMatrix::<f64>::from_fn(k, k, |a, b| if b <= a { lower[a * k + b] } else { lower[b * k + a] });
    let scale = (0..k).map(|a| xtx[(a, a)]).fold(0.0, f64::max).max(1e-300);
    for a in 0..k {
        xtx[(a, a)] += 1e-8 * scale;
    }
    match xtx.clone().cholesky() {
        Some(c) => c.solve(&xty),
        None => xtx.lu().solve(&xty).unwrap_or_else(|| DVector::zeros(k)),
    }
}

/// Weighted cross products `X'WX` (lower triangle, row-major, `p * p`) and `X'Wy` over `n`
/// rows given by `row(r)` (width `p`), weights `w[r]` (rows of weight 0 skipped). Every entry
/// is summed over the rows in order; common widths use the kernel compiled for their width,
/// which the compiler unrolls (the same sums, so the same numbers).
pub fn cross_products<'a>(
    p: usize,
    n: usize,
    row: impl Fn(usize) -> &'a [f64],
    y: &[f64],
    w: &[f64],
) -> (Vec<f64>, Vec<f64>) {
    macro_rules! fixed {
        ($($k:literal)*) => {
            match p {
                $($k => cross_width::<$k>(p, n, row, y, w),)*
                _ => cross_width::<0>(p, n, row, y, w),
            }
        };
    }
    fixed!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16 17 18 19 20 21 22 23 24)
}

/// [`cross_products`] for width `K` (0: `p`, not known when compiling).
fn cross_width<'a, const K: usize>(
    p: usize,
    n: usize,
    row: impl Fn(usize) -> &'a [f64],
    y: &[f64],
    w: &[f64],
) -> (Vec<f64>, Vec<f64>) {
    let p = if K > 0 { K } else { p };
    let mut lower = vec![0.0; p * p];
    let mut xty = vec![0.0; p];
    let mut fixed_row = [0.0f64; K];
    for r in 0..n {
        let wi = w[r];
        if wi == 0.0 {
            continue;
        }
        let x: &[f64] = if K > 0 {
            fixed_row.copy_from_slice(row(r));
            &fixed_row
        } else {
            row(r)
        };
        for a in 0..p {
            let va = wi * x[a];
            xty[a] += va * y[r];
            for (h, xb) in lower[a * p..a * p + a + 1].iter_mut().zip(&x[..=a]) {
                *h += va * xb;
            }
        }
    }
    (lower, xty)
}

/// Prediction of a linear model at design row `i`.
pub fn predict(design: &Design, beta: &DVector<f64>, i: usize) -> f64 {
    design.row(i).iter().zip(beta.iter()).map(|(a, b)| a * b).sum()
}
