//! The benchmark series (benches/data/bench_series.csv, written by benches/bench_statsmodels.py)
//! has known generating values: irregular variance 16 (noise sd 4), level variance 1 (random
//! walk with sd 1 and drift 0.05), fixed weekly and yearly patterns (seasonal variances 0),
//! coefficients 2.0 and 1.5 on the two controls. With 18 states (a 365.25-day trigonometric
//! season beside a trend and two controls) the P_inf recursion of the exact diffuse filter loses
//! precision (statsmodels' own exact filter never leaves the diffuse period on it); the augmented
//! filter with a collapse must resolve it and recover the generating values without any fallback.

use aftercast_forecast::structural::{
    Initialisation, SeasonKind, StructuralParams, StructuralSpec, Trend, fit, loglik_at,
};

#[path = "../benches/shared/job.rs"]
mod job;
use job::{pre_period as load, spec};

/// Our approximate diffuse filter vs statsmodels 0.15.0 UnobservedComponents (default
/// approximate diffuse, loglikelihood_burn 18) on the 18-state model at two fixed parameter
/// vectors (tests/reference/make_reference.py -> tests/data/uc_reference.json "bench_approx").
#[test]
fn approximate_diffuse_matches_statsmodels_on_18_states() {
    let (y, x) = load();
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/uc_reference.json")).unwrap();
    let r: serde_json::Value = serde_json::from_str(&text).unwrap();
    let b = &r["bench_approx"];
    for (k, p) in b["params"].as_array().unwrap().iter().enumerate() {
        let p: Vec<f64> = p.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
        let par = StructuralParams {
            irregular: p[0],
            level: p[1],
            slope: Some(p[2]),
            seasons: vec![p[3], p[4]],
            damping: None,
            ar_variance: None,
            ar_coef: None,
            control_prior: None,
        };
        let out = loglik_at(&spec(Initialisation::ApproximateDiffuse { kappa: 1e6 }), &par, &y, &x);
        let want = b["llf"][k].as_f64().unwrap();
        assert!((out.loglik - want).abs() / want.abs() < 1e-6, "{} vs statsmodels {want}", out.loglik);
    }
}

#[test]
fn benchmark_series_recovers_generating_variances() {
    let (y, x) = load();
    let spec = spec(Initialisation::ExactDiffuse);
    let f = fit(&spec, &y, &x, None).unwrap();
    assert!(f.optim.converged, "{:?}", f.optim);
    assert_eq!(f.spec.init, Initialisation::ExactDiffuse);
    assert!(f.warnings.is_empty(), "{:?} at {:?}", f.warnings, f.params);
    assert!((f.params.irregular - 16.0).abs() / 16.0 < 0.15, "irregular {}", f.params.irregular);
    assert!((f.params.level - 1.0).abs() < 0.5, "level {}", f.params.level);
    let out = loglik_at(&f.spec, &f.params, &y, &x);
    let m = f.spec.n_states();
    let r0 = f.spec.regression_start();
    for (k, want) in [2.0, 1.5].into_iter().enumerate() {
        let i = r0 + k;
        let (b, sd) = (out.a_next[i], out.p_next[i * m + i].sqrt());
        assert!((b - want).abs() < 4.0 * sd, "coefficient {k}: {b} +- {sd}, generated {want}");
    }
}

/// A weekly series with a yearly trigonometric season (52.18:4) and two regressors
/// (tests/data/weekly_series.csv, tests/reference/make_weekly.py): the exact diffuse filter
/// resolves without any fallback, with a linear trend as well as a local level, and the
/// regression coefficients are recovered (generated 0.8 and -1.2).
#[test]
fn weekly_series_with_yearly_season_and_two_regressors_needs_no_fallback() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/weekly_series.csv")).unwrap();
    let (mut y, mut x1, mut x2) = (vec![], vec![], vec![]);
    for l in text.lines().skip(1) {
        let f: Vec<f64> = l.split(',').skip(1).map(|v| v.parse().unwrap()).collect();
        y.push(f[0]);
        x1.push(f[1]);
        x2.push(f[2]);
    }
    let x = vec![x1, x2];
    for trend in [Trend::Level, Trend::LinearTrend] {
        let spec = StructuralSpec {
            trend,
            seasons: vec![SeasonKind::Trig { period: 52.18, harmonics: 4 }],
            n_regressors: 2,
            ar: false,
            control_scales: vec![],
            absent: vec![],
            init: Initialisation::ExactDiffuse,
        };
        let f = fit(&spec, &y, &x, None).unwrap();
        assert!(f.optim.converged, "{trend:?}: {:?}", f.optim);
        assert_eq!(f.spec.init, Initialisation::ExactDiffuse);
        assert!(
            f.warnings.is_empty(),
            "{trend:?}: {:?} at {:?}, theta {:?}, cov diag {:?}",
            f.warnings,
            f.params,
            f.theta,
            (0..f.theta.len()).map(|i| f.theta_cov[i][i]).collect::<Vec<_>>()
        );
        let out = loglik_at(&f.spec, &f.params, &y, &x);
        assert!(out.resolved && out.loglik.is_finite());
        let m = f.spec.n_states();
        let r0 = f.spec.regression_start();
        for (k, want) in [0.8, -1.2].into_iter().enumerate() {
            let i = r0 + k;
            let (b, sd) = (out.a_next[i], out.p_next[i * m + i].sqrt());
            assert!((b - want).abs() < 4.0 * sd, "{trend:?} coefficient {k}: {b} +- {sd}, generated {want}");
        }
    }
}
