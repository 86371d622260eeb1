//! Event-log readers: CSV, gzip-compressed CSV and Parquet, read once, in parallel.
//!
//! CSV (plain or gzip) is read sequentially in blocks of whole lines that workers parse in
//! parallel; Parquet is split by row groups. Each worker owns one accumulator (its size depends
//! on the number of units only); the accumulators are merged at the end. With the `error` policy
//! the reported bad row is the first one in file order, whatever the thread count.

use crate::engine::{Acc, Plan, RowError, check_value, metric_index};
use crate::error::{Cell, WindowsError, WindowsResult};
use crate::params::BadRowPolicy;
use crate::params::EventColumns;
use crate::time;
use arrow_array::cast::AsArray;
use arrow_array::{Array, RecordBatch, types};
use arrow_schema::{DataType, TimeUnit};
use parquet::arrow::ProjectionMask;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Formats of the event log.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EventFormat {
    /// Comma-separated text with a header; one event per line.
    Csv,
    /// gzip-compressed CSV.
    CsvGzip,
    /// Apache Parquet.
    Parquet,
}

impl EventFormat {
    /// The format implied by a file name: `.parquet`/`.pq` Parquet, `.gz` gzip CSV, else CSV.
    pub fn from_path(path: &Path) -> Self {
        match path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase()).as_deref() {
            Some("parquet" | "pq") => EventFormat::Parquet,
            Some("gz" | "gzip") => EventFormat::CsvGzip,
            _ => EventFormat::Csv,
        }
    }
}

/// An event log on disk.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct EventSource {
    /// The file.
    pub path: PathBuf,
    /// Its format.
    pub format: EventFormat,
    /// Column names.
    pub columns: EventColumns,
}

impl EventSource {
    /// An event log whose format follows from its file name.
    pub fn new(path: impl Into<PathBuf>, columns: EventColumns) -> Self {
        let path = path.into();
        Self { format: EventFormat::from_path(&path), path, columns }
    }
}

const BLOCK: usize = 8 << 20;

pub(crate) fn read_events(src: &EventSource, plan: &Plan<'_>, threads: usize) -> WindowsResult<Acc> {
    match src.format {
        EventFormat::Parquet => read_parquet(src, plan, threads),
        EventFormat::Csv | EventFormat::CsvGzip => read_csv(src, plan, threads),
    }
}

fn io_err(path: &Path, what: &str, e: std::io::Error) -> WindowsError {
    WindowsError::Io { path: path.to_path_buf(), what: what.to_string(), source: e }
}

/// Errors found by workers: keep the one in the earliest chunk (rows are in order within one).
struct FirstError {
    chunk: AtomicUsize,
    error: Mutex<Option<(usize, u64, WindowsError)>>,
}

impl FirstError {
    fn new() -> Self {
        Self { chunk: AtomicUsize::new(usize::MAX), error: Mutex::new(None) }
    }
    fn skip(&self, chunk: usize) -> bool {
        chunk > self.chunk.load(Ordering::Relaxed)
    }
    fn record(&self, chunk: usize, line: u64, e: WindowsError) {
        self.chunk.fetch_min(chunk, Ordering::Relaxed);
        let mut g = self.error.lock().unwrap_or_else(|p| p.into_inner());
        let replace = match &*g {
            None => true,
            Some((c, l, _)) => (chunk, line) < (*c, *l),
        };
        if replace {
            *g = Some((chunk, line, e));
        }
    }
    fn take(self) -> Option<WindowsError> {
        self.error.into_inner().unwrap_or_else(|p| p.into_inner()).map(|(_, _, e)| e)
    }
}

fn merge_all(mut accs: Vec<Acc>) -> Acc {
    let mut first = accs.remove(0);
    for a in accs {
        first.merge(a);
    }
    first
}

// ---------------------------------------------------------------------------------------------
// CSV

struct CsvCols {
    unit: usize,
    time: usize,
    metric: usize,
    value: usize,
    header: Vec<String>,
}

fn find_col(path: &Path, header: &[String], name: &str) -> WindowsResult<usize> {
    header.iter().position(|h| h == name).ok_or_else(|| WindowsError::MissingColumn {
        path: path.to_path_buf(),
        name: name.to_string(),
        available: header.to_vec(),
    })
}

