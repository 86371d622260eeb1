//! aftercast-synth: the synthetic control family.
//!
//! For a change that hit some units and not others, the counterfactual of a treated unit is a
//! weighted mix of untouched units (donors). Methods: simplex `weights`, ADH `predictors`,
//! demeaned `intercept`, ridge-augmented `ridge`, and synthetic difference-in-differences
//! `sdid`. Inference: placebo in space (always), placebo in time, leave-one-out and conformal
//! inference ([`inference`]).
//!
//! Parameters are built with [`SynthParams`], checked into [`ValidParams`], and
//! [`ValidParams::fit`] returns a [`Fitted`]. [`result::estimate`] turns a fit into
//! the one estimate (see `aftercast_core::estimate`).
//!
//! The numerical core is the exact simplex QP solver in [`simplex`].

mod data;
mod engine;
pub mod error;
pub mod fit;
pub mod inference;
pub mod params;
mod predictors;
pub mod result;
pub mod sdid;
pub mod simplex;

pub use error::{SynthError, SynthResult};
pub use fit::{Fitted, Placebo, PlaceboRun, PredictorBalance, UnitFit};
pub use params::{Aggregation, Method, SynthParams, ValidParams};
pub use result::{Robustness, RunOptions, SynthDiagnostics, estimate, run};
