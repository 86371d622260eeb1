//! aftercast-calibrate: how far observational estimates have landed from randomized truths,
//! and whether a series can show an effect at all.
//!
//! - [`truth`]: the experimental effect (difference in means or in a ratio metric) with a
//!   Bayesian-bootstrap interval;
//! - [`estimators`]: the [`UnitEstimator`] trait and the naive and regression baselines;
//!   [`adapters::matching`] puts every `aftercast-match` method behind the same trait;
//! - [`compare`]: the comparison table (bias, relative bias, bias in truth sds, coverage,
//!   verdict agreement) for unit-level experiments; [`series`] for experiments recorded as arm
//!   totals per period;
//! - [`history`]: the JSON-lines evidence base and its per-method summary (bias, RMSE,
//!   coverage, interval inflation factor);
//! - [`backtest`]: placebo origins, false-positive rate, coverage, power and minimum
//!   detectable effect for any [`PathModel`]; [`adapters::forecast`] and
//!   [`adapters::synthetic`] are the estimator crates' models behind it;
//! - [`plan`]: power, minimum detectable effects and waits from any placebo runs' thresholds;
//! - [`plasmode`]: simulated outcomes on real covariates and treatment for matching methods.
//!
//! ```
//! use aftercast_calibrate::history::{HistoryRecord, summarize};
//! let rec = |truth: f64| HistoryRecord {
//!     method: "m".into(), setting: "s".into(), metric: "y".into(),
//!     truth, estimate: 0.0, lower: -1.0, upper: 1.0, level: 0.5,
//! };
//! let s = summarize(&[rec(0.5), rec(2.0)]);
//! assert_eq!(s[0].coverage, 0.5);
//! assert_eq!(s[0].inflation_factor, 0.5); // ceil(0.5 * 2) = 1st smallest required factor
//! ```

pub mod adapters;
pub mod backtest;
pub mod compare;
pub mod error;
pub mod estimators;
pub mod history;
pub mod plan;
pub mod plasmode;
pub mod sample;
pub mod series;
pub mod truth;

pub use backtest::{BacktestData, BacktestReport, BacktestSpec, PathModel, RunControl};
pub use compare::{Comparison, ComparisonRow, TruthSummary, compare_units};
pub use error::{CalibrateError, CalibrateResult};
pub use estimators::{MethodEstimate, Naive, Regression, RegressionKind, UnitEstimator};
