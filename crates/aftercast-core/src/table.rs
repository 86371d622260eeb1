//! Reading a file into a validated table of typed columns, with line numbers kept for errors.
//!
//! Every reader of a shape (series, panel, unit table) starts here, so that CSV and Parquet
//! inputs go through one set of checks and produce the same error messages.

use crate::column::{Column, ColumnKind};
use crate::csv_read::{CsvChunking, Lines};
use crate::error::{DataError, DataResult, Location};
use crate::policy::MissingPolicy;
use serde::{Deserialize, Serialize};
use std::borrow::Cow;
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// File formats the readers understand.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// Comma-separated text with a header row.
    Csv,
    /// Apache Parquet (flat schema of numbers, strings, booleans and dates).
    Parquet,
    /// A table handed over in memory by an embedding program ([`crate::frame`]).
    Frame,
}

impl Format {
    /// The format's name as users write it.
    pub fn name(self) -> &'static str {
        match self {
            Format::Csv => "CSV",
            Format::Parquet => "Parquet",
            Format::Frame => "data frame",
        }
    }

    /// The format implied by a file name (`.parquet`/`.pq` is Parquet, anything else CSV).
    pub fn from_path(path: &Path) -> Self {
        match path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase()) {
            Some(e) if e == "parquet" || e == "pq" => Format::Parquet,
            _ => Format::Csv,
        }
    }
}

/// What the result records about one input file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct InputInfo {
    /// Path as given.
    pub path: String,
    /// SHA-256 of the file's bytes, lower-case hex.
    pub sha256: String,
    /// Number of data rows (header excluded).
    pub rows: usize,
}

/// A whole input file as typed columns, checked for shape (header, ragged rows, duplicate
/// names). Only the columns asked for are kept ([`RawTable::read_columns`]); every row keeps its
/// line in the file for messages.
#[derive(Debug, Clone)]
pub struct RawTable {
    path: PathBuf,
    format: Format,
    sha256: String,
    header: Vec<String>,
    index: HashMap<String, usize>,
    columns: Vec<Option<Column>>,
    lines: Lines,
    rows: usize,
    /// A table handed over in memory ([`crate::frame`]): rows counted from 0.
    in_memory: bool,
    /// The short name of a table handed over in memory (a file's is its stem).
    short: Option<String>,
}

/// Which columns to keep and how: by name; columns not named are not kept.
#[derive(Debug, Clone, Default)]
pub struct Projection {
    wanted: Vec<(String, ColumnKind)>,
    all: Option<ColumnKind>,
}

impl Projection {
    /// Every column, as one kind.
    pub fn all(kind: ColumnKind) -> Self {
        Projection { wanted: Vec::new(), all: Some(kind) }
    }

    /// No column yet.
    pub fn none() -> Self {
        Projection::default()
    }

    /// Keep a column as numbers (a name already asked for as text stays text).
    pub fn number(mut self, name: &str) -> Self {
        if !self.wanted.iter().any(|(n, _)| n == name) {
            self.wanted.push((name.to_string(), ColumnKind::Number));
        }
        self
    }

    /// Keep columns as numbers.
    pub fn numbers<'a>(self, names: impl IntoIterator<Item = &'a String>) -> Self {
        names.into_iter().fold(self, |p, n| p.number(n))
    }

    /// Keep a column as text (ids, categories, times, labels).
    pub fn text(mut self, name: &str) -> Self {
        match self.wanted.iter_mut().find(|(n, _)| n == name) {
            Some(w) => w.1 = ColumnKind::Text,
            None => self.wanted.push((name.to_string(), ColumnKind::Text)),
        }
        self
    }

    /// The kind of each header column, refusing a header that lacks a column asked for (so a
    /// misspelt column name is reported as soon as the header is read, not after the file).
    ///
    /// # Errors
    /// [`DataError::MissingColumn`] for the first column asked for that the header lacks.
    pub fn checked_kinds(&self, path: &Path, header: &[String]) -> DataResult<Vec<Option<ColumnKind>>> {
        header_index(path, header, false)?;
        if let Some((name, _)) = self.wanted.iter().find(|(n, _)| !header.contains(n)) {
            return Err(DataError::MissingColumn {
                path: path.to_path_buf(),
                name: name.clone(),
                available: header.to_vec(),
            });
        }
        Ok(self.kinds(header))
    }

    /// The kind of each header column (`None` = not kept).
    pub fn kinds(&self, header: &[String]) -> Vec<Option<ColumnKind>> {
        header.iter().map(|h| self.wanted.iter().find(|(n, _)| n == h).map(|w| w.1).or(self.all)).collect()
    }
}

