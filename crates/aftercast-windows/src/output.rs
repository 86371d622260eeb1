//! Writing the unit table and the group series (CSV or Parquet) and the sidecar JSON.
//!
//! Files are written to a temporary name next to the target and renamed, so a reader never sees
//! half a file.

use crate::engine::{ColumnValues, GroupSeries, UnitTable, WindowsOutput};
use crate::error::{WindowsError, WindowsResult};
use crate::params::{WindowKind, WindowSpec};
use crate::time::{self, format_timestamp};
use arrow_array::builder::{Float64Builder, Int64Builder, StringBuilder};
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema};
use serde_json::{Value, json};
use std::io::Write;
use std::path::Path;
use std::sync::Arc;

/// Output table formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OutputFormat {
    /// CSV; empty cells are excluded windows (or undefined means).
    Csv,
    /// Parquet; nulls are excluded windows (or undefined means).
    Parquet,
}

impl OutputFormat {
    /// `.parquet`/`.pq` means Parquet, anything else CSV.
    pub fn from_path(path: &Path) -> Self {
        match path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase()).as_deref() {
            Some("parquet" | "pq") => OutputFormat::Parquet,
            _ => OutputFormat::Csv,
        }
    }
}

fn out_err(path: &Path, e: impl std::fmt::Display) -> WindowsError {
    WindowsError::Output { path: path.to_path_buf(), message: e.to_string() }
}

/// Write `path` through `aftercast_core::output` (never over an input or through a link; an
/// unpredictable temporary name in the target's folder, removed unless committed).
fn write_atomic(path: &Path, f: impl FnOnce(&mut std::fs::File) -> WindowsResult<()>) -> WindowsResult<()> {
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        aftercast_core::output::create_folder(dir)?;
    }
    let mut file = aftercast_core::output::AtomicFile::create(path)?;
    f(file.file())?;
    file.commit()?;
    Ok(())
}

/// Format an `f64` for CSV: shortest text that reads back to the same number.
fn num(v: f64) -> String {
    format!("{v}")
}

/// Build the unit table as an Arrow record batch: `unit`, `group`, `exposed` (0/1), `anchor`
/// (ISO 8601 in the analysis offset), then the value columns (Int64 or Float64, null =
/// excluded).
///
/// # Errors
/// [`WindowsError::Output`] if Arrow refuses the columns (a bug).
pub fn unit_batch(t: &UnitTable, spec: &WindowSpec) -> WindowsResult<RecordBatch> {
    let n = t.units.len();
    let mut fields = vec![
        Field::new("unit", DataType::Utf8, false),
        Field::new("group", DataType::Utf8, false),
        Field::new("exposed", DataType::Int64, false),
        Field::new("anchor", DataType::Utf8, false),
    ];
    let mut cols: Vec<ArrayRef> = Vec::new();
    let mut b = StringBuilder::with_capacity(n, n * 8);
    t.units.iter().for_each(|u| b.append_value(u));
    cols.push(Arc::new(b.finish()));
    let mut b = StringBuilder::with_capacity(n, n * 4);
    t.groups.iter().for_each(|g| b.append_value(g));
    cols.push(Arc::new(b.finish()));
    let mut b = Int64Builder::with_capacity(n);
    t.exposed.iter().for_each(|e| b.append_value(i64::from(*e)));
    cols.push(Arc::new(b.finish()));
    let mut b = StringBuilder::with_capacity(n, n * 20);
    t.anchors.iter().for_each(|a| b.append_value(format_timestamp(*a, spec.offset())));
    cols.push(Arc::new(b.finish()));
    for c in &t.columns {
        match &c.values {
            ColumnValues::Int(v) => {
                fields.push(Field::new(&c.name, DataType::Int64, true));
                let mut b = Int64Builder::with_capacity(n);
                v.iter().for_each(|x| b.append_option(*x));
                cols.push(Arc::new(b.finish()));
            }
            ColumnValues::Float(v) => {
                fields.push(Field::new(&c.name, DataType::Float64, true));
                let mut b = Float64Builder::with_capacity(n);
                v.iter().for_each(|x| b.append_option(*x));
                cols.push(Arc::new(b.finish()));
            }
        }
    }
    RecordBatch::try_new(Arc::new(Schema::new(fields)), cols).map_err(|e| out_err(Path::new("<unit table>"), e))
}

