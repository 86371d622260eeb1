//! Parquet input: the projected columns of a flat file become the same typed columns as a CSV
//! file's (a cell that is not a plain number goes through its text), so that one set of checks
//! serves both formats. Row numbers take the place of line numbers (row 1 is the first
//! data row; messages say "line" = row + 1, as a CSV export of the same file would).

use crate::column::Column;
use crate::csv_read::hex;
use crate::error::{DataError, DataResult, Location};
use crate::table::Projection;
use arrow_array::{Array, cast::AsArray, types};
use arrow_schema::{DataType, TimeUnit};
use parquet::arrow::ProjectionMask;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use sha2::{Digest, Sha256};
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

fn malformed(path: &Path, message: String) -> DataError {
    DataError::Malformed { at: Location::file(path), format: "Parquet", message }
}

pub(crate) struct ParquetColumns {
    pub header: Vec<String>,
    pub columns: Vec<Option<Column>>,
    pub rows: usize,
    pub sha256: String,
}

/// Read the projected columns of a Parquet file, batch by batch (row group by row group).
pub(crate) fn read_columns(path: &Path, mut file: File, projection: &Projection) -> DataResult<ParquetColumns> {
    let io = |source| DataError::Io { path: path.to_path_buf(), source };
    let _stage = crate::progress::stage(format!("reading {}", path.display()), None);
    // the file's hash: one streaming pass (the reader below fetches only the projected columns)
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut total = 0usize;
    loop {
        match file.read(&mut buf) {
            Ok(0) => break,
            Ok(k) => {
                hasher.update(&buf[..k]);
                total += k;
            }
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(io(e)),
        }
    }
    if total == 0 {
        return Err(DataError::EmptyFile { path: path.to_path_buf() });
    }
    file.seek(SeekFrom::Start(0)).map_err(io)?;
    let builder = ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| malformed(path, e.to_string()))?;
    let schema = builder.schema().clone();
    let header: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let kinds = projection.checked_kinds(path, &header)?;
    let roots: Vec<usize> = kinds.iter().enumerate().filter(|(_, k)| k.is_some()).map(|(i, _)| i).collect();
    let mask = ProjectionMask::roots(builder.parquet_schema(), roots.iter().copied());
    let reader = builder.with_projection(mask).build().map_err(|e| malformed(path, e.to_string()))?;
    let mut columns: Vec<Option<Column>> = kinds.iter().map(|k| k.map(Column::new)).collect();
    let mut rows = 0usize;
    for batch in reader {
        let batch = batch.map_err(|e| malformed(path, e.to_string()))?;
        for (j, &c) in roots.iter().enumerate() {
            let Some(col) = columns[c].as_mut() else { continue };
            append_array(path, &header[c], batch.column(j).as_ref(), col)?;
        }
        rows += batch.num_rows();
    }
    for c in columns.iter_mut().flatten() {
        c.seal();
    }
    Ok(ParquetColumns { header, columns, rows, sha256: hex(&hasher.finalize()) })
}

fn append_array(path: &Path, name: &str, array: &dyn Array, col: &mut Column) -> DataResult<()> {
    let numeric = matches!(col, Column::Number(_));
    macro_rules! direct {
        ($t:ty) => {{
            let a = array.as_primitive::<$t>();
            for r in 0..a.len() {
                if a.is_null(r) { col.push("") } else { col.push_number(a.value(r) as f64) }
            }
            return Ok(());
        }};
    }
    if numeric {
        match array.data_type() {
            DataType::Int8 => direct!(types::Int8Type),
            DataType::Int16 => direct!(types::Int16Type),
            DataType::Int32 => direct!(types::Int32Type),
            DataType::UInt8 => direct!(types::UInt8Type),
            DataType::UInt16 => direct!(types::UInt16Type),
            DataType::UInt32 => direct!(types::UInt32Type),
            DataType::Int64 => direct!(types::Int64Type),
            DataType::UInt64 => direct!(types::UInt64Type),
            DataType::Float64 => direct!(types::Float64Type),
            _ => {}
        }
    }
    // every other type goes through its text, exactly as written out
    for r in 0..array.len() {
        if array.is_null(r) {
            col.push("");
        } else {
            col.push(&cell_text(path, name, array, r)?);
        }
    }
    Ok(())
}

