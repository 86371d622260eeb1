//! aftercast-forecast: seasonal counterfactual forecasting.
//!
//! The counterfactual of a series whose change hit everyone at once comes from its own past
//! and from control series the change could not touch. Three model families are here:
//! a structural time-series model in state-space form ([`structural`], exact diffuse Kalman
//! filter, maximum likelihood), Holt-Winters exponential smoothing ([`holt_winters`]) and
//! ridge-penalised harmonic regression ([`harmonic`]), plus rolling-origin backtests that pick
//! among them ([`backtest`]).
//!
//! ```
//! use aftercast_core::table::RawTable;
//! use aftercast_core::series::{Series, SeriesSpec};
//! use aftercast_forecast::{ForecastParams, ModelKind, analyse};
//! let mut csv = String::from("period,y\n");
//! for t in 0..60 {
//!     let y = 100.0 + 0.5 * t as f64 + if t >= 50 { 10.0 } else { 0.0 } + ((t * 7919) % 13) as f64 * 0.2;
//!     csv.push_str(&format!("{t},{y}\n"));
//! }
//! let table = RawTable::from_csv_bytes(std::path::Path::new("demo.csv"), csv.as_bytes())?;
//! let series = Series::from_table(&table, &SeriesSpec { time: "period".into(), outcome: "y".into(), ..Default::default() })?;
//! let split = series.split("50", None, 0, 10)?;
//! let params = ForecastParams::builder().model(ModelKind::Structural).draws(200).backtest_folds(0).check()?;
//! let run = analyse(&series, split, &params, None)?;
//! assert!(run.summarize(vec![]).unwrap().result.effect.average.mean > 5.0);
//! # Ok::<(), aftercast_forecast::ForecastError>(())
//! ```

pub mod analysis;
pub mod backtest;
pub mod diagnostics;
pub mod error;
pub mod events;
pub mod harmonic;
pub mod holt_winters;
pub mod linalg;
pub mod optim;
pub mod params;
pub mod structural;

pub use analysis::{Counterfactual, Diagnostics, Fitted, FittedModel, ForecastDiagnostics, ForecastRun, analyse};
pub use error::{ForecastError, ForecastResult};
pub use events::EventCalendar;
pub use params::{Choice, ForecastParams, ModelKind, Season, ValidParams};