fn read_csv(src: &EventSource, plan: &Plan<'_>, threads: usize) -> WindowsResult<Acc> {
    let path = &src.path;
    let file = open_input(path).map_err(|e| io_err(path, "cannot open the event log", e))?;
    let mut reader: Box<dyn Read + Send> = match src.format {
        EventFormat::CsvGzip => {
            Box::new(flate2::read::MultiGzDecoder::new(std::io::BufReader::with_capacity(1 << 20, file)))
        }
        _ => Box::new(file),
    };
    let format: &'static str = if src.format == EventFormat::CsvGzip { "gzip CSV" } else { "CSV" };
    let read_err = |e: std::io::Error| -> WindowsError {
        if src.format == EventFormat::CsvGzip && e.kind() != std::io::ErrorKind::NotFound {
            WindowsError::Malformed { path: path.clone(), line: None, format: "gzip", message: e.to_string() }
        } else {
            io_err(path, "cannot read the event log", e)
        }
    };
    // Header: the first line.
    let mut buf: Vec<u8> = Vec::with_capacity(BLOCK + (1 << 16));
    let header_end = loop {
        if let Some(p) = buf.iter().position(|&b| b == b'\n') {
            break p;
        }
        let before = buf.len();
        let mut tmp = vec![0u8; 1 << 16];
        let n = reader.read(&mut tmp).map_err(read_err)?;
        if n == 0 {
            if before == 0 {
                return Err(WindowsError::Malformed {
                    path: path.clone(),
                    line: Some(1),
                    format,
                    message: "the file is empty".into(),
                });
            }
            break buf.len();
        }
        buf.extend_from_slice(&tmp[..n]);
    };
    let mut header_bytes = &buf[..header_end];
    if header_bytes.starts_with(&[0xEF, 0xBB, 0xBF]) {
        header_bytes = &header_bytes[3..];
    }
    let header: Vec<String> = {
        let mut r = csv::ReaderBuilder::new().has_headers(false).trim(csv::Trim::All).from_reader(header_bytes);
        let mut rec = csv::StringRecord::new();
        match r.read_record(&mut rec) {
            Ok(true) => rec.iter().map(str::to_string).collect(),
            Ok(false) => Vec::new(),
            Err(e) => {
                return Err(WindowsError::Malformed {
                    path: path.clone(),
                    line: Some(1),
                    format,
                    message: e.to_string(),
                });
            }
        }
    };
    let c = &src.columns;
    let cols = CsvCols {
        unit: find_col(path, &header, &c.unit)?,
        time: find_col(path, &header, &c.time)?,
        metric: find_col(path, &header, &c.metric)?,
        value: find_col(path, &header, &c.value)?,
        header,
    };
    let rest: Vec<u8> = if header_end < buf.len() { buf[header_end + 1..].to_vec() } else { Vec::new() };
    buf = rest;

    let first_error = FirstError::new();
    let (tx, rx) = std::sync::mpsc::sync_channel::<(usize, u64, Vec<u8>)>(threads * 2);
    let rx = Mutex::new(rx);
    let policy = plan.spec.bad_rows();
    let result: WindowsResult<Vec<Acc>> = std::thread::scope(|s| {
        let mut handles = Vec::new();
        for _ in 0..threads {
            handles.push(s.spawn(|| {
                let mut acc = plan.new_acc();
                loop {
                    let msg = rx.lock().unwrap_or_else(|p| p.into_inner()).recv();
                    let Ok((idx, line0, chunk)) = msg else { break };
                    if first_error.skip(idx) {
                        continue;
                    }
                    if let Err((line, e)) = csv_chunk(plan, &mut acc, &cols, path, line0, &chunk, policy) {
                        first_error.record(idx, line, e);
                    }
                }
                acc
            }));
        }
        // The reader: whole lines per chunk.
        let mut idx = 0usize;
        let mut line = 2u64;
        let mut eof = false;
        let mut read_result: WindowsResult<()> = Ok(());
        while !eof {
            let mut filled = buf.len();
            buf.resize(BLOCK.max(filled * 2), 0);
            while filled < buf.len() {
                match reader.read(&mut buf[filled..]) {
                    Ok(0) => {
                        eof = true;
                        break;
                    }
                    Ok(n) => filled += n,
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                    Err(e) => {
                        read_result = Err(read_err(e));
                        eof = true;
                        break;
                    }
                }
            }
            buf.truncate(filled);
            if read_result.is_err() {
                break;
            }
            let cut = if eof { buf.len() } else { buf.iter().rposition(|&b| b == b'\n').map_or(0, |p| p + 1) };
            if cut == 0 && !eof {
                continue; // a line longer than the buffer: read more
            }
            let tail = buf.split_off(cut);
            let chunk = std::mem::replace(&mut buf, tail);
            if chunk.is_empty() {
                continue;
            }
            let lines = chunk.iter().filter(|&&b| b == b'\n').count() as u64;
            if tx.send((idx, line, chunk)).is_err() {
                break;
            }
            idx += 1;
            line += lines;
        }
        drop(tx);
        let accs: Vec<Acc> = handles.into_iter().map(|h| h.join().unwrap_or_else(|_| plan.new_acc())).collect();
        read_result.map(|()| accs)
    });
    let accs = result?;
    if let Some(e) = first_error.take() {
        return Err(e);
    }
    Ok(merge_all(accs))
}

