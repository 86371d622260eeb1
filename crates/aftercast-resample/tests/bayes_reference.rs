//! The Bayesian bootstrap against published and analytic results.

mod tol;

use aftercast_resample::bayes::{BayesBootstrap, BayesError, PairSample, Sample, TieAggregation};
use aftercast_resample::rng::Stream;
use rand::RngExt;

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn var(v: &[f64]) -> f64 {
    let m = mean(v);
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() as f64 - 1.0)
}

/// Rubin (1981), Ann. Statist. 9:130-134: the Bayesian-bootstrap distribution of the mean has
/// mean xbar and variance sum (x_i - xbar)^2 / (n (n + 1)).
fn rubin_variance(x: &[f64]) -> f64 {
    let n = x.len() as f64;
    let m = mean(x);
    x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n * (n + 1.0))
}

/// Two-sample Kolmogorov-Smirnov statistic sup |F_a - F_b|.
fn ks_statistic(a: &[f64], b: &[f64]) -> f64 {
    let mut a = a.to_vec();
    let mut b = b.to_vec();
    a.sort_by(f64::total_cmp);
    b.sort_by(f64::total_cmp);
    let (mut i, mut j, mut d) = (0usize, 0usize, 0.0f64);
    while i < a.len() && j < b.len() {
        let t = a[i].min(b[j]);
        while i < a.len() && a[i] <= t {
            i += 1;
        }
        while j < b.len() && b[j] <= t {
            j += 1;
        }
        d = d.max((i as f64 / a.len() as f64 - j as f64 / b.len() as f64).abs());
    }
    d
}

/// Critical value of the two-sample KS statistic at level alpha from Smirnov's limiting
/// distribution: c(alpha) sqrt((n + m) / (n m)), c(alpha) = sqrt(-ln(alpha / 2) / 2).
fn ks_critical(n: usize, m: usize, alpha: f64) -> f64 {
    let c = (-(alpha / 2.0).ln() / 2.0).sqrt();
    c * ((n + m) as f64 / (n * m) as f64).sqrt()
}

/// Rubin (1981): x = {1, 2, 4, 7, 11}: posterior mean 5, variance 2.2 (published example; also
/// in the project's reference-data README).
#[test]
fn rubin_1981_example_variance_2_2() {
    let x = [1.0, 2.0, 4.0, 7.0, 11.0];
    assert!((rubin_variance(&x) - 2.2).abs() < 1e-12, "the formula itself gives 2.2");
    for ties in [TieAggregation::Auto, TieAggregation::Never, TieAggregation::Always] {
        let d = BayesBootstrap::new(tol::RUBIN_DRAWS, 1981).with_ties(ties).mean(&x).expect("draws");
        let v = var(&d);
        println!("Rubin example, {ties:?}: variance {v:.5} (2.2), mean {:.5} (5)", mean(&d));
        assert!(((v - 2.2) / 2.2).abs() < tol::RUBIN_VARIANCE_REL, "{ties:?}: variance {v}");
        assert!((mean(&d) - 5.0).abs() < tol::RUBIN_MEAN_SDS * 2.2f64.sqrt(), "{ties:?}: mean {}", mean(&d));
    }
}

/// Rubin (1981) general formula on random data (with and without ties).
#[test]
fn rubin_1981_general_formula_on_random_data() {
    let mut rng = Stream::new(99, 0);
    let continuous: Vec<f64> = (0..40).map(|_| rng.random::<f64>() * 100.0 - 20.0).collect();
    let tied: Vec<f64> = (0..60).map(|_| (rng.random::<f64>() * 4.0).floor()).collect();
    for (name, x) in [("continuous", &continuous), ("tied", &tied)] {
        let want = rubin_variance(x);
        let d = BayesBootstrap::new(tol::RUBIN_DRAWS, 7).mean(x).expect("draws");
        let v = var(&d);
        println!("Rubin formula, {name}: variance {v:.6} vs {want:.6}");
        assert!(((v - want) / want).abs() < tol::RUBIN_VARIANCE_REL, "{name}: variance {v}, Rubin {want}");
        assert!((mean(&d) - mean(x)).abs() < tol::RUBIN_MEAN_SDS * want.sqrt(), "{name}: mean");
    }
}

