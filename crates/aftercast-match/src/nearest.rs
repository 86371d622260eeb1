//! Nearest-neighbour matching on the logit of the propensity score, in O(n log n): the pool is
//! sorted by score once, each focal unit is placed by binary search, and matching without
//! replacement keeps the still-available pool units in an ordered set.
//!
//! Variance: Abadie & Imbens (2006, Econometrica 74:235-267), with the conditional outcome
//! variances estimated by matching each unit to its `J` nearest neighbours in its own group.
//! Bias correction: Abadie & Imbens (2011, JBES 29:1-11), a linear regression of the outcome
//! on the design among the units used as matches.

use crate::design::Design;
use crate::linear;
use nalgebra::{DMatrix, DVector};
use rayon::prelude::*;
use std::collections::{BTreeMap, BTreeSet};

/// How to match.
#[derive(Debug, Clone)]
pub struct MatchRule {
    /// Matches per focal unit.
    pub k: usize,
    /// Whether a pool unit may be used more than once.
    pub replace: bool,
    /// Largest allowed distance on the logit scale (`None` = no caliper).
    pub caliper: Option<f64>,
    /// Choose among the pool units within the caliper by Mahalanobis distance on the design.
    pub mahalanobis: bool,
}

/// The matches of each focal unit (indices into the analysis sample).
#[derive(Debug, Clone)]
pub struct Matches {
    /// Focal units, in the order given.
    pub focal: Vec<usize>,
    /// Matches of each focal unit (empty = none within the caliper).
    pub matched: Vec<Vec<usize>>,
}

/// Inverse covariance of the design columns (intercept excluded), for Mahalanobis distances.
pub fn inverse_covariance(design: &Design) -> DMatrix<f64> {
    let p = design.names.len();
    let mut c = DMatrix::<f64>::zeros(p, p);
    for i in 0..design.n {
        let r = &design.row(i)[1..];
        for a in 0..p {
            for b in 0..=a {
                c[(a, b)] += r[a] * r[b];
            }
        }
    }
    for a in 0..p {
        for b in 0..a {
            c[(b, a)] = c[(a, b)];
        }
    }
    c /= (design.n as f64 - 1.0).max(1.0);
    c.clone().try_inverse().unwrap_or_else(|| DMatrix::identity(p, p))
}

fn mahalanobis(design: &Design, inv: &DMatrix<f64>, a: usize, b: usize) -> f64 {
    let ra = &design.row(a)[1..];
    let rb = &design.row(b)[1..];
    let d = DVector::from_iterator(ra.len(), ra.iter().zip(rb).map(|(x, y)| x - y));
    (d.transpose() * inv * &d)[(0, 0)]
}