/// Build the group series as a record batch: `group`, `day` (YYYY-MM-DD, first day of the
/// bucket), `units`, then per metric `{m}_total`, `{m}_events`, `{m}_per_unit`.
///
/// # Errors
/// [`WindowsError::Output`] if Arrow refuses the columns (a bug).
pub fn series_batch(s: &GroupSeries) -> WindowsResult<RecordBatch> {
    let n = s.rows.len();
    let mut fields = vec![
        Field::new("group", DataType::Utf8, false),
        Field::new("day", DataType::Utf8, false),
        Field::new("units", DataType::Int64, false),
    ];
    let mut cols: Vec<ArrayRef> = Vec::new();
    let mut b = StringBuilder::with_capacity(n, n * 4);
    s.rows.iter().for_each(|r| b.append_value(&r.group));
    cols.push(Arc::new(b.finish()));
    let mut b = StringBuilder::with_capacity(n, n * 10);
    s.rows.iter().for_each(|r| b.append_value(&r.day));
    cols.push(Arc::new(b.finish()));
    let mut b = Int64Builder::with_capacity(n);
    s.rows.iter().for_each(|r| b.append_value(r.units as i64));
    cols.push(Arc::new(b.finish()));
    for (m, name) in s.metrics.iter().enumerate() {
        fields.push(Field::new(format!("{name}_total"), DataType::Float64, false));
        let mut b = Float64Builder::with_capacity(n);
        s.rows.iter().for_each(|r| b.append_value(r.total[m]));
        cols.push(Arc::new(b.finish()));
        fields.push(Field::new(format!("{name}_events"), DataType::Int64, false));
        let mut b = Int64Builder::with_capacity(n);
        s.rows.iter().for_each(|r| b.append_value(r.events[m] as i64));
        cols.push(Arc::new(b.finish()));
        fields.push(Field::new(format!("{name}_per_unit"), DataType::Float64, false));
        let mut b = Float64Builder::with_capacity(n);
        s.rows.iter().for_each(|r| b.append_value(r.per_unit[m]));
        cols.push(Arc::new(b.finish()));
    }
    RecordBatch::try_new(Arc::new(Schema::new(fields)), cols).map_err(|e| out_err(Path::new("<series>"), e))
}

fn write_batch(path: &Path, batch: &RecordBatch, format: OutputFormat) -> WindowsResult<()> {
    match format {
        OutputFormat::Parquet => write_atomic(path, |f| {
            let props = parquet::file::properties::WriterProperties::builder()
                .set_compression(parquet::basic::Compression::SNAPPY)
                .build();
            let mut w = parquet::arrow::ArrowWriter::try_new(
                f.try_clone().map_err(|e| out_err(path, e))?,
                batch.schema(),
                Some(props),
            )
            .map_err(|e| out_err(path, e))?;
            w.write(batch).map_err(|e| out_err(path, e))?;
            w.close().map_err(|e| out_err(path, e))?;
            Ok(())
        }),
        OutputFormat::Csv => write_atomic(path, |f| {
            let mut w = csv::Writer::from_writer(std::io::BufWriter::new(f));
            let schema = batch.schema();
            w.write_record(schema.fields().iter().map(|f| f.name().as_str())).map_err(|e| out_err(path, e))?;
            let cols = batch.columns();
            let mut rec: Vec<String> = vec![String::new(); cols.len()];
            for r in 0..batch.num_rows() {
                for (c, a) in cols.iter().enumerate() {
                    rec[c] = cell_text(a.as_ref(), r);
                }
                w.write_record(&rec).map_err(|e| out_err(path, e))?;
            }
            w.flush().map_err(|e| out_err(path, e))?;
            Ok(())
        }),
    }
}

fn cell_text(a: &dyn arrow_array::Array, r: usize) -> String {
    use arrow_array::cast::AsArray;
    use arrow_array::types;
    if a.is_null(r) {
        return String::new();
    }
    match a.data_type() {
        DataType::Utf8 => a.as_string::<i32>().value(r).to_string(),
        DataType::Int64 => a.as_primitive::<types::Int64Type>().value(r).to_string(),
        DataType::Float64 => num(a.as_primitive::<types::Float64Type>().value(r)),
        _ => String::new(),
    }
}