/// Stratified by group: independent Dirichlets per group, so the difference of means has
/// mean xbar_t - xbar_c and variance V_t + V_c (Rubin's formula per group).
#[test]
fn two_group_difference_is_stratified() {
    let mut rng = Stream::new(5, 5);
    let t: Vec<f64> = (0..30).map(|_| rng.random::<f64>() * 10.0 + 2.0).collect();
    let c: Vec<f64> =
        (0..50).map(|_| if rng.random::<f64>() < 0.6 { 0.0 } else { rng.random::<f64>() * 8.0 }).collect();
    let d = BayesBootstrap::new(tol::RUBIN_DRAWS, 11).two_groups(&t, &c).expect("draws");
    let want_v = rubin_variance(&t) + rubin_variance(&c);
    assert!(((var(&d.difference) - want_v) / want_v).abs() < tol::RUBIN_VARIANCE_REL);
    assert!((mean(&d.difference) - (mean(&t) - mean(&c))).abs() < tol::RUBIN_MEAN_SDS * want_v.sqrt());
    // independence of the two groups' draws: correlation near 0 (SE 1/sqrt(draws) = 0.0022)
    let (mt, mc) = (mean(&d.treated_mean), mean(&d.control_mean));
    let cov = d.treated_mean.iter().zip(&d.control_mean).map(|(a, b)| (a - mt) * (b - mc)).sum::<f64>()
        / (d.difference.len() as f64 - 1.0);
    let corr = cov / (var(&d.treated_mean) * var(&d.control_mean)).sqrt();
    assert!(corr.abs() < 0.012, "correlation between groups {corr}");
    let rel = d.relative().expect("relative");
    for k in [0, 17, 999] {
        assert_eq!(rel[k], d.difference[k] / d.control_mean[k]);
    }
}

/// Exact tie aggregation: k tied units with Exp(1) weights have total weight Gamma(k, 1)
/// (sum of independent exponentials), so compressed and per-unit draws have the same
/// distribution. Two-sample KS test at a fixed seed plus the Rubin moments for each policy.
#[test]
fn tie_aggregation_same_distribution_as_per_unit_weights() {
    let mut rng = Stream::new(123, 0);
    let x: Vec<f64> = (0..300)
        .map(|i| match i % 10 {
            0..=6 => 0.0,
            7 | 8 => 1.0,
            _ => rng.random::<f64>() * 50.0,
        })
        .collect();
    let compressed = Sample::new(&x, TieAggregation::Always).expect("sample");
    assert_eq!(compressed.atoms(), 32, "0, 1 and 30 distinct values");
    assert!(compressed.is_compressed());
    assert_eq!(compressed.counts()[0], 210);
    assert!(Sample::new(&x, TieAggregation::Auto).expect("sample").is_compressed());
    assert!(!Sample::new(&x, TieAggregation::Never).expect("sample").is_compressed());

    let a = BayesBootstrap::new(tol::TIE_DRAWS, 1).with_ties(TieAggregation::Always).mean(&x).expect("draws");
    let b = BayesBootstrap::new(tol::TIE_DRAWS, 2).with_ties(TieAggregation::Never).mean(&x).expect("draws");
    let d = ks_statistic(&a, &b);
    let crit = ks_critical(a.len(), b.len(), tol::KS_ALPHA);
    println!("tie aggregation: KS {d:.5} (critical {crit:.5} at alpha {})", tol::KS_ALPHA);
    assert!(d < crit, "KS statistic {d} >= critical {crit}");
    let want_v = rubin_variance(&x);
    for (name, draws) in [("gamma", &a), ("per-unit", &b)] {
        assert!(((var(draws) - want_v) / want_v).abs() < tol::TIE_VARIANCE_REL, "{name}: variance");
        assert!((mean(draws) - mean(&x)).abs() < tol::TIE_MEAN_SDS * want_v.sqrt(), "{name}: mean");
    }
    // The test has power: replacing Gamma(k) by one Exp(1) per atom (ties treated as one unit)
    // gives a clearly different distribution.
    let mut atoms: Vec<f64> = x.clone();
    atoms.sort_by(f64::total_cmp);
    atoms.dedup();
    let wrong = BayesBootstrap::new(tol::TIE_DRAWS, 3).with_ties(TieAggregation::Never).mean(&atoms).expect("draws");
    assert!(ks_statistic(&a, &wrong) > crit);
}

/// Weighted quantile: the cumulative weight of the j smallest of n distinct values is
/// Beta(j, n - j) (sums of Dirichlet(1,..,1) components), so the Bayesian-bootstrap
/// p-quantile (inverse weighted ECDF) equals x_(j) with probability P(Binomial(n-1, p) = j-1).
/// With ties the probabilities of tied order statistics add up.
#[test]
fn weighted_quantile_order_statistic_probabilities() {
    let binom = |n: u64, k: u64, p: f64| {
        let c = (1..=k).fold(1.0, |acc, i| acc * (n - k + i) as f64 / i as f64);
        c * p.powi(k as i32) * (1.0 - p).powi((n - k) as i32)
    };
    let x = [1.0, 2.0, 3.0, 4.0, 5.0];
    for p in [0.5, 0.3] {
        let q = BayesBootstrap::new(tol::QUANTILE_DRAWS, 8).quantile(&x, p).expect("draws");
        for (j, &v) in x.iter().enumerate() {
            let freq = q.iter().filter(|&&d| d == v).count() as f64 / q.len() as f64;
            let want = binom(4, j as u64, p);
            assert!((freq - want).abs() < tol::QUANTILE_FREQ_ABS, "p {p}, x_({}) freq {freq}, want {want}", j + 1);
        }
    }
    // ties: {1, 2, 2, 2, 5}: P(median = 2) = P(Bin(4, .5) in {1, 2, 3}) = 14/16
    let tied = [2.0, 1.0, 2.0, 5.0, 2.0];
    for ties in [TieAggregation::Always, TieAggregation::Never] {
        let q = BayesBootstrap::new(tol::QUANTILE_DRAWS, 9).with_ties(ties).quantile(&tied, 0.5).expect("draws");
        let f2 = q.iter().filter(|&&d| d == 2.0).count() as f64 / q.len() as f64;
        assert!((f2 - 14.0 / 16.0).abs() < tol::QUANTILE_FREQ_ABS, "{ties:?}: {f2}");
    }
    // several quantiles at once are ordered and equal the one-at-a-time draws (same streams)
    let qs = BayesBootstrap::new(200, 4).quantiles(&x, &[0.9, 0.1, 0.5]).expect("draws");
    let q1 = BayesBootstrap::new(200, 4).quantile(&x, 0.1).expect("draws");
    for (row, single) in qs.iter().zip(&q1) {
        assert!(row[1] <= row[2] && row[2] <= row[0]);
        assert_eq!(row[1], *single);
    }
}

