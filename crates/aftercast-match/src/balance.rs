//! Balance diagnostics: standardised mean differences, variance ratios, effective sample sizes,
//! binned propensity distributions, and common-support trimming rules.

use crate::design::Design;
use aftercast_core::result::BalanceRow;
use serde::{Deserialize, Serialize};

/// Flag threshold on |SMD| (common practice; Austin 2009, Stat. Med. 28:3083-3107).
pub const SMD_FLAG: f64 = 0.1;
/// Acceptable variance-ratio range (common practice; Rubin 2001, Health Serv. Outcomes Res.
/// Methodol. 2:169-188).
pub const VAR_RATIO_RANGE: (f64, f64) = (0.5, 2.0);

/// One design column's balance before and after adjustment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BalanceEntry {
    /// Column name (covariate, level `name=value`, or term).
    pub covariate: String,
    /// Treated mean before adjustment (original units).
    pub mean_treated_before: f64,
    /// Control mean before adjustment.
    pub mean_control_before: f64,
    /// Treated mean after adjustment.
    pub mean_treated_after: f64,
    /// Control mean after adjustment.
    pub mean_control_after: f64,
    /// SMD before (pooled SD of the unadjusted groups in the denominator).
    pub smd_before: f64,
    /// SMD after (same denominator as before).
    pub smd_after: f64,
    /// Variance ratio treated / control before.
    pub var_ratio_before: f64,
    /// Variance ratio after (weighted variances).
    pub var_ratio_after: f64,
    /// |SMD after| above 0.1.
    pub smd_flag: bool,
    /// Variance ratio after outside [0.5, 2].
    pub var_ratio_flag: bool,
}

impl BalanceEntry {
    /// The shared result row.
    pub fn row(&self) -> BalanceRow {
        BalanceRow {
            covariate: self.covariate.clone(),
            smd_before: self.smd_before,
            smd_after: self.smd_after,
            var_ratio_before: self.var_ratio_before,
            var_ratio_after: self.var_ratio_after,
        }
    }
}

/// Weighted mean and (reliability-weighted, unbiased for equal weights) variance: the
/// definition [`group_moments`] computes four at a time (kept to test it against).
#[cfg(test)]
fn wmv(vals: impl Iterator<Item = (f64, f64)> + Clone) -> (f64, f64) {
    let (mut sw, mut sx, mut sw2) = (0.0, 0.0, 0.0);
    for (x, w) in vals.clone() {
        sw += w;
        sx += w * x;
        sw2 += w * w;
    }
    if sw <= 0.0 {
        return (f64::NAN, f64::NAN);
    }
    let m = sx / sw;
    let ss: f64 = vals.map(|(x, w)| w * (x - m) * (x - m)).sum();
    let denom = sw - sw2 / sw;
    (m, if denom > 0.0 { ss / denom } else { f64::NAN })
}

/// [`wmv`] of each design column (on its original scale) among the treated and the controls,
/// unweighted and with the weights `after`: all columns in two passes over the rows (the design
/// is row-major), each sum in unit order, as separate calls of [`wmv`] would add them.
fn group_moments(design: &Design, treated: &[bool], after: &[f64]) -> Vec<[(f64, f64); 4]> {
    use rayon::prelude::*;
    // the columns split among the threads, each part making its own two passes
    let p = design.names.len();
    let per = p.div_ceil(rayon::current_num_threads().max(1)).max(1);
    let parts: Vec<Vec<[(f64, f64); 4]>> = (0..p)
        .step_by(per)
        .collect::<Vec<_>>()
        .into_par_iter()
        .map(|from| column_moments(design, treated, after, from..(from + per).min(p)))
        .collect();
    parts.concat()
}

