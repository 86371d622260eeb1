//! Logistic regression by Newton's method (iteratively reweighted least squares) on a
//! standardised design, with optional case weights (for the Bayesian bootstrap) and an optional
//! L2 penalty on the non-intercept coefficients.

use crate::design::{ColumnKind, Design};
use nalgebra::{DMatrix, DVector};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Options of one logistic fit.
#[derive(Debug, Clone, Copy)]
pub struct LogitOptions {
    /// L2 penalty `lambda / 2 * sum(beta_j^2)` on the standardised non-intercept coefficients.
    pub penalty: f64,
    /// Newton iterations allowed.
    pub max_iter: usize,
    /// Convergence: largest coefficient change (standardised scale) below this.
    pub tol: f64,
    /// Accumulate the Hessian in parallel chunks (deterministic order).
    pub parallel: bool,
}

impl Default for LogitOptions {
    fn default() -> Self {
        LogitOptions { penalty: 0.0, max_iter: 50, tol: 1e-9, parallel: true }
    }
}

/// A fitted logistic regression.
#[derive(Debug, Clone)]
pub struct LogitFit {
    /// Coefficients on the standardised design (intercept first).
    pub beta: DVector<f64>,
    /// Unpenalised log-likelihood (weighted when case weights were given).
    pub loglik: f64,
    /// Newton iterations run.
    pub iterations: usize,
    /// Whether the step criterion was met.
    pub converged: bool,
    /// Largest coefficient change in the last iteration.
    pub last_step: f64,
    /// Penalty used.
    pub penalty: f64,
}

#[inline]
fn sigmoid(eta: f64) -> f64 {
    if eta >= 0.0 {
        1.0 / (1.0 + (-eta).exp())
    } else {
        let e = eta.exp();
        e / (1.0 + e)
    }
}

/// log(1 + exp(x)), stable.
#[inline]
fn softplus(x: f64) -> f64 {
    if x > 0.0 { x + (-x).exp().ln_1p() } else { x.exp().ln_1p() }
}

const CHUNK: usize = 8192;

struct Acc {
    h: Vec<f64>,
    g: Vec<f64>,
    ll: f64,
}

fn accumulate(design: &Design, y: &[bool], w: Option<&[f64]>, beta: &[f64], lo: usize, hi: usize) -> Acc {
    let k = design.width();
    let mut h = vec![0.0; k * k];
    let mut g = vec![0.0; k];
    let mut ll = 0.0;
    for i in lo..hi {
        let row = design.row(i);
        let wi = w.map_or(1.0, |w| w[i]);
        if wi == 0.0 {
            continue;
        }
        let eta: f64 = row.iter().zip(beta).map(|(a, b)| a * b).sum();
        let p = sigmoid(eta);
        let yi = if y[i] { 1.0 } else { 0.0 };
        ll += wi * (yi * eta - softplus(eta));
        let r = wi * (yi - p);
        let v = wi * p * (1.0 - p);
        for a in 0..k {
            g[a] += r * row[a];
            let va = v * row[a];
            let ha = &mut h[a * k..a * k + a + 1];
            for (b, hb) in ha.iter_mut().enumerate() {
                *hb += va * row[b];
            }
        }
    }
    Acc { h, g, ll }
}

fn gradient_hessian(design: &Design, y: &[bool], w: Option<&[f64]>, beta: &[f64], parallel: bool) -> Acc {
    let n = design.n;
    let k = design.width();
    let nchunks = n.div_ceil(CHUNK);
    let parts: Vec<Acc> = if parallel && nchunks > 1 {
        (0..nchunks)
            .into_par_iter()
            .map(|c| accumulate(design, y, w, beta, c * CHUNK, ((c + 1) * CHUNK).min(n)))
            .collect()
    } else {
        (0..nchunks).map(|c| accumulate(design, y, w, beta, c * CHUNK, ((c + 1) * CHUNK).min(n))).collect()
    };
    let mut total = Acc { h: vec![0.0; k * k], g: vec![0.0; k], ll: 0.0 };
    for p in parts {
        for (a, b) in total.h.iter_mut().zip(&p.h) {
            *a += b;
        }
        for (a, b) in total.g.iter_mut().zip(&p.g) {
            *a += b;
        }
        total.ll += p.ll;
    }
    total
}

