//! The one error type of the data layer. Every variant says where the problem is.

use std::path::PathBuf;

/// Where in an input something was found: file, 1-based line (CSV) or row (Parquet), column.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// The input file.
    pub file: PathBuf,
    /// 1-based line in a CSV file (the header is line 1), or 1-based row in a Parquet file.
    pub line: Option<u64>,
    /// 1-based column position.
    pub column: Option<usize>,
    /// Column name as given in the header.
    pub column_name: Option<String>,
    /// `line` counts the rows of a table held in memory from 0 (its positions), not the lines
    /// of a file: messages say "row".
    pub rows: bool,
}

impl Location {
    /// A location naming only the file.
    pub fn file(file: impl Into<PathBuf>) -> Self {
        Self { file: file.into(), line: None, column: None, column_name: None, rows: false }
    }

    /// A location naming file, line, column position and column name.
    pub fn cell(file: impl Into<PathBuf>, line: u64, column: usize, name: &str) -> Self {
        Self {
            file: file.into(),
            line: Some(line),
            column: Some(column),
            column_name: Some(name.to_string()),
            rows: false,
        }
    }

    /// A location naming file and line.
    pub fn line(file: impl Into<PathBuf>, line: u64) -> Self {
        Self { file: file.into(), line: Some(line), column: None, column_name: None, rows: false }
    }
}

impl Location {
    /// What `line` counts: "line" (of a file) or "row" (of a table in memory).
    pub fn counted(&self) -> &'static str {
        if self.rows { "row" } else { "line" }
    }
}

impl std::fmt::Display for Location {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(l) = self.line {
            write!(f, ", {} {l}", self.counted())?;
        }
        match (&self.column, &self.column_name) {
            (Some(c), Some(n)) => write!(f, ", column {c} ('{}')", shown(n))?,
            (Some(c), None) => write!(f, ", column {c}")?,
            (None, Some(n)) => write!(f, ", column '{}'", shown(n))?,
            (None, None) => {}
        }
        Ok(())
    }
}

