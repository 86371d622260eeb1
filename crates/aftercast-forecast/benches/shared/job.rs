//! The forecast benchmark job of docs/performance.md, one definition shared by the criterion
//! bench, the example that times it for benches/side_by_side.py, and the tests that check it:
//! benches/data/bench_series.csv (written by benches/bench_statsmodels.py: 1,095 daily
//! pre-period values + 90 post-period values, two controls) and the model fitted to it, a local
//! linear trend + weekly dummy seasonal + yearly trigonometric seasonal (365.25, K = 4) + two
//! controls as regression states (18 states).
#![allow(dead_code)] // each including target uses part of it

use aftercast_forecast::structural::{Initialisation, SeasonKind, StructuralSpec, Trend};

/// Pre-period length.
pub const N_PRE: usize = 1095;

/// The whole series: outcome and the two controls (`x[k][t]`).
pub fn load() -> (Vec<f64>, Vec<Vec<f64>>) {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/benches/data/bench_series.csv");
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{path}: {e}"));
    let (mut y, mut c1, mut c2) = (Vec::new(), Vec::new(), Vec::new());
    for l in text.lines().skip(1) {
        let f: Vec<f64> = l.split(',').skip(1).map(|v| v.parse().expect("a number")).collect();
        y.push(f[0]);
        c1.push(f[1]);
        c2.push(f[2]);
    }
    (y, vec![c1, c2])
}

/// The pre-period only.
pub fn pre_period() -> (Vec<f64>, Vec<Vec<f64>>) {
    let (y, x) = load();
    (y[..N_PRE].to_vec(), x.iter().map(|v| v[..N_PRE].to_vec()).collect())
}

/// The benchmark model.
pub fn spec(init: Initialisation) -> StructuralSpec {
    StructuralSpec {
        trend: Trend::LinearTrend,
        seasons: vec![SeasonKind::Dummy { period: 7 }, SeasonKind::Trig { period: 365.25, harmonics: 4 }],
        n_regressors: 2,
        ar: false,
        control_scales: vec![],
        absent: vec![],
        init,
    }
}