/// Log-likelihood at `beta` (weighted when `w` is given).
pub fn loglik(design: &Design, y: &[bool], w: Option<&[f64]>, beta: &[f64]) -> f64 {
    (0..design.n)
        .map(|i| {
            let wi = w.map_or(1.0, |w| w[i]);
            let eta: f64 = design.row(i).iter().zip(beta).map(|(a, b)| a * b).sum();
            let yi = if y[i] { 1.0 } else { 0.0 };
            wi * (yi * eta - softplus(eta))
        })
        .sum()
}

/// Fit by Newton's method with step halving on the penalised log-likelihood.
/// Starts from `start` (e.g. the full-sample fit for bootstrap replicates) or from the
/// intercept-only solution.
pub fn fit(
    design: &Design,
    y: &[bool],
    w: Option<&[f64]>,
    opts: &LogitOptions,
    start: Option<&DVector<f64>>,
) -> LogitFit {
    let k = design.width();
    let mut beta = match start {
        Some(b) => b.clone(),
        None => {
            let (mut sw, mut sy) = (0.0, 0.0);
            for i in 0..design.n {
                let wi = w.map_or(1.0, |w| w[i]);
                sw += wi;
                if y[i] {
                    sy += wi;
                }
            }
            let p = (sy / sw).clamp(1e-12, 1.0 - 1e-12);
            let mut b = DVector::zeros(k);
            b[0] = (p / (1.0 - p)).ln();
            b
        }
    };
    let pen = |b: &DVector<f64>| opts.penalty * 0.5 * b.iter().skip(1).map(|x| x * x).sum::<f64>();
    let mut acc = gradient_hessian(design, y, w, beta.as_slice(), opts.parallel);
    let mut obj = acc.ll - pen(&beta);
    let mut iterations = 0;
    let mut converged = false;
    let mut last_step = f64::INFINITY;
    while iterations < opts.max_iter {
        iterations += 1;
        let mut hm = DMatrix::zeros(k, k);
        for a in 0..k {
            for b in 0..=a {
                hm[(a, b)] = acc.h[a * k + b];
                hm[(b, a)] = acc.h[a * k + b];
            }
        }
        let mut g = DVector::from_vec(acc.g.clone());
        for a in 1..k {
            hm[(a, a)] += opts.penalty;
            g[a] -= opts.penalty * beta[a];
        }
        // Information matrix is positive definite unless the design is degenerate in the
        // weighted sample; a tiny ridge keeps the step defined in that case.
        let step = match hm.clone().cholesky() {
            Some(c) => c.solve(&g),
            None => {
                let scale = (0..k).map(|a| hm[(a, a)]).fold(0.0, f64::max).max(1.0);
                for a in 0..k {
                    hm[(a, a)] += 1e-10 * scale;
                }
                match hm.cholesky() {
                    Some(c) => c.solve(&g),
                    None => break,
                }
            }
        };
        let mut t = 1.0;
        let mut accepted = false;
        for _ in 0..30 {
            let cand = &beta + &step * t;
            let a2 = gradient_hessian(design, y, w, cand.as_slice(), opts.parallel);
            let o2 = a2.ll - pen(&cand);
            if o2.is_finite() && o2 >= obj - 1e-12 * obj.abs().max(1.0) {
                last_step = (&step * t).amax();
                beta = cand;
                acc = a2;
                obj = o2;
                accepted = true;
                break;
            }
            t *= 0.5;
        }
        if !accepted {
            last_step = 0.0;
            converged = step.amax() < 1e-6;
            break;
        }
        if last_step < opts.tol {
            converged = true;
            break;
        }
    }
    LogitFit { beta, loglik: acc.ll, iterations, converged, last_step, penalty: opts.penalty }
}

/// The propensity model as reported: coefficients on the original scale and diagnostics.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct PropensityReport {
    /// Term names, "(intercept)" first.
    pub terms: Vec<String>,
    /// Coefficients on the original (unstandardised) scale.
    pub coefficients: Vec<f64>,
    /// Coefficients on the standardised scale (per standard deviation of each column).
    pub coefficients_standardised: Vec<f64>,
    /// Log-likelihood at the estimate (unpenalised).
    pub loglik: f64,
    /// Newton iterations.
    pub iterations: usize,
    /// Whether Newton's method met its step criterion.
    pub converged: bool,
    /// L2 penalty used (0 = maximum likelihood).
    pub penalty: f64,
    /// Whether separation was detected (and the penalised fallback used).
    pub separation: bool,
    /// Units with fitted probability within 1e-8 of 0 or 1.
    pub extreme_fitted: usize,
}

