//! `aftercast windows`: turn an event log into the per-unit table (metric windows around each
//! unit's exposure) and the per-group series the analyses read; natively, on Spark, or as
//! Spark SQL to run elsewhere. This is a data-preparation verb: it writes tables, not an effect.

use crate::failure::{bad_input, bad_input_msg};
use aftercast_windows::output::{sidecar_json, write_series, write_sidecar, write_units};
use aftercast_windows::spark::{SparkOptions, run_spark};
use aftercast_windows::sql::{SparkInput, SparkPlan, spark_sql};
use aftercast_windows::time::{Offset, parse_timestamp};
use aftercast_windows::{
    Aggregation, Anchoring, BadRowPolicy, EventColumns, EventSource, ExposureOptions, Exposures, Population,
    SeriesFrequency, WindowKind, WindowSpec, WindowsError, run,
};
use std::path::PathBuf;

/// Engines.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Engine {
    /// The built-in streaming engine.
    Native,
    /// Spark through spark-submit (local[2] unless --spark-master).
    Spark,
}

/// SQL dialects `--emit-sql` writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Dialect {
    /// Spark SQL.
    Spark,
}

/// Arguments of `windows`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Event log: CSV, gzip CSV (.gz) or Parquet (.parquet), one event per row.
    #[arg(long)]
    pub events: Option<PathBuf>,
    /// Exposures (the unit list): unit id, exposure time (empty = never exposed), optional group.
    #[arg(long)]
    pub exposures: Option<PathBuf>,
    /// A window, repeatable: 14d (forward [0,14d)), forward:7d, deferred:7d+14d, pre:28d,
    /// calendar:28d; optionally NAME=KIND, e.g. outcome=forward:28d. Units: w d h m s.
    #[arg(long = "window", required = true)]
    pub windows: Vec<String>,
    /// A metric and its aggregations, repeatable: orders=sum,count,active_days,mean_per_active_day,any.
    #[arg(long = "metric")]
    pub metrics: Vec<String>,
    /// A ratio metric kept as numerator and denominator columns, repeatable: aov=revenue/orders.
    #[arg(long = "ratio")]
    pub ratios: Vec<String>,
    /// Data start, inclusive: windows starting before it are excluded (needed for --series).
    /// (--start/--end are the change period of the analysis verbs, not the data span.)
    #[arg(long)]
    pub from: Option<String>,
    /// Data end, exclusive: windows ending after it are excluded.
    #[arg(long)]
    pub until: String,
    /// Fixed UTC offset of day boundaries and of timestamps written without one (UTC, +02:00).
    #[arg(long, default_value = "UTC")]
    pub tz: String,
    /// Window anchor: exact (the exposure instant) or day-start (its local midnight).
    #[arg(long, default_value = "exact")]
    pub anchoring: String,
    /// One launch time for all units (with no --exposure), and the anchor of never-exposed units.
    #[arg(long)]
    pub launch: Option<String>,
    /// Anchor of never-exposed units (default: --launch).
    #[arg(long)]
    pub reference: Option<String>,
    /// Unit column of the exposures file.
    #[arg(long, default_value = "unit")]
    pub unit: String,
    /// Exposure-time column of the exposures file (default `exposure`; none when --launch is
    /// given without it).
    #[arg(long)]
    pub exposure: Option<String>,
    /// Group column of the exposures file (region, segment, arm).
    #[arg(long)]
    pub group: Option<String>,
    /// Which units the table has: exposures (default; other units' events are bad rows) or
    /// exposures-and-events (units seen only in the events join as never exposed).
    #[arg(long, default_value = "exposures")]
    pub population: String,
    /// A file listing every unit (column --unit); units not in --exposures join as never
    /// exposed (native engine only).
    #[arg(long)]
    pub unit_list: Option<PathBuf>,
    /// Event-log columns: unit, time, metric, value (comma-separated, in that order).
    #[arg(long, default_value = "unit,time,metric,value")]
    pub event_columns: String,
    /// Metrics whose values may be negative (comma-separated).
    #[arg(long, default_value = "")]
    pub allow_negative: String,
    /// Bad event rows: error (default; stop, naming file, line, column) or skip (and count).
    #[arg(long, default_value = "error")]
    pub bad_rows: String,
    /// Also build the per-group series: daily or weekly.
    #[arg(long)]
    pub series: Option<String>,
    /// Unit table output (.csv or .parquet); the sidecar JSON goes next to it.
    #[arg(long)]
    pub output: Option<PathBuf>,
    /// Series output (.csv or .parquet).
    #[arg(long)]
    pub series_output: Option<PathBuf>,
    /// Sidecar JSON (default: the output name with extension .windows.json).
    #[arg(long)]
    pub sidecar: Option<PathBuf>,
    /// Engine.
    #[arg(long, value_enum, default_value_t = Engine::Native)]
    pub engine: Engine,
    /// Print the query in this dialect and stop.
    #[arg(long, value_enum)]
    pub emit_sql: Option<Dialect>,
    /// For --emit-sql: read events from this Spark table instead of --events.
    #[arg(long)]
    pub spark_events_table: Option<String>,
    /// For --emit-sql: read exposures from this Spark table instead of --exposures.
    #[arg(long)]
    pub spark_exposures_table: Option<String>,
    /// For --emit-sql: write units/, series/, counts/ as Parquet under this folder.
    #[arg(long)]
    pub spark_output: Option<String>,
    /// spark-submit program (default $SPARK_SUBMIT or spark-submit).
    #[arg(long)]
    pub spark_submit: Option<PathBuf>,
    /// Spark master.
    #[arg(long, default_value = "local[2]")]
    pub spark_master: String,
    /// Spark work folder (default: a folder next to the output).
    #[arg(long)]
    pub spark_work: Option<PathBuf>,
    /// Worker threads of the native engine (default: all cores). Results do not depend on it.
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    pub threads: Option<u64>,
    /// Print nothing on success.
    #[arg(long)]
    pub quiet: bool,
}

