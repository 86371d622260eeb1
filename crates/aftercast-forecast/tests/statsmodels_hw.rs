//! Holt-Winters vs statsmodels 0.15.0 ExponentialSmoothing at fixed smoothing parameters with
//! known initial states (tests/reference/make_reference.py -> tests/data/hw_reference.json).

mod common;
use aftercast_forecast::holt_winters::{HwInit, HwParams, HwSpec, Seasonality};
use common::tol;
use serde_json::Value;

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

/// statsmodels ExponentialSmoothing(y, trend='add', damped_trend=..., seasonal='add'|'mul',
/// seasonal_periods=12, initialization_method='known', ...).fit(smoothing_level=0.3,
/// smoothing_trend=0.1, smoothing_seasonal=0.2, damping_trend=0.95, optimized=False):
/// fittedvalues and SSE to 1e-8 relative in all four cases; forecast(24) to 1e-8 at every
/// horizon except h = 12 and 24. At h = 12, 24 ExponentialSmoothing 0.15.0 uses the seasonal
/// state of one season earlier (its `_predict` overwrites `s[nobs+m-1]` with `s[nobs-1]`), so
/// there the reference is statsmodels ETSModel(error='add', ...) at the same parameters
/// (smoothing_trend = alpha * beta), which is the same recursion for additive seasonality and
/// agrees with ExponentialSmoothing at all other horizons; it is checked at all 24 horizons.
#[test]
fn holt_winters_matches_statsmodels_exponential_smoothing() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/hw_reference.json")).unwrap();
    let r: Value = serde_json::from_str(&text).unwrap();
    let y = common::col(&common::read_csv(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/hw_series.csv")), "y");
    let cases = r["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 4);
    for c in cases {
        let spec = HwSpec {
            trend: true,
            damped: c["damped"].as_bool().unwrap(),
            seasonality: if c["seasonal"] == "mul" { Seasonality::Multiplicative } else { Seasonality::Additive },
            period: 12,
        };
        let p = HwParams {
            alpha: c["alpha"].as_f64().unwrap(),
            beta: c["beta"].as_f64().unwrap(),
            gamma: c["gamma"].as_f64().unwrap(),
            phi: c["phi"].as_f64().unwrap(),
        };
        let init = HwInit {
            level: c["initial_level"].as_f64().unwrap(),
            trend: c["initial_trend"].as_f64().unwrap(),
            seasonal: floats(&c["initial_seasonal"]),
        };
        let (fitted, state, sse) = spec.run(&p, &init, &y);
        let want = floats(&c["fitted"]);
        let fc = spec.forecast(&p, &state, 24);
        let want_fc = floats(&c["forecast"]);
        let mut worst = fitted
            .iter()
            .zip(&want)
            .chain(fc.iter().zip(&want_fc).enumerate().filter(|(h, _)| (h + 1) % 12 != 0).map(|(_, p)| p))
            .map(|(a, b)| (a - b).abs() / b.abs())
            .fold(0.0, f64::max);
        if let Some(ets) = c["ets_forecast"].as_array() {
            let ets: Vec<f64> = ets.iter().map(|v| v.as_f64().unwrap()).collect();
            assert_eq!(ets.len(), 24);
            worst = fc.iter().zip(&ets).map(|(a, b)| (a - b).abs() / b.abs()).fold(worst, f64::max);
        }
        assert!(worst < tol::HW_REL, "{}: worst relative difference {worst:e}", c["name"]);
        let want_sse = c["sse"].as_f64().unwrap();
        assert!((sse - want_sse).abs() / want_sse < tol::HW_REL, "{}: sse {sse} vs {want_sse}", c["name"]);
    }
}

/// A missing value in the first season is named as such (the states start from that season),
/// not as a pre-period too short for a series that is long.
#[test]
fn a_missing_value_in_the_first_season_is_named() {
    use aftercast_forecast::ForecastError;
    let spec = HwSpec { trend: true, damped: false, seasonality: Seasonality::Additive, period: 7 };
    let mut y: Vec<f64> = (0..140).map(|t| 10.0 + (t % 7) as f64).collect();
    y[3] = f64::NAN;
    let e = aftercast_forecast::holt_winters::fit(&spec, &y, "2026-03-02").expect_err("first season has a gap");
    assert!(matches!(e, ForecastError::FirstSeasonMissing { season: 7, .. }), "{e}");
    assert!(e.to_string().contains("first 7 pre-period values"), "{e}");
}
