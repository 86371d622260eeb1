//! The error type of the calibration layer.

use aftercast_core::DataError;
use std::path::PathBuf;

/// Everything that can go wrong when comparing with an experiment, reading or writing a
/// history, or running a backtest. Each variant names the value and where it was found.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum CalibrateError {
    /// A problem in the input data (file, line, column).
    #[error(transparent)]
    Data(#[from] DataError),
    /// The Bayesian bootstrap refused its input (empty group, non-finite value).
    #[error("{what}: {source}")]
    Bootstrap {
        /// Which quantity was being resampled.
        what: String,
        /// The bootstrap's error.
        #[source]
        source: aftercast_resample::bayes::BayesError,
    },
    /// An observational estimator failed on the comparison sample.
    #[error("method '{method}' failed on setting '{setting}': {source}")]
    Method {
        /// The method.
        method: String,
        /// The setting (pool, series) it ran on.
        setting: String,
        /// The estimator's own error.
        #[source]
        source: Box<dyn std::error::Error + Send + Sync>,
    },
    /// A parameter is outside its allowed range.
    #[error("invalid parameter {name} = {value}: {detail}")]
    BadParameter {
        /// Parameter name as on the command line.
        name: &'static str,
        /// The value given.
        value: String,
        /// Allowed range or reason.
        detail: String,
    },
    /// A column the comparison needs is missing from one of the files.
    #[error("{}: no column named '{name}' (needed as {what})", path.display())]
    MissingColumn {
        /// The file.
        path: PathBuf,
        /// The column.
        name: String,
        /// What it is needed for.
        what: &'static str,
    },
    /// An arm or group has no units (or no usable values).
    #[error("{what} is empty in {}", path.display())]
    EmptyGroup {
        /// Which group ("treated arm", "control arm", "pool").
        what: &'static str,
        /// The file.
        path: PathBuf,
    },
    /// A ratio metric's denominator sums to zero in a group.
    #[error("the denominator '{column}' sums to zero in the {group} of {}", path.display())]
    ZeroDenominator {
        /// Denominator column.
        column: String,
        /// Group.
        group: &'static str,
        /// The file.
        path: PathBuf,
    },
    /// The regression design is singular (collinear covariates).
    #[error("the regression design is singular (collinear or constant covariates among: {})", columns.join(", "))]
    Singular {
        /// Columns of the design.
        columns: Vec<String>,
    },
    /// A series is too short for the requested backtest.
    #[error("series '{series}' has {periods} periods; the backtest needs at least {needed} ({detail})")]
    TooShort {
        /// Series name.
        series: String,
        /// Periods available.
        periods: usize,
        /// Periods needed.
        needed: usize,
        /// Why.
        detail: String,
    },
    /// A model returned paths of the wrong shape or with non-finite values.
    #[error("model '{model}' returned unusable paths at origin {origin}: {detail}")]
    BadPaths {
        /// Model name.
        model: String,
        /// Index of the forecast origin.
        origin: usize,
        /// What was wrong.
        detail: String,
    },
    /// A history file line could not be read.
    #[error("{}, line {line}: not a comparison record: {detail}", path.display())]
    BadHistory {
        /// The file.
        path: PathBuf,
        /// 1-based line.
        line: usize,
        /// The parser's message.
        detail: String,
    },
    /// A file could not be read or written.
    #[error("{}: {what}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// "cannot append", "cannot read", ...
        what: &'static str,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The run was interrupted before any result was complete.
    #[error("interrupted before any placebo window finished")]
    Interrupted,
}

/// Result alias of this crate.
pub type CalibrateResult<T> = Result<T, CalibrateError>;
