//! The error type of the synthetic control family. Every variant names what was wrong and where
//! (unit, period, parameter).

use aftercast_core::error::DataError;

/// Everything that can go wrong when building or fitting a synthetic control.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum SynthError {
    /// A data-layer problem (file, column, cell). Boxed to keep the error small.
    #[error(transparent)]
    Data(Box<DataError>),
    /// A treated unit named by the caller is not in the panel.
    #[error("treated unit '{unit}' is not in the panel (it has {n_units} units, e.g. {examples})")]
    TreatedNotFound {
        /// The unit asked for.
        unit: String,
        /// Number of units in the panel.
        n_units: usize,
        /// A few unit names of the panel.
        examples: String,
    },
    /// The same treated unit was named twice.
    #[error("treated unit '{unit}' is named twice")]
    DuplicateTreated {
        /// The repeated unit.
        unit: String,
    },
    /// No treated unit was given.
    #[error("no treated unit was given")]
    NoTreated,
    /// Too few untreated units to build a synthetic control from.
    #[error(
        "only {found} donor units are left after removing the treated and excluded units; at least {needed} are needed"
    )]
    TooFewDonors {
        /// Donors available.
        found: usize,
        /// Donors needed.
        needed: usize,
    },
    /// Too few periods before the start.
    #[error("only {found} periods before the start {start}; at least {needed} are needed")]
    TooFewPrePeriods {
        /// The start as given.
        start: String,
        /// Pre-periods found.
        found: usize,
        /// Pre-periods needed.
        needed: usize,
    },
    /// The end (--end) comes before the start: no post-period.
    #[error("--end {end} comes before the start {start}: no period lies between them")]
    EndBeforeStart {
        /// The start as given.
        start: String,
        /// The end as given.
        end: String,
    },
    /// The start lies at or after the last period (nothing to estimate).
    #[error("no period at or after the start {start} (the panel ends at {last})")]
    NoPostPeriod {
        /// The start as given.
        start: String,
        /// Last period of the panel.
        last: String,
    },
    /// A treated unit's outcome does not vary over the pre-period.
    #[error(
        "unit '{unit}' has the constant value {value} over every pre-period (up to {last_pre}); a synthetic control cannot be judged on it"
    )]
    ConstantSeries {
        /// The unit.
        unit: String,
        /// The constant value.
        value: f64,
        /// Last pre-period.
        last_pre: String,
    },
    /// A predictor takes the same value for every unit (it cannot be scaled or weighted).
    #[error("predictor '{predictor}' has the same value {value} for every unit")]
    ConstantPredictor {
        /// Predictor name.
        predictor: String,
        /// Its value.
        value: f64,
    },
    /// A predictor names a covariate the panel does not have.
    #[error("predictor '{predictor}' names no covariate of the panel (covariates: {available})")]
    UnknownPredictor {
        /// The name asked for.
        predictor: String,
        /// Covariates of the panel.
        available: String,
    },
    /// A non-finite value reached the estimator.
    #[error("unit '{unit}' has a non-finite outcome {value} at period {period}")]
    NonFinite {
        /// The unit.
        unit: String,
        /// The period.
        period: String,
        /// The value.
        value: f64,
    },
    /// A value too large in magnitude for the weight solver's sums of squares.
    #[error(
        "unit '{unit}' has an outcome of {value:e} at period {period}, too large to compute with (at most 1e150 in absolute value: rescale the column, e.g. to thousands)"
    )]
    TooLarge {
        /// The unit.
        unit: String,
        /// The period.
        period: String,
        /// The value.
        value: f64,
    },
    /// A parameter is outside its allowed range.
    #[error("invalid parameter {name} = {value}: {detail}")]
    BadParameter {
        /// Parameter name.
        name: &'static str,
        /// The value given.
        value: String,
        /// The allowed range.
        detail: String,
    },
    /// The method needs something the input does not have.
    #[error("method '{method}' cannot be used here: {detail}")]
    Unsupported {
        /// The method.
        method: &'static str,
        /// Why.
        detail: String,
    },
    /// The weight solver did not reach its tolerance.
    #[error(
        "the weight solver for unit '{unit}' stopped after {iterations} iterations with KKT residual {kkt_residual:.3e} (tolerance {tolerance:.1e})"
    )]
    NotConverged {
        /// The (pseudo-)treated unit.
        unit: String,
        /// Iterations used.
        iterations: usize,
        /// Remaining KKT residual.
        kkt_residual: f64,
        /// Tolerance asked for.
        tolerance: f64,
    },
    /// A matrix that must be invertible was not.
    #[error("numerical failure in {stage}: {detail}")]
    Numerical {
        /// Where it happened.
        stage: &'static str,
        /// What happened.
        detail: String,
    },
}

impl From<DataError> for SynthError {
    fn from(e: DataError) -> Self {
        SynthError::Data(Box::new(e))
    }
}

/// Result alias of this crate.
pub type SynthResult<T> = Result<T, SynthError>;
