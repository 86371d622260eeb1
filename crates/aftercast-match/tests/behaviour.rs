//! Behaviour of the analysis: errors name what is wrong, separation falls back to a penalised
//! fit, matching rules hold, trimming, exact matching, bias correction, matched DiD, JSON.

use aftercast_core::table::{InputInfo, RawTable};
use aftercast_core::units::{Categorical, UnitSpec, UnitTable};
use aftercast_match::{Caliper, Estimand, MatchError, MatchParams, Method, SeparationPolicy, Trim};
use aftercast_resample::rng::Stream;
use rand_distr::{Distribution, StandardNormal};

/// Units with two normal covariates, a 3-level category, a confounded treatment, a pre-period
/// outcome carrying a unit effect, and a post outcome with treatment effect `effect`.
fn simulate(n: usize, seed: u64, effect: f64) -> UnitTable {
    let mut s = Stream::new(seed, 0);
    let (mut x1s, mut x2s, mut tr, mut pre, mut post, mut codes) = (vec![], vec![], vec![], vec![], vec![], vec![]);
    for _ in 0..n {
        let x1: f64 = StandardNormal.sample(&mut s);
        let x2: f64 = StandardNormal.sample(&mut s);
        let c = (s.uniform() * 3.0) as usize;
        let eta = -0.5 + 0.7 * x1 - 0.4 * x2 + 0.3 * c as f64;
        let t = s.uniform() < 1.0 / (1.0 + (-eta).exp());
        // unit effect correlated with treatment beyond x: the post-only comparison is biased
        let z: f64 = StandardNormal.sample(&mut s);
        let u = z + if t { 1.5 } else { 0.0 };
        let e0: f64 = StandardNormal.sample(&mut s);
        let e1: f64 = StandardNormal.sample(&mut s);
        pre.push(2.0 + x1 + x2 + u + 0.5 * e0);
        post.push(2.5 + x1 + x2 + u + if t { effect } else { 0.0 } + 0.5 * e1);
        x1s.push(x1);
        x2s.push(x2);
        tr.push(t);
        codes.push(c);
    }
    UnitTable {
        ids: (0..n).map(|i| format!("u{i}")).collect(),
        lines: (0..n as u64).map(|i| i + 2).collect(),
        treated: tr,
        outcomes: vec![("post".into(), post), ("pre".into(), pre)],
        numeric: vec![("x1".into(), x1s), ("x2".into(), x2s)],
        categorical: vec![Categorical {
            name: "region".into(),
            levels: vec!["a".into(), "b".into(), "c".into()],
            codes,
        }],
        input: InputInfo { path: "simulated".into(), sha256: String::new(), rows: n },
        dropped_rows: 0,
    }
}

fn from_csv(text: &str, numeric: &[&str], categorical: &[&str]) -> UnitTable {
    let table = RawTable::from_csv_bytes(std::path::Path::new("units.csv"), text.as_bytes()).unwrap();
    let spec = UnitSpec {
        treatment: "t".into(),
        outcomes: vec!["y".into()],
        numeric: numeric.iter().map(|s| s.to_string()).collect(),
        categorical: categorical.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    };
    UnitTable::from_table(&table, &spec).unwrap()
}

#[test]
fn unknown_covariate_is_named() {
    let units = simulate(100, 1, 1.0);
    let err = MatchParams::new(["x1", "age"]).check().unwrap().fit(&units, "post").unwrap_err();
    match err {
        MatchError::UnknownColumn { name, available, .. } => {
            assert_eq!(name, "age");
            assert!(available.contains(&"x1".to_string()));
        }
        other => panic!("{other}"),
    }
    let err = MatchParams::new(["x1"]).check().unwrap().fit(&units, "revenue").unwrap_err();
    assert!(matches!(err, MatchError::UnknownColumn { what: "outcome", .. }), "{err}");
    let err =
        MatchParams::new(["x1"]).terms(["region^2".parse().unwrap()]).check().unwrap().fit(&units, "post").unwrap_err();
    assert!(matches!(err, MatchError::CategoricalInTerm { .. }), "{err}");
}

