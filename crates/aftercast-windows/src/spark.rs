//! Running the emitted Spark SQL through `spark-submit` and reading the small result back.
//!
//! The script from [`crate::sql::spark_sql`] is written to a work folder together with a short
//! PySpark driver that executes its statements in order; `spark-submit` runs the driver (local
//! mode by default, or any master). Spark writes `units/`, `series/` and `counts/` as Parquet
//! under the output folder; they are read back into the same [`WindowsOutput`] the native engine
//! returns (units ordered by id).

use crate::engine::{
    ColumnValues, EventCounts, GroupSeries, InclusionCounts, OutColumn, SeriesRow, UnitTable, WindowCounts,
    WindowsOutput,
};
use crate::error::{WindowsError, WindowsResult};
use crate::exposure::ExposureOptions;
use crate::params::WindowSpec;
use crate::sql::{SparkInput, SparkPlan, spark_sql};
use crate::time;
use arrow_array::cast::AsArray;
use arrow_array::{Array, RecordBatch, types};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The PySpark driver: runs each statement of the script in order.
pub const DRIVER: &str = r#"# aftercast windows: runs a generated Spark SQL script statement by statement.
import sys
from pyspark.sql import SparkSession

spark = SparkSession.builder.appName("aftercast-windows").getOrCreate()
spark.sparkContext.setLogLevel("WARN")
statement = []
with open(sys.argv[1], encoding="utf-8") as f:
    for line in f:
        line = line.rstrip("\n")
        if not statement and (line.startswith("--") or not line.strip()):
            continue
        statement.append(line)
        if line.rstrip().endswith(";"):
            spark.sql("\n".join(statement).rstrip().rstrip(";")).collect()
            statement = []
spark.stop()
"#;

/// How to reach Spark.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SparkOptions {
    /// The `spark-submit` program (default: `$SPARK_SUBMIT` or `spark-submit` on the PATH).
    pub submit: PathBuf,
    /// Master URL (default `local[2]`).
    pub master: String,
    /// Driver memory (default `4g`).
    pub driver_memory: String,
    /// Work folder for the script, the driver and the outputs.
    pub work_dir: PathBuf,
}

impl SparkOptions {
    /// Defaults with a work folder.
    pub fn new(work_dir: impl Into<PathBuf>) -> Self {
        Self {
            submit: std::env::var_os("SPARK_SUBMIT")
                .map(PathBuf::from)
                .unwrap_or_else(|| PathBuf::from("spark-submit")),
            master: "local[2]".into(),
            driver_memory: "4g".into(),
            work_dir: work_dir.into(),
        }
    }
}

/// Emit the script for local files, run it with `spark-submit`, read the result back.
///
/// # Errors
/// [`WindowsError::Spark`] (Spark missing or failing; `input` set when the script's input checks
/// stopped it), [`WindowsError::Io`], [`WindowsError::Malformed`] for unreadable results.
pub fn run_spark(
    spec: &WindowSpec,
    exposure: &ExposureOptions,
    events: &Path,
    exposures: &Path,
    options: &SparkOptions,
) -> WindowsResult<WindowsOutput> {
    let abs = |p: &Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf()).display().to_string();
    std::fs::create_dir_all(&options.work_dir).map_err(|e| WindowsError::Io {
        path: options.work_dir.clone(),
        what: "cannot create the Spark work folder".into(),
        source: e,
    })?;
    let out_dir = options.work_dir.join("out");
    let plan = SparkPlan {
        events: SparkInput::from_path(&abs(events)),
        exposures: SparkInput::from_path(&abs(exposures)),
        output: Some(abs(&out_dir)),
    };
    let sql = spark_sql(spec, exposure, &plan)?;
    let sql_path = options.work_dir.join("windows.sql");
    let driver_path = options.work_dir.join("run_sql.py");
    for (p, text) in [(&sql_path, sql.as_str()), (&driver_path, DRIVER)] {
        std::fs::write(p, text).map_err(|e| WindowsError::Io {
            path: p.clone(),
            what: "cannot write".into(),
            source: e,
        })?;
    }
    let mut cmd = Command::new(&options.submit);
    // A spark-submit inside a Python virtual environment finds its Spark home and Python through
    // the PATH: put its own folder first.
    if let Some(dir) = options.submit.parent().filter(|d| !d.as_os_str().is_empty()) {
        let mut paths = vec![dir.to_path_buf()];
        if let Some(p) = std::env::var_os("PATH") {
            paths.extend(std::env::split_paths(&p));
        }
        if let Ok(joined) = std::env::join_paths(paths) {
            cmd.env("PATH", joined);
        }
    }
    let output = cmd
        .arg("--master")
        .arg(&options.master)
        .arg("--driver-memory")
        .arg(&options.driver_memory)
        .arg("--conf")
        .arg("spark.ui.enabled=false")
        .arg(&driver_path)
        .arg(&sql_path)
        .output()
        .map_err(|e| WindowsError::Spark {
            // a spark-submit that is not there or not runnable is the user's setup to fix
            input: matches!(e.kind(), std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied),
            message: format!("cannot start {}: {e} (install pyspark or set SPARK_SUBMIT)", options.submit.display()),
        })?;
    if !output.status.success() {
        let err = String::from_utf8_lossy(&output.stderr);
        let input = err.contains("events: bad row") || err.contains("exposures: ");
        if let Some(line) = err.lines().find(|l| l.contains("events: bad row") || l.contains("exposures: ")) {
            let start = line.find("events: bad row").or_else(|| line.find("exposures: ")).unwrap_or(0);
            let msg = line[start..].trim_end_matches(" SQLSTATE: P0001").to_string();
            return Err(WindowsError::Spark { message: msg, input: true });
        }
        let tail: Vec<&str> = err.lines().filter(|l| !l.trim().is_empty()).collect();
        let picked: Vec<&str> = tail
            .iter()
            .copied()
            .filter(|l| {
                l.contains("events: bad row")
                    || l.contains("exposures: ")
                    || l.contains("Exception")
                    || l.contains("Error")
            })
            .take(3)
            .collect();
        let msg = if picked.is_empty() {
            tail.iter().rev().take(5).rev().copied().collect::<Vec<_>>().join("\n")
        } else {
            picked.join("\n")
        };
        return Err(WindowsError::Spark { message: format!("spark-submit failed ({}): {msg}", output.status), input });
    }
    read_spark_output(spec, &out_dir)
}