impl PropensityReport {
    /// Build the report from a fit on `design`.
    pub fn new(design: &Design, fit: &LogitFit, separation: bool, extreme_fitted: usize) -> Self {
        let std = fit.beta.as_slice().to_vec();
        let mut orig = vec![0.0; std.len()];
        let mut icpt = std[0];
        for j in 0..design.names.len() {
            orig[j + 1] = std[j + 1] / design.sd[j];
            icpt -= std[j + 1] * design.mean[j] / design.sd[j];
        }
        orig[0] = icpt;
        let mut terms = vec!["(intercept)".to_string()];
        terms.extend(design.names.iter().cloned());
        PropensityReport {
            terms,
            coefficients: orig,
            coefficients_standardised: std,
            loglik: fit.loglik,
            iterations: fit.iterations,
            converged: fit.converged,
            penalty: fit.penalty,
            separation,
            extreme_fitted,
        }
    }
}

/// Linear predictor (logit of the propensity) of every unit.
pub fn linear_predictor(design: &Design, beta: &DVector<f64>) -> Vec<f64> {
    let b = beta.as_slice();
    (0..design.n).map(|i| design.row(i).iter().zip(b).map(|(a, c)| a * c).sum()).collect()
}

/// The probability from a logit.
pub fn prob(eta: f64) -> f64 {
    sigmoid(eta)
}

/// Look for a single design column that separates the groups: a 0/1 column one of whose values
/// occurs in only one group, or a column whose treated and control ranges do not overlap.
/// Returns the column name and what was seen.
pub fn single_column_separation(design: &Design, y: &[bool]) -> Option<(String, String)> {
    for (j, name) in design.names.iter().enumerate() {
        let (mut tmin, mut tmax, mut cmin, mut cmax) =
            (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY);
        for (i, &yi) in y.iter().enumerate().take(design.n) {
            let v = design.at(i, j);
            if yi {
                tmin = tmin.min(v);
                tmax = tmax.max(v);
            } else {
                cmin = cmin.min(v);
                cmax = cmax.max(v);
            }
        }
        let raw = |v: f64| v * design.sd[j] + design.mean[j];
        if tmax < cmin || cmax < tmin {
            return Some((
                name.clone(),
                format!(
                    "'{name}' ranges over [{:.4}, {:.4}] among treated and [{:.4}, {:.4}] among controls",
                    raw(tmin),
                    raw(tmax),
                    raw(cmin),
                    raw(cmax)
                ),
            ));
        }
        let binary = design.kinds[j] == ColumnKind::Level || {
            let lo = raw(tmin.min(cmin));
            let hi = raw(tmax.max(cmax));
            (lo.abs() < 1e-9)
                && ((hi - 1.0).abs() < 1e-9)
                && (0..design.n).all(|i| {
                    let v = raw(design.at(i, j));
                    v.abs() < 1e-9 || (v - 1.0).abs() < 1e-9
                })
        };
        if binary {
            // Quasi-complete separation: one value seen in one group only.
            let one = |v: f64| (raw(v) - 1.0).abs() < 1e-9;
            let (mut t1, mut c1, mut t0, mut c0) = (0usize, 0usize, 0usize, 0usize);
            for (i, &yi) in y.iter().enumerate().take(design.n) {
                match (yi, one(design.at(i, j))) {
                    (true, true) => t1 += 1,
                    (false, true) => c1 += 1,
                    (true, false) => t0 += 1,
                    (false, false) => c0 += 1,
                }
            }
            for (val, t, c) in [(1, t1, c1), (0, t0, c0)] {
                if t + c > 0 && (t == 0 || c == 0) {
                    let grp = if t == 0 { "controls" } else { "treated units" };
                    return Some((name.clone(), format!("'{name}' = {val} occurs only among {grp} ({} units)", t + c)));
                }
            }
        }
    }
    None
}