/// Match every focal unit to up to `k` pool units. `keys` (optional) restricts matches to units
/// with the same exact-matching key. Focal units are processed in descending score order when
/// matching without replacement (common practice: the hardest-to-match first).
pub fn match_units(
    score: &[f64],
    focal: &[usize],
    pool: &[usize],
    keys: Option<&[u64]>,
    rule: &MatchRule,
    maha: Option<(&Design, &DMatrix<f64>)>,
) -> Matches {
    let mut groups: BTreeMap<u64, (Vec<usize>, Vec<usize>)> = BTreeMap::new();
    let key = |i: usize| keys.map_or(0, |k| k[i]);
    for (r, &i) in focal.iter().enumerate() {
        groups.entry(key(i)).or_default().0.push(r);
    }
    for &j in pool {
        groups.entry(key(j)).or_default().1.push(j);
    }
    let mut matched = vec![Vec::new(); focal.len()];
    let cal = rule.caliper.unwrap_or(f64::INFINITY);
    for (_, (fr, pl)) in groups {
        if fr.is_empty() || pl.is_empty() {
            continue;
        }
        let (pl, ps) = sorted_by_score(score, pl);
        if rule.replace {
            for &r in &fr {
                let i = focal[r];
                let s = score[i];
                matched[r] = if let Some((design, inv)) = maha.filter(|_| rule.mahalanobis) {
                    let lo = ps.partition_point(|&v| v < s - cal);
                    let hi = ps.partition_point(|&v| v <= s + cal);
                    let mut cand: Vec<(f64, usize)> =
                        (lo..hi).map(|q| (mahalanobis(design, inv, i, pl[q]), pl[q])).collect();
                    cand.sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
                    // collected by reference: an in-place collect would keep the whole
                    // candidate list's allocation alive behind the k matches
                    cand.iter().take(rule.k).map(|c| c.1).collect()
                } else {
                    let pos = ps.partition_point(|&v| v < s);
                    let (mut l, mut h) = (pos, pos);
                    let mut out = Vec::with_capacity(rule.k);
                    while out.len() < rule.k {
                        let dl = if l > 0 { s - ps[l - 1] } else { f64::INFINITY };
                        let dh = if h < ps.len() { ps[h] - s } else { f64::INFINITY };
                        let (d, q) = if dl <= dh { (dl, l.wrapping_sub(1)) } else { (dh, h) };
                        if d.is_nan() || d > cal {
                            break;
                        }
                        out.push(pl[q]);
                        if dl <= dh {
                            l -= 1;
                        } else {
                            h += 1;
                        }
                    }
                    out
                };
            }
        } else {
            let mut order = fr.clone();
            order.par_sort_unstable_by(|&a, &b| score[focal[b]].total_cmp(&score[focal[a]]).then(a.cmp(&b)));
            let mut avail: BTreeSet<usize> = (0..pl.len()).collect();
            for r in order {
                if avail.is_empty() {
                    break;
                }
                let i = focal[r];
                let s = score[i];
                let mut out = Vec::with_capacity(rule.k);
                if let Some((design, inv)) = maha.filter(|_| rule.mahalanobis) {
                    let lo = ps.partition_point(|&v| v < s - cal);
                    let hi = ps.partition_point(|&v| v <= s + cal);
                    let mut cand: Vec<(f64, usize)> =
                        avail.range(lo..hi).map(|&q| (mahalanobis(design, inv, i, pl[q]), q)).collect();
                    cand.sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
                    for (_, q) in cand.into_iter().take(rule.k) {
                        avail.remove(&q);
                        out.push(pl[q]);
                    }
                } else {
                    let pos = ps.partition_point(|&v| v < s);
                    while out.len() < rule.k {
                        let below = avail.range(..pos).next_back().copied();
                        let above = avail.range(pos..).next().copied();
                        let dl = below.map_or(f64::INFINITY, |q| s - ps[q]);
                        let dh = above.map_or(f64::INFINITY, |q| ps[q] - s);
                        let (d, q) = if dl <= dh { (dl, below) } else { (dh, above) };
                        match q {
                            Some(q) if d <= cal => {
                                avail.remove(&q);
                                out.push(pl[q]);
                            }
                            _ => break,
                        }
                    }
                }
                matched[r] = out;
            }
        }
    }
    Matches { focal: focal.to_vec(), matched }
}

/// Conditional outcome variance of each unit, by matching it to its `j` nearest neighbours (on
/// `score`) within its own treatment group: `j / (j + 1) * (y_i - mean of neighbours)^2`
/// (Abadie & Imbens 2006, section 4). Units in groups with fewer than 2 members get 0.
pub fn conditional_variances(score: &[f64], treated: &[bool], y: &[f64], j: usize) -> Vec<f64> {
    let n = score.len();
    let mut out = vec![0.0; n];
    for grp in [true, false] {
        let idx: Vec<usize> = (0..n).filter(|&i| treated[i] == grp).collect();
        if idx.len() < 2 {
            continue;
        }
        let (idx, ps) = sorted_by_score(score, idx);
        // outcomes in score order: the neighbour search below then reads memory in sequence
        let ys: Vec<f64> = idx.iter().map(|&i| y[i]).collect();
        let jj = j.min(idx.len() - 1);
        for q in 0..idx.len() {
            let s = ps[q];
            let (mut l, mut h) = (q, q + 1);
            let mut sum = 0.0;
            for _ in 0..jj {
                let dl = if l > 0 { s - ps[l - 1] } else { f64::INFINITY };
                let dh = if h < idx.len() { ps[h] - s } else { f64::INFINITY };
                if dl <= dh {
                    l -= 1;
                    sum += ys[l];
                } else {
                    sum += ys[h];
                    h += 1;
                }
            }
            let m = sum / jj as f64;
            let e = ys[q] - m;
            out[idx[q]] = jj as f64 / (jj as f64 + 1.0) * e * e;
        }
    }
    out
}