impl RawTable {
    /// Read a CSV or Parquet file (chosen by extension), every column kept as text.
    ///
    /// # Errors
    /// [`DataError::Io`], [`DataError::EmptyFile`], [`DataError::NoRows`],
    /// [`DataError::Malformed`], [`DataError::RaggedRow`], [`DataError::DuplicateColumn`].
    pub fn read(path: impl AsRef<Path>) -> DataResult<Self> {
        Self::read_columns(path, &Projection::all(ColumnKind::Text))
    }

    /// Read a CSV or Parquet file keeping only the columns of `projection`, typed. CSV is
    /// streamed and parsed in parallel chunks; Parquet reads only the projected columns.
    ///
    /// # Errors
    /// As [`RawTable::read`].
    pub fn read_columns(path: impl AsRef<Path>, projection: &Projection) -> DataResult<Self> {
        let path = path.as_ref();
        #[cfg(feature = "arrow")]
        if let Some(frame) = crate::frame::lookup(path) {
            return Self::from_frame(path, &frame, projection);
        }
        let file = open_input(path)?;
        match Format::from_path(path) {
            Format::Csv => {
                let size = file.metadata().ok().map(|m| m.len());
                let kinds = |h: &[String]| projection.checked_kinds(path, h);
                let parts = crate::csv_read::read_csv(path, file, &kinds, CsvChunking::default(), size)?;
                Self::from_csv_parts(path, parts)
            }
            Format::Parquet | Format::Frame => Self::from_parquet_file(path, file, projection),
        }
    }

    /// Keep the columns of `projection` of a table held in memory, typed as a file's would be;
    /// `name` is what messages call it. Rows are counted from 0 (the frame's positions). The
    /// recorded SHA-256 is that of the kept columns' names and cells as text, columns in name
    /// order.
    ///
    /// # Errors
    /// As [`RawTable::read`].
    #[cfg(feature = "arrow")]
    pub fn from_frame(name: &Path, frame: &crate::frame::Frame, projection: &Projection) -> DataResult<Self> {
        use sha2::{Digest, Sha256};
        let header: Vec<String> = frame.schema.fields().iter().map(|f| f.name().clone()).collect();
        header_index(name, &header, true)?;
        if let Some((missing, _)) = projection.wanted.iter().find(|(n, _)| !header.contains(n)) {
            return Err(DataError::MissingColumn {
                path: name.to_path_buf(),
                name: missing.clone(),
                available: header,
            });
        }
        let kinds = projection.kinds(&header);
        let mut columns: Vec<Option<Column>> = kinds.iter().map(|k| k.map(Column::new)).collect();
        for batch in &frame.batches {
            for (c, col) in columns.iter_mut().enumerate() {
                let Some(col) = col.as_mut() else { continue };
                crate::arrow_read::append_array(name, &header[c], batch.column(c).as_ref(), col)?;
            }
        }
        let rows = frame.rows();
        for col in columns.iter_mut().flatten() {
            col.seal();
        }
        // the kept columns by name: the fingerprint of the data the analysis used, whatever the
        // order of the frame's columns
        let mut kept: Vec<usize> = (0..header.len()).filter(|&c| columns[c].is_some()).collect();
        kept.sort_by(|&a, &b| header[a].cmp(&header[b]));
        let mut hasher = Sha256::new();
        for c in kept {
            let Some(col) = columns[c].as_ref() else { continue };
            hasher.update(header[c].as_bytes());
            for r in 0..rows {
                hasher.update(b"\n");
                hasher.update(col.text(r).as_bytes());
            }
            hasher.update(b"\0");
        }
        let sha256 = crate::csv_read::hex(&hasher.finalize());
        let mut table =
            Self::assemble(name, Format::Frame, sha256, header, columns, Lines::Regular { first: 0 }, rows)?;
        table.short = Some(frame.short.clone());
        Ok(table)
    }

