//! From draws to the numbers a decision rests on: mean, median, sd, equal-tailed and
//! highest-density intervals, probabilities above zero and a threshold, and the ROPE verdict.
//!
//! Quantiles use linear interpolation between order statistics (Hyndman & Fan 1996 type 7,
//! numpy's default), so equal-tailed intervals match `numpy.quantile` on the same draws.
//! The highest-density interval is the shortest interval holding `ceil(level * n)` sorted draws
//! (Chen & Shao 1999), which is consistent for unimodal posteriors.

use aftercast_core::result::{PathPoint, Summary, Verdict};
use aftercast_core::time::TimePoint;

/// Type-7 quantile of sorted, finite values (`p` in [0, 1]).
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    match sorted.len() {
        0 => f64::NAN,
        1 => sorted[0],
        n => {
            let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
            let lo = h.floor() as usize;
            let hi = (lo + 1).min(n - 1);
            sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
        }
    }
}

/// Highest-density interval of sorted draws: the narrowest window of `ceil(level * n)` draws.
pub fn hdi(sorted: &[f64], level: f64) -> (f64, f64) {
    let n = sorted.len();
    if n == 0 {
        return (f64::NAN, f64::NAN);
    }
    let m = ((level.clamp(0.0, 1.0) * n as f64).ceil() as usize).clamp(1, n);
    let mut best = (sorted[0], sorted[m - 1]);
    let mut width = best.1 - best.0;
    for i in 1..=(n - m) {
        let w = sorted[i + m - 1] - sorted[i];
        if w < width {
            width = w;
            best = (sorted[i], sorted[i + m - 1]);
        }
    }
    best
}

/// Summarise draws (`estimate` is set to their mean; set the method's point answer with
/// [`Summary::with_estimate`]). Non-finite draws are ignored (callers report how many there were); with no
/// finite draw every field is NaN.
pub fn summarize(draws: &[f64], level: f64, threshold: Option<f64>) -> Summary {
    let mut sorted: Vec<f64> = draws.iter().copied().filter(|v| v.is_finite()).collect();
    sorted.sort_by(f64::total_cmp);
    summarize_sorted(&sorted, level, threshold)
}

/// [`summarize`] for draws already sorted and finite.
pub fn summarize_sorted(sorted: &[f64], level: f64, threshold: Option<f64>) -> Summary {
    let n = sorted.len();
    if n == 0 {
        return Summary {
            estimate: f64::NAN,
            mean: f64::NAN,
            median: f64::NAN,
            sd: f64::NAN,
            lower: f64::NAN,
            upper: f64::NAN,
            hdi_lower: f64::NAN,
            hdi_upper: f64::NAN,
            prob_positive: f64::NAN,
            prob_above_threshold: threshold.map(|_| f64::NAN),
        };
    }
    let nf = n as f64;
    let mean = sorted.iter().sum::<f64>() / nf;
    let var = if n > 1 { sorted.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0) } else { 0.0 };
    let tail = (1.0 - level) / 2.0;
    let (hl, hu) = hdi(sorted, level);
    let above = |t: f64| (n - sorted.partition_point(|v| *v <= t)) as f64 / nf;
    Summary {
        estimate: mean,
        mean,
        median: quantile_sorted(sorted, 0.5),
        sd: var.sqrt(),
        lower: quantile_sorted(sorted, tail),
        upper: quantile_sorted(sorted, 1.0 - tail),
        hdi_lower: hl,
        hdi_upper: hu,
        prob_positive: above(0.0),
        prob_above_threshold: threshold.map(above),
    }
}

