//! Equal-tailed intervals of `summary::summarize` against numpy.quantile (default 'linear'
//! method = Hyndman & Fan type 7) on a stored draw vector
//! (tests/reference/quantile_reference.py, numpy 2.4.6; values in quantiles_numpy.json).

mod tol;

use aftercast_resample::summary::summarize;
use serde::Deserialize;

#[derive(Deserialize)]
struct NumpyReference {
    numpy_version: String,
    draws: Vec<f64>,
    mean: f64,
    median: f64,
    sd: f64,
    intervals: Vec<Interval>,
}

#[derive(Deserialize)]
struct Interval {
    level: f64,
    lower: f64,
    upper: f64,
}

#[test]
fn equal_tailed_interval_matches_numpy_quantile() {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/quantiles_numpy.json");
    let r: NumpyReference = serde_json::from_str(&std::fs::read_to_string(path).expect("json")).expect("parse");
    assert_eq!(r.numpy_version, "2.4.6");
    assert_eq!(r.draws.len(), 2001);
    // the input order must not matter: feed the stored (unsorted) draws
    for iv in &r.intervals {
        let s = summarize(&r.draws, iv.level, None);
        assert!(
            (s.lower - iv.lower).abs() < tol::NUMPY_QUANTILE_ABS,
            "level {}: lower {} vs numpy {}",
            iv.level,
            s.lower,
            iv.lower
        );
        assert!(
            (s.upper - iv.upper).abs() < tol::NUMPY_QUANTILE_ABS,
            "level {}: upper {} vs numpy {}",
            iv.level,
            s.upper,
            iv.upper
        );
    }
    let s = summarize(&r.draws, 0.9, None);
    assert!((s.median - r.median).abs() < tol::NUMPY_QUANTILE_ABS, "median vs numpy.median");
    assert!((s.mean - r.mean).abs() < tol::NUMPY_MOMENT_ABS, "mean vs numpy.mean");
    assert!((s.sd - r.sd).abs() < tol::NUMPY_MOMENT_ABS, "sd vs numpy.std(ddof=1)");
}
