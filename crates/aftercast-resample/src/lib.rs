//! aftercast-resample: reproducible random streams, the Bayesian bootstrap (with exact tie
//! aggregation), stationary and moving-block bootstraps with automatic block length, and the
//! summaries every estimator ends in (intervals, HDI, ROPE verdicts).

pub mod bayes;
pub mod blocks;
pub mod finish;
pub mod joint;
pub mod rng;
pub mod segments;
pub mod summary;

pub use finish::{FinishError, Finished, finish, judge, scalar_block};
pub use rng::{Stream, par_draws};
pub use summary::{hdi, summarize, verdict};