/// Everything that can be wrong with input data. Bad input is always one of these, never a panic.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DataError {
    /// The file could not be opened or read.
    #[error("{}: cannot read file", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// An output could not be written for a reason the user can fix.
    #[error("{}: cannot write: {detail}", path.display())]
    Output {
        /// The output.
        path: PathBuf,
        /// The reason in words.
        detail: String,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// An output names a file this run reads.
    #[error("{}: refusing to write over an input of this run ({})", path.display(), input.display())]
    OutputIsInput {
        /// The output as given.
        path: PathBuf,
        /// The input it is (canonical path).
        input: PathBuf,
    },
    /// An output names a link, folder, device or FIFO.
    #[error("{}: refusing to write: it is {kind}; name a regular file", path.display())]
    OutputNotRegular {
        /// The output as given.
        path: PathBuf,
        /// What it is.
        kind: &'static str,
    },
    /// The file has no bytes, or no header.
    #[error("{}: the file is empty", path.display())]
    EmptyFile {
        /// The file.
        path: PathBuf,
    },
    /// The file has a header and no data rows.
    #[error("{}: a header but no data rows", path.display())]
    NoRows {
        /// The file.
        path: PathBuf,
    },
    /// The file is not well-formed CSV or Parquet.
    #[error("{at}: malformed {format} input: {message}")]
    Malformed {
        /// Where.
        at: Location,
        /// "CSV" or "Parquet".
        format: &'static str,
        /// What the parser said.
        message: String,
    },
    /// A row has a different number of fields than the header.
    #[error("{at}: row has {found} fields, the header has {expected}")]
    RaggedRow {
        /// Where.
        at: Location,
        /// Fields in the header.
        expected: usize,
        /// Fields in the row.
        found: usize,
    },
    /// Two header cells carry the same name.
    #[error("{at}: column name '{}' appears twice in the header", crate::error::shown(name))]
    DuplicateColumn {
        /// Where.
        at: Location,
        /// The repeated name.
        name: String,
    },
    /// A column the analysis needs is not in the file.
    #[error("{}: no column named '{}' (the columns are: {})", path.display(), crate::error::shown(name), column_list(available))]
    MissingColumn {
        /// The file.
        path: PathBuf,
        /// The column asked for.
        name: String,
        /// The columns the file has.
        available: Vec<String>,
    },
    /// A cell that must hold a number does not.
    #[error("{at}: '{}' is not a number", crate::error::shown(text))]
    BadNumber {
        /// Where.
        at: Location,
        /// The offending text.
        text: String,
    },
    /// A cell holds NaN or an infinity.
    #[error("{at}: '{}' is not a finite number (NaN and infinities are not accepted)", crate::error::shown(text))]
    NonFinite {
        /// Where.
        at: Location,
        /// The offending text.
        text: String,
    },
    /// A cell that must hold a date does not.
    #[error("{at}: '{}' is not a date in {} form", crate::error::shown(text), crate::error::shown(expected))]
    BadDate {
        /// Where.
        at: Location,
        /// The offending text.
        text: String,
        /// The expected form, e.g. "ISO 8601 (YYYY-MM-DD)".
        expected: String,
    },
    /// A cell that must hold a date is empty.
    #[error("{at}: the date is missing (an empty or NA cell); every row needs one")]
    MissingDate {
        /// Where.
        at: Location,
    },
    /// A required value is empty and the missing-value policy is `Error`.
    #[error(
        "{at}: value is missing (an empty or NA cell); series and unit tables can leave such rows out with --missing drop-row"
    )]
    MissingValue {
        /// Where.
        at: Location,
    },
    /// The same time appears twice in a series, or the same unit and time twice in a panel.
    #[error("{at}: duplicate {what} '{}' (first seen on {} {first_line})", crate::error::shown(key), at.counted())]
    Duplicate {
        /// Where the second occurrence is.
        at: Location,
        /// "date", "unit and period", "unit id".
        what: &'static str,
        /// The repeated key.
        key: String,
        /// Line of the first occurrence.
        first_line: u64,
    },
    /// Times do not increase.
    #[error(
        "{at}: time '{}' comes before the previous row's '{}'; rows must be in time order",
        crate::error::shown(text),
        crate::error::shown(previous)
    )]
    NonMonotone {
        /// Where.
        at: Location,
        /// This row's time.
        text: String,
        /// Previous row's time.
        previous: String,
    },
    /// Times are not evenly spaced (gap policy `Error`), or the spacing matches no frequency.
    #[error(
        "{at}: irregular time step from '{}' to '{}' ({detail})",
        crate::error::shown(previous),
        crate::error::shown(text)
    )]
    Irregular {
        /// Where.
        at: Location,
        /// This row's time.
        text: String,
        /// Previous row's time.
        previous: String,
        /// What was expected.
        detail: String,
    },
    /// Too few periods before the intervention to fit anything.
    #[error("{}: only {found} pre-period observations before {start}; at least {needed} are needed", path.display())]
    TooFewPrePeriods {
        /// The file.
        path: PathBuf,
        /// The intervention start as given.
        start: String,
        /// How many there are.
        found: usize,
        /// How many are needed.
        needed: usize,
    },
    /// Too few post-periods (none after the start, or before the end).
    #[error("{}: no observations in the post-period from {start}", path.display())]
    NoPostPeriod {
        /// The file.
        path: PathBuf,
        /// The intervention start as given.
        start: String,
    },
    /// A treated unit named on the command line is not in the data.
    #[error("{}: treated unit '{}' is not in column '{}'", path.display(), crate::error::shown(unit), crate::error::shown(column))]
    UnitNotFound {
        /// The file.
        path: PathBuf,
        /// The unit asked for.
        unit: String,
        /// The unit column.
        column: String,
    },
    /// A treatment or arm column takes only one value.
    #[error("{}: column '{}' has only the value '{}'; treated and untreated units are both needed", path.display(), crate::error::shown(column), crate::error::shown(value))]
    ConstantTreatment {
        /// The file.
        path: PathBuf,
        /// The treatment column.
        column: String,
        /// Its single value.
        value: String,
    },
    /// A treatment cell is not one of the accepted spellings.
    #[error(
        "{at}: '{}' is not a treatment value (use 1/0, true/false, yes/no, treated/control or test/holdout)",
        crate::error::shown(text)
    )]
    BadTreatment {
        /// Where.
        at: Location,
        /// The offending text.
        text: String,
    },
    /// A panel does not have every unit at every period.
    #[error("{}: unit '{}' has no row for period '{}'; panels must be balanced", path.display(), crate::error::shown(unit), crate::error::shown(period))]
    UnbalancedPanel {
        /// The file.
        path: PathBuf,
        /// The unit.
        unit: String,
        /// The missing period.
        period: String,
    },
    /// Too few units of some kind (donors, controls).
    #[error("{}: {what}: found {found}, need at least {needed}", path.display())]
    TooFew {
        /// The file.
        path: PathBuf,
        /// What is counted.
        what: String,
        /// How many there are.
        found: usize,
        /// How many are needed.
        needed: usize,
    },
    /// A value the user gave on the command line or in a study file is not valid.
    #[error("invalid {what}: '{}' ({detail})", crate::error::shown(text))]
    BadArgument {
        /// Which argument.
        what: String,
        /// The offending text.
        text: String,
        /// Why.
        detail: String,
    },
    /// Any other problem with the data, located.
    #[error("{at}: {message}")]
    Invalid {
        /// Where.
        at: Location,
        /// What is wrong.
        message: String,
    },
}

/// Result alias of the data layer.
pub type DataResult<T> = Result<T, DataError>;

/// The names of a table's columns for a message: each escaped as [`shown`], whole names only,
/// the first ones up to about 200 characters and a count of the rest.
fn column_list(names: &[String]) -> String {
    let mut out = String::new();
    for (i, n) in names.iter().enumerate() {
        let one = shown(n);
        if i > 0 && out.len() + one.len() > 200 {
            return format!("{out}, and {} more", names.len() - i);
        }
        if i > 0 {
            out.push_str(", ");
        }
        out.push_str(&one);
    }
    out
}

/// Text from a file as an error message shows it: control characters escaped (a cell cannot
/// move the cursor or start a new line in the terminal) and cut to about 80 characters.
pub fn shown(text: &str) -> String {
    const MAX: usize = 80;
    let mut out = String::new();
    for (count, c) in text.chars().enumerate() {
        if count == MAX {
            let rest = text.chars().count() - MAX;
            out.push_str(&format!("... ({rest} more characters)"));
            return out;
        }
        // control characters and the bidirectional overrides (which reorder what follows
        // them on screen) are shown as escapes
        let bidi = matches!(c, '\u{200E}' | '\u{200F}' | '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}');
        if c.is_control() || bidi {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out
}