#[test]
fn bad_parameters_are_refused() {
    assert!(matches!(MatchParams::new(["x1"]).k(0).check(), Err(MatchError::BadParameter { name: "--k", .. })));
    assert!(matches!(
        MatchParams::new(["x1"]).caliper(Caliper::SdOfLogit(-1.0)).check(),
        Err(MatchError::BadParameter { name: "--caliper", .. })
    ));
    assert!(matches!(MatchParams::new(["x1"]).trim(Trim::Fixed(0.7)).check(), Err(MatchError::BadParameter { .. })));
    assert!(matches!(
        MatchParams::new(["x1"]).mahalanobis(true).caliper(Caliper::None).check(),
        Err(MatchError::Unsupported { .. })
    ));
    assert!(matches!(
        MatchParams::new(["x1"]).estimand(Estimand::Ate).replace(false).check(),
        Err(MatchError::Unsupported { .. })
    ));
    assert!(MatchParams::new(["x1"]).interact(["x1x2"]).is_err());
    assert!("ipw2".parse::<Method>().is_err());
}

#[test]
fn constant_and_collinear_columns_are_named() {
    let mut text = String::from("t,y,a,b,k\n");
    for i in 0..40 {
        let a = (i % 7) as f64;
        text.push_str(&format!("{},{},{a},{},5\n", i % 2, i, 2.0 * a + 1.0));
    }
    let units = from_csv(&text, &["a", "b", "k"], &[]);
    let err = MatchParams::new(["a", "k"]).check().unwrap().fit(&units, "y").unwrap_err();
    assert!(matches!(&err, MatchError::ConstantColumn { name, .. } if name == "k"), "{err}");
    let err = MatchParams::new(["a", "b"]).check().unwrap().fit(&units, "y").unwrap_err();
    assert!(matches!(&err, MatchError::Collinear { name, .. } if name == "b"), "{err}");
}

#[test]
fn quasi_complete_separation_warns_and_penalises_or_errors() {
    // 'vip' = yes only among treated units: quasi-complete separation on one level.
    let mut text = String::from("t,y,x,vip\n");
    for i in 1..=200 {
        let t = i % 3 == 0;
        let vip = if t && i % 2 == 0 { "yes" } else { "no" };
        text.push_str(&format!("{},{},{},{vip}\n", t as u8, i % 11, (i % 17) as f64 / 3.0));
    }
    let units = from_csv(&text, &["x"], &["vip"]);
    let f = MatchParams::new(["x", "vip"]).method(Method::Ipw).draws(50).check().unwrap().fit(&units, "y").unwrap();
    assert!(f.propensity.separation);
    assert_eq!(f.propensity.penalty, 1.0);
    assert!(f.propensity.converged);
    assert!(f.warnings.iter().any(|w| w.contains("separation") && w.contains("vip=yes")), "{:?}", f.warnings);
    let err = MatchParams::new(["x", "vip"])
        .separation(SeparationPolicy::Error)
        .check()
        .unwrap()
        .fit(&units, "y")
        .unwrap_err();
    match err {
        MatchError::Separation { covariate, detail } => {
            assert_eq!(covariate.as_deref(), Some("vip=yes"));
            assert!(detail.contains("only among treated"), "{detail}");
        }
        other => panic!("{other}"),
    }
}

#[test]
fn complete_separation_on_a_continuous_covariate() {
    let mut text = String::from("t,y,x\n");
    for i in 0..60 {
        let t = i >= 30;
        text.push_str(&format!("{},{},{}\n", t as u8, i % 5, i as f64 + if t { 5.0 } else { 0.0 }));
    }
    let units = from_csv(&text, &["x"], &[]);
    let err =
        MatchParams::new(["x"]).separation(SeparationPolicy::Error).check().unwrap().fit(&units, "y").unwrap_err();
    assert!(matches!(&err, MatchError::Separation { covariate: Some(c), .. } if c == "x"), "{err}");
}

