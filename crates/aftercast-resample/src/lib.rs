//! aftercast-resample: reproducible random streams, the Bayesian bootstrap (with exact tie
//! aggregation), stationary and moving-block bootstraps with automatic block length, and the
//! summaries every estimator ends in (intervals, HDI, ROPE verdicts).

pub mod bayes;
pub mod blocks;
pub mod rng;
pub mod summary;

pub use rng::{Stream, par_draws};
pub use summary::{hdi, scalar_effects, series_effects, summarize, verdict};
