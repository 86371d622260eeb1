//! Parquet input: the projected columns of a flat file become the same typed columns as a CSV
//! file's (a cell that is not a plain number goes through its text), so that one set of checks
//! serves both formats. Row numbers take the place of line numbers (row 1 is the first
//! data row; messages say "line" = row + 1, as a CSV export of the same file would).

use crate::column::Column;
use crate::csv_read::hex;
use crate::error::{DataError, DataResult, Location};
use crate::table::Projection;
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
            crate::arrow_read::append_array(path, &header[c], batch.column(j).as_ref(), col)?;
        }
        rows += batch.num_rows();
    }
    for c in columns.iter_mut().flatten() {
        c.seal();
    }
    Ok(ParquetColumns { header, columns, rows, sha256: hex(&hasher.finalize()) })
}
