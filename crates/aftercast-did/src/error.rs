//! The error type of the rollout family. Every variant names the unit, period or option at fault.

use aftercast_core::error::DataError;

/// Everything that can go wrong when reading or estimating a rollout.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DidError {
    /// A data-layer problem (file, column, cell). Boxed to keep the error small.
    #[error(transparent)]
    Data(Box<DataError>),
    /// An adoption column that goes back from 1 to 0.
    #[error(
        "unit '{unit}' adopts at {adopted} and is back to 0 at {back}: a rollout needs adoption to stay (split the unit, or analyse each spell separately)"
    )]
    AdoptsTwice {
        /// The unit.
        unit: String,
        /// Its first adopted period.
        adopted: String,
        /// The period where the column returns to 0.
        back: String,
    },
    /// A start outside the periods of the panel.
    #[error(
        "unit '{unit}' starts at {start}, outside the data ({first} to {last}): give a start inside the panel, or leave it empty for a unit that never adopted"
    )]
    StartOutside {
        /// The unit.
        unit: String,
        /// The start given.
        start: String,
        /// First period of the panel.
        first: String,
        /// Last period of the panel.
        last: String,
    },
    /// No unit adopts.
    #[error("no unit adopts the change inside the data: give starts for the adopting units")]
    NoAdopters,
    /// Nothing left to compare with.
    #[error("{detail}")]
    NoComparison {
        /// What is missing.
        detail: String,
    },
    /// The cells left are not connected through shared units and periods, so unit and period
    /// effects cannot be told apart.
    #[error(
        "the untreated unit-periods do not connect every unit and period ({detail}); unit and period effects cannot be separated"
    )]
    NotConnected {
        /// Which part is cut off.
        detail: String,
    },
    /// An option out of range.
    #[error("{what}: {detail}")]
    BadOption {
        /// The option.
        what: String,
        /// What is wrong.
        detail: String,
    },
    /// A numerical failure (collinear regressors, singular system).
    #[error("{detail}")]
    Numerical {
        /// What failed.
        detail: String,
    },
}

impl From<DataError> for DidError {
    fn from(e: DataError) -> Self {
        DidError::Data(Box::new(e))
    }
}

/// Result alias of the rollout family.
pub type DidResult<T> = Result<T, DidError>;