/// Write the unit table (format from the file name).
///
/// # Errors
/// [`WindowsError::Output`].
pub fn write_units(path: &Path, t: &UnitTable, spec: &WindowSpec) -> WindowsResult<()> {
    write_batch(path, &unit_batch(t, spec)?, OutputFormat::from_path(path))
}

/// Write the group series (format from the file name).
///
/// # Errors
/// [`WindowsError::Output`].
pub fn write_series(path: &Path, s: &GroupSeries) -> WindowsResult<()> {
    write_batch(path, &series_batch(s)?, OutputFormat::from_path(path))
}

/// The exact window definitions of a spec as JSON.
pub fn spec_json(spec: &WindowSpec) -> Value {
    let off = spec.offset();
    let windows: Vec<Value> = spec
        .windows()
        .iter()
        .map(|w| {
            let (kind, from, to) = match w.kind {
                WindowKind::Forward { length } => ("forward", Some(0), Some(length)),
                WindowKind::Deferred { delay, length } => ("deferred", Some(delay), Some(delay + length)),
                WindowKind::Pre { length } => ("pre", Some(-length), Some(0)),
                WindowKind::Calendar { .. } => ("calendar", None, None),
            };
            let mut o = json!({
                "name": w.name,
                "kind": kind,
                "length": time::format_duration(w.kind.length()),
                "length_us": w.kind.length(),
                "interval": "half-open [from, to)",
            });
            if let (Some(a), Some(b)) = (from, to) {
                o["from_anchor_us"] = json!(a);
                o["to_anchor_us"] = json!(b);
                o["from_anchor"] = json!(signed_duration(a));
                o["to_anchor"] = json!(signed_duration(b));
            } else {
                let (a, b) = spec.bounds(spec.windows().iter().position(|x| x.name == w.name).unwrap_or(0), 0);
                o["from"] = json!(format_timestamp(a, off));
                o["to"] = json!(format_timestamp(b, off));
            }
            o
        })
        .collect();
    let metrics: Vec<Value> = spec
        .metrics()
        .iter()
        .map(|m| json!({"name": m.name, "aggregations": m.aggregations.iter().map(|a| a.suffix()).collect::<Vec<_>>()}))
        .collect();
    let ratios: Vec<Value> = spec
        .ratios()
        .iter()
        .map(|r| json!({"name": r.name, "numerator": r.numerator, "denominator": r.denominator}))
        .collect();
    json!({
        "from": spec.from().map(|s| format_timestamp(s, off)),
        "until": format_timestamp(spec.until(), off),
        "utc_offset": off.to_string(),
        "anchoring": match spec.anchoring() { crate::Anchoring::Exact => "exact", crate::Anchoring::DayStart => "day-start" },
        "bad_rows": spec.bad_rows().to_string(),
        "population": spec.population().to_string(),
        "duplicates": "counted (each row is one event)",
        "allow_negative": spec.allow_negative(),
        "windows": windows,
        "metrics": metrics,
        "ratios": ratios,
        "series": spec.series().map(|f| format!("{f:?}").to_lowercase()),
        "event_columns": {"unit": spec.columns().unit, "time": spec.columns().time, "metric": spec.columns().metric, "value": spec.columns().value},
    })
}

fn signed_duration(us: i64) -> String {
    if us < 0 { format!("-{}", time::format_duration(-us)) } else { time::format_duration(us) }
}

/// The sidecar document: window definitions, inclusion counts per window and group, event
/// counts, and the engine that produced the tables.
pub fn sidecar_json(spec: &WindowSpec, out: &WindowsOutput, engine: &str) -> Value {
    json!({
        "engine": engine,
        "spec": spec_json(spec),
        "units": {
            "total": out.units.units.len(),
            "exposed": out.exposed_units,
            "never_exposed": out.never_exposed_units,
        },
        "windows": out.windows,
        "events": out.events,
    })
}

/// Write the sidecar JSON.
///
/// # Errors
/// [`WindowsError::Output`].
pub fn write_sidecar(path: &Path, doc: &Value) -> WindowsResult<()> {
    write_atomic(path, |f| {
        let text = serde_json::to_string_pretty(doc).map_err(|e| out_err(path, e))?;
        f.write_all(text.as_bytes()).map_err(|e| out_err(path, e))?;
        f.write_all(b"\n").map_err(|e| out_err(path, e))
    })
}