fn column_moments(
    design: &Design,
    treated: &[bool],
    after: &[f64],
    columns: std::ops::Range<usize>,
) -> Vec<[(f64, f64); 4]> {
    let p = columns.len();
    let first = columns.start;
    let raw = |row: &[f64], j: usize| row[first + j + 1] * design.sd[first + j] + design.mean[first + j];
    // groups: treated, controls, treated weighted, controls weighted; sums of w, w x, w^2
    let mut acc = vec![[[0.0f64; 3]; 4]; p];
    for i in 0..design.n {
        let row = design.row(i);
        let (u, w) = if treated[i] { (0, 2) } else { (1, 3) };
        let wi = after[i];
        for (j, a) in acc.iter_mut().enumerate() {
            let x = raw(row, j);
            a[u][0] += 1.0;
            a[u][1] += 1.0 * x;
            a[u][2] += 1.0 * 1.0;
            a[w][0] += wi;
            a[w][1] += wi * x;
            a[w][2] += wi * wi;
        }
    }
    let mean: Vec<[f64; 4]> =
        acc.iter().map(|a| a.map(|[sw, sx, _]| if sw <= 0.0 { f64::NAN } else { sx / sw })).collect();
    let mut ss = vec![[0.0f64; 4]; p];
    for i in 0..design.n {
        let row = design.row(i);
        let (u, w) = if treated[i] { (0, 2) } else { (1, 3) };
        for (j, (s, m)) in ss.iter_mut().zip(&mean).enumerate() {
            let x = raw(row, j);
            s[u] += 1.0 * (x - m[u]) * (x - m[u]);
            s[w] += after[i] * (x - m[w]) * (x - m[w]);
        }
    }
    (0..p)
        .map(|j| {
            std::array::from_fn(|g| {
                let [sw, _, sw2] = acc[j][g];
                if sw <= 0.0 {
                    return (f64::NAN, f64::NAN);
                }
                let denom = sw - sw2 / sw;
                (mean[j][g], if denom > 0.0 { ss[j][g] / denom } else { f64::NAN })
            })
        })
        .collect()
}

/// Balance of every design column. `after[i]` is unit i's weight after adjustment (0 = unused).
pub fn balance(design: &Design, treated: &[bool], after: &[f64]) -> Vec<BalanceEntry> {
    let moments = group_moments(design, treated, after);
    (0..design.names.len())
        .map(|j| {
            let [(m1, v1), (m0, v0), (a1, w1), (a0, w0)] = moments[j];
            let pooled = ((v1 + v0) / 2.0).sqrt();
            let smd = |a: f64, b: f64| if pooled > 0.0 { (a - b) / pooled } else { 0.0 };
            let smd_after = smd(a1, a0);
            let vr_after = w1 / w0;
            BalanceEntry {
                covariate: design.names[j].clone(),
                mean_treated_before: m1,
                mean_control_before: m0,
                mean_treated_after: a1,
                mean_control_after: a0,
                smd_before: smd(m1, m0),
                smd_after,
                var_ratio_before: v1 / v0,
                var_ratio_after: vr_after,
                smd_flag: smd_after.is_nan() || smd_after.abs() > SMD_FLAG,
                var_ratio_flag: !(VAR_RATIO_RANGE.0..=VAR_RATIO_RANGE.1).contains(&vr_after),
            }
        })
        .collect()
}

/// Kish effective sample size (sum w)^2 / sum w^2 of the positive weights.
pub fn ess(weights: impl Iterator<Item = f64>) -> f64 {
    let (mut s, mut s2) = (0.0, 0.0);
    for w in weights {
        s += w;
        s2 += w * w;
    }
    if s2 > 0.0 { s * s / s2 } else { 0.0 }
}

/// Propensity-score distributions by group, before and after adjustment, as shares per bin.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PropensityBins {
    /// Bin edges on the propensity scale (length bins + 1).
    pub edges: Vec<f64>,
    /// Share of treated units per bin, before.
    pub treated_before: Vec<f64>,
    /// Share of control units per bin, before.
    pub control_before: Vec<f64>,
    /// Share of treated weight per bin, after.
    pub treated_after: Vec<f64>,
    /// Share of control weight per bin, after.
    pub control_after: Vec<f64>,
}

/// Bin the propensity scores into `bins` equal-width bins on [0, 1].
pub fn propensity_bins(e: &[f64], treated: &[bool], after: &[f64], bins: usize) -> PropensityBins {
    let bins = bins.max(1);
    let mut h = [vec![0.0; bins], vec![0.0; bins], vec![0.0; bins], vec![0.0; bins]];
    for i in 0..e.len() {
        let b = ((e[i] * bins as f64) as usize).min(bins - 1);
        let g = if treated[i] { 0 } else { 1 };
        h[g][b] += 1.0;
        h[g + 2][b] += after[i];
    }
    for v in h.iter_mut() {
        let s: f64 = v.iter().sum();
        if s > 0.0 {
            v.iter_mut().for_each(|x| *x /= s);
        }
    }
    let [tb, cb, ta, ca] = h;
    PropensityBins {
        edges: (0..=bins).map(|b| b as f64 / bins as f64).collect(),
        treated_before: tb,
        control_before: cb,
        treated_after: ta,
        control_after: ca,
    }
}

