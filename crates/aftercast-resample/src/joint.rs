//! Joint questions over several estimates that share their draws: are they all zero, are they
//! all equal? Answered with a Wald statistic whose covariance is the draws' own (each draw is
//! one resample of every estimate), referred to a chi-square distribution.

use aftercast_core::estimate::JointQuestion;
use aftercast_core::result::JointTest;
use nalgebra::{DMatrix, DVector};
use statrs::distribution::{ChiSquared, ContinuousCDF, FisherSnedecor};

/// Answer `question` for the estimates `points` (one per row) with draws `draws[row][draw]`,
/// the draws resampling `clusters` units when given.
/// Draws in which any row is not finite are left out. Returns `None` when fewer than two
/// usable draws or no row (or, for `all-equal`, fewer than two rows) remain, or when the
/// covariance is singular (rows that are exact combinations of others).
///
/// For `all-zero` the statistic is `p' S⁻¹ p` with `S` the draws' covariance, on `rows` degrees
/// of freedom; for `all-equal` the same on the `rows − 1` differences from the first row. The
/// reference distribution treats the draws' covariance as the sampling covariance (the
/// Bayesian-bootstrap reading of a Wald test).
///
/// ```
/// use aftercast_core::estimate::JointQuestion;
/// use aftercast_resample::joint::wald;
/// // two independent estimates, each with sd 1: (2, 0) gives a statistic near 4 on 2 df
/// let a: Vec<f64> = (0..2000).map(|i| ((i as f64 + 0.5) / 2000.0 * 6.0 - 3.0)).collect();
/// let b: Vec<f64> = (0..2000).map(|i| a[(i * 7919) % 2000]).collect();
/// let t = wald(JointQuestion::AllZero, &["a".into(), "b".into()], &[2.0, 0.0], &[a, b], None).unwrap();
/// assert_eq!(t.df, 2);
/// assert!(t.p_value > 0.0 && t.p_value < 1.0);
/// ```
pub fn wald(
    question: JointQuestion,
    labels: &[String],
    points: &[f64],
    draws: &[Vec<f64>],
    clusters: Option<usize>,
) -> Option<JointTest> {
    let k = points.len();
    if k == 0 || draws.len() != k || (question == JointQuestion::AllEqual && k < 2) {
        return None;
    }
    let n = draws.iter().map(Vec::len).min().unwrap_or(0);
    let usable: Vec<usize> = (0..n).filter(|&d| draws.iter().all(|r| r[d].is_finite())).collect();
    if usable.len() < 3 {
        return None;
    }
    // the contrasts tested: the rows themselves, or each row minus the first
    let contrast = |row: &dyn Fn(usize) -> f64| -> Vec<f64> {
        match question {
            JointQuestion::AllZero => (0..k).map(row).collect(),
            JointQuestion::AllEqual => (1..k).map(|j| row(j) - row(0)).collect(),
        }
    };
    let m = match question {
        JointQuestion::AllZero => k,
        JointQuestion::AllEqual => k - 1,
    };
    let p = DVector::from_vec(contrast(&|j| points[j]));
    let samples: Vec<Vec<f64>> = usable.iter().map(|&d| contrast(&|j| draws[j][d])).collect();
    let nd = samples.len() as f64;
    let mean: Vec<f64> = (0..m).map(|j| samples.iter().map(|s| s[j]).sum::<f64>() / nd).collect();
    let mut cov = DMatrix::<f64>::zeros(m, m);
    for s in &samples {
        for a in 0..m {
            for b in 0..m {
                cov[(a, b)] += (s[a] - mean[a]) * (s[b] - mean[b]) / (nd - 1.0);
            }
        }
    }
    let chol = cov.cholesky()?;
    let statistic = p.dot(&chol.solve(&p));
    if !statistic.is_finite() {
        return None;
    }
    // with G resampled clusters, W / m against F(m, G - 1) (the usual small-sample reference of
    // a cluster-robust Wald test); otherwise chi-square with m degrees of freedom
    let (p_value, df_denominator) = match clusters.filter(|&g| g >= 3) {
        Some(g) => (
            FisherSnedecor::new(m as f64, (g - 1) as f64).ok().map_or(f64::NAN, |f| f.sf(statistic / m as f64)),
            Some(g - 1),
        ),
        None => (ChiSquared::new(m as f64).ok().map_or(f64::NAN, |c| c.sf(statistic)), None),
    };
    let prob_order = (question == JointQuestion::AllEqual).then(|| {
        let hi = (0..k).max_by(|&a, &b| points[a].total_cmp(&points[b])).unwrap_or(0);
        let lo = (0..k).min_by(|&a, &b| points[a].total_cmp(&points[b])).unwrap_or(0);
        usable.iter().filter(|&&d| draws[hi][d] > draws[lo][d]).count() as f64 / nd
    });
    Some(JointTest { question, rows: labels.to_vec(), statistic, df: m, df_denominator, p_value, prob_order })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Stream;

    /// Analytic check: with independent unit-variance draws, the statistic of points (a, b) is
    /// a² + b² and the p-value is exp(-x/2) for 2 degrees of freedom (chi-square with 2 df).
    #[test]
    fn two_independent_rows_match_the_chi_square_with_two_df() {
        let mut s = Stream::new(7, 0);
        let a: Vec<f64> = (0..200_000).map(|_| s.normal()).collect();
        let b: Vec<f64> = (0..200_000).map(|_| s.normal()).collect();
        let t = wald(JointQuestion::AllZero, &["a".into(), "b".into()], &[1.5, -1.0], &[a, b], None).unwrap();
        assert!((t.statistic - 3.25).abs() < 0.05, "{}", t.statistic);
        assert!((t.p_value - (-t.statistic / 2.0).exp()).abs() < 1e-12);
    }

    /// Equality of two rows with independent unit-variance draws: the difference has variance 2,
    /// so points 2 and 0 give a statistic of 4/2 = 2 on one degree of freedom.
    #[test]
    fn equality_uses_the_variance_of_the_difference() {
        let mut s = Stream::new(9, 0);
        let a: Vec<f64> = (0..200_000).map(|_| 2.0 + s.normal()).collect();
        let b: Vec<f64> = (0..200_000).map(|_| s.normal()).collect();
        let t = wald(JointQuestion::AllEqual, &["a".into(), "b".into()], &[2.0, 0.0], &[a, b], None).unwrap();
        assert_eq!(t.df, 1);
        assert!((t.statistic - 2.0).abs() < 0.05, "{}", t.statistic);
        // P(N(2, 2) > 0) = Phi(2 / sqrt 2) = 0.9214 (normal table)
        assert!((t.prob_order.unwrap() - 0.9214).abs() < 0.01);
    }

    /// With clusters, the p-value is the F(m, G - 1) tail of W / m: for m = 1 that equals the
    /// two-sided t tail with G - 1 df (t² = F(1, ν)); scipy.stats.t.sf(2, 9) * 2 = 0.0765 (from
    /// memory of the t table: t(9) 0.05 two-sided is 2.262, so p at 2 sits between 0.05 and 0.1).
    #[test]
    fn clusters_use_the_f_reference() {
        let mut s = Stream::new(11, 0);
        let a: Vec<f64> = (0..200_000).map(|_| s.normal()).collect();
        let t = wald(JointQuestion::AllZero, &["a".into()], &[2.0], &[a], Some(10)).unwrap();
        assert_eq!(t.df_denominator, Some(9));
        let want = statrs::distribution::StudentsT::new(0.0, 1.0, 9.0).map(|d| 2.0 * d.sf(t.statistic.sqrt())).unwrap();
        assert!((t.p_value - want).abs() < 1e-9);
        assert!(t.p_value > 0.05 && t.p_value < 0.1);
    }

    #[test]
    fn a_constant_row_gives_no_test() {
        let a = vec![1.0; 50];
        assert!(wald(JointQuestion::AllZero, &["a".into()], &[1.0], &[a], None).is_none());
    }
}
