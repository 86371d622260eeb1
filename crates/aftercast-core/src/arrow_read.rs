//! Arrow arrays into the readers' typed columns: a Parquet file's row groups and the tables an
//! embedding program hands over in memory (a data frame) become the same columns as a CSV file's.
//! A numeric cell is kept as its number; every other cell goes through its text, exactly as a
//! CSV export of the same data would show it.

use crate::column::Column;
use crate::error::{DataError, DataResult, Location};
use arrow_array::{Array, cast::AsArray, types};
use arrow_schema::{DataType, TimeUnit};
use std::path::Path;

fn malformed(path: &Path, message: String) -> DataError {
    DataError::Malformed { at: Location::file(path), format: "Arrow", message }
}

/// Append every cell of `array` (column `name` of input `path`) to `col`.
pub(crate) fn append_array(path: &Path, name: &str, array: &dyn Array, col: &mut Column) -> DataResult<()> {
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
    // a categorical column (dictionary-encoded): each cell is its category's value
    if let DataType::Dictionary(_, _) = array.data_type() {
        let dict = array.as_any_dictionary();
        let keys = dict.normalized_keys();
        let values = dict.values();
        for (r, &k) in keys.iter().enumerate() {
            if array.is_null(r) || values.is_null(k) {
                col.push("");
            } else if numeric && let Some(v) = plain_number(values.as_ref(), k) {
                col.push_number(v);
            } else {
                col.push(&cell_text(path, name, values.as_ref(), k)?);
            }
        }
        return Ok(());
    }
    if let DataType::Null = array.data_type() {
        for _ in 0..array.len() {
            col.push("");
        }
        return Ok(());
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

/// The value of a numeric cell that is a plain number (integers and floats).
fn plain_number(array: &dyn Array, r: usize) -> Option<f64> {
    Some(match array.data_type() {
        DataType::Int8 => f64::from(array.as_primitive::<types::Int8Type>().value(r)),
        DataType::Int16 => f64::from(array.as_primitive::<types::Int16Type>().value(r)),
        DataType::Int32 => f64::from(array.as_primitive::<types::Int32Type>().value(r)),
        DataType::Int64 => array.as_primitive::<types::Int64Type>().value(r) as f64,
        DataType::UInt8 => f64::from(array.as_primitive::<types::UInt8Type>().value(r)),
        DataType::UInt16 => f64::from(array.as_primitive::<types::UInt16Type>().value(r)),
        DataType::UInt32 => f64::from(array.as_primitive::<types::UInt32Type>().value(r)),
        DataType::UInt64 => array.as_primitive::<types::UInt64Type>().value(r) as f64,
        DataType::Float64 => array.as_primitive::<types::Float64Type>().value(r),
        _ => return None,
    })
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
                at: Location { column_name: Some(name.to_string()), ..Location::file(path) },
                message: format!(
                    "column type {other} is not supported (use numbers, strings, booleans, dates or categories of those)"
                ),
            });
        }
    })
}

fn days_to_iso(days: i64) -> String {
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    epoch.checked_add_signed(chrono::Duration::days(days)).map(|d| d.to_string()).unwrap_or_else(|| format!("{days}"))
}
