//! The one error type of the windows engine. Every variant says where the problem is.

use aftercast_core::DataError;
use std::path::PathBuf;

/// Where a bad event or exposure row was found: file, 1-based line (CSV; the header is line 1)
/// or 1-based row + 1 (Parquet, the line a CSV export of the file would have), column.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Cell {
    /// The input file.
    pub file: PathBuf,
    /// Line (CSV) or row + 1 (Parquet).
    pub line: u64,
    /// 1-based column position.
    pub column: usize,
    /// Column name.
    pub column_name: String,
}

impl std::fmt::Display for Cell {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}, line {}, column {} ('{}')",
            self.file.display(),
            self.line,
            self.column,
            aftercast_core::error::shown(&self.column_name)
        )
    }
}

/// Everything that can go wrong building windows. Bad input is always one of these.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum WindowsError {
    /// A data-layer error from aftercast-core (reading the exposures file).
    #[error(transparent)]
    Data(#[from] DataError),
    /// A file could not be opened, read or written.
    #[error("{}: {what}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// What was being done.
        what: String,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// An input file is not well-formed CSV, gzip or Parquet.
    #[error("{}{}: malformed {format} input: {message}", path.display(), line.map(|l| format!(", line {l}")).unwrap_or_default())]
    Malformed {
        /// The file.
        path: PathBuf,
        /// Line, when known.
        line: Option<u64>,
        /// "CSV", "gzip" or "Parquet".
        format: &'static str,
        /// What the parser said.
        message: String,
    },
    /// A column the run needs is not in the file.
    #[error(
        "{}: no column named '{}' (the file has: {})",
        path.display(),
        aftercast_core::error::shown(name),
        aftercast_core::error::shown(&available.join(", "))
    )]
    MissingColumn {
        /// The file.
        path: PathBuf,
        /// The column asked for.
        name: String,
        /// The columns the file has.
        available: Vec<String>,
    },
    /// A Parquet column has a type the engine cannot read for its role.
    #[error("{}: column '{column}' has type {found}; expected {expected}", path.display())]
    ColumnType {
        /// The file.
        path: PathBuf,
        /// The column.
        column: String,
        /// Its type.
        found: String,
        /// What is accepted.
        expected: String,
    },
    /// A timestamp cell is not ISO 8601.
    #[error(
        "{at}: '{}' is not an ISO 8601 timestamp (e.g. 2024-03-01T10:00:00Z, 2024-03-01T12:00:00+02:00, 2024-03-01)",
        aftercast_core::error::shown(text)
    )]
    BadTimestamp {
        /// Where.
        at: Cell,
        /// The offending text.
        text: String,
    },
    /// A value cell is not a finite number, or is beyond the accepted magnitude (2^62).
    #[error(
        "{at}: '{}' is not a number aftercast can sum exactly (a finite number of magnitude at most 2^62, about 4.6e18)",
        aftercast_core::error::shown(text)
    )]
    BadValue {
        /// Where.
        at: Cell,
        /// The offending text.
        text: String,
    },
    /// A value is negative for a metric that does not allow it.
    #[error(
        "{at}: value {} of metric '{}' is negative; allow negative values for this metric or skip bad rows",
        aftercast_core::error::shown(text),
        aftercast_core::error::shown(metric)
    )]
    NegativeValue {
        /// Where.
        at: Cell,
        /// The offending text.
        text: String,
        /// The metric.
        metric: String,
    },
    /// An event names a unit that is not in the exposures file.
    #[error("{at}: unit '{}' is not in the exposures file", aftercast_core::error::shown(unit))]
    UnknownUnit {
        /// Where.
        at: Cell,
        /// The unit.
        unit: String,
    },
    /// A required cell is empty.
    #[error("{at}: value is missing (empty cell)")]
    MissingCell {
        /// Where.
        at: Cell,
    },
    /// A unit appears twice in the exposures file.
    #[error(
        "{at}: unit '{}' appears twice in the exposures file (first on line {first_line})",
        aftercast_core::error::shown(unit)
    )]
    DuplicateUnit {
        /// Where the second occurrence is.
        at: Cell,
        /// The unit.
        unit: String,
        /// Line of the first occurrence.
        first_line: u64,
    },
    /// A unit is never exposed (empty exposure cell) and neither a reference time nor a launch
    /// time was given.
    #[error(
        "{at}: unit '{}' has no exposure time; give a reference time (or a launch time) for never-exposed units",
        aftercast_core::error::shown(unit)
    )]
    NoReference {
        /// Where.
        at: Cell,
        /// The unit.
        unit: String,
    },
    /// A parameter is not valid.
    #[error("invalid {what}: '{}' ({detail})", aftercast_core::error::shown(text))]
    BadParameter {
        /// Which parameter.
        what: String,
        /// The offending text.
        text: String,
        /// Why.
        detail: String,
    },
    /// A sum left the range the exact accumulator holds (about +-7.4e19), or a count passed
    /// 4 294 967 295 events of one unit, window and metric.
    #[error(
        "sum or count of metric '{}' for unit '{}' exceeds the accumulator range (|sum| < 7.4e19, count < 2^32)",
        aftercast_core::error::shown(metric),
        aftercast_core::error::shown(unit)
    )]
    Overflow {
        /// The metric.
        metric: String,
        /// The unit.
        unit: String,
    },
    /// Spark could not be run or failed. `input` is true when the script's own input checks
    /// stopped it (a bad event or exposure row).
    #[error("spark: {message}")]
    Spark {
        /// What happened (the tail of Spark's output).
        message: String,
        /// Whether the input caused it.
        input: bool,
    },
    /// Writing an output table failed.
    #[error("{}: cannot write output: {message}", path.display())]
    Output {
        /// The file.
        path: PathBuf,
        /// Why.
        message: String,
    },
}

impl WindowsError {
    /// Whether the error is caused by the input (files, parameters) rather than by the machine.
    pub fn is_bad_input(&self) -> bool {
        match self {
            WindowsError::Spark { input, .. } => *input,
            // a file that is missing, a folder, a device or not readable: the user named it
            WindowsError::Io { source, .. } => {
                use std::io::ErrorKind as K;
                matches!(
                    source.kind(),
                    K::NotFound | K::PermissionDenied | K::IsADirectory | K::NotADirectory | K::InvalidInput
                )
            }
            WindowsError::Output { .. } => false,
            _ => true,
        }
    }

    pub(crate) fn bad_param(what: &str, text: impl Into<String>, detail: impl Into<String>) -> Self {
        WindowsError::BadParameter { what: what.to_string(), text: text.into(), detail: detail.into() }
    }
}

/// Result alias of the windows engine.
pub type WindowsResult<T> = Result<T, WindowsError>;
