//! Reading a file into a validated table of text cells, with line numbers kept for errors.
//!
//! Every reader of a shape (series, panel, unit table) starts here, so that CSV and Parquet
//! inputs go through one set of checks and produce the same error messages.

use crate::error::{DataError, DataResult, Location};
use crate::policy::MissingPolicy;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
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
}

impl Format {
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

/// One data row: its cells as text and its line in the file.
#[derive(Debug, Clone)]
pub struct RawRow {
    /// 1-based line in the CSV file (header is line 1), or 1-based data row + 1 for Parquet.
    pub line: u64,
    /// Cell texts, one per header column.
    pub cells: Vec<String>,
}

/// A whole input file as text cells, checked for shape (header, ragged rows, duplicate names).
#[derive(Debug, Clone)]
pub struct RawTable {
    path: PathBuf,
    format: Format,
    sha256: String,
    header: Vec<String>,
    index: HashMap<String, usize>,
    rows: Vec<RawRow>,
}

fn sha256_hex(bytes: &[u8]) -> String {
    let digest = Sha256::digest(bytes);
    let mut s = String::with_capacity(64);
    for b in digest {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

impl RawTable {
    /// Read a CSV or Parquet file (chosen by extension).
    ///
    /// # Errors
    /// [`DataError::Io`], [`DataError::EmptyFile`], [`DataError::NoRows`],
    /// [`DataError::Malformed`], [`DataError::RaggedRow`], [`DataError::DuplicateColumn`].
    pub fn read(path: impl AsRef<Path>) -> DataResult<Self> {
        let path = path.as_ref();
        let bytes = read_input(path)?;
        match Format::from_path(path) {
            Format::Csv => Self::from_csv_bytes(path, &bytes),
            Format::Parquet => Self::from_parquet_bytes(path, bytes),
        }
    }

    /// Parse CSV bytes; `path` is used in messages only.
    ///
    /// (Reading a file goes through [`read_input`], which registers it as an input.)
    ///
    /// # Errors
    /// As [`RawTable::read`].
    pub fn from_csv_bytes(path: &Path, bytes: &[u8]) -> DataResult<Self> {
        let sha256 = sha256_hex(bytes);
        let text_start = if bytes.starts_with(&[0xEF, 0xBB, 0xBF]) { 3 } else { 0 };
        let body = &bytes[text_start..];
        if body.iter().all(|b| b.is_ascii_whitespace()) {
            return Err(DataError::EmptyFile { path: path.to_path_buf() });
        }
        let mut reader =
            csv::ReaderBuilder::new().has_headers(false).flexible(true).trim(csv::Trim::All).from_reader(body);
        let mut header: Option<Vec<String>> = None;
        let mut rows = Vec::new();
        let mut record = csv::StringRecord::new();
        loop {
            match reader.read_record(&mut record) {
                Ok(false) => break,
                Ok(true) => {}
                Err(e) => {
                    let line = e.position().map(|p| p.line()).unwrap_or(0);
                    let message = match e.kind() {
                        csv::ErrorKind::Utf8 { .. } => "text is not valid UTF-8".to_string(),
                        _ => e.to_string(),
                    };
                    return Err(DataError::Malformed { at: Location::line(path, line), format: "CSV", message });
                }
            }
            let line = record.position().map(|p| p.line()).unwrap_or(0);
            // Skip wholly blank lines.
            if record.len() == 1 && record[0].is_empty() {
                continue;
            }
            match &header {
                None => {
                    header = Some(record.iter().map(|s| s.to_string()).collect());
                }
                Some(h) => {
                    if record.len() != h.len() {
                        return Err(DataError::RaggedRow {
                            at: Location::line(path, line),
                            expected: h.len(),
                            found: record.len(),
                        });
                    }
                    rows.push(RawRow { line, cells: record.iter().map(|s| s.to_string()).collect() });
                }
            }
        }
        let header = header.ok_or_else(|| DataError::EmptyFile { path: path.to_path_buf() })?;
        Self::assemble(path, Format::Csv, sha256, header, rows)
    }

    fn assemble(
        path: &Path,
        format: Format,
        sha256: String,
        header: Vec<String>,
        rows: Vec<RawRow>,
    ) -> DataResult<Self> {
        let mut index = HashMap::new();
        for (i, name) in header.iter().enumerate() {
            if name.is_empty() {
                return Err(DataError::Invalid {
                    at: Location { file: path.to_path_buf(), line: Some(1), column: Some(i + 1), column_name: None },
                    message: "header cell is empty; every column needs a name".into(),
                });
            }
            if index.insert(name.clone(), i).is_some() {
                return Err(DataError::DuplicateColumn {
                    at: Location { file: path.to_path_buf(), line: Some(1), column: Some(i + 1), column_name: None },
                    name: name.clone(),
                });
            }
        }
        if rows.is_empty() {
            return Err(DataError::NoRows { path: path.to_path_buf() });
        }
        Ok(Self { path: path.to_path_buf(), format, sha256, header, index, rows })
    }

    #[cfg(feature = "parquet")]
    fn from_parquet_bytes(path: &Path, bytes: Vec<u8>) -> DataResult<Self> {
        let sha256 = sha256_hex(&bytes);
        if bytes.is_empty() {
            return Err(DataError::EmptyFile { path: path.to_path_buf() });
        }
        let (header, rows) = crate::parquet_read::read_cells(path, bytes)?;
        Self::assemble(path, Format::Parquet, sha256, header, rows)
    }

    #[cfg(not(feature = "parquet"))]
    fn from_parquet_bytes(path: &Path, _bytes: Vec<u8>) -> DataResult<Self> {
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

    /// Data rows.
    pub fn rows(&self) -> &[RawRow] {
        &self.rows
    }

    /// What a result records about this file.
    pub fn info(&self) -> InputInfo {
        InputInfo { path: self.path.display().to_string(), sha256: self.sha256.clone(), rows: self.rows.len() }
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

    /// The location of one cell, for messages.
    pub fn at(&self, row: &RawRow, col: usize) -> Location {
        Location::cell(&self.path, row.line, col + 1, &self.header[col])
    }

    /// Parse one cell as a finite number. Empty cells give `Ok(None)`.
    ///
    /// # Errors
    /// [`DataError::BadNumber`] or [`DataError::NonFinite`] with the cell's location.
    pub fn parse_number(&self, row: &RawRow, col: usize) -> DataResult<Option<f64>> {
        let text = row.cells[col].as_str();
        parse_number_text(text).map_err(|nonfinite| {
            if nonfinite {
                DataError::NonFinite { at: self.at(row, col), text: text.to_string() }
            } else {
                DataError::BadNumber { at: self.at(row, col), text: text.to_string() }
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
        self.rows
            .iter()
            .map(|row| {
                let v = self.parse_number(row, col)?;
                if v.is_none() && missing == MissingPolicy::Error {
                    return Err(DataError::MissingValue { at: self.at(row, col) });
                }
                Ok(v)
            })
            .collect()
    }

    /// A whole text column (cells as given, trimmed).
    ///
    /// # Errors
    /// [`DataError::MissingColumn`].
    pub fn text_column(&self, name: &str) -> DataResult<Vec<&str>> {
        let col = self.column(name)?;
        Ok(self.rows.iter().map(|r| r.cells[col].as_str()).collect())
    }
}

/// Parse a number the way every reader does: empty or NA-like text is missing (`Ok(None)`);
/// NaN and infinities are refused (`Err(true)`); anything else unparsable is `Err(false)`.
pub fn parse_number_text(text: &str) -> Result<Option<f64>, bool> {
    let t = text.trim();
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
    let io = |source| DataError::Io { path: path.to_path_buf(), source };
    let meta = std::fs::metadata(path).map_err(io)?;
    if !meta.is_file() {
        let what = if meta.is_dir() { "a folder" } else { "not a regular file (a device, FIFO or socket)" };
        return Err(io(std::io::Error::new(std::io::ErrorKind::InvalidInput, format!("it is {what}"))));
    }
    crate::output::register_input(path);
    std::fs::read(path).map_err(io)
}