/// A ratio of sums with denominator 1 for every unit is the mean: same atoms, same streams.
#[test]
fn ratio_with_unit_denominator_is_the_mean() {
    let x = [0.0, 0.0, 3.5, 1.0, 0.0, 9.0, 1.0];
    let ones = [1.0; 7];
    let boot = BayesBootstrap::new(500, 21);
    let r = boot.ratio(&x, &ones).expect("ratio");
    let m = boot.mean(&x).expect("mean");
    for (a, b) in r.iter().zip(&m) {
        assert!((a - b).abs() <= 1e-12 * b.abs().max(1.0));
    }
    // a genuine ratio stays within the range of the per-unit ratios (positive denominators)
    let den = [1.0, 2.0, 1.0, 4.0, 1.0, 3.0, 2.0];
    let rr = boot.ratio(&x, &den).expect("ratio");
    let per_unit: Vec<f64> = x.iter().zip(&den).map(|(a, b)| a / b).collect();
    let (lo, hi) = per_unit.iter().fold((f64::MAX, f64::MIN), |(l, h), v| (l.min(*v), h.max(*v)));
    assert!(rr.iter().all(|v| *v >= lo - 1e-12 && *v <= hi + 1e-12));
    // stratified ratios with unit denominators are the stratified means, draw for draw
    let y = [2.0, 0.0, 0.0, 4.0];
    let pa = PairSample::for_group(&x, &ones, TieAggregation::Auto, 0).expect("pairs");
    let pb = PairSample::for_group(&y, &[1.0; 4], TieAggregation::Auto, 1).expect("pairs");
    let sa = Sample::for_group(&x, TieAggregation::Auto, 0).expect("sample");
    let sb = Sample::for_group(&y, TieAggregation::Auto, 1).expect("sample");
    let by_ratio = boot.stratified_ratios(&[pa, pb], |r| r[0] - r[1]).expect("ratios");
    let by_mean = boot.stratified_samples(&[sa, sb], |m| m[0] - m[1]).expect("means");
    for (a, b) in by_ratio.iter().zip(&by_mean) {
        assert!((a - b).abs() <= 1e-12 * b.abs().max(1.0));
    }
}

#[test]
fn bad_input_is_an_error() {
    let boot = BayesBootstrap::new(10, 1);
    assert_eq!(boot.mean(&[]), Err(BayesError::EmptyGroup { group: 0 }));
    assert!(matches!(boot.mean(&[1.0, f64::INFINITY]), Err(BayesError::NonFinite { group: 0, index: 1, .. })));
    assert!(matches!(boot.two_groups(&[1.0], &[2.0, f64::NAN]), Err(BayesError::NonFinite { group: 1, index: 1, .. })));
    assert_eq!(boot.two_groups(&[1.0], &[]).err(), Some(BayesError::EmptyGroup { group: 1 }));
    assert_eq!(boot.ratio(&[1.0, 2.0], &[0.0, 0.0]), Err(BayesError::ZeroDenominator { group: 0, units: 2 }));
    assert!(matches!(boot.ratio(&[1.0, 2.0], &[1.0]), Err(BayesError::LengthMismatch { .. })));
    assert!(matches!(boot.quantile(&[1.0], 1.5), Err(BayesError::InvalidProbability { .. })));
    assert_eq!(BayesBootstrap::new(0, 1).mean(&[1.0]), Err(BayesError::NoDraws));
    let d = boot.two_groups(&[1.0, 2.0], &[0.0, 0.0, 0.0]).expect("difference is fine");
    assert_eq!(d.relative(), Err(BayesError::ZeroDenominator { group: 1, units: 3 }));
    // the messages name the group and unit
    let msg = boot.mean(&[1.0, f64::NAN]).expect_err("error").to_string();
    assert!(msg.contains("group 0") && msg.contains("unit 1"), "{msg}");
}