fn cell_text(path: &Path, name: &str, col: &dyn Array, r: usize) -> DataResult<String> {
    Ok(match col.data_type() {
        DataType::Boolean => col.as_boolean().value(r).to_string(),
        DataType::Int8 => col.as_primitive::<types::Int8Type>().value(r).to_string(),
        DataType::Int16 => col.as_primitive::<types::Int16Type>().value(r).to_string(),
        DataType::Int32 => col.as_primitive::<types::Int32Type>().value(r).to_string(),
        DataType::Int64 => col.as_primitive::<types::Int64Type>().value(r).to_string(),
        DataType::UInt8 => col.as_primitive::<types::UInt8Type>().value(r).to_string(),
        DataType::UInt16 => col.as_primitive::<types::UInt16Type>().value(r).to_string(),
        DataType::UInt32 => col.as_primitive::<types::UInt32Type>().value(r).to_string(),
        DataType::UInt64 => col.as_primitive::<types::UInt64Type>().value(r).to_string(),
        DataType::Float32 => col.as_primitive::<types::Float32Type>().value(r).to_string(),
        DataType::Float64 => col.as_primitive::<types::Float64Type>().value(r).to_string(),
        DataType::Utf8 => col.as_string::<i32>().value(r).trim().to_string(),
        DataType::LargeUtf8 => col.as_string::<i64>().value(r).trim().to_string(),
        DataType::Utf8View => col.as_string_view().value(r).trim().to_string(),
        DataType::Date32 => {
            let days = col.as_primitive::<types::Date32Type>().value(r);
            days_to_iso(i64::from(days))
        }
        DataType::Date64 => {
            let ms = col.as_primitive::<types::Date64Type>().value(r);
            days_to_iso(ms.div_euclid(86_400_000))
        }
        DataType::Timestamp(unit, _) => {
            let v = match unit {
                TimeUnit::Second => col.as_primitive::<types::TimestampSecondType>().value(r),
                TimeUnit::Millisecond => col.as_primitive::<types::TimestampMillisecondType>().value(r),
                TimeUnit::Microsecond => col.as_primitive::<types::TimestampMicrosecondType>().value(r),
                TimeUnit::Nanosecond => col.as_primitive::<types::TimestampNanosecondType>().value(r),
            };
            let per_sec: i64 = match unit {
                TimeUnit::Second => 1,
                TimeUnit::Millisecond => 1_000,
                TimeUnit::Microsecond => 1_000_000,
                TimeUnit::Nanosecond => 1_000_000_000,
            };
            let secs = v.div_euclid(per_sec);
            match chrono::DateTime::from_timestamp(secs, 0) {
                Some(dt) if secs.rem_euclid(86_400) == 0 => dt.date_naive().to_string(),
                Some(dt) => dt.format("%Y-%m-%dT%H:%M:%SZ").to_string(),
                None => return Err(malformed(path, format!("column '{name}': timestamp out of range"))),
            }
        }
        other => {
            return Err(DataError::Invalid {
                at: Location {
                    file: path.to_path_buf(),
                    line: None,
                    column: None,
                    column_name: Some(name.to_string()),
                },
                message: format!(
                    "Parquet column type {other} is not supported (use numbers, strings, booleans or dates)"
                ),
            });
        }
    })
}

fn days_to_iso(days: i64) -> String {
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    epoch.checked_add_signed(chrono::Duration::days(days)).map(|d| d.to_string()).unwrap_or_else(|| format!("{days}"))
}