/// Overlap of the propensity scores of the two groups.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Support {
    /// Smallest and largest treated propensity.
    pub treated_range: (f64, f64),
    /// Smallest and largest control propensity.
    pub control_range: (f64, f64),
    /// Treated units outside the control range.
    pub treated_outside: usize,
    /// Control units outside the treated range.
    pub control_outside: usize,
}

/// Ranges and out-of-range counts.
pub fn support(e: &[f64], treated: &[bool]) -> Support {
    let range = |g: bool| {
        e.iter()
            .zip(treated)
            .filter(|(_, t)| **t == g)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), (x, _)| (a.min(*x), b.max(*x)))
    };
    let tr = range(true);
    let cr = range(false);
    let out =
        |g: bool, r: (f64, f64)| e.iter().zip(treated).filter(|(x, t)| **t == g && (**x < r.0 || **x > r.1)).count();
    Support { treated_range: tr, control_range: cr, treated_outside: out(true, cr), control_outside: out(false, tr) }
}

/// The Crump, Hotz, Imbens & Mitnik (2009, Biometrika 96:187-199) trimming limit alpha: keep
/// units with alpha <= e <= 1 - alpha. With g = 1 / (e (1 - e)): alpha = 0 when
/// max g <= 2 mean g; otherwise 1/(alpha (1 - alpha)) = gamma where gamma solves
/// gamma = 2 * mean(g | g <= gamma).
pub fn crump_alpha(e: &[f64]) -> f64 {
    let mut g: Vec<f64> = e.iter().map(|&p| 1.0 / (p * (1.0 - p))).filter(|v| v.is_finite()).collect();
    if g.is_empty() {
        return 0.0;
    }
    g.sort_unstable_by(f64::total_cmp);
    let n = g.len();
    let mean = g.iter().sum::<f64>() / n as f64;
    if g[n - 1] <= 2.0 * mean {
        return 0.0;
    }
    // find the largest m such that g[m-1] <= 2 * mean(g[..m]) via prefix sums
    let mut prefix = 0.0;
    let mut gamma = g[0] * 2.0;
    for (m, &v) in g.iter().enumerate() {
        prefix += v;
        let cand = 2.0 * prefix / (m + 1) as f64;
        if v <= cand {
            gamma = cand;
        }
    }
    // alpha (1 - alpha) = 1 / gamma, alpha in (0, 0.5]
    let q = 1.0 / gamma;
    if q >= 0.25 {
        return 0.5;
    }
    0.5 - (0.25 - q).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn group_moments_equal_the_one_group_definition_bit_for_bit() {
        let n = 1000;
        let (p, k) = (2, 3);
        let mut z = vec![0.0; n * k];
        for i in 0..n {
            z[i * k] = 1.0;
            z[i * k + 1] = ((i * 7919) % 1000) as f64 / 37.0 - 3.0;
            z[i * k + 2] = ((i * 104_729) % 997) as f64 / 11.0;
        }
        let design = Design {
            names: vec!["a".into(), "b".into()],
            kinds: vec![crate::design::ColumnKind::Numeric; p],
            mean: vec![0.25, -4.0],
            sd: vec![2.0, 0.5],
            n,
            z,
        };
        let treated: Vec<bool> = (0..n).map(|i| (i * 31) % 7 < 2).collect();
        let after: Vec<f64> = (0..n).map(|i| if i % 5 == 0 { 0.0 } else { 1.0 + (i % 3) as f64 / 4.0 }).collect();
        let got = group_moments(&design, &treated, &after);
        for (j, moments) in got.iter().enumerate() {
            let raw = |i: usize| design.at(i, j) * design.sd[j] + design.mean[j];
            let one = |g: bool, wt: bool| {
                wmv((0..n).filter(|&i| treated[i] == g).map(|i| (raw(i), if wt { after[i] } else { 1.0 })))
            };
            let want = [one(true, false), one(false, false), one(true, true), one(false, true)];
            for (a, b) in moments.iter().zip(&want) {
                assert_eq!(a.0.to_bits(), b.0.to_bits());
                assert_eq!(a.1.to_bits(), b.1.to_bits());
            }
        }
    }
}
