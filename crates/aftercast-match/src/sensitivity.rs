//! Sensitivity to unmeasured confounding: Rosenbaum bounds for matched pairs and E-values.

use serde::{Deserialize, Serialize};

/// erfc(x), from statrs (one well-tested source for special functions). statrs 0.18 is
/// accurate to about 1e-10 relative above x = 0.5 (its interval constants carry 10 digits),
/// far more than a p-value needs.
pub fn erfc(x: f64) -> f64 {
    statrs::function::erf::erfc(x)
}

/// Upper tail of the standard normal, P(Z > z).
pub fn norm_sf(z: f64) -> f64 {
    0.5 * erfc(z / std::f64::consts::SQRT_2)
}

/// P(X >= k) for X ~ Binomial(n, p), from statrs (`Binomial::sf(k - 1)`, the regularised
/// incomplete beta function).
pub fn binom_sf(k: usize, n: usize, p: f64) -> f64 {
    use statrs::distribution::{Binomial, DiscreteCDF};
    if k == 0 {
        return 1.0;
    }
    if k > n {
        return 0.0;
    }
    if p.is_nan() {
        return f64::NAN;
    }
    Binomial::new(p.clamp(0.0, 1.0), n as u64).map_or(f64::NAN, |b| b.sf(k as u64 - 1))
}

/// How the Rosenbaum upper-bound p-value was computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BoundMethod {
    /// Normal approximation to the signed-rank statistic's bounding distribution.
    Normal,
    /// All non-zero pair differences have the same size (e.g. binary outcomes): the signed-rank
    /// test is the sign test and the bound is an exact binomial tail.
    ExactSign,
}

/// One point of the Gamma grid.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BoundPoint {
    /// Odds ratio of differential assignment within a pair.
    pub gamma: f64,
    /// Upper bound on the one-sided p-value (effect > 0).
    pub p_upper: f64,
}

/// Rosenbaum bounds of a matched-pair analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RosenbaumBounds {
    /// Pairs with a non-zero difference.
    pub pairs_used: usize,
    /// Pairs whose difference is exactly zero (dropped, as in the signed-rank test).
    pub zero_pairs: usize,
    /// The signed-rank statistic (sum of ranks of positive differences).
    pub statistic: f64,
    /// How the bound was computed.
    pub method: BoundMethod,
    /// The grid.
    pub grid: Vec<BoundPoint>,
    /// Significance level.
    pub alpha: f64,
    /// Gamma at which the upper bound crosses alpha (`None` when it is above alpha already at
    /// Gamma = 1, or still below at the largest Gamma searched, 1000).
    pub gamma_critical: Option<f64>,
}

/// Signed-rank statistic, sum of ranks and sum of squared ranks (average ranks for ties).
fn signed_rank(d: &[f64]) -> (f64, f64, f64, bool) {
    let mut a: Vec<(f64, bool)> = d.iter().map(|&x| (x.abs(), x > 0.0)).collect();
    a.sort_by(|x, y| x.0.total_cmp(&y.0));
    let (mut t, mut s1, mut s2) = (0.0, 0.0, 0.0);
    let mut i = 0;
    let all_tied = a.first().zip(a.last()).is_some_and(|(f, l)| f.0 == l.0);
    while i < a.len() {
        let mut j = i;
        while j + 1 < a.len() && a[j + 1].0 == a[i].0 {
            j += 1;
        }
        let r = (i + j) as f64 / 2.0 + 1.0;
        for item in &a[i..=j] {
            s1 += r;
            s2 += r * r;
            if item.1 {
                t += r;
            }
        }
        i = j + 1;
    }
    (t, s1, s2, all_tied)
}

/// Upper-bound p-value at one Gamma.
fn p_upper(gamma: f64, t: f64, s1: f64, s2: f64, m: usize, exact: bool) -> f64 {
    let p = gamma / (1.0 + gamma);
    if exact {
        let r = s1 / m as f64;
        let k = (t / r).round() as usize;
        binom_sf(k, m, p)
    } else {
        let e = p * s1;
        let v = p * (1.0 - p) * s2;
        norm_sf((t - e) / v.sqrt())
    }
}

