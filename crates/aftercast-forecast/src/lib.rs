//! aftercast-forecast: seasonal counterfactual forecasting.
//!
//! The counterfactual of a series whose change hit everyone at once comes from its own past
//! and from control series the change could not touch. Three model families are here:
//! a structural time-series model in state-space form ([`structural`], exact diffuse Kalman
//! filter, maximum likelihood), Holt-Winters exponential smoothing ([`holt_winters`]) and
//! ridge-penalised harmonic regression ([`harmonic`]), plus rolling-origin backtests that pick
//! among them ([`backtest`]).

pub mod error;
pub mod holt_winters;
pub mod linalg;
pub mod optim;
pub mod structural;

pub use error::{ForecastError, ForecastResult};
