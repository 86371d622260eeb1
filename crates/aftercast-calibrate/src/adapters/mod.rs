//! Adapters from the estimator crates to this crate's small traits: propensity-score methods
//! ([`matching`], [`UnitEstimator`](crate::estimators::UnitEstimator)), the structural
//! forecast model ([`forecast`], [`PathModel`](crate::backtest::PathModel)) and the synthetic
//! control ([`synthetic`], also a [`PathModel`](crate::backtest::PathModel) whose controls are
//! the donors).

pub mod forecast;
pub mod matching;
pub mod synthetic;