/// Rosenbaum bounds for pair differences `d` (treated minus matched control) over the Gamma
/// grid, for the one-sided alternative "effect > 0" (pass `-d` for "effect < 0").
/// Returns `None` when no pair has a non-zero difference.
pub fn rosenbaum(d: &[f64], gammas: &[f64], alpha: f64) -> Option<RosenbaumBounds> {
    let nz: Vec<f64> = d.iter().copied().filter(|x| *x != 0.0).collect();
    if nz.is_empty() {
        return None;
    }
    let (t, s1, s2, tied) = signed_rank(&nz);
    let m = nz.len();
    let method = if tied { BoundMethod::ExactSign } else { BoundMethod::Normal };
    let exact = tied;
    let f = |g: f64| p_upper(g, t, s1, s2, m, exact);
    let grid = gammas.iter().map(|&g| BoundPoint { gamma: g, p_upper: f(g) }).collect();
    let gamma_critical = if f(1.0) > alpha || f(1000.0) <= alpha {
        None
    } else {
        let (mut lo, mut hi) = (0.0f64, 1000f64.ln());
        for _ in 0..100 {
            let mid = 0.5 * (lo + hi);
            if f(mid.exp()) <= alpha {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        Some((0.5 * (lo + hi)).exp())
    };
    Some(RosenbaumBounds { pairs_used: m, zero_pairs: d.len() - m, statistic: t, method, grid, alpha, gamma_critical })
}

/// E-value of a risk ratio (VanderWeele & Ding 2017, Ann. Intern. Med. 167:268-274):
/// RR + sqrt(RR (RR - 1)), with RR < 1 replaced by 1/RR.
pub fn evalue_rr(rr: f64) -> f64 {
    let r = if rr < 1.0 { 1.0 / rr } else { rr };
    r + (r * (r - 1.0)).max(0.0).sqrt()
}

/// E-value of the confidence limit nearer the null: 1 when the interval contains 1.
pub fn evalue_limit(lower: f64, upper: f64) -> f64 {
    if lower <= 1.0 && upper >= 1.0 {
        1.0
    } else if lower > 1.0 {
        evalue_rr(lower)
    } else {
        evalue_rr(upper)
    }
}

/// E-values of an analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EValues {
    /// "risk-ratio" (binary outcome) or "standardised-difference" (continuous outcome,
    /// RR approximated by exp(0.91 d); VanderWeele & Ding 2017).
    pub scale: String,
    /// Risk ratio (or its approximation) at the point estimate.
    pub rr: f64,
    /// Interval of the risk ratio.
    pub rr_interval: (f64, f64),
    /// E-value of the point estimate.
    pub point: f64,
    /// E-value of the interval limit nearer the null.
    pub limit: f64,
}

/// E-values of a continuous outcome via the standardised difference d = effect / sd:
/// RR = exp(0.91 d) (VanderWeele & Ding 2017, after Chinn 2000 and Hasselblad & Hedges 1995).
pub fn evalue_continuous(effect: f64, lower: f64, upper: f64, sd: f64) -> EValues {
    let rr = (0.91 * effect / sd).exp();
    let lo = (0.91 * lower / sd).exp();
    let hi = (0.91 * upper / sd).exp();
    EValues {
        scale: "standardised-difference".into(),
        rr,
        rr_interval: (lo, hi),
        point: evalue_rr(rr),
        limit: evalue_limit(lo, hi),
    }
}

/// E-values of a binary outcome from the risk ratio and its interval.
pub fn evalue_binary(rr: f64, lower: f64, upper: f64) -> EValues {
    EValues {
        scale: "risk-ratio".into(),
        rr,
        rr_interval: (lower, upper),
        point: evalue_rr(rr),
        limit: evalue_limit(lower, upper),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn erfc_known_values() {
        // Abramowitz & Stegun table values (also scipy.special.erfc). Tolerance: statrs 0.18's
        // documented accuracy, about 1e-10 relative above x = 0.5.
        assert!((erfc(0.5) / 0.4795001221869535 - 1.0).abs() < 1e-9);
        assert!((erfc(1.0) / 0.15729920705028513 - 1.0).abs() < 1e-9);
        assert!((erfc(3.0) / 2.209049699858544e-05 - 1.0).abs() < 1e-9);
        assert!((erfc(-1.0) - (2.0 - 0.15729920705028513)).abs() < 1e-9);
        // scipy.stats.norm.sf(1.6448536269514722) = 0.05
        assert!((norm_sf(1.6448536269514722) - 0.05).abs() < 1e-10);
    }

    #[test]
    fn binom_tail_small_case() {
        // P(X >= 2), n = 3, p = 0.5: (3 + 1) / 8, by hand; statrs' incomplete beta is within a
        // few ulps of it.
        assert!((binom_sf(2, 3, 0.5) - 0.5).abs() < 1e-14);
        assert!((binom_sf(1, 3, 0.5) - 0.875).abs() < 1e-14);
        assert!((binom_sf(3, 3, 0.25) - 1.0 / 64.0).abs() < 1e-14);
        assert_eq!((binom_sf(0, 3, 0.5), binom_sf(4, 3, 0.5)), (1.0, 0.0));
        // scipy 1.17.1 binom.sf(59, 100, 0.5) = P(X >= 60) = 0.028443966820490444
        assert!((binom_sf(60, 100, 0.5) / 0.028443966820490444 - 1.0).abs() < 1e-9);
    }
}
