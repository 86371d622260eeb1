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

/// The probability and log(1 + exp(eta)) from one exponential, exp(-|eta|); the same values as
/// computing each on its own with its own exponential.
#[inline]
fn sigmoid_softplus(eta: f64) -> (f64, f64) {
    let e = (-eta.abs()).exp();
    let p = if eta >= 0.0 { 1.0 / (1.0 + e) } else { e / (1.0 + e) };
    let sp = if eta > 0.0 { eta + e.ln_1p() } else { e.ln_1p() };
    (p, sp)
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

/// One row's terms at linear predictor `eta`: its log-likelihood, its gradient weight
/// `w (y - p)` and its information weight `w p (1 - p)`.
#[inline(always)]
fn row_terms(eta: f64, treated: bool, wi: f64) -> (f64, f64, f64) {
    let (p, sp) = sigmoid_softplus(eta);
    let yi = if treated { 1.0 } else { 0.0 };
    (wi * (yi * eta - sp), wi * (yi - p), wi * p * (1.0 - p))
}

/// Log-likelihood, gradient and (lower triangle of the) information over rows `lo..hi`; with
/// `ll_only` the gradient and information are left at zero.
#[allow(clippy::too_many_arguments)]
fn accumulate(
    design: &Design,
    y: &[bool],
    w: Option<&[f64]>,
    beta: &[f64],
    lo: usize,
    hi: usize,
    ll_only: bool,
) -> Acc {
    let k = design.width();
    if !ll_only {
        // widths seen in practice get a kernel of fixed width, which the compiler unrolls
        macro_rules! fixed {
            ($($n:literal)*) => {
                match k {
                    $($n => return accumulate_fixed::<$n>(design, y, w, beta, lo, hi),)*
                    _ => {}
                }
            };
        }
        fixed!(2 3 4 5 6 7 8 9 10 11 12 13 14 15 16 17 18 19 20 21 22 23 24);
    }
    let mut h = vec![0.0; if ll_only { 0 } else { k * k }];
    let mut g = vec![0.0; if ll_only { 0 } else { k }];
    let mut ll = 0.0;
    for i in lo..hi {
        let row = design.row(i);
        let wi = w.map_or(1.0, |w| w[i]);
        if wi == 0.0 {
            continue;
        }
        let eta: f64 = row.iter().zip(beta).map(|(a, b)| a * b).sum();
        let (l, r, v) = row_terms(eta, y[i], wi);
        ll += l;
        if ll_only {
            continue;
        }
        for a in 0..k {
            g[a] += r * row[a];
            let va = v * row[a];
            let ha = &mut h[a * k..a * k + a + 1];
            for (hb, rb) in ha.iter_mut().zip(&row[..=a]) {
                *hb += va * rb;
            }
        }
    }
    Acc { h, g, ll }
}

/// [`accumulate`] for a design of width `K`: the same sums in the same order for every entry of
/// the lower triangle (with the width known, the compiler unrolls and vectorises the loops).
fn accumulate_fixed<const K: usize>(
    design: &Design,
    y: &[bool],
    w: Option<&[f64]>,
    beta: &[f64],
    lo: usize,
    hi: usize,
) -> Acc {
    let mut h = [[0.0f64; K]; K];
    let mut g = [0.0f64; K];
    let mut ll = 0.0;
    let mut b = [0.0f64; K];
    b.copy_from_slice(beta);
    for (i, row) in design.z[lo * K..hi * K].chunks_exact(K).enumerate().map(|(q, r)| (lo + q, r)) {
        let wi = w.map_or(1.0, |w| w[i]);
        if wi == 0.0 {
            continue;
        }
        let mut x = [0.0f64; K];
        x.copy_from_slice(row);
        let eta: f64 = x.iter().zip(&b).map(|(a, c)| a * c).sum();
        let (l, r, v) = row_terms(eta, y[i], wi);
        ll += l;
        for a in 0..K {
            g[a] += r * x[a];
            let va = v * x[a];
            for (hb, xb) in h[a][..=a].iter_mut().zip(&x[..=a]) {
                *hb += va * xb;
            }
        }
    }
    Acc { h: h.iter().flatten().copied().collect(), g: g.to_vec(), ll }
}

fn gradient_hessian(design: &Design, y: &[bool], w: Option<&[f64]>, beta: &[f64], parallel: bool) -> Acc {
    chunked(design, y, w, beta, parallel, false)
}

/// Sums over fixed chunks of rows, added in chunk order (the same for any number of threads).
fn chunked(design: &Design, y: &[bool], w: Option<&[f64]>, beta: &[f64], parallel: bool, ll_only: bool) -> Acc {
    let n = design.n;
    let k = if ll_only { 0 } else { design.width() };
    let nchunks = n.div_ceil(CHUNK);
    let part = |c: usize| accumulate(design, y, w, beta, c * CHUNK, ((c + 1) * CHUNK).min(n), ll_only);
    let parts: Vec<Acc> = if parallel && nchunks > 1 {
        (0..nchunks).into_par_iter().map(part).collect()
    } else {
        (0..nchunks).map(part).collect()
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
            // a step below the tolerance ends the fit when accepted: only the log-likelihood
            // is needed there (summed in the same chunks, so it is the same number)
            let last = (&step * t).amax() < opts.tol;
            let a2 = chunked(design, y, w, cand.as_slice(), opts.parallel, last);
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
    let one = |i: usize| -> f64 { design.row(i).iter().zip(b).map(|(a, c)| a * c).sum() };
    // in parallel only where it pays (bootstrap replicates already run one per thread)
    if design.n >= 8 * CHUNK {
        (0..design.n).into_par_iter().with_min_len(CHUNK).map(one).collect()
    } else {
        (0..design.n).map(one).collect()
    }
}

/// The probability from a logit.
pub fn prob(eta: f64) -> f64 {
    sigmoid(eta)
}

/// Look for a single design column that separates the groups: a 0/1 column one of whose values
/// occurs in only one group, or a column whose treated and control ranges do not overlap.
/// Returns the column name and what was seen.
pub fn single_column_separation(design: &Design, y: &[bool]) -> Option<(String, String)> {
    let ranges = group_ranges(design, y);
    (0..design.names.len()).find_map(|j| column_separation(design, y, j, ranges[j]))
}

/// Smallest and largest standardised value of each column among the treated and the controls
/// (`[tmin, tmax, cmin, cmax]`), in one parallel pass over the rows (minima and maxima do not
/// depend on the order they are taken in).
fn group_ranges(design: &Design, y: &[bool]) -> Vec<[f64; 4]> {
    let p = design.names.len();
    let k = design.width();
    let empty = vec![[f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY]; p];
    let merge = |mut a: Vec<[f64; 4]>, b: Vec<[f64; 4]>| {
        for (x, y) in a.iter_mut().zip(b) {
            *x = [x[0].min(y[0]), x[1].max(y[1]), x[2].min(y[2]), x[3].max(y[3])];
        }
        a
    };
    design
        .z
        .par_chunks(k * CHUNK)
        .enumerate()
        .map(|(b, block)| {
            let mut r = empty.clone();
            for (q, row) in block.chunks(k).enumerate() {
                let (lo, hi) = if y[b * CHUNK + q] { (0, 1) } else { (2, 3) };
                for (m, &v) in r.iter_mut().zip(&row[1..]) {
                    m[lo] = m[lo].min(v);
                    m[hi] = m[hi].max(v);
                }
            }
            r
        })
        .reduce(|| empty.clone(), merge)
}

fn column_separation(design: &Design, y: &[bool], j: usize, range: [f64; 4]) -> Option<(String, String)> {
    let name = &design.names[j];
    {
        let [tmin, tmax, cmin, cmax] = range;
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
