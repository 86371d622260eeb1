//! The doubly robust group-time effect with pre-period covariates (Sant'Anna & Zhao 2020, the
//! panel estimator): an outcome regression of the change on the covariates among comparison
//! units, and a logistic propensity of being in the wave; the effect is
//! `E_w[(w₁ − w₀)(ΔY − μ₀(X))]` with `w₁` the wave's weights and `w₀ ∝ p(X)/(1 − p(X))` on the
//! comparison units. Right if either model is right.

use crate::data::Rollout;
use crate::error::{DidError, DidResult};
use nalgebra::{DMatrix, DVector};

/// Propensities are kept inside [`P_MIN`, 1 − `P_MIN`] so one unit cannot take all the weight.
pub const P_MIN: f64 = 0.001;

/// Standardised covariate rows (with an intercept) of `units`.
fn design(data: &Rollout, units: &[usize]) -> DMatrix<f64> {
    let p = data.covariates.len();
    let mut x = DMatrix::<f64>::from_element(units.len(), p + 1, 1.0);
    for (j, (_, v)) in data.covariates.iter().enumerate() {
        let vals: Vec<f64> = units.iter().map(|&u| v[u]).collect();
        let m = vals.iter().sum::<f64>() / vals.len() as f64;
        let sd = (vals.iter().map(|a| (a - m).powi(2)).sum::<f64>() / vals.len() as f64).sqrt();
        let sd = if sd > 0.0 { sd } else { 1.0 };
        for (r, a) in vals.iter().enumerate() {
            x[(r, j + 1)] = (a - m) / sd;
        }
    }
    x
}

/// Weighted least squares with a tiny ridge on the slopes (keeps a constant covariate from
/// breaking the fit).
fn wls(x: &DMatrix<f64>, y: &[f64], w: &[f64]) -> DidResult<DVector<f64>> {
    let p = x.ncols();
    let mut xtx = DMatrix::<f64>::zeros(p, p);
    let mut xty = DVector::<f64>::zeros(p);
    for r in 0..x.nrows() {
        for a in 0..p {
            xty[a] += w[r] * x[(r, a)] * y[r];
            for b in 0..p {
                xtx[(a, b)] += w[r] * x[(r, a)] * x[(r, b)];
            }
        }
    }
    let total: f64 = w.iter().sum();
    for a in 1..p {
        xtx[(a, a)] += 1e-8 * total;
    }
    xtx.cholesky().map(|c| c.solve(&xty)).ok_or_else(|| DidError::Numerical {
        detail: "the outcome regression on the covariates is singular; use fewer covariates".into(),
    })
}

/// Weighted logistic regression by Newton steps, with a small ridge on the slopes so that a
/// covariate separating the groups gives large but finite coefficients.
fn logit(x: &DMatrix<f64>, d: &[f64], w: &[f64]) -> DidResult<Vec<f64>> {
    let p = x.ncols();
    let total: f64 = w.iter().sum();
    let ridge = 1e-4 * total;
    let mut beta = DVector::<f64>::zeros(p);
    for _ in 0..100 {
        let mut g = DVector::<f64>::zeros(p);
        let mut h = DMatrix::<f64>::zeros(p, p);
        for r in 0..x.nrows() {
            let eta: f64 = (0..p).map(|a| x[(r, a)] * beta[a]).sum();
            let mu = 1.0 / (1.0 + (-eta).exp());
            let v = (mu * (1.0 - mu)).max(1e-12);
            for a in 0..p {
                g[a] += w[r] * (d[r] - mu) * x[(r, a)];
                for b in 0..p {
                    h[(a, b)] += w[r] * v * x[(r, a)] * x[(r, b)];
                }
            }
        }
        for a in 1..p {
            g[a] -= ridge * beta[a];
            h[(a, a)] += ridge;
        }
        let step = h.cholesky().map(|c| c.solve(&g)).ok_or_else(|| DidError::Numerical {
            detail: "the propensity model of a wave cannot be fitted; use fewer covariates".into(),
        })?;
        beta += &step;
        if step.amax() < 1e-10 {
            break;
        }
    }
    Ok((0..x.nrows())
        .map(|r| {
            let eta: f64 = (0..p).map(|a| x[(r, a)] * beta[a]).sum();
            (1.0 / (1.0 + (-eta).exp())).clamp(P_MIN, 1.0 - P_MIN)
        })
        .collect())
}

/// The doubly robust effect of one cell: `treated` and `comp` are unit indices, `w` the unit
/// weights, `dy` the change of a unit from the base period.
///
/// # Errors
/// Singular outcome or propensity models.
pub fn doubly_robust(
    data: &Rollout,
    treated: &[usize],
    comp: &[usize],
    w: &[f64],
    dy: &dyn Fn(usize) -> f64,
) -> DidResult<f64> {
    let all: Vec<usize> = treated.iter().chain(comp).copied().collect();
    let x = design(data, &all);
    let nt = treated.len();
    let wa: Vec<f64> = all.iter().map(|&u| w[u]).collect();
    let ya: Vec<f64> = all.iter().map(|&u| dy(u)).collect();
    let xc = x.rows(nt, comp.len()).into_owned();
    let beta = wls(&xc, &ya[nt..], &wa[nt..])?;
    let d: Vec<f64> = (0..all.len()).map(|r| if r < nt { 1.0 } else { 0.0 }).collect();
    let ps = logit(&x, &d, &wa)?;
    let resid: Vec<f64> = (0..all.len()).map(|r| ya[r] - (x.row(r) * &beta)[0]).collect();
    let (mut s1, mut w1, mut s0, mut w0) = (0.0, 0.0, 0.0, 0.0);
    for r in 0..all.len() {
        if r < nt {
            s1 += wa[r] * resid[r];
            w1 += wa[r];
        } else {
            let odds = wa[r] * ps[r] / (1.0 - ps[r]);
            s0 += odds * resid[r];
            w0 += odds;
        }
    }
    Ok(s1 / w1 - s0 / w0)
}
