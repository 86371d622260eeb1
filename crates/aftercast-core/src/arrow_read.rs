//! Arrow arrays into the readers' typed columns: a Parquet file's row groups and the tables an
//! embedding program hands over in memory (a data frame) become the same columns as a CSV file's.
//! A numeric cell is kept as its number; every other cell goes through its text, exactly as a
//! CSV export of the same data would show it.

use crate::column::Column;
use crate::error::{DataError, DataResult, Location};
use arrow_array::timezone::Tz;
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
        DataType::Timestamp(unit, zone) => {
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
            let Some(utc) = chrono::DateTime::from_timestamp(secs, 0) else {
                return Err(malformed(path, format!("column '{name}': timestamp out of range")));
            };
            match zone {
                // a time with no zone is the wall time written
                None => {
                    if secs.rem_euclid(86_400) == 0 {
                        utc.date_naive().to_string()
                    } else {
                        utc.format("%Y-%m-%dT%H:%M:%SZ").to_string()
                    }
                }
                // an instant with a zone is written in the wall time of its zone with its
                // offset: the same instant, and midnight in Berlin reads as that day in Berlin
                // (crate::time::parse_time), whatever the hour in UTC
                Some(zone) => {
                    let tz: Tz = zone.parse().map_err(|_| DataError::Invalid {
                        at: Location { column_name: Some(name.to_string()), ..Location::file(path) },
                        message: format!("time zone '{}' is not known", crate::error::shown(zone)),
                    })?;
                    utc.with_timezone(&tz).format("%Y-%m-%dT%H:%M:%S%:z").to_string()
                }
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

#[cfg(test)]
mod tests {
    use super::append_array;
    use crate::column::{Column, ColumnKind};
    use arrow_array::TimestampSecondArray;
    use std::path::Path;

    fn texts(array: &TimestampSecondArray) -> Vec<String> {
        let mut col = Column::new(ColumnKind::Text);
        append_array(Path::new("t"), "date", array, &mut col).expect("read");
        (0..col.len()).map(|r| col.text(r).into_owned()).collect()
    }

    #[test]
    fn a_zoned_instant_is_its_zones_wall_time() {
        // 2026-03-01T23:00:00Z is midnight of 2 March in Berlin (UTC+1 in winter) and
        // 2026-06-30T22:00:00Z midnight of 1 July (UTC+2 in summer): the IANA rules
        let secs = [1_772_406_000, 1_782_856_800, 1_772_409_600];
        let berlin = TimestampSecondArray::from(secs.to_vec()).with_timezone("Europe/Berlin");
        assert_eq!(
            texts(&berlin),
            ["2026-03-02T00:00:00+01:00", "2026-07-01T00:00:00+02:00", "2026-03-02T01:00:00+01:00"]
        );
        // 2026-03-02T05:00:00Z is midnight of 2 March at a fixed UTC-5
        let offset = TimestampSecondArray::from(vec![1_772_406_000, 1_772_427_600]).with_timezone("-05:00");
        assert_eq!(texts(&offset), ["2026-03-01T18:00:00-05:00", "2026-03-02T00:00:00-05:00"]);
        let naive = TimestampSecondArray::from(vec![1_772_409_600, 1_772_406_000]);
        assert_eq!(texts(&naive), ["2026-03-02", "2026-03-01T23:00:00Z"]);
        // a zoned midnight is its zone's date to a time column
        let day =
            |s: &str| crate::time::parse_time(s, &crate::time::DateFormat::Iso, || crate::error::Location::file("t"));
        for (text, date) in [("2026-03-02T00:00:00+01:00", "2026-03-02"), ("2026-07-01T00:00:00-05:00", "2026-07-01")] {
            assert_eq!(day(text).expect("a date").to_string(), date);
        }
        assert!(day("2026-03-02T01:00:00+01:00").is_err());
    }

    #[test]
    fn an_unknown_zone_names_the_column() {
        let bad = TimestampSecondArray::from(vec![0]).with_timezone("Mars/Olympus");
        let mut col = Column::new(ColumnKind::Text);
        let e = append_array(Path::new("t"), "date", &bad, &mut col).expect_err("unknown zone");
        let m = e.to_string();
        assert!(m.contains("'date'") && m.contains("Mars/Olympus"), "{m}");
    }
}