fn read_dir_batches(dir: &Path) -> WindowsResult<Vec<RecordBatch>> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| WindowsError::Io { path: dir.to_path_buf(), what: "cannot list Spark output".into(), source: e })?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "parquet"))
        .collect();
    files.sort();
    let mut out = Vec::new();
    for f in files {
        let file = std::fs::File::open(&f).map_err(|e| WindowsError::Io {
            path: f.clone(),
            what: "cannot open".into(),
            source: e,
        })?;
        let reader = ParquetRecordBatchReaderBuilder::try_new(file).and_then(|b| b.build()).map_err(|e| {
            WindowsError::Malformed { path: f.clone(), line: None, format: "Parquet", message: e.to_string() }
        })?;
        for b in reader {
            out.push(b.map_err(|e| WindowsError::Malformed {
                path: f.clone(),
                line: None,
                format: "Parquet",
                message: e.to_string(),
            })?);
        }
    }
    Ok(out)
}

fn column<'a>(b: &'a RecordBatch, name: &str, dir: &Path) -> WindowsResult<&'a dyn Array> {
    b.column_by_name(name).map(|a| a.as_ref()).ok_or_else(|| WindowsError::MissingColumn {
        path: dir.to_path_buf(),
        name: name.into(),
        available: b.schema().fields().iter().map(|f| f.name().clone()).collect(),
    })
}

fn text(a: &dyn Array, i: usize) -> String {
    match a.data_type() {
        DataType::Utf8 => a.as_string::<i32>().value(i).to_string(),
        DataType::LargeUtf8 => a.as_string::<i64>().value(i).to_string(),
        DataType::Utf8View => a.as_string_view().value(i).to_string(),
        _ => String::new(),
    }
}

fn int(a: &dyn Array, i: usize) -> Option<i64> {
    if a.is_null(i) {
        return None;
    }
    match a.data_type() {
        DataType::Int64 => Some(a.as_primitive::<types::Int64Type>().value(i)),
        DataType::Int32 => Some(i64::from(a.as_primitive::<types::Int32Type>().value(i))),
        DataType::Float64 => Some(a.as_primitive::<types::Float64Type>().value(i) as i64),
        _ => None,
    }
}

fn float(a: &dyn Array, i: usize) -> Option<f64> {
    if a.is_null(i) {
        return None;
    }
    match a.data_type() {
        DataType::Float64 => Some(a.as_primitive::<types::Float64Type>().value(i)),
        DataType::Int64 => Some(a.as_primitive::<types::Int64Type>().value(i) as f64),
        DataType::Int32 => Some(f64::from(a.as_primitive::<types::Int32Type>().value(i))),
        _ => None,
    }
}

