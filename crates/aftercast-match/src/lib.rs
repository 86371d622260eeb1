//! aftercast-match: propensity-score methods for a change that units chose themselves.
//!
//! A logistic propensity model (Newton/IRLS, standardised design, separation detection with a
//! penalised fallback) feeds one of five estimators: nearest-neighbour matching on the logit
//! of the score (Abadie-Imbens variance, optional bias correction), propensity strata,
//! normalised inverse probability weights, overlap weights and augmented IPW. Weighting
//! estimators get their uncertainty from a Bayesian bootstrap that re-fits the propensity
//! model in every replicate. Every analysis reports balance, counts, overlap, and
//! sensitivity (Rosenbaum bounds for matched pairs, E-values).
//!
//! ```
//! use aftercast_core::table::RawTable;
//! use aftercast_core::units::{UnitTable, UnitSpec};
//! use aftercast_match::{MatchParams, Method};
//! let mut csv = String::from("treat,x,y\n");
//! for i in 0..60 {
//!     let x = (i % 10) as f64;
//!     let t = (i * 7 % 3 == 0) as u8;
//!     csv.push_str(&format!("{t},{x},{}\n", 2.0 * x + 3.0 * t as f64 + (i % 4) as f64));
//! }
//! let table = RawTable::from_csv_bytes(std::path::Path::new("u.csv"), csv.as_bytes())?;
//! let spec = UnitSpec { treatment: "treat".into(), outcomes: vec!["y".into()], numeric: vec!["x".into()], ..Default::default() };
//! let units = UnitTable::from_table(&table, &spec)?;
//! let fitted = MatchParams::new(["x"]).method(Method::Ipw).draws(200).check()?.fit(&units, "y")?;
//! assert!(fitted.estimate.is_finite());
//! assert_eq!(fitted.estimand, "ATT");
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

pub mod balance;
pub mod design;
pub mod error;
pub mod fit;
pub mod linear;
pub mod logit;
pub mod nearest;
pub mod params;
pub mod sensitivity;
pub mod weighting;

pub use error::{MatchError, MatchResult};
pub use fit::{Counts, Fitted, MatchDiagnostics, run};
pub use params::{Caliper, Estimand, MatchParams, Method, SeparationPolicy, Trim, ValidParams};