#[test]
fn matching_without_replacement_uses_each_control_once() {
    let units = simulate(600, 2, 1.0);
    for k in [1, 2] {
        let f = MatchParams::new(["x1", "x2"]).k(k).check().unwrap().fit(&units, "post").unwrap();
        let matched = f.counts.treated - f.counts.treated_unmatched;
        let used = f.counts.controls_used;
        assert!(used >= matched && used <= k * matched, "k {k}: {used} controls for {matched} treated");
        assert!(f.caliper.unwrap() > 0.0);
        let rb = f.rosenbaum.unwrap();
        assert_eq!(rb.pairs_used + rb.zero_pairs, f.counts.treated - f.counts.treated_unmatched);
    }
}

#[test]
fn no_control_appears_twice_without_replacement() {
    use aftercast_match::nearest::{MatchRule, match_units};
    let mut s = Stream::new(9, 0);
    let score: Vec<f64> = (0..500).map(|_| StandardNormal.sample(&mut s)).collect();
    let focal: Vec<usize> = (0..100).collect();
    let pool: Vec<usize> = (100..500).collect();
    for k in [1, 3] {
        let rule = MatchRule { k, replace: false, caliper: Some(0.05), mahalanobis: false };
        let m = match_units(&score, &focal, &pool, None, &rule, None);
        let mut all: Vec<usize> = m.matched.iter().flatten().copied().collect();
        let n = all.len();
        all.sort();
        all.dedup();
        assert_eq!(all.len(), n, "k {k}: a control was used twice");
        for (r, js) in m.matched.iter().enumerate() {
            assert!(js.len() <= k);
            for &j in js {
                assert!((score[j] - score[focal[r]]).abs() <= 0.05);
            }
        }
    }
}

#[test]
fn exact_matching_balances_the_category_exactly() {
    let units = simulate(800, 3, 1.0);
    let f = MatchParams::new(["x1", "x2", "region"])
        .exact(["region"])
        .replace(true)
        .caliper(Caliper::None)
        .check()
        .unwrap()
        .fit(&units, "post")
        .unwrap();
    assert_eq!(f.counts.treated_unmatched, 0);
    for b in f.balance.iter().filter(|b| b.covariate.starts_with("region=")) {
        assert!(b.smd_after.abs() < 1e-12, "{}: {}", b.covariate, b.smd_after);
    }
}

#[test]
fn matched_difference_in_differences_removes_the_unit_effect() {
    // The post-only comparison carries the +1.5 unit effect of treated units; differencing out
    // the pre-period removes it (parallel trends hold by construction).
    let (mut did, mut post) = (0.0, 0.0);
    let runs = 10;
    for r in 0..runs {
        let units = simulate(800, 100 + r, 2.0);
        let p = MatchParams::new(["x1", "x2"]).replace(true).k(3);
        post += p.clone().check().unwrap().fit(&units, "post").unwrap().estimate / runs as f64;
        let f = p.pre_outcome("pre").check().unwrap().fit(&units, "post").unwrap();
        assert_eq!(f.pre_outcome.as_deref(), Some("pre"));
        did += f.estimate / runs as f64;
    }
    assert!((did - 2.0).abs() < 0.15, "DiD {did}");
    assert!((post - 3.5).abs() < 0.3, "post-only {post}");
}

#[test]
fn bias_correction_reduces_matching_bias() {
    // Abadie & Imbens (2011): with coarse matches (no caliper, k = 5) the regression correction
    // removes most of the bias from a linear outcome surface.
    let (mut plain, mut bc) = (0.0, 0.0);
    let runs = 10;
    for r in 0..runs {
        let units = simulate(500, 200 + r, 1.0);
        let p = MatchParams::new(["x1", "x2"]).replace(true).k(5).caliper(Caliper::None).pre_outcome("pre");
        plain += (p.clone().check().unwrap().fit(&units, "post").unwrap().estimate - 1.0) / runs as f64;
        bc += (p.bias_correct(true).check().unwrap().fit(&units, "post").unwrap().estimate - 1.0) / runs as f64;
    }
    assert!(bc.abs() < plain.abs(), "bias plain {plain}, corrected {bc}");
    assert!(bc.abs() < 0.1, "corrected bias {bc}");
}