#[allow(clippy::too_many_arguments)]
fn csv_chunk(
    plan: &Plan<'_>,
    acc: &mut Acc,
    cols: &CsvCols,
    path: &Path,
    line0: u64,
    chunk: &[u8],
    policy: BadRowPolicy,
) -> Result<(), (u64, WindowsError)> {
    let mut r = csv::ReaderBuilder::new().has_headers(false).flexible(true).trim(csv::Trim::All).from_reader(chunk);
    let mut rec = csv::ByteRecord::new();
    let offset = plan.spec.offset();
    let map = plan.exposures.map();
    loop {
        let ok = match r.read_byte_record(&mut rec) {
            Ok(ok) => ok,
            Err(e) => {
                let line = line0 + e.position().map_or(1, |p| p.line()) - 1;
                if policy == BadRowPolicy::Skip {
                    acc.events.skipped_malformed += 1;
                    break;
                }
                return Err((
                    line,
                    WindowsError::Malformed {
                        path: path.to_path_buf(),
                        line: Some(line),
                        format: "CSV",
                        message: e.to_string(),
                    },
                ));
            }
        };
        if !ok {
            break;
        }
        let line = line0 + rec.position().map_or(1, |p| p.line()) - 1;
        if rec.len() == 1 && rec[0].is_empty() {
            continue;
        }
        acc.events.rows += 1;
        if rec.len() != cols.header.len() {
            if policy == BadRowPolicy::Skip {
                acc.events.skipped_malformed += 1;
                continue;
            }
            return Err((
                line,
                WindowsError::Malformed {
                    path: path.to_path_buf(),
                    line: Some(line),
                    format: "CSV",
                    message: format!("row has {} fields, the header has {}", rec.len(), cols.header.len()),
                },
            ));
        }
        let metric = &rec[cols.metric];
        let outcome = (|| -> Result<Option<(usize, usize, i64, i128)>, RowError> {
            if metric.is_empty() {
                return Err(RowError::Missing(cols.metric));
            }
            let Some(m) = metric_index(plan, metric) else { return Ok(None) };
            let unit = &rec[cols.unit];
            if unit.is_empty() {
                return Err(RowError::Missing(cols.unit));
            }
            let u = std::str::from_utf8(unit).ok().and_then(|s| map.get(s)).ok_or(RowError::UnknownUnit(cols.unit))?;
            let t = &rec[cols.time];
            if t.is_empty() {
                return Err(RowError::Missing(cols.time));
            }
            let t = std::str::from_utf8(t)
                .ok()
                .and_then(|s| time::parse_timestamp(s, offset))
                .ok_or(RowError::BadTimestamp(cols.time))?;
            let v = &rec[cols.value];
            if v.is_empty() {
                return Err(RowError::Missing(cols.value));
            }
            let v: f64 =
                std::str::from_utf8(v).ok().and_then(|s| s.parse().ok()).ok_or(RowError::BadValue(cols.value))?;
            let fixed = check_value(plan, m, v, cols.value)?;
            Ok(Some((u as usize, m, t, fixed)))
        })();
        match outcome {
            Ok(Some((u, m, t, v))) => acc.add(plan, u, m, t, v),
            Ok(None) => acc.events.other_metric += 1,
            Err(re) => {
                if policy == BadRowPolicy::Skip {
                    re.count(&mut acc.events);
                    continue;
                }
                let cell = |c: usize| Cell {
                    file: path.to_path_buf(),
                    line,
                    column: c + 1,
                    column_name: cols.header[c].clone(),
                };
                let text = |c: usize| String::from_utf8_lossy(&rec[c]).into_owned();
                let metric = String::from_utf8_lossy(metric).into_owned();
                return Err((line, re.into_error(cell, text, &metric)));
            }
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Parquet

fn pq_err(path: &Path, e: impl std::fmt::Display) -> WindowsError {
    WindowsError::Malformed { path: path.to_path_buf(), line: None, format: "Parquet", message: e.to_string() }
}

fn read_parquet(src: &EventSource, plan: &Plan<'_>, threads: usize) -> WindowsResult<Acc> {
    let path = &src.path;
    let file = open_input(path).map_err(|e| io_err(path, "cannot open the event log", e))?;
    let builder = ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| pq_err(path, e))?;
    let schema = builder.schema().clone();
    let header: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let c = &src.columns;
    let idx = [
        find_col(path, &header, &c.unit)?,
        find_col(path, &header, &c.time)?,
        find_col(path, &header, &c.metric)?,
        find_col(path, &header, &c.value)?,
    ];
    // Check the column types up front.
    let ty = |i: usize| schema.field(i).data_type().clone();
    let type_err = |i: usize, expected: &str| WindowsError::ColumnType {
        path: path.clone(),
        column: header[i].clone(),
        found: ty(i).to_string(),
        expected: expected.to_string(),
    };
    if !matches!(
        ty(idx[0]),
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View | DataType::Int32 | DataType::Int64
    ) {
        return Err(type_err(idx[0], "text or integer unit ids"));
    }
    if !matches!(
        ty(idx[1]),
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View | DataType::Timestamp(_, _) | DataType::Date32
    ) {
        return Err(type_err(idx[1], "a timestamp, a date, or ISO 8601 text"));
    }
    if !matches!(ty(idx[2]), DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View) {
        return Err(type_err(idx[2], "text metric names"));
    }
    if !matches!(ty(idx[3]), DataType::Float64 | DataType::Float32 | DataType::Int64 | DataType::Int32) {
        return Err(type_err(idx[3], "numbers (float or integer)"));
    }
    let meta = builder.metadata().clone();
    let n_groups = meta.num_row_groups();
    let mut first_row = Vec::with_capacity(n_groups);
    let mut acc_rows = 0u64;
    for g in 0..n_groups {
        first_row.push(acc_rows);
        acc_rows += meta.row_group(g).num_rows() as u64;
    }
    drop(builder);
    let next = AtomicUsize::new(0);
    let first_error = FirstError::new();
    let policy = plan.spec.bad_rows();
    let accs: Vec<Acc> = std::thread::scope(|s| {
        let handles: Vec<_> = (0..threads.min(n_groups.max(1)))
            .map(|_| {
                s.spawn(|| {
                    let mut acc = plan.new_acc();
                    loop {
                        let g = next.fetch_add(1, Ordering::Relaxed);
                        if g >= n_groups {
                            break;
                        }
                        if first_error.skip(g) {
                            continue;
                        }
                        if let Err((line, e)) =
                            parquet_group(plan, &mut acc, path, &header, idx, g, first_row[g], policy)
                        {
                            first_error.record(g, line, e);
                        }
                    }
                    acc
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().unwrap_or_else(|_| plan.new_acc())).collect()
    });
    if let Some(e) = first_error.take() {
        return Err(e);
    }
    if accs.is_empty() {
        return Ok(plan.new_acc());
    }
    Ok(merge_all(accs))
}

enum TextCol<'a> {
    Small(&'a arrow_array::StringArray),
    Large(&'a arrow_array::LargeStringArray),
    View(&'a arrow_array::StringViewArray),
}

impl<'a> TextCol<'a> {
    fn new(a: &'a dyn Array) -> Option<Self> {
        match a.data_type() {
            DataType::Utf8 => Some(TextCol::Small(a.as_string::<i32>())),
            DataType::LargeUtf8 => Some(TextCol::Large(a.as_string::<i64>())),
            DataType::Utf8View => Some(TextCol::View(a.as_string_view())),
            _ => None,
        }
    }
    #[inline]
    fn get(&self, i: usize) -> &'a str {
        match self {
            TextCol::Small(a) => a.value(i),
            TextCol::Large(a) => a.value(i),
            TextCol::View(a) => a.value(i),
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn parquet_group(
    plan: &Plan<'_>,
    acc: &mut Acc,
    path: &Path,
    header: &[String],
    idx: [usize; 4],
    group: usize,
    first_row: u64,
    policy: BadRowPolicy,
) -> Result<(), (u64, WindowsError)> {
    let file = open_input(path).map_err(|e| (0, io_err(path, "cannot open the event log", e)))?;
    let builder = ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| (0, pq_err(path, e)))?;
    let mask = ProjectionMask::roots(builder.parquet_schema(), idx.iter().copied());
    let reader = builder
        .with_row_groups(vec![group])
        .with_projection(mask)
        .with_batch_size(65_536)
        .build()
        .map_err(|e| (0, pq_err(path, e)))?;
    let mut row = first_row;
    for batch in reader {
        let batch = batch.map_err(|e| (row + 2, pq_err(path, e)))?;
        parquet_batch(plan, acc, path, header, idx, &batch, row, policy)?;
        row += batch.num_rows() as u64;
    }
    Ok(())
}

#[allow(clippy::too_many_arguments)]
fn parquet_batch(
    plan: &Plan<'_>,
    acc: &mut Acc,
    path: &Path,
    header: &[String],
    idx: [usize; 4],
    batch: &RecordBatch,
    first_row: u64,
    policy: BadRowPolicy,
) -> Result<(), (u64, WindowsError)> {
    let col = |i: usize| batch.column_by_name(&header[i]).map(|a| a.as_ref());
    let missing = || (first_row + 2, pq_err(path, "a projected column is absent from a batch"));
    let unit_a = col(idx[0]).ok_or_else(missing)?;
    let time_a = col(idx[1]).ok_or_else(missing)?;
    let metric_a = col(idx[2]).ok_or_else(missing)?;
    let value_a = col(idx[3]).ok_or_else(missing)?;
    let metric_t = TextCol::new(metric_a).ok_or_else(missing)?;
    let unit_t = TextCol::new(unit_a);
    let time_t = TextCol::new(time_a);
    let offset = plan.spec.offset();
    let map = plan.exposures.map();
    // Timestamp columns: (values, micros per unit numerator/denominator, naive?).
    let ts: Option<(Vec<i64>, bool)> = match time_a.data_type() {
        DataType::Timestamp(unit, tz) => {
            let raw: &[i64] = match unit {
                TimeUnit::Second => time_a.as_primitive::<types::TimestampSecondType>().values(),
                TimeUnit::Millisecond => time_a.as_primitive::<types::TimestampMillisecondType>().values(),
                TimeUnit::Microsecond => time_a.as_primitive::<types::TimestampMicrosecondType>().values(),
                TimeUnit::Nanosecond => time_a.as_primitive::<types::TimestampNanosecondType>().values(),
            };
            let conv: Vec<i64> = match unit {
                TimeUnit::Second => raw.iter().map(|v| v.saturating_mul(time::SECOND)).collect(),
                TimeUnit::Millisecond => raw.iter().map(|v| v.saturating_mul(1000)).collect(),
                TimeUnit::Microsecond => raw.to_vec(),
                TimeUnit::Nanosecond => raw.iter().map(|v| v.div_euclid(1000)).collect(),
            };
            Some((conv, tz.is_none()))
        }
        DataType::Date32 => {
            let d = time_a.as_primitive::<types::Date32Type>().values();
            Some((d.iter().map(|&x| i64::from(x) * time::DAY + offset.micros()).collect(), true))
        }
        _ => None,
    };
    let mut unit_buf = String::new();
    for i in 0..batch.num_rows() {
        acc.events.rows += 1;
        let line = first_row + i as u64 + 2;
        let outcome = (|| -> Result<Option<(usize, usize, i64, i128)>, RowError> {
            if metric_a.is_null(i) {
                return Err(RowError::Missing(idx[2]));
            }
            let metric = metric_t.get(i).trim();
            if metric.is_empty() {
                return Err(RowError::Missing(idx[2]));
            }
            let Some(m) = metric_index(plan, metric.as_bytes()) else { return Ok(None) };
            if unit_a.is_null(i) {
                return Err(RowError::Missing(idx[0]));
            }
            let unit: &str = match &unit_t {
                Some(t) => t.get(i).trim(),
                None => {
                    use std::fmt::Write;
                    unit_buf.clear();
                    let v = match unit_a.data_type() {
                        DataType::Int64 => unit_a.as_primitive::<types::Int64Type>().value(i),
                        _ => i64::from(unit_a.as_primitive::<types::Int32Type>().value(i)),
                    };
                    let _ = write!(unit_buf, "{v}");
                    unit_buf.as_str()
                }
            };
            if unit.is_empty() {
                return Err(RowError::Missing(idx[0]));
            }
            let u = map.get(unit).ok_or(RowError::UnknownUnit(idx[0]))? as usize;
            if time_a.is_null(i) {
                return Err(RowError::Missing(idx[1]));
            }
            let t = match (&ts, &time_t) {
                (Some((vals, naive)), _) => {
                    if *naive {
                        vals[i] - offset.micros()
                    } else {
                        vals[i]
                    }
                }
                (None, Some(tt)) => {
                    let s = tt.get(i);
                    if s.trim().is_empty() {
                        return Err(RowError::Missing(idx[1]));
                    }
                    time::parse_timestamp(s, offset).ok_or(RowError::BadTimestamp(idx[1]))?
                }
                (None, None) => return Err(RowError::BadTimestamp(idx[1])),
            };
            if value_a.is_null(i) {
                return Err(RowError::Missing(idx[3]));
            }
            let v = match value_a.data_type() {
                DataType::Float64 => value_a.as_primitive::<types::Float64Type>().value(i),
                DataType::Float32 => f64::from(value_a.as_primitive::<types::Float32Type>().value(i)),
                DataType::Int64 => value_a.as_primitive::<types::Int64Type>().value(i) as f64,
                _ => f64::from(value_a.as_primitive::<types::Int32Type>().value(i)),
            };
            let fixed = check_value(plan, m, v, idx[3])?;
            Ok(Some((u, m, t, fixed)))
        })();
        match outcome {
            Ok(Some((u, m, t, v))) => acc.add(plan, u, m, t, v),
            Ok(None) => acc.events.other_metric += 1,
            Err(re) => {
                if policy == BadRowPolicy::Skip {
                    re.count(&mut acc.events);
                    continue;
                }
                let cell =
                    |c: usize| Cell { file: path.to_path_buf(), line, column: c + 1, column_name: header[c].clone() };
                let text = |c: usize| {
                    let a = if c == idx[0] {
                        unit_a
                    } else if c == idx[1] {
                        time_a
                    } else if c == idx[2] {
                        metric_a
                    } else {
                        value_a
                    };
                    if a.is_null(i) {
                        return String::new();
                    }
                    match TextCol::new(a) {
                        Some(t) => t.get(i).to_string(),
                        None => match a.data_type() {
                            DataType::Float64 => a.as_primitive::<types::Float64Type>().value(i).to_string(),
                            DataType::Float32 => a.as_primitive::<types::Float32Type>().value(i).to_string(),
                            DataType::Int64 => a.as_primitive::<types::Int64Type>().value(i).to_string(),
                            DataType::Int32 => a.as_primitive::<types::Int32Type>().value(i).to_string(),
                            other => format!("<{other}>"),
                        },
                    }
                };
                let metric = if metric_a.is_null(i) { String::new() } else { metric_t.get(i).to_string() };
                return Err((line, re.into_error(cell, text, &metric)));
            }
        }
    }
    Ok(())
}

/// Every distinct non-empty unit id of the event log (one sequential pass over the unit column).
///
/// # Errors
/// Read errors of the event log, [`WindowsError::MissingColumn`].
pub fn event_unit_ids(src: &EventSource) -> WindowsResult<Vec<String>> {
    let path = &src.path;
    let mut seen: std::collections::HashSet<String> = std::collections::HashSet::new();
    match src.format {
        EventFormat::Parquet => {
            let file = open_input(path).map_err(|e| io_err(path, "cannot open the event log", e))?;
            let builder = ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| pq_err(path, e))?;
            let header: Vec<String> = builder.schema().fields().iter().map(|f| f.name().clone()).collect();
            let ui = find_col(path, &header, &src.columns.unit)?;
            let mask = ProjectionMask::roots(builder.parquet_schema(), [ui]);
            let reader = builder.with_projection(mask).build().map_err(|e| pq_err(path, e))?;
            for batch in reader {
                let batch = batch.map_err(|e| pq_err(path, e))?;
                let a = batch.column(0).as_ref();
                for i in 0..batch.num_rows() {
                    if a.is_null(i) {
                        continue;
                    }
                    let id = match TextCol::new(a) {
                        Some(t) => t.get(i).trim().to_string(),
                        None => match a.data_type() {
                            DataType::Int64 => a.as_primitive::<types::Int64Type>().value(i).to_string(),
                            DataType::Int32 => a.as_primitive::<types::Int32Type>().value(i).to_string(),
                            _ => continue,
                        },
                    };
                    if !id.is_empty() && !seen.contains(&id) {
                        seen.insert(id);
                    }
                }
            }
        }
        EventFormat::Csv | EventFormat::CsvGzip => {
            let file = open_input(path).map_err(|e| io_err(path, "cannot open the event log", e))?;
            let reader: Box<dyn Read> = match src.format {
                EventFormat::CsvGzip => Box::new(flate2::read::MultiGzDecoder::new(std::io::BufReader::new(file))),
                _ => Box::new(std::io::BufReader::with_capacity(1 << 20, file)),
            };
            let mut r = csv::ReaderBuilder::new().flexible(true).trim(csv::Trim::All).from_reader(reader);
            let header: Vec<String> = r
                .headers()
                .map_err(|e| WindowsError::Malformed {
                    path: path.clone(),
                    line: Some(1),
                    format: "CSV",
                    message: e.to_string(),
                })?
                .iter()
                .map(|h| h.trim_start_matches('\u{feff}').to_string())
                .collect();
            let ui = find_col(path, &header, &src.columns.unit)?;
            let mut rec = csv::ByteRecord::new();
            loop {
                match r.read_byte_record(&mut rec) {
                    Ok(true) => {}
                    Ok(false) => break,
                    Err(e) => {
                        return Err(WindowsError::Malformed {
                            path: path.clone(),
                            line: e.position().map(|p| p.line()),
                            format: "CSV",
                            message: e.to_string(),
                        });
                    }
                }
                if let Some(Ok(id)) = rec.get(ui).map(std::str::from_utf8)
                    && !id.is_empty()
                    && !seen.contains(id)
                {
                    seen.insert(id.to_string());
                }
            }
        }
    }
    let mut ids: Vec<String> = seen.into_iter().collect();
    ids.sort();
    Ok(ids)
}

/// Open an input file: a regular file only (a device such as /dev/zero, a FIFO or a folder is
/// refused rather than read forever), registered as an input of the run so that no output may
/// replace it.
fn open_input(path: &Path) -> std::io::Result<std::fs::File> {
    let meta = std::fs::metadata(path)?;
    if !meta.is_file() {
        let what = if meta.is_dir() { "a folder" } else { "not a regular file (a device, FIFO or socket)" };
        return Err(std::io::Error::new(std::io::ErrorKind::InvalidInput, format!("it is {what}")));
    }
    aftercast_core::output::register_input(path);
    std::fs::File::open(path)
}