    /// Parse CSV bytes, every column as text; `path` is used in messages only.
    ///
    /// (Reading a file goes through [`read_input`], which registers it as an input.)
    ///
    /// # Errors
    /// As [`RawTable::read`].
    pub fn from_csv_bytes(path: &Path, bytes: &[u8]) -> DataResult<Self> {
        Self::from_csv_bytes_with(path, bytes, &Projection::all(ColumnKind::Text), CsvChunking::default())
    }

    /// Parse CSV bytes with a projection and explicit block and chunk sizes (tests use chunks
    /// of a few bytes to check that records are never cut).
    ///
    /// # Errors
    /// As [`RawTable::read`].
    pub fn from_csv_bytes_with(
        path: &Path,
        bytes: &[u8],
        projection: &Projection,
        chunking: CsvChunking,
    ) -> DataResult<Self> {
        let parts = crate::csv_read::read_csv(
            path,
            bytes,
            &|h| projection.checked_kinds(path, h),
            chunking,
            Some(bytes.len() as u64),
        )?;
        Self::from_csv_parts(path, parts)
    }

    fn from_csv_parts(path: &Path, parts: crate::csv_read::CsvColumns) -> DataResult<Self> {
        Self::assemble(path, Format::Csv, parts.sha256, parts.header, parts.columns, parts.lines, parts.rows)
    }

    fn assemble(
        path: &Path,
        format: Format,
        sha256: String,
        header: Vec<String>,
        columns: Vec<Option<Column>>,
        lines: Lines,
        rows: usize,
    ) -> DataResult<Self> {
        let in_memory = matches!(format, Format::Frame);
        let index = header_index(path, &header, in_memory)?;
        // columns address their rows with 32-bit numbers
        if rows > u32::MAX as usize {
            return Err(DataError::Invalid {
                at: Location::file(path),
                message: format!("{rows} rows: at most {} rows can be read from one file", u32::MAX),
            });
        }
        if rows == 0 {
            return Err(DataError::NoRows { path: path.to_path_buf() });
        }
        Ok(Self {
            path: path.to_path_buf(),
            format,
            sha256,
            header,
            index,
            columns,
            lines,
            rows,
            in_memory,
            short: None,
        })
    }

    #[cfg(feature = "parquet")]
    fn from_parquet_file(path: &Path, file: std::fs::File, projection: &Projection) -> DataResult<Self> {
        let p = crate::parquet_read::read_columns(path, file, projection)?;
        Self::assemble(path, Format::Parquet, p.sha256, p.header, p.columns, Lines::Regular { first: 2 }, p.rows)
    }

    #[cfg(not(feature = "parquet"))]
    fn from_parquet_file(path: &Path, _file: std::fs::File, _projection: &Projection) -> DataResult<Self> {
        Err(DataError::Malformed {
            at: Location::file(path),
            format: "Parquet",
            message: "this build of aftercast was made without Parquet support".into(),
        })
    }

    /// The file path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file format.
    pub fn format(&self) -> Format {
        self.format
    }

    /// Column names in file order.
    pub fn header(&self) -> &[String] {
        &self.header
    }

    /// Number of data rows.
    pub fn row_count(&self) -> usize {
        self.rows
    }

    /// Line of data row `r` in the file (row + 1 for Parquet), for messages.
    pub fn line(&self, r: usize) -> u64 {
        self.lines.get(r)
    }