#[test]
fn trimming_rules_drop_units_outside_the_limits() {
    let units = simulate(1000, 4, 1.0);
    let f = MatchParams::new(["x1", "x2"]).method(Method::Ipw).trim(Trim::Fixed(0.1)).draws(50).check().unwrap();
    let f = f.fit(&units, "post").unwrap();
    let t = f.trim.unwrap();
    assert_eq!(t.limits, (0.1, 0.9));
    assert!(f.counts.treated_trimmed + f.counts.controls_trimmed > 0);
    let g = MatchParams::new(["x1", "x2"]).method(Method::Ipw).trim(Trim::Crump).draws(50).check().unwrap();
    let g = g.fit(&units, "post").unwrap();
    let (lo, hi) = g.trim.unwrap().limits;
    assert!((0.0..0.5).contains(&lo) && (hi - (1.0 - lo)).abs() < 1e-15);
    let m = MatchParams::new(["x1", "x2"]).method(Method::Ipw).trim(Trim::MinMax).draws(50).check().unwrap();
    let m = m.fit(&units, "post").unwrap();
    let (lo, hi) = m.trim.unwrap().limits;
    assert!(lo >= m.support.treated_range.0.max(m.support.control_range.0) - 1e-15);
    assert!(hi <= m.support.treated_range.1.min(m.support.control_range.1) + 1e-15);
}

#[test]
fn ate_by_matching_and_result_json() {
    let units = simulate(600, 5, 1.0);
    let inf = aftercast_core::Inference { rope: "0.1".parse().unwrap(), ..Default::default() };
    let (f, est) = aftercast_match::run(
        &units,
        "post",
        MatchParams::new(["x1", "x2"]).estimand(Estimand::Ate).replace(true).pre_outcome("pre").inference(inf),
    )
    .unwrap();
    let r = aftercast_resample::finish(est, &inf, vec![]).unwrap().result;
    // The point answer in the result is the fit's own estimate.
    assert_eq!(r.effect.average.estimate, f.estimate);
    assert_eq!(f.estimand, "ATE");
    let v = serde_json::to_value(&r).unwrap();
    assert_eq!(v["verb"], "match");
    assert_eq!(v["estimand"], "ATE");
    assert_eq!(v["balance"].as_array().unwrap().len(), 2);
    assert!(v["sample"]["controls_used"].as_u64().unwrap() > 0);
    assert!(v["diagnostics"]["e_value"]["point"].as_f64().unwrap() >= 1.0);
    let bins = &v["diagnostics"]["propensity_bins"];
    let s: f64 = bins["treated_after"].as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).sum();
    assert!((s - 1.0).abs() < 1e-12);
    assert!(r.effect.average.lower < r.effect.average.upper);
}

#[test]
fn no_match_within_exact_groups_is_an_error() {
    // every treated unit is in region "a", every control in region "b": exact matching on
    // region leaves nobody matched
    let mut text = String::from("t,y,x,region\n");
    for i in 0..80 {
        let t = i % 4 == 0;
        text.push_str(&format!("{},{},{},{}\n", t as u8, i % 9, (i % 13) as f64, if t { "a" } else { "b" }));
    }
    let units = from_csv(&text, &["x"], &["region"]);
    let err = MatchParams::new(["x"]).exact(["region"]).replace(true).check().unwrap().fit(&units, "y").unwrap_err();
    assert!(matches!(err, MatchError::NoMatches { .. }), "{err}");
    let err = MatchParams::new(["x"]).exact(["zone"]).check().unwrap().fit(&units, "y").unwrap_err();
    assert!(matches!(&err, MatchError::UnknownColumn { name, .. } if name == "zone"), "{err}");
}
