//! aftercast-did: changes adopted in waves.
//!
//! A [`Rollout`] is a balanced panel where each unit adopts the change at its own period (or
//! never). Estimators ([`Method`]): group-time average effects with never- or not-yet-adopted
//! comparison units, doubly robust with pre-period covariates (Callaway & Sant'Anna 2021;
//! Sant'Anna & Zhao 2020); the imputation estimator (Borusyak, Jaravel & Spiess 2024); and the
//! two-way fixed-effects regression as a labelled baseline, with what its coefficient averages
//! ([`decompose`]). Uncertainty comes from a Bayesian bootstrap over units; the overall effect
//! is broken down by event time (with a joint test of the periods before adoption), by wave,
//! by calendar period, by segment, and checked with fake adoption dates ([`estimate`]).
//!
//! The numerical core is an exact solver for unit and period effects on any set of observed
//! unit-periods ([`twoway`]).

#![warn(missing_docs)]

pub mod data;
pub mod decompose;
pub mod error;
pub mod estimate;
pub mod fit;
pub mod params;
mod robust;
pub mod twoway;

pub use data::{Rollout, Wave, starts_from_column, starts_from_table};
pub use error::{DidError, DidResult};
pub use estimate::{Replicates, RolloutDiagnostics, estimate, estimate_by, replicate};
pub use params::{Comparison, Method, Spec};