    /// What a result records about this file.
    pub fn info(&self) -> InputInfo {
        InputInfo { path: self.path.display().to_string(), sha256: self.sha256.clone(), rows: self.rows }
    }

    /// Position of a column.
    ///
    /// # Errors
    /// [`DataError::MissingColumn`] naming the file and the columns it has.
    pub fn column(&self, name: &str) -> DataResult<usize> {
        self.index.get(name).copied().ok_or_else(|| DataError::MissingColumn {
            path: self.path.clone(),
            name: name.to_string(),
            available: self.header.clone(),
        })
    }

    /// Whether a column exists.
    pub fn has_column(&self, name: &str) -> bool {
        self.index.contains_key(name)
    }

    /// Whether the column at a position was kept when the file was read.
    pub fn kept(&self, col: usize) -> bool {
        self.columns.get(col).is_some_and(Option::is_some)
    }

    /// The kept column at a position.
    ///
    /// # Panics
    /// When the column was not asked for when the file was read: a reader must name every
    /// column it uses in its projection.
    pub fn data(&self, col: usize) -> &Column {
        match &self.columns[col] {
            Some(c) => c,
            None => panic!("column '{}' was read without being asked for", self.header[col]),
        }
    }

    /// The codes and dictionary of a column kept as text.
    pub fn text_codes(&self, col: usize) -> Option<(&[u32], &crate::column::Dictionary)> {
        match &self.columns[col] {
            Some(Column::Text(c)) => Some((c.codes(), c.dictionary())),
            _ => None,
        }
    }

    /// Whether every cell of a column kept as numbers is a finite number (no empty cell, no text).
    pub fn all_numbers(&self, col: usize) -> bool {
        matches!(&self.columns[col], Some(Column::Number(c)) if c.exception_count() == 0)
    }

    /// Take the values of a numeric column out of the table (for readers that own the table and
    /// keep the column as it is).
    pub fn take_numbers(&mut self, col: usize) -> Option<Vec<f64>> {
        match self.columns[col].as_mut() {
            Some(Column::Number(c)) => Some(c.take_values()),
            _ => None,
        }
    }

    /// The location of one cell, for messages.
    pub fn at(&self, row: usize, col: usize) -> Location {
        Location { rows: self.in_memory, ..Location::cell(&self.path, self.line(row), col + 1, &self.header[col]) }
    }

    /// The table's short name where a result names it: a file's stem, or the name a table in
    /// memory was handed over with.
    pub fn short_name(&self) -> String {
        match &self.short {
            Some(s) => s.clone(),
            None => self.path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default(),
        }
    }

    /// Whether the table was handed over in memory (rows counted from 0, messages say "row").
    pub fn in_memory(&self) -> bool {
        self.in_memory
    }

    /// Where data row `r` is, for messages: "line 12" of a file, "row 10" of a table in memory.
    pub fn place(&self, r: usize) -> String {
        format!("{} {}", if self.in_memory { "row" } else { "line" }, self.line(r))
    }

    /// One cell as text (as written, trimmed).
    pub fn text(&self, row: usize, col: usize) -> Cow<'_, str> {
        self.data(col).text(row)
    }

    /// Parse one cell as a finite number. Empty cells give `Ok(None)`.
    ///
    /// # Errors
    /// [`DataError::BadNumber`] or [`DataError::NonFinite`] with the cell's location.
    pub fn parse_number(&self, row: usize, col: usize) -> DataResult<Option<f64>> {
        self.data(col).number(row).map_err(|nonfinite| {
            let text = self.text(row, col).into_owned();
            if nonfinite {
                DataError::NonFinite { at: self.at(row, col), text }
            } else {
                DataError::BadNumber { at: self.at(row, col), text }
            }
        })
    }

    /// A whole numeric column with a missing-value policy applied. With
    /// [`MissingPolicy::Error`] an empty cell is an error; otherwise it is `None`.
    ///
    /// # Errors
    /// As [`RawTable::parse_number`], plus [`DataError::MissingValue`].
    pub fn number_column(&self, name: &str, missing: MissingPolicy) -> DataResult<Vec<Option<f64>>> {
        let col = self.column(name)?;
        (0..self.rows)
            .map(|r| {
                let v = self.parse_number(r, col)?;
                if v.is_none() && missing == MissingPolicy::Error {
                    return Err(DataError::MissingValue { at: self.at(r, col) });
                }
                Ok(v)
            })
            .collect()
    }

    /// A whole text column (cells as given, trimmed).
    ///
    /// # Errors
    /// [`DataError::MissingColumn`].
    pub fn text_column(&self, name: &str) -> DataResult<Vec<Cow<'_, str>>> {
        let col = self.column(name)?;
        Ok((0..self.rows).map(|r| self.text(r, col)).collect())
    }
}

