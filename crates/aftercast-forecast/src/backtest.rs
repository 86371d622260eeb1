//! Scores of probabilistic forecasts from draws, and the rolling-origin backtest table.

use aftercast_core::time::TimePoint;
use serde::{Deserialize, Serialize};

/// Continuous ranked probability score of an observation `y` under the empirical distribution
/// of `draws`: `mean |X - y| - mean |X - X'| / 2` (Gneiting & Raftery 2007, JASA 102:359-378),
/// computed from the sorted draws in `O(n log n)`.
pub fn crps(draws: &[f64], y: f64) -> f64 {
    let mut x: Vec<f64> = draws.iter().copied().filter(|v| v.is_finite()).collect();
    if x.is_empty() || !y.is_finite() {
        return f64::NAN;
    }
    x.sort_by(f64::total_cmp);
    let n = x.len() as f64;
    let abs_err = x.iter().map(|v| (v - y).abs()).sum::<f64>() / n;
    let spread: f64 = x.iter().enumerate().map(|(k, v)| v * (2.0 * k as f64 - n + 1.0)).sum::<f64>() / (n * n);
    abs_err - spread
}

/// One backtest forecast: a model fitted up to an origin and scored on the next periods.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BacktestRow {
    /// Model name.
    pub model: String,
    /// Last period of the fitting span.
    pub fit_end: TimePoint,
    /// First scored period.
    pub first: TimePoint,
    /// Number of scored periods.
    pub horizon: usize,
    /// Mean CRPS over the scored periods.
    pub crps: f64,
    /// MAPE (percent) of the median path.
    pub mape: f64,
    /// Share of scored periods inside the central interval at the analysis level.
    pub coverage: f64,
}

/// Per-model averages over the folds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BacktestSummary {
    /// Model name.
    pub model: String,
    /// Folds that could be scored.
    pub folds: usize,
    /// Mean CRPS.
    pub crps: f64,
    /// Mean MAPE (percent).
    pub mape: f64,
    /// Mean coverage.
    pub coverage: f64,
    /// Why a model could not be scored, if it could not.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub failed: Option<String>,
}

/// The rolling-origin backtest in the pre-period.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Backtest {
    /// Interval level of the coverage column.
    pub level: f64,
    /// Washout periods skipped after each origin (as in the analysis).
    pub washout: usize,
    /// Every fold of every model.
    pub rows: Vec<BacktestRow>,
    /// Averages per model.
    pub summary: Vec<BacktestSummary>,
    /// The model with the lowest mean CRPS (for `auto`).
    pub chosen: Option<String>,
}

/// Score one forecast: draws `paths[d][h]` against `observed[h]`.
pub fn score(paths: &[Vec<f64>], observed: &[f64], level: f64) -> (f64, f64, f64) {
    let tail = (1.0 - level) / 2.0;
    let mut c = Vec::new();
    let mut ape = Vec::new();
    let mut cover = Vec::new();
    for (h, &y) in observed.iter().enumerate() {
        if !y.is_finite() {
            continue;
        }
        let mut col: Vec<f64> = paths.iter().map(|p| p[h]).filter(|v| v.is_finite()).collect();
        if col.is_empty() {
            continue;
        }
        col.sort_by(f64::total_cmp);
        c.push(crps(&col, y));
        let med = aftercast_resample::summary::quantile_sorted(&col, 0.5);
        if y != 0.0 {
            ape.push(((y - med) / y).abs());
        }
        let lo = aftercast_resample::summary::quantile_sorted(&col, tail);
        let hi = aftercast_resample::summary::quantile_sorted(&col, 1.0 - tail);
        cover.push(f64::from(u8::from(y >= lo && y <= hi)));
    }
    let mean = |v: &[f64]| if v.is_empty() { f64::NAN } else { v.iter().sum::<f64>() / v.len() as f64 };
    (mean(&c), 100.0 * mean(&ape), mean(&cover))
}