/// The ROPE decision on an interval (Kruschke 2018), in the product's words:
/// wholly above the ROPE: gain; above zero but reaching into the ROPE: gain-but-small; wholly
/// inside: negligible; mirrored for losses; spanning zero and leaving the ROPE: inconclusive.
pub fn verdict(interval: (f64, f64), rope: (f64, f64)) -> Verdict {
    let (lo, hi) = interval;
    let (rl, rh) = rope;
    if !(lo.is_finite() && hi.is_finite()) {
        return Verdict::Inconclusive;
    }
    if lo > rh {
        Verdict::Gain
    } else if hi < rl {
        Verdict::Loss
    } else if lo >= rl && hi <= rh {
        Verdict::Negligible
    } else if lo > 0.0 {
        Verdict::GainButSmall
    } else if hi < 0.0 {
        Verdict::LossButSmall
    } else {
        Verdict::Inconclusive
    }
}

/// A pre-period row of a series result (counterfactual band of the in-sample fit).
pub fn pre_point(time: TimePoint, observed: f64, fitted_draws: &mut [f64], level: f64) -> PathPoint {
    fitted_draws.sort_by(f64::total_cmp);
    let tail = (1.0 - level) / 2.0;
    PathPoint {
        time,
        observed: observed.is_finite().then_some(observed),
        counterfactual: quantile_sorted(fitted_draws, 0.5),
        lower: quantile_sorted(fitted_draws, tail),
        upper: quantile_sorted(fitted_draws, 1.0 - tail),
        post: false,
        effect: None,
        cumulative: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Stream;

    #[test]
    fn hdi_of_exponential_is_zero_to_ln10() {
        // Analytic: for Exp(1) the 90% HDI is [0, -ln 0.1] = [0, 2.302585].
        let mut s = Stream::new(11, 0);
        let mut d: Vec<f64> = (0..200_000).map(|_| s.exp1()).collect();
        d.sort_by(f64::total_cmp);
        let (lo, hi) = hdi(&d, 0.9);
        assert!(lo.abs() < 0.002, "lo {lo}");
        assert!((hi - 10f64.ln()).abs() < 0.03, "hi {hi}");
    }

    #[test]
    fn hdi_of_normal_is_pm_1_6449() {
        // Analytic: for N(0,1) the 90% HDI is the central interval +-1.644854.
        use rand_distr::{Distribution, StandardNormal};
        let mut s = Stream::new(12, 0);
        let mut d: Vec<f64> = (0..200_000).map(|_| StandardNormal.sample(&mut s)).collect();
        d.sort_by(f64::total_cmp);
        let (lo, hi) = hdi(&d, 0.9);
        assert!((lo + 1.644854).abs() < 0.02, "lo {lo}");
        assert!((hi - 1.644854).abs() < 0.02, "hi {hi}");
    }

    #[test]
    fn every_verdict_word_is_reachable() {
        let rope = (-1.0, 1.0);
        assert_eq!(verdict((1.5, 3.0), rope), Verdict::Gain);
        assert_eq!(verdict((0.5, 3.0), rope), Verdict::GainButSmall);
        assert_eq!(verdict((-0.5, 0.8), rope), Verdict::Negligible);
        assert_eq!(verdict((-3.0, -0.5), rope), Verdict::LossButSmall);
        assert_eq!(verdict((-3.0, -1.5), rope), Verdict::Loss);
        assert_eq!(verdict((-0.5, 2.0), rope), Verdict::Inconclusive);
        assert_eq!(verdict((-2.0, 2.0), rope), Verdict::Inconclusive);
        assert_eq!(verdict((f64::NAN, 2.0), rope), Verdict::Inconclusive);
    }

    #[test]
    fn type7_quantiles_by_hand() {
        // Hyndman & Fan (1996) type 7 on {1,2,3,4}: p=0.5 -> 2.5, p=0.1 -> 1.3.
        let x = [1.0, 2.0, 3.0, 4.0];
        assert!((quantile_sorted(&x, 0.5) - 2.5).abs() < 1e-12);
        assert!((quantile_sorted(&x, 0.1) - 1.3).abs() < 1e-12);
        assert_eq!(quantile_sorted(&x, 1.0), 4.0);
    }
}