/// Position of each column name, refusing an empty or repeated name.
fn header_index(path: &Path, header: &[String], in_memory: bool) -> DataResult<HashMap<String, usize>> {
    let mut index = HashMap::new();
    for (i, name) in header.iter().enumerate() {
        if name.is_empty() {
            return Err(DataError::Invalid {
                at: Location { line: (!in_memory).then_some(1), column: Some(i + 1), ..Location::file(path) },
                message: "header cell is empty; every column needs a name".into(),
            });
        }
        if index.insert(name.clone(), i).is_some() {
            return Err(DataError::DuplicateColumn {
                at: Location { line: (!in_memory).then_some(1), column: Some(i + 1), ..Location::file(path) },
                name: name.clone(),
            });
        }
    }
    Ok(index)
}

/// Parse a number the way every reader does: empty or NA-like text is missing (`Ok(None)`);
/// NaN and infinities are refused (`Err(true)`); anything else unparsable is `Err(false)`.
pub fn parse_number_text(text: &str) -> Result<Option<f64>, bool> {
    let t = text.trim();
    // the common case first: a plain finite number (none of the texts below parses as one)
    if let Ok(v) = t.parse::<f64>()
        && v.is_finite()
    {
        return Ok(Some(v));
    }
    if t.is_empty() || t.eq_ignore_ascii_case("na") || t == "." || t.eq_ignore_ascii_case("null") {
        return Ok(None);
    }
    let lower = t.to_ascii_lowercase();
    let stripped = lower.trim_start_matches(['+', '-']);
    if stripped == "nan" || stripped == "inf" || stripped == "infinity" {
        return Err(true);
    }
    match t.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(Some(v)),
        Ok(_) => Err(true),
        Err(_) => Err(false),
    }
}

/// Read an input file whole: it must be a regular file (a device such as /dev/zero, a FIFO or a
/// folder is refused rather than read forever), and it is registered as an input of the run so
/// that no output may replace it ([`crate::output::register_input`]).
///
/// # Errors
/// [`DataError::Io`] naming the file.
pub fn read_input(path: &Path) -> DataResult<Vec<u8>> {
    let mut bytes = Vec::new();
    std::io::Read::read_to_end(&mut open_input(path)?, &mut bytes)
        .map_err(|source| DataError::Io { path: path.to_path_buf(), source })?;
    Ok(bytes)
}

/// Open an input file for streaming, with the checks of [`read_input`].
///
/// # Errors
/// [`DataError::Io`] naming the file.
pub fn open_input(path: &Path) -> DataResult<std::fs::File> {
    let io = |source| DataError::Io { path: path.to_path_buf(), source };
    let meta = std::fs::metadata(path).map_err(io)?;
    if !meta.is_file() {
        let what = if meta.is_dir() { "a folder" } else { "not a regular file (a device, FIFO or socket)" };
        return Err(io(std::io::Error::new(std::io::ErrorKind::InvalidInput, format!("it is {what}"))));
    }
    crate::output::register_input(path);
    std::fs::File::open(path).map_err(io)
}