/// Units in ascending order of score (ties by unit index, a total order, so the parallel
/// unstable sort has one answer), with their scores: sorting (score, unit) pairs keeps the keys
/// next to each other in memory.
fn sorted_by_score(score: &[f64], units: Vec<usize>) -> (Vec<usize>, Vec<f64>) {
    let mut pairs: Vec<(f64, usize)> = units.into_iter().map(|i| (score[i], i)).collect();
    pairs.par_sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    pairs.into_iter().map(|(s, i)| (i, s)).unzip()
}

/// Bias-correction regressions: (control model, treated model).
type OutcomeModels = (Option<DVector<f64>>, Option<DVector<f64>>);

/// Point estimate and Abadie-Imbens standard error of a matching estimator.
#[derive(Debug, Clone)]
pub struct MatchEstimate {
    /// The estimate.
    pub estimate: f64,
    /// Abadie-Imbens standard error.
    pub se: f64,
    /// Mean imputed counterfactual (for the relative effect).
    pub baseline: f64,
    /// Focal units with at least one match.
    pub focal_matched: usize,
    /// Weight of each unit in the estimator (treated matched = 1 per focal; used pool units
    /// = sum over focal units of 1 / number of matches). Length n.
    pub weights: Vec<f64>,
    /// Per matched focal unit (in `matches.focal` order, unmatched skipped): observed minus
    /// imputed outcome, signed as treated minus control.
    pub pair_differences: Vec<f64>,
}

