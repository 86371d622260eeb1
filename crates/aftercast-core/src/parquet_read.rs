//! Parquet input: a flat file is turned into the same text cells as a CSV file, so that one set
//! of checks serves both formats. Row numbers take the place of line numbers (row 1 is the first
//! data row; messages say "line" = row + 1, as a CSV export of the same file would).

use crate::error::{DataError, DataResult, Location};
use crate::table::RawRow;
use arrow_array::{Array, RecordBatch, cast::AsArray, types};
use arrow_schema::{DataType, TimeUnit};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::path::Path;

fn malformed(path: &Path, message: String) -> DataError {
    DataError::Malformed { at: Location::file(path), format: "Parquet", message }
}

pub(crate) fn read_cells(path: &Path, bytes: Vec<u8>) -> DataResult<(Vec<String>, Vec<RawRow>)> {
    let builder = ParquetRecordBatchReaderBuilder::try_new(bytes::Bytes::from(bytes))
        .map_err(|e| malformed(path, e.to_string()))?;
    let schema = builder.schema().clone();
    let header: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let reader = builder.build().map_err(|e| malformed(path, e.to_string()))?;
    let mut rows: Vec<RawRow> = Vec::new();
    for batch in reader {
        let batch = batch.map_err(|e| malformed(path, e.to_string()))?;
        append_batch(path, &batch, &mut rows)?;
    }
    Ok((header, rows))
}

fn append_batch(path: &Path, batch: &RecordBatch, rows: &mut Vec<RawRow>) -> DataResult<()> {
    let start = rows.len();
    for r in 0..batch.num_rows() {
        rows.push(RawRow { line: (start + r + 2) as u64, cells: Vec::with_capacity(batch.num_columns()) });
    }
    for (c, col) in batch.columns().iter().enumerate() {
        let name = batch.schema().field(c).name().clone();
        for r in 0..batch.num_rows() {
            let text = if col.is_null(r) { String::new() } else { cell_text(path, &name, col.as_ref(), r)? };
            rows[start + r].cells.push(text);
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
