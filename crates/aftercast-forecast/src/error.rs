//! The error type of the forecasting crate. Every variant says what was wrong and where.

use aftercast_core::error::DataError;

/// Everything that can go wrong while building, fitting or simulating a forecasting model.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ForecastError {
    /// A data-layer error (file, line, column are in the inner error; boxed to keep results small).
    #[error(transparent)]
    Data(Box<DataError>),
    /// A model parameter is out of its allowed range.
    #[error("invalid forecast parameter {name} = {value}: {detail}")]
    BadParameter {
        /// The parameter name as documented (e.g. `season`, `level`, `draws`).
        name: &'static str,
        /// The offending value, as text.
        value: String,
        /// The allowed range or the reason.
        detail: String,
    },
    /// A season specification such as `7` or `365.25:4` could not be read.
    #[error("invalid season '{text}': {detail}")]
    BadSeason {
        /// The text as given.
        text: String,
        /// Why it is not accepted.
        detail: String,
    },
    /// Holt-Winters starts its states from the first season, which has a missing value.
    #[error(
        "the holt-winters model starts from the first {season} pre-period values, and one of them is missing (pre-period ends before {at}); the structural model (--model structural) takes missing values anywhere"
    )]
    FirstSeasonMissing {
        /// The season's length in periods.
        season: usize,
        /// The post-period start, as text.
        at: String,
    },
    /// The pre-period is too short for the chosen model.
    #[error(
        "the {model} model needs at least {needed} observed pre-period values; the series has {found} (pre-period ends before {at})"
    )]
    TooShort {
        /// Which model.
        model: &'static str,
        /// How many it needs.
        needed: usize,
        /// How many there are.
        found: usize,
        /// The first time of the post-period (or washout), as text.
        at: String,
    },
    /// A control series or event indicator has a non-finite value.
    #[error("control '{name}' has a non-finite value {value} at {at}")]
    NonFiniteControl {
        /// The control name.
        name: String,
        /// The value.
        value: f64,
        /// The time, as text.
        at: String,
    },
    /// The outcome cannot be put on the log scale.
    #[error("--log needs positive outcome values; the value at {at} is {value}")]
    NonPositiveForLog {
        /// The time, as text.
        at: String,
        /// The value.
        value: f64,
    },
    /// The outcome does not vary in the pre-period: there is nothing to forecast from.
    #[error(
        "the outcome is constant ({value}) over the {periods} pre-periods; a forecast from its own past cannot say what the change did (compare with untreated units instead)"
    )]
    ConstantOutcome {
        /// The constant value.
        value: f64,
        /// Pre-periods.
        periods: usize,
    },
    /// A control named for the log scale cannot be put on it.
    #[error("--log-controls: control '{name}' is {value} at {at}; the log scale needs positive values")]
    NonPositiveControlForLog {
        /// The control name.
        name: String,
        /// The time, as text.
        at: String,
        /// The value.
        value: f64,
    },
    /// A control named for the log scale is not among the controls.
    #[error("--log-controls: '{name}' is not one of the --controls ({controls})")]
    UnknownLogControl {
        /// The name given.
        name: String,
        /// The controls, comma-separated.
        controls: String,
    },
    /// Multiplicative seasonality needs positive values.
    #[error("multiplicative Holt-Winters needs positive values; the value at {at} is {value}")]
    NonPositiveForMultiplicative {
        /// The time, as text.
        at: String,
        /// The value.
        value: f64,
    },
    /// The diffuse part of the Kalman filter did not end in the pre-period: some state (e.g. a
    /// regression coefficient whose control never varies) is not identified by the data.
    #[error(
        "the {model} model is not identified by the pre-period data: the diffuse initial state did not resolve in {periods} periods (is a control constant, do two controls repeat one another, or is an event absent from the pre-period?)"
    )]
    NotIdentified {
        /// Which model.
        model: &'static str,
        /// Pre-period length.
        periods: usize,
    },
    /// The likelihood or the sum of squares was not finite at the starting values.
    #[error("the {model} model's objective is not finite at the starting values ({detail})")]
    NonFiniteObjective {
        /// Which model.
        model: &'static str,
        /// Details.
        detail: String,
    },
    /// The optimiser failed (as opposed to stopping early, which is a warning).
    #[error("the optimiser failed while fitting the {model} model: {detail}")]
    Optimiser {
        /// Which model.
        model: &'static str,
        /// What argmin said.
        detail: String,
    },
    /// A linear-algebra step failed (singular system).
    #[error("{what} is numerically singular")]
    Singular {
        /// Which matrix.
        what: String,
    },
    /// An events calendar row names a date that is not a date.
    #[error("{at}: event '{name}' has date '{text}', which is not on the series' time axis kind")]
    BadEventDate {
        /// Where in the calendar file.
        at: Box<aftercast_core::error::Location>,
        /// The event name.
        name: String,
        /// The offending text.
        text: String,
    },
}

impl From<DataError> for ForecastError {
    fn from(e: DataError) -> Self {
        ForecastError::Data(Box::new(e))
    }
}

/// Result alias of this crate.
pub type ForecastResult<T> = Result<T, ForecastError>;
