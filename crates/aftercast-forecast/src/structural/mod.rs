//! Structural time-series models in state-space form: local level, local linear (or damped)
//! trend, dummy and trigonometric seasonals, regression on controls and event indicators;
//! the exact diffuse Kalman filter, maximum likelihood, and path simulation.

pub mod fit;
pub mod kalman;
pub mod model;

pub use fit::{SimulationOptions, StructuralFit, fit, loglik_at, score_at, simulate};
pub use kalman::{FilterOutput, FilterTrace, SystemDerivative, filter, filter_with_score};
pub use model::{Initialisation, SeasonKind, StructuralParams, StructuralSpec, System, Trend};
