//! Structural model vs statsmodels 0.15.0 UnobservedComponents with exact diffuse
//! initialisation (values from tests/reference/make_reference.py, stored in
//! tests/data/uc_reference.json). statsmodels' `llf` follows Durbin & Koopman (2012) eq. (7.3):
//! diffuse-period observations contribute -(log 2pi + log F_inf)/2, which is what our
//! `FilterOutput::loglik` reports too.

mod common;
use aftercast_forecast::structural::{
    Initialisation, SeasonKind, StructuralParams, StructuralSpec, Trend, fit, loglik_at,
};
use common::{rel, tol};
use serde_json::Value;

fn reference() -> Value {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/uc_reference.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

fn series() -> Vec<(String, Vec<f64>)> {
    common::read_csv(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/uc_series.csv"))
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

fn spec_a() -> StructuralSpec {
    StructuralSpec {
        trend: Trend::LinearTrend,
        seasons: vec![SeasonKind::Dummy { period: 7 }],
        n_regressors: 1,
        ar: false,
        control_scales: vec![],
        absent: vec![],
        init: Initialisation::ExactDiffuse,
    }
}

fn spec_b() -> StructuralSpec {
    StructuralSpec {
        trend: Trend::Level,
        seasons: vec![SeasonKind::Trig { period: 12.0, harmonics: 2 }],
        n_regressors: 0,
        ar: false,
        control_scales: vec![],
        absent: vec![],
        init: Initialisation::ExactDiffuse,
    }
}

fn params_a(p: &[f64]) -> StructuralParams {
    StructuralParams {
        irregular: p[0],
        level: p[1],
        slope: Some(p[2]),
        seasons: vec![p[3]],
        damping: None,
        ar_variance: None,
        ar_coef: None,
        control_prior: None,
    }
}

fn params_b(p: &[f64]) -> StructuralParams {
    StructuralParams {
        irregular: p[0],
        level: p[1],
        slope: None,
        seasons: vec![p[2]],
        damping: None,
        ar_variance: None,
        ar_coef: None,
        control_prior: None,
    }
}

fn check_trace(out: &aftercast_forecast::structural::FilterOutput, r: &Value) {
    let tr = out.trace.as_ref().unwrap();
    let fs = r["filtered_state"].as_array().unwrap();
    let fc = floats(&r["forecasts"]);
    assert_eq!(fs.len(), tr.filtered_state.len());
    let mut worst: f64 = 0.0;
    for (t, row) in fs.iter().enumerate() {
        let want = floats(row);
        for (k, w) in want.iter().enumerate() {
            worst = worst.max(rel(tr.filtered_state[t][k], *w));
        }
        worst = worst.max(rel(tr.forecast[t], fc[t]));
    }
    assert!(worst < tol::SM_STATE_REL, "largest relative difference of filtered states / forecasts {worst:e}");
}

/// Local linear trend + dummy seasonal(7) + one regressor (coefficient as a state), 400
/// periods with 3 missing: statsmodels UnobservedComponents(..., mle_regression=False,
/// use_exact_diffuse=True).smooth([3.5, 0.6, 0.02, 0.15]).
#[test]
fn trend_seasonal_regression_matches_statsmodels_at_fixed_params() {
    let r = reference();
    let s = series();
    let y = common::col(&s, "y");
    let x = vec![common::col(&s, "x")];
    let p = floats(&r["a"]["params"]);
    let out = loglik_at(&spec_a(), &params_a(&p), &y, &x);
    let want = r["a"]["llf"].as_f64().unwrap();
    assert!((out.loglik - want).abs() / want.abs() < tol::SM_LOGLIK_REL, "loglik {} vs statsmodels {want}", out.loglik);
    assert_eq!(out.n_diffuse as u64, r["a"]["nobs_diffuse"].as_u64().unwrap());
    check_trace(&out, &r["a"]);
}

/// Local level + trigonometric seasonal (period 12, 2 harmonics): statsmodels
/// UnobservedComponents(y2, 'llevel', freq_seasonal=[{'period': 12, 'harmonics': 2}]).
#[test]
fn level_trig_seasonal_matches_statsmodels_at_fixed_params() {
    let r = reference();
    let y = common::col(&series(), "y2");
    let p = floats(&r["b"]["params"]);
    let out = loglik_at(&spec_b(), &params_b(&p), &y, &[]);
    let want = r["b"]["llf"].as_f64().unwrap();
    assert!((out.loglik - want).abs() / want.abs() < tol::SM_LOGLIK_REL, "loglik {} vs statsmodels {want}", out.loglik);
    check_trace(&out, &r["b"]);
}

/// MLE within 2% of statsmodels' (L-BFGS-B, pgtol 1e-10), and a log-likelihood at least as high.
#[test]
fn mle_matches_statsmodels() {
    let r = reference();
    let s = series();
    for (case, spec, y, x) in [
        ("a", spec_a(), common::col(&s, "y"), vec![common::col(&s, "x")]),
        ("b", spec_b(), common::col(&s, "y2"), vec![]),
    ] {
        let f = fit(&spec, &y, &x, None).unwrap();
        assert!(f.optim.converged, "{case}: {:?}", f.optim);
        assert_eq!(f.spec.init, Initialisation::ExactDiffuse, "{case}: the exact diffuse filter must be kept");
        let want = floats(&r[case]["mle_params"]);
        let got: Vec<f64> = f.theta.iter().map(|t| t.exp()).collect();
        for (g, w) in got.iter().zip(&want) {
            assert!((g - w).abs() / w < tol::SM_MLE_REL, "{case}: MLE {got:?} vs statsmodels {want:?}");
        }
        let llf = r[case]["mle_llf"].as_f64().unwrap();
        assert!(f.loglik > llf - 1e-4, "{case}: loglik {} below statsmodels' maximum {llf}", f.loglik);
    }
}