/// Estimate the ATT (focal = treated; `att = true`) or the ATE (both directions matched) with
/// the Abadie-Imbens variance. `to_controls` matches treated units to controls; `to_treated`
/// matches controls to treated units (ATE only). With `bias_correct` the imputed outcomes are
/// corrected by a weighted linear regression on the design among the units used as matches.
#[allow(clippy::too_many_arguments)]
pub fn estimate(
    y: &[f64],
    treated: &[bool],
    to_controls: &Matches,
    to_treated: Option<&Matches>,
    sigma2: &[f64],
    bias_correct: Option<&Design>,
) -> Option<MatchEstimate> {
    let n = y.len();
    // usage weights K and K' of each unit as a match
    let mut kw = vec![0.0; n];
    let mut kw2 = vec![0.0; n];
    let sets: Vec<&Matches> = std::iter::once(to_controls).chain(to_treated).collect();
    for m in &sets {
        for js in &m.matched {
            if js.is_empty() {
                continue;
            }
            let inv = 1.0 / js.len() as f64;
            for &j in js {
                kw[j] += inv;
                kw2[j] += inv * inv;
            }
        }
    }
    // bias-correction models, one per group that is imputed
    let models: Option<OutcomeModels> = bias_correct.map(|d| {
        let fitg = |grp: bool| {
            let rows: Vec<usize> = (0..n).filter(|&i| treated[i] == grp && kw[i] > 0.0).collect();
            if rows.len() <= d.width() {
                return None;
            }
            let yy: Vec<f64> = rows.iter().map(|&i| y[i]).collect();
            let ww: Vec<f64> = rows.iter().map(|&i| kw[i]).collect();
            Some(linear::wls(d, &rows, &yy, &ww))
        };
        (fitg(false), if to_treated.is_some() { fitg(true) } else { None })
    });
    let imputed = |i: usize, js: &[usize], grp_model: Option<&DVector<f64>>| -> f64 {
        let mut s = 0.0;
        for &j in js {
            let adj = match (bias_correct, grp_model) {
                (Some(d), Some(b)) => linear::predict(d, b, i) - linear::predict(d, b, j),
                _ => 0.0,
            };
            s += y[j] + adj;
        }
        s / js.len() as f64
    };
    let mut contrib = Vec::new();
    let mut in_sample = vec![false; n];
    let mut base_sum = 0.0;
    let mut pair_differences = Vec::new();
    let m0 = models.as_ref().and_then(|m| m.0.as_ref());
    let m1 = models.as_ref().and_then(|m| m.1.as_ref());
    for (r, js) in to_controls.matched.iter().enumerate() {
        if js.is_empty() {
            continue;
        }
        let i = to_controls.focal[r];
        let y0 = imputed(i, js, m0);
        contrib.push(y[i] - y0);
        pair_differences.push(y[i] - y0);
        base_sum += y0;
        in_sample[i] = true;
    }
    let n_t = contrib.len();
    if let Some(mt) = to_treated {
        for (r, js) in mt.matched.iter().enumerate() {
            if js.is_empty() {
                continue;
            }
            let i = mt.focal[r];
            let y1 = imputed(i, js, m1);
            contrib.push(y1 - y[i]);
            base_sum += y[i];
            in_sample[i] = true;
        }
    }
    let nn = contrib.len();
    if nn == 0 {
        return None;
    }
    let tau = contrib.iter().sum::<f64>() / nn as f64;
    let mut v = contrib.iter().map(|c| (c - tau) * (c - tau)).sum::<f64>();
    for i in 0..n {
        if kw[i] > 0.0 {
            let own = if to_treated.is_some() && in_sample[i] { 2.0 * kw[i] } else { 0.0 };
            v += (kw[i] * kw[i] + own - kw2[i]) * sigma2[i];
        }
    }
    v /= (nn as f64) * (nn as f64);
    let mut weights = kw;
    for (r, js) in to_controls.matched.iter().enumerate() {
        if !js.is_empty() {
            weights[to_controls.focal[r]] += 1.0;
        }
    }
    if let Some(mt) = to_treated {
        for (r, js) in mt.matched.iter().enumerate() {
            if !js.is_empty() {
                weights[mt.focal[r]] += 1.0;
            }
        }
    }
    let baseline = if to_treated.is_some() { base_sum / nn as f64 } else { base_sum / n_t as f64 };
    Some(MatchEstimate {
        estimate: tau,
        se: v.max(0.0).sqrt(),
        baseline,
        focal_matched: n_t,
        weights,
        pair_differences,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rule(k: usize, replace: bool, caliper: Option<f64>) -> MatchRule {
        MatchRule { k, replace, caliper, mahalanobis: false }
    }

    #[test]
    fn nearest_with_and_without_replacement() {
        // focal 0 at 0.0 and 1 at 0.1; pool 2 at 0.05, 3 at 1.0
        let score = [0.0, 0.1, 0.05, 1.0];
        let m = match_units(&score, &[0, 1], &[2, 3], None, &rule(1, true, None), None);
        assert_eq!(m.matched, vec![vec![2], vec![2]]);
        let m = match_units(&score, &[0, 1], &[2, 3], None, &rule(1, false, None), None);
        // descending order: unit 1 (0.1) first takes 2, unit 0 gets 3
        assert_eq!(m.matched, vec![vec![3], vec![2]]);
        let m = match_units(&score, &[0, 1], &[2, 3], None, &rule(1, false, Some(0.2)), None);
        assert_eq!(m.matched, vec![Vec::<usize>::new(), vec![2]]);
    }

    #[test]
    fn exact_keys_restrict_matches() {
        let score = [0.0, 0.01, 0.5];
        let keys = [1u64, 2, 1];
        let m = match_units(&score, &[0], &[1, 2], Some(&keys), &rule(1, true, None), None);
        assert_eq!(m.matched, vec![vec![2]]);
    }

    #[test]
    fn ai_variance_of_exact_pairs_reduces_to_paired_formula() {
        // 1:1 without replacement, each control used once: V = sum (d - tau)^2 / N1^2.
        let y = [5.0, 7.0, 1.0, 2.0];
        let tr = [true, true, false, false];
        let m = Matches { focal: vec![0, 1], matched: vec![vec![2], vec![3]] };
        let e = estimate(&y, &tr, &m, None, &[1.0; 4], None).unwrap();
        assert!((e.estimate - 4.5).abs() < 1e-12);
        assert!((e.se - (0.5f64 / 4.0).sqrt()).abs() < 1e-12);
    }
}
