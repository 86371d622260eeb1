//! The draws file kept beside result.json: one Parquet file (`draws.parquet`, or
//! `<analysis>.draws.parquet` in a study) with one float64 column per summarised quantity
//! (`average`, `cumulative`, `relative`, `total`) and one row per draw, in draw order. Any
//! Parquet reader opens it (e.g. `pandas.read_parquet`). Format notes: docs/results.md.

use crate::error::{DataError, Location};
use crate::estimate::KeptDraws;
use arrow_array::{Array, ArrayRef, Float64Array, RecordBatch, cast::AsArray, types::Float64Type};
use arrow_schema::{DataType, Field, Schema};
use parquet::arrow::ArrowWriter;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::path::Path;
use std::sync::Arc;

fn malformed(path: &Path, message: String) -> DataError {
    DataError::Malformed { at: Location::file(path), format: "Parquet", message }
}

/// Encode draws as Parquet bytes (write them with an atomic writer).
///
/// # Errors
/// [`DataError::Malformed`] naming `path` when the columns differ in length or the encoder fails.
pub fn to_parquet(draws: &KeptDraws, path: &Path) -> Result<Vec<u8>, DataError> {
    let cols = draws.columns();
    let rows = cols.first().map_or(0, |(_, v)| v.len());
    if let Some((name, v)) = cols.iter().find(|(_, v)| v.len() != rows) {
        return Err(malformed(path, format!("draw column '{name}' has {} rows, expected {rows}", v.len())));
    }
    let fields: Vec<Field> = cols.iter().map(|(n, _)| Field::new(*n, DataType::Float64, false)).collect();
    let arrays: Vec<ArrayRef> =
        cols.iter().map(|(_, v)| Arc::new(Float64Array::from(v.to_vec())) as ArrayRef).collect();
    let schema = Arc::new(Schema::new(fields));
    let mut buf = Vec::new();
    let err = |e: &dyn std::fmt::Display| malformed(path, e.to_string());
    let mut writer = ArrowWriter::try_new(&mut buf, schema.clone(), None).map_err(|e| err(&e))?;
    if !cols.is_empty() {
        let batch = RecordBatch::try_new(schema, arrays).map_err(|e| err(&e))?;
        writer.write(&batch).map_err(|e| err(&e))?;
    }
    writer.close().map_err(|e| err(&e))?;
    Ok(buf)
}

/// Read a draws file written by [`to_parquet`].
///
/// # Errors
/// [`DataError::Io`] or [`DataError::Malformed`] naming `path`.
pub fn read(path: &Path) -> Result<KeptDraws, DataError> {
    let bytes = std::fs::read(path).map_err(|source| DataError::Io { path: path.to_path_buf(), source })?;
    let builder = ParquetRecordBatchReaderBuilder::try_new(bytes::Bytes::from(bytes))
        .map_err(|e| malformed(path, e.to_string()))?;
    let reader = builder.build().map_err(|e| malformed(path, e.to_string()))?;
    let mut out = KeptDraws::default();
    for batch in reader {
        let batch = batch.map_err(|e| malformed(path, e.to_string()))?;
        for (c, col) in batch.columns().iter().enumerate() {
            let name = batch.schema().field(c).name().clone();
            let target = match name.as_str() {
                "average" => &mut out.average,
                "cumulative" => &mut out.cumulative,
                "relative" => &mut out.relative,
                "total" => &mut out.total,
                other => return Err(malformed(path, format!("unknown draw column '{other}'"))),
            };
            let Some(values) = col.as_primitive_opt::<Float64Type>() else {
                return Err(malformed(path, format!("draw column '{name}' is not float64")));
            };
            target.extend((0..values.len()).map(|i| if values.is_null(i) { f64::NAN } else { values.value(i) }));
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn draws_round_trip_bit_for_bit() {
        let d = KeptDraws {
            average: vec![1.5, -2.25, f64::MIN_POSITIVE],
            cumulative: vec![3.0, 4.0, 5.0],
            relative: vec![0.01, 0.02, -0.03],
            total: Vec::new(),
        };
        let dir = tempfile::tempdir().expect("tempdir");
        let p = dir.path().join("draws.parquet");
        std::fs::write(&p, to_parquet(&d, &p).expect("encode")).expect("write");
        let back = read(&p).expect("read");
        assert_eq!(back, d);
    }

    #[test]
    fn ragged_columns_are_refused() {
        let d = KeptDraws { average: vec![1.0], cumulative: vec![1.0, 2.0], ..KeptDraws::default() };
        assert!(to_parquet(&d, Path::new("x.parquet")).is_err());
    }
}
