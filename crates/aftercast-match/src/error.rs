//! The error type of the matching and weighting layer.

use aftercast_core::DataError;

/// Everything that can go wrong in a propensity-score analysis. Each variant names the
/// covariate, term, parameter or unit involved.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum MatchError {
    /// A problem in the input data (file, line, column). Boxed to keep the error small.
    #[error(transparent)]
    Data(Box<DataError>),
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
    /// A term of the propensity model could not be read.
    #[error("cannot read model term '{text}': {detail}")]
    BadTerm {
        /// The term as written.
        text: String,
        /// What is wrong.
        detail: String,
    },
    /// A covariate, term factor, exact-matching column or outcome is not in the unit table.
    #[error("no {what} named '{name}' in the unit table (available: {})", available.join(", "))]
    UnknownColumn {
        /// "covariate", "outcome", "exact-matching column", ...
        what: &'static str,
        /// The name asked for.
        name: String,
        /// The names that are there.
        available: Vec<String>,
    },
    /// A categorical covariate was used inside a power or interaction term.
    #[error("'{name}' is categorical; powers, interactions and zero indicators need a numeric covariate")]
    CategoricalInTerm {
        /// The covariate.
        name: String,
    },
    /// A design column takes a single value, so it carries no information.
    #[error("model column '{name}' is constant ({value}) over the {units} units used")]
    ConstantColumn {
        /// Column name (covariate, level or term).
        name: String,
        /// Its only value.
        value: f64,
        /// Units it was computed over.
        units: usize,
    },
    /// A design column is (numerically) a linear combination of earlier columns.
    #[error("model column '{name}' is a linear combination of earlier columns ({earlier}); drop one of them")]
    Collinear {
        /// The redundant column.
        name: String,
        /// The columns before it.
        earlier: String,
    },
    /// A value is not finite after transformation (e.g. a cube overflowed).
    #[error("model column '{name}' is not finite at unit '{unit}' (line {line}): {value}")]
    NonFinite {
        /// Column name.
        name: String,
        /// Unit id.
        unit: String,
        /// Source line of the unit.
        line: u64,
        /// The value.
        value: f64,
    },
    /// The propensity model separates treated from controls and the separation policy is Error.
    #[error("the propensity model separates treated and control units ({detail}); fitted probabilities reach 0 or 1 and the maximum-likelihood estimate does not exist{}", covariate.as_ref().map(|c| format!("; look at '{c}'")).unwrap_or_default())]
    Separation {
        /// The covariate most likely responsible, when one can be named.
        covariate: Option<String>,
        /// What was seen.
        detail: String,
    },
    /// The propensity model did not converge (and no separation was found to explain it).
    #[error("the propensity model did not converge in {iterations} Newton iterations (last step {last_step:.3e})")]
    NotConverged {
        /// Iterations run.
        iterations: usize,
        /// Largest coefficient change in the last iteration (standardised scale).
        last_step: f64,
    },
    /// Treated and control propensity ranges do not overlap at all (or trimming removed a group).
    #[error("no common support: {detail}")]
    NoOverlap {
        /// The ranges found.
        detail: String,
    },
    /// Not one treated unit found a match within the caliper.
    #[error(
        "no unit found a match within the caliper of {caliper:.4} (logit of the propensity score); widen --caliper or check the covariates"
    )]
    NoMatches {
        /// Caliper width on the logit scale.
        caliper: f64,
    },
    /// Too few units for the requested analysis.
    #[error("{what}: found {found}, need at least {needed}")]
    TooFew {
        /// What is counted.
        what: String,
        /// How many there are.
        found: usize,
        /// How many are needed.
        needed: usize,
    },
    /// A combination of options that cannot be honoured.
    #[error("unsupported combination: {detail}")]
    Unsupported {
        /// Which combination and why.
        detail: String,
    },
}

impl From<DataError> for MatchError {
    fn from(e: DataError) -> Self {
        MatchError::Data(Box::new(e))
    }
}

/// Result alias of this crate.
pub type MatchResult<T> = Result<T, MatchError>;
