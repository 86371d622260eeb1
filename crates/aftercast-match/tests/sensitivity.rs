//! Rosenbaum bounds against scipy (binomtest, wilcoxon) and E-values against VanderWeele & Ding
//! (2017).

mod common;
use aftercast_match::sensitivity::{BoundMethod, binom_sf, evalue_continuous, evalue_limit, evalue_rr, rosenbaum};
use common::{reference, tol};

#[test]
fn evalue_vanderweele_ding_2017() {
    // VanderWeele & Ding (2017), Ann. Intern. Med. 167:268-274: RR 3.9 -> E-value 7.26;
    // lower CI limit 1.8 -> 3.0.
    assert!((evalue_rr(3.9) - 7.263).abs() < tol::EVALUE_3DP, "{}", evalue_rr(3.9));
    assert!((evalue_limit(1.8, 8.4) - 3.0).abs() < tol::EVALUE_1DP, "{}", evalue_limit(1.8, 8.4));
    // protective effects use 1/RR; an interval containing 1 gives 1
    assert!((evalue_rr(1.0 / 3.9) - 7.263).abs() < tol::EVALUE_3DP);
    assert_eq!(evalue_limit(0.8, 1.3), 1.0);
    // continuous outcome: d = 0.5 -> RR = exp(0.455) (standardised-difference approximation)
    let e = evalue_continuous(5.0, 1.0, 9.0, 10.0);
    assert!((e.rr - (0.91f64 * 0.5).exp()).abs() < 1e-12);
    assert!((e.point - evalue_rr((0.455f64).exp())).abs() < 1e-12);
}

#[test]
fn exact_sign_bound_equals_scipy_binomtest() {
    // Binary matched-pair outcomes: every non-zero difference is +-1, the signed-rank bound is
    // the sign test, P(Bin(m, G/(1+G)) >= k) (Rosenbaum 2002, Observational Studies, ch. 4).
    // Reference: scipy.stats.binomtest(k, m, G/(1+G), alternative='greater').
    let r = reference();
    for case in r["binomtest_greater"].as_array().unwrap() {
        let k = case["k"].as_u64().unwrap() as usize;
        let m = case["m"].as_u64().unwrap() as usize;
        let g = case["gamma"].as_f64().unwrap();
        let want = case["p_upper"].as_f64().unwrap();
        assert!((binom_sf(k, m, g / (1.0 + g)) - want).abs() < tol::BINOM_ABS, "k {k} m {m} G {g}");
        // the same through the bound: k positive pairs, m - k negative, some ties at zero
        let mut d = vec![1.0; k];
        d.extend(vec![-1.0; m - k]);
        d.extend(vec![0.0; 3]);
        let b = rosenbaum(&d, &[g], 0.05).unwrap();
        assert_eq!(b.method, BoundMethod::ExactSign);
        assert_eq!(b.pairs_used, m);
        assert_eq!(b.zero_pairs, 3);
        assert!(
            (b.grid[0].p_upper - want).abs() < tol::BINOM_ABS,
            "bound k {k} m {m} G {g}: {} vs {want}",
            b.grid[0].p_upper
        );
    }
}

#[test]
fn gamma_one_equals_scipy_wilcoxon_normal_approximation() {
    // Reference: scipy.stats.wilcoxon(d, alternative='greater', method='approx', correction=False).
    let r = reference();
    let w = &r["wilcoxon_greater_approx"];
    let d: Vec<f64> = w["d"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let b = rosenbaum(&d, &[1.0, 2.0], 0.05).unwrap();
    assert_eq!(b.method, BoundMethod::Normal);
    assert!((b.grid[0].p_upper - w["p_value"].as_f64().unwrap()).abs() < tol::WILCOXON_ABS);
    assert!((b.statistic - w["statistic"].as_f64().unwrap()).abs() < 1e-12);
    // the bound grows with Gamma, and the critical Gamma sits where it crosses alpha
    assert!(b.grid[1].p_upper > b.grid[0].p_upper);
    let gc = b.gamma_critical.unwrap();
    let at = rosenbaum(&d, &[gc], 0.05).unwrap().grid[0].p_upper;
    assert!((at - 0.05).abs() < 1e-9, "p at critical gamma {at}");
}
