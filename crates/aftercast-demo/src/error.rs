//! The one error type of the demo generator.

use std::path::PathBuf;

/// Everything that can go wrong writing the demo scenario. Only [`DemoError::Io`] can happen
/// in practice; the other variants guard the generator's fixed constants.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DemoError {
    /// A folder or file could not be created, written or renamed.
    #[error("{}: {what}", path.display())]
    Io {
        /// The folder or file.
        path: PathBuf,
        /// What was being done.
        what: String,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// A constant of the scenario does not name a real calendar date.
    #[error("invalid demo date: {what}")]
    Invalid {
        /// The date that was asked for.
        what: String,
    },
    /// A distribution refused its parameters.
    #[error("invalid {what}: {message}")]
    Distribution {
        /// The distribution and its parameters.
        what: String,
        /// What `rand_distr` said.
        message: String,
    },
}

/// Result of the demo generator.
pub type DemoResult<T> = Result<T, DemoError>;