fn wbad(e: WindowsError) -> anyhow::Error {
    if e.is_bad_input() { bad_input(e) } else { anyhow::Error::new(e) }
}

fn instant(flag: &str, text: &str, off: Offset) -> anyhow::Result<i64> {
    parse_timestamp(text, off).ok_or_else(|| {
        bad_input_msg(format!(
            "--{flag} '{text}': not an ISO 8601 time (2024-03-01, 2024-03-01T10:00:00Z, 2024-03-01T12:00:00+02:00)"
        ))
    })
}

/// Parse a flag's value; the error names the flag (`--bad-rows: invalid bad-row policy: ...`).
fn parse<T: std::str::FromStr<Err = WindowsError>>(flag: &str, text: &str) -> anyhow::Result<T> {
    text.parse::<T>().map_err(|e| wbad(e).context(format!("--{flag}")))
}

/// Build the validated spec and exposure options from the flags.
///
/// # Errors
/// Bad input for any invalid flag.
pub fn spec_of(a: &Args) -> anyhow::Result<(WindowSpec, ExposureOptions)> {
    let off = Offset::parse(&a.tz)
        .ok_or_else(|| bad_input_msg(format!("--tz '{}': use UTC or a fixed offset like +02:00", a.tz)))?;
    let mut p = WindowSpec::params().offset(off);
    for w in &a.windows {
        let (name, kind) = match w.split_once('=') {
            Some((n, k)) => (Some(n.trim()), k),
            None => (None, w.as_str()),
        };
        let kind = WindowKind::parse(kind).map_err(wbad)?;
        p = match name {
            Some(n) => p.named_window(n, kind),
            None => p.window(kind),
        };
    }
    for m in &a.metrics {
        let (name, aggs) = m
            .split_once('=')
            .ok_or_else(|| bad_input_msg(format!("--metric '{m}': write NAME=AGG[,AGG], e.g. orders=sum,count")))?;
        let aggs: Vec<Aggregation> =
            aggs.split(',').map(|g| parse::<Aggregation>("metric", g)).collect::<anyhow::Result<_>>()?;
        p = p.metric(name.trim(), &aggs);
    }
    for r in &a.ratios {
        let parsed = r.split_once('=').and_then(|(n, rest)| rest.split_once('/').map(|(x, y)| (n, x, y)));
        let (n, x, y) =
            parsed.ok_or_else(|| bad_input_msg(format!("--ratio '{r}': write NAME=NUMERATOR/DENOMINATOR")))?;
        p = p.ratio(n.trim(), x.trim(), y.trim());
    }
    p = p.until(instant("until", &a.until, off)?);
    if let Some(s) = &a.from {
        p = p.from(instant("from", s, off)?);
    }
    p = p
        .anchoring(parse::<Anchoring>("anchoring", &a.anchoring)?)
        .bad_rows(parse::<BadRowPolicy>("bad-rows", &a.bad_rows)?);
    p = p.population(parse::<Population>("population", &a.population)?);
    for m in a.allow_negative.split(',').map(str::trim).filter(|m| !m.is_empty()) {
        p = p.allow_negative(m);
    }
    if let Some(s) = &a.series {
        p = p.series(parse::<SeriesFrequency>("series", s)?);
    }
    let cols: Vec<&str> = a.event_columns.split(',').map(str::trim).collect();
    let [unit, time, metric, value] = cols.as_slice() else {
        return Err(bad_input_msg(format!(
            "--event-columns '{}': give four names: unit,time,metric,value",
            a.event_columns
        )));
    };
    p = p.event_columns(EventColumns {
        unit: unit.to_string(),
        time: time.to_string(),
        metric: metric.to_string(),
        value: value.to_string(),
    });
    let spec = p.check().map_err(wbad)?;
    let launch = a.launch.as_deref().map(|t| instant("launch", t, off)).transpose()?;
    let reference = a.reference.as_deref().map(|t| instant("reference", t, off)).transpose()?;
    let time_col = match (&a.exposure, launch) {
        (Some(c), _) => Some(c.clone()),
        (None, Some(_)) => None,
        (None, None) => Some("exposure".to_string()),
    };
    let opts = ExposureOptions { unit: a.unit.clone(), time: time_col, group: a.group.clone(), launch, reference };
    Ok((spec, opts))
}

