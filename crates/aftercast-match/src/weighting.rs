//! Weighting estimators (normalised inverse probability weights, overlap weights, propensity
//! strata, augmented IPW) evaluated under case weights `omega` (all 1 for the point estimate,
//! Exp(1) draws for a Bayesian-bootstrap replicate).

use crate::design::Design;
use crate::linear;

/// Which weighting estimator.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Weighting {
    /// Normalised inverse probability weights.
    Ipw,
    /// Overlap weights (Li, Morgan & Zaslavsky 2018).
    Overlap,
    /// Subclassification on propensity quantiles.
    Strata(usize),
    /// Augmented IPW with linear outcome models.
    Aipw,
}

/// The result of one evaluation.
#[derive(Debug, Clone)]
pub struct WeightedEstimate {
    /// The effect.
    pub effect: f64,
    /// Counterfactual mean of the target population (for the relative effect).
    pub baseline: f64,
    /// Implied weight of each unit (treated and control groups each sum to their case-weight
    /// total in the target population); used for balance and effective sample size.
    pub weights: Vec<f64>,
    /// Treated units that got no weight (strata without controls).
    pub treated_dropped: usize,
}

/// Evaluate `method` for the ATT (`att = true`) or ATE. Overlap weights ignore `att` (their
/// estimand is the average effect in the overlap population).
pub fn evaluate(
    method: Weighting,
    att: bool,
    y: &[f64],
    treated: &[bool],
    e: &[f64],
    omega: &[f64],
    design: &Design,
) -> Option<WeightedEstimate> {
    let n = y.len();
    match method {
        Weighting::Ipw | Weighting::Overlap => {
            let w: Vec<f64> = (0..n)
                .map(|i| {
                    let (t, p) = (treated[i], e[i]);
                    omega[i]
                        * match (method, att, t) {
                            (Weighting::Overlap, _, true) => 1.0 - p,
                            (Weighting::Overlap, _, false) => p,
                            (_, true, true) => 1.0,
                            (_, true, false) => p / (1.0 - p),
                            (_, false, true) => 1.0 / p,
                            (_, false, false) => 1.0 / (1.0 - p),
                        }
                })
                .collect();
            let (m1, m0) = group_means(y, treated, &w)?;
            Some(WeightedEstimate { effect: m1 - m0, baseline: m0, weights: w, treated_dropped: 0 })
        }
        Weighting::Strata(k) => strata(k, att, y, treated, e, omega),
        Weighting::Aipw => {
            let rows1: Vec<usize> = (0..n).filter(|&i| treated[i]).collect();
            let rows0: Vec<usize> = (0..n).filter(|&i| !treated[i]).collect();
            let fitm = |rows: &[usize]| {
                let yy: Vec<f64> = rows.iter().map(|&i| y[i]).collect();
                let ww: Vec<f64> = rows.iter().map(|&i| omega[i]).collect();
                linear::wls(design, rows, &yy, &ww)
            };
            let b0 = fitm(&rows0);
            let mu0: Vec<f64> = (0..n).map(|i| linear::predict(design, &b0, i)).collect();
            if att {
                // tau = mean_treated(y - mu0) - weighted mean over controls of (y - mu0),
                // control weights e/(1-e) (normalised)
                let w: Vec<f64> =
                    (0..n).map(|i| omega[i] * if treated[i] { 1.0 } else { e[i] / (1.0 - e[i]) }).collect();
                let r: Vec<f64> = (0..n).map(|i| y[i] - mu0[i]).collect();
                let (r1, r0) = group_means(&r, treated, &w)?;
                let (m1, _) = group_means(y, treated, &w)?;
                let effect = r1 - r0;
                Some(WeightedEstimate { effect, baseline: m1 - effect, weights: w, treated_dropped: 0 })
            } else {
                let b1 = fitm(&rows1);
                let mu1: Vec<f64> = (0..n).map(|i| linear::predict(design, &b1, i)).collect();
                let w: Vec<f64> =
                    (0..n).map(|i| omega[i] * if treated[i] { 1.0 / e[i] } else { 1.0 / (1.0 - e[i]) }).collect();
                let sw: f64 = omega.iter().sum();
                let mm1 = (0..n).map(|i| omega[i] * mu1[i]).sum::<f64>() / sw;
                let mm0 = (0..n).map(|i| omega[i] * mu0[i]).sum::<f64>() / sw;
                let r: Vec<f64> = (0..n).map(|i| if treated[i] { y[i] - mu1[i] } else { y[i] - mu0[i] }).collect();
                let (r1, r0) = group_means(&r, treated, &w)?;
                let y1 = mm1 + r1;
                let y0 = mm0 + r0;
                Some(WeightedEstimate { effect: y1 - y0, baseline: y0, weights: w, treated_dropped: 0 })
            }
        }
    }
}

fn group_means(y: &[f64], treated: &[bool], w: &[f64]) -> Option<(f64, f64)> {
    let (mut s1, mut w1, mut s0, mut w0) = (0.0, 0.0, 0.0, 0.0);
    for i in 0..y.len() {
        if treated[i] {
            s1 += w[i] * y[i];
            w1 += w[i];
        } else {
            s0 += w[i] * y[i];
            w0 += w[i];
        }
    }
    if w1 > 0.0 && w0 > 0.0 { Some((s1 / w1, s0 / w0)) } else { None }
}

/// Stratum of each unit: `k` groups cut at the (unweighted) quantiles of `e` over all units
/// (Rosenbaum & Rubin 1984).
pub fn strata_of(e: &[f64], k: usize) -> Vec<usize> {
    let mut s: Vec<f64> = e.to_vec();
    s.sort_unstable_by(f64::total_cmp);
    let n = s.len();
    let cuts: Vec<f64> = (1..k).map(|q| s[((q * n) / k).min(n - 1)]).collect();
    e.iter().map(|&v| cuts.partition_point(|&c| c <= v)).collect()
}

fn strata(k: usize, att: bool, y: &[f64], treated: &[bool], e: &[f64], omega: &[f64]) -> Option<WeightedEstimate> {
    let n = y.len();
    let s = strata_of(e, k);
    let mut acc = vec![[0.0f64; 4]; k]; // sum w y treated, sum w treated, sum w y control, sum w control
    for i in 0..n {
        let a = &mut acc[s[i]];
        if treated[i] {
            a[0] += omega[i] * y[i];
            a[1] += omega[i];
        } else {
            a[2] += omega[i] * y[i];
            a[3] += omega[i];
        }
    }
    let mut num = 0.0;
    let mut den = 0.0;
    let mut base = 0.0;
    let mut dropped_strata = vec![false; k];
    for (q, a) in acc.iter().enumerate() {
        let target = if att { a[1] } else { a[1] + a[3] };
        if a[1] > 0.0 && a[3] > 0.0 {
            let d = a[0] / a[1] - a[2] / a[3];
            num += target * d;
            base += target * a[2] / a[3];
            den += target;
        } else if target > 0.0 {
            dropped_strata[q] = true;
        }
    }
    if den <= 0.0 {
        return None;
    }
    let weights: Vec<f64> = (0..n)
        .map(|i| {
            let a = &acc[s[i]];
            if dropped_strata[s[i]] || a[1] == 0.0 || a[3] == 0.0 {
                return 0.0;
            }
            let target = if att { a[1] } else { a[1] + a[3] };
            omega[i] * if treated[i] { target / a[1] } else { target / a[3] }
        })
        .collect();
    let treated_dropped = (0..n).filter(|&i| treated[i] && dropped_strata[s[i]]).count();
    Some(WeightedEstimate { effect: num / den, baseline: base / den, weights, treated_dropped })
}