/// Read the Parquet folders Spark wrote (`units/`, `series/`, `counts/` under `dir`).
///
/// # Errors
/// [`WindowsError::Io`], [`WindowsError::Malformed`], [`WindowsError::MissingColumn`].
pub fn read_spark_output(spec: &WindowSpec, dir: &Path) -> WindowsResult<WindowsOutput> {
    let udir = dir.join("units");
    let vcols = spec.value_columns();
    let mut units = UnitTable { units: vec![], groups: vec![], exposed: vec![], anchors: vec![], columns: vec![] };
    let mut values: Vec<ColumnValues> = vcols
        .iter()
        .map(|c| if c.kind.is_integer() { ColumnValues::Int(vec![]) } else { ColumnValues::Float(vec![]) })
        .collect();
    for b in read_dir_batches(&udir)? {
        let (u, g, e, a) = (
            column(&b, "unit", &udir)?,
            column(&b, "group", &udir)?,
            column(&b, "exposed", &udir)?,
            column(&b, "anchor", &udir)?,
        );
        let vals: Vec<&dyn Array> = vcols.iter().map(|c| column(&b, &c.name, &udir)).collect::<WindowsResult<_>>()?;
        for i in 0..b.num_rows() {
            units.units.push(text(u, i));
            units.groups.push(text(g, i));
            units.exposed.push(int(e, i) == Some(1));
            let at = text(a, i);
            units.anchors.push(time::parse_timestamp(&at, spec.offset()).ok_or_else(|| WindowsError::Malformed {
                path: udir.clone(),
                line: Some(i as u64 + 2),
                format: "Parquet",
                message: format!("anchor '{at}' is not a timestamp"),
            })?);
            for (k, arr) in vals.iter().enumerate() {
                match &mut values[k] {
                    ColumnValues::Int(v) => v.push(int(*arr, i)),
                    ColumnValues::Float(v) => v.push(float(*arr, i)),
                }
            }
        }
    }
    units.columns =
        vcols.into_iter().zip(values).map(|(c, values)| OutColumn { name: c.name, window: c.window, values }).collect();

    let series = match spec.series() {
        None => None,
        Some(freq) => {
            let sdir = dir.join("series");
            let metrics: Vec<String> = spec.tracked().iter().map(|t| t.name.clone()).collect();
            let mut rows = Vec::new();
            for b in read_dir_batches(&sdir)? {
                let (g, d, n) = (column(&b, "group", &sdir)?, column(&b, "day", &sdir)?, column(&b, "units", &sdir)?);
                let mut per = Vec::new();
                for m in &metrics {
                    per.push((
                        column(&b, &format!("{m}_total"), &sdir)?,
                        column(&b, &format!("{m}_events"), &sdir)?,
                        column(&b, &format!("{m}_per_unit"), &sdir)?,
                    ));
                }
                for i in 0..b.num_rows() {
                    rows.push(SeriesRow {
                        group: text(g, i),
                        day: text(d, i),
                        units: int(n, i).unwrap_or(0) as u64,
                        total: per.iter().map(|p| float(p.0, i).unwrap_or(0.0)).collect(),
                        events: per.iter().map(|p| int(p.1, i).unwrap_or(0) as u64).collect(),
                        per_unit: per.iter().map(|p| float(p.2, i).unwrap_or(0.0)).collect(),
                    });
                }
            }
            Some(GroupSeries { frequency: freq, metrics, rows })
        }
    };

    let cdir = dir.join("counts");
    let mut windows: Vec<WindowCounts> = spec
        .windows()
        .iter()
        .map(|w| WindowCounts { window: w.name.clone(), all: InclusionCounts::default(), by_group: BTreeMap::new() })
        .collect();
    let mut events = EventCounts::default();
    let (mut exposed_units, mut never) = (0u64, 0u64);
    for b in read_dir_batches(&cdir)? {
        let cols =
            ["kind", "name", "group", "units", "included", "excluded_ends_after_end", "excluded_starts_before_start"]
                .map(|c| column(&b, c, &cdir));
        let [kind, name, group, n, inc, ea, sb] = cols;
        let (kind, name, group, n, inc, ea, sb) = (kind?, name?, group?, n?, inc?, ea?, sb?);
        for i in 0..b.num_rows() {
            let c = InclusionCounts {
                units: int(n, i).unwrap_or(0) as u64,
                included: int(inc, i).unwrap_or(0) as u64,
                excluded_ends_after_end: int(ea, i).unwrap_or(0) as u64,
                excluded_starts_before_start: int(sb, i).unwrap_or(0) as u64,
            };
            let nm = text(name, i);
            match text(kind, i).as_str() {
                "window" => {
                    if let Some(w) = windows.iter_mut().find(|w| w.window == nm) {
                        w.all.units += c.units;
                        w.all.included += c.included;
                        w.all.excluded_ends_after_end += c.excluded_ends_after_end;
                        w.all.excluded_starts_before_start += c.excluded_starts_before_start;
                        w.by_group.insert(text(group, i), c);
                    }
                }
                "events" => {
                    events.rows += c.units;
                    match nm.as_str() {
                        "ok" => events.used += c.units,
                        "other_metric" => events.other_metric += c.units,
                        "missing" => events.skipped_missing += c.units,
                        "unknown_unit" => events.skipped_unknown_unit += c.units,
                        "bad_timestamp" => events.skipped_bad_timestamp += c.units,
                        "bad_value" => events.skipped_bad_value += c.units,
                        "negative" => events.skipped_negative += c.units,
                        _ => events.skipped_malformed += c.units,
                    }
                }
                "exposed" => {
                    if nm == "1" {
                        exposed_units += c.units;
                    } else {
                        never += c.units;
                    }
                }
                _ => {}
            }
        }
    }
    Ok(WindowsOutput { units, series, windows, events, exposed_units, never_exposed_units: never })
}