fn sidecar_path(a: &Args, output: &std::path::Path) -> PathBuf {
    a.sidecar.clone().unwrap_or_else(|| output.with_extension("windows.json"))
}

/// Run the verb.
///
/// # Errors
/// Bad input (exit 2) for invalid flags or data; internal failures otherwise.
pub fn run_verb(a: &Args) -> anyhow::Result<()> {
    let (spec, opts) = spec_of(a)?;
    if a.emit_sql.is_some() {
        let events = match (&a.spark_events_table, &a.events) {
            (Some(t), _) => SparkInput::Table(t.clone()),
            (None, Some(p)) => SparkInput::from_path(&p.display().to_string()),
            (None, None) => return Err(bad_input_msg("--emit-sql needs --events or --spark-events-table")),
        };
        let exposures = match (&a.spark_exposures_table, &a.exposures) {
            (Some(t), _) => SparkInput::Table(t.clone()),
            (None, Some(p)) => SparkInput::from_path(&p.display().to_string()),
            (None, None) => return Err(bad_input_msg("--emit-sql needs --exposures or --spark-exposures-table")),
        };
        let sql =
            spark_sql(&spec, &opts, &SparkPlan { events, exposures, output: a.spark_output.clone() }).map_err(wbad)?;
        say!("{sql}");
        return Ok(());
    }
    let events = a.events.as_ref().ok_or_else(|| bad_input_msg("--events is required"))?;
    let exposures_path = a.exposures.as_ref().ok_or_else(|| bad_input_msg("--exposures is required"))?;
    let output = a.output.as_ref().ok_or_else(|| bad_input_msg("--output is required (or --emit-sql spark)"))?;
    if spec.series().is_some() && a.series_output.is_none() {
        return Err(bad_input_msg("--series needs --series-output FILE"));
    }
    let started = std::time::Instant::now();
    let (out, engine) = match a.engine {
        Engine::Native => {
            let mut ex = Exposures::read(exposures_path, &opts, &spec).map_err(wbad)?;
            if let Some(list) = &a.unit_list {
                let table = crate::common::read_table(list, &aftercast_core::Projection::none().text(&a.unit))?;
                let ids =
                    table.text_column(&a.unit)?.into_iter().filter(|s| !s.is_empty()).map(|s| s.into_owned()).collect();
                ex.add_unlisted(ids).map_err(wbad)?;
            }
            let threads = a.threads.unwrap_or(0) as usize;
            let src = EventSource::new(events, spec.columns().clone());
            (run(&src, &ex, &spec, threads).map_err(wbad)?, "native")
        }
        Engine::Spark => {
            if a.unit_list.is_some() {
                return Err(bad_input_msg(
                    "--unit-list works with the native engine only; add the units to the exposures table for Spark",
                ));
            }
            let work = a.spark_work.clone().unwrap_or_else(|| output.with_extension("spark-work"));
            let mut so = SparkOptions::new(work);
            so.master = a.spark_master.clone();
            if let Some(s) = &a.spark_submit {
                so.submit = s.clone();
            }
            (run_spark(&spec, &opts, events, exposures_path, &so).map_err(wbad)?, "spark")
        }
    };
    write_units(output, &out.units, &spec).map_err(wbad)?;
    if let (Some(p), Some(s)) = (&a.series_output, &out.series) {
        write_series(p, s).map_err(wbad)?;
    }
    let side = sidecar_path(a, output);
    write_sidecar(&side, &sidecar_json(&spec, &out, engine)).map_err(wbad)?;
    if !a.quiet {
        sayln!(
            "windows ({engine}): {} units ({} exposed, {} never exposed), {} event rows ({} used, {} other metrics, {} skipped) in {:.1} s",
            out.units.units.len(),
            out.exposed_units,
            out.never_exposed_units,
            out.events.rows,
            out.events.used,
            out.events.other_metric,
            out.events.skipped(),
            started.elapsed().as_secs_f64()
        );
        for w in &out.windows {
            sayln!(
                "  {:<24} included {:>8}  excluded: ends after --until {:>6}, starts before --from {:>6}",
                w.window,
                w.all.included,
                w.all.excluded_ends_after_end,
                w.all.excluded_starts_before_start
            );
        }
        sayln!("  wrote {} and {}", output.display(), side.display());
        if let Some(p) = &a.series_output {
            sayln!("  wrote {}", p.display());
        }
    }
    Ok(())
}
