//! Spark SQL with the native engine's semantics.
//!
//! [`spark_sql`] writes a script of plain Spark SQL statements (each ends with `;` at the end of
//! a line): it sets the session time zone to the analysis offset, registers the inputs, checks
//! the inputs as the native engine does, builds the views `ac_out_units`, `ac_out_series` (when
//! a series is requested) and `ac_out_counts`, and writes them as Parquet (one file each) when
//! an output folder is given, or selects them otherwise. All time arithmetic is on integer
//! microseconds (`unix_micros`), local days are floor divisions of `micros + offset` by
//! 86 400 000 000, exactly as in [`crate::time`].

use crate::error::{WindowsError, WindowsResult};
use crate::exposure::ExposureOptions;
use crate::params::{Aggregation, BadRowPolicy, SeriesFrequency, ValueKind, WindowSpec};
use crate::time::{DAY, format_timestamp};
use std::fmt::Write;

/// Where Spark finds an input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SparkInput {
    /// A table or view already known to the Spark session (catalog name).
    Table(String),
    /// A Parquet file or folder.
    Parquet(String),
    /// A CSV file or folder with a header row (all columns read as text).
    Csv(String),
}

impl SparkInput {
    /// A path, as Parquet if it ends in `.parquet`/`.pq` (or is a folder), else CSV.
    pub fn from_path(path: &str) -> Self {
        let lower = path.to_ascii_lowercase();
        if lower.ends_with(".csv") || lower.ends_with(".csv.gz") || lower.ends_with(".gz") {
            SparkInput::Csv(path.to_string())
        } else {
            SparkInput::Parquet(path.to_string())
        }
    }
}

/// Inputs and outputs of the emitted script.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SparkPlan {
    /// The event log.
    pub events: SparkInput,
    /// The exposures table.
    pub exposures: SparkInput,
    /// Output folder: `units/`, `series/`, `counts/` (Parquet) are written beneath it. `None`:
    /// the script ends by selecting the three views.
    pub output: Option<String>,
}

fn lit(s: &str) -> String {
    let mut o = String::with_capacity(s.len() + 2);
    o.push('\'');
    for c in s.chars() {
        match c {
            '\'' => o.push_str("\\'"),
            '\\' => o.push_str("\\\\"),
            _ => o.push(c),
        }
    }
    o.push('\'');
    o
}

fn ident(s: &str) -> String {
    format!("`{}`", s.replace('`', "``"))
}

fn check_text(what: &str, s: &str) -> WindowsResult<()> {
    if s.contains('\n') || s.contains('\r') || s.is_empty() {
        return Err(WindowsError::bad_param(what, s, "must be non-empty and on one line"));
    }
    Ok(())
}

fn source_sql(view: &str, src: &SparkInput) -> WindowsResult<String> {
    Ok(match src {
        SparkInput::Table(name) => {
            check_text("Spark table name", name)?;
            if !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '.') {
                return Err(WindowsError::bad_param("Spark table name", name, "use letters, digits, _ and ."));
            }
            format!("CREATE OR REPLACE TEMPORARY VIEW {view} AS SELECT * FROM {name};\n")
        }
        SparkInput::Parquet(p) => {
            check_text("Spark input path", p)?;
            format!("CREATE OR REPLACE TEMPORARY VIEW {view} USING parquet OPTIONS (path {});\n", lit(p))
        }
        SparkInput::Csv(p) => {
            check_text("Spark input path", p)?;
            format!(
                "CREATE OR REPLACE TEMPORARY VIEW {view} USING csv OPTIONS (path {}, header 'true', inferSchema 'false', mode 'PERMISSIVE');\n",
                lit(p)
            )
        }
    })
}

/// Floor division of a bigint expression by a positive constant.
fn floor_div(expr: &str, d: i64) -> String {
    format!("(({expr}) - pmod({expr}, {d})) div {d}")
}

fn local_day(t: &str, off: i64) -> String {
    floor_div(&format!("{t} + {off}"), DAY)
}

/// The Spark SQL script for `spec` over `plan`'s inputs.
///
/// # Errors
/// [`WindowsError::BadParameter`] for a path or name Spark could not take literally, or
/// exposure options that leave never-exposed units without an anchor.
pub fn spark_sql(spec: &WindowSpec, exposure: &ExposureOptions, plan: &SparkPlan) -> WindowsResult<String> {
    let off = spec.offset();
    let off_us = off.micros();
    let mut s = String::new();
    let w = &mut s;
    let _ = writeln!(w, "-- aftercast windows: Spark SQL with the native engine's semantics (generated).");
    let _ = writeln!(w, "-- Windows are half-open [from, to) in microseconds; local days use the fixed offset {off}.");
    let tz = if off.seconds() == 0 { "UTC".to_string() } else { off.to_string() };
    let _ = writeln!(w, "SET TIME ZONE {};", lit(&tz));
    s.push_str(&source_sql("ac_events_src", &plan.events)?);
    s.push_str(&source_sql("ac_exposures_src", &plan.exposures)?);
    let w = &mut s;

    // Units: id, group, exposed flag, anchor.
    let ucol = ident(&exposure.unit);
    let grp = match &exposure.group {
        Some(g) => format!("trim(CAST({} AS STRING))", ident(g)),
        None => "'all'".to_string(),
    };
    let reference = exposure.reference.or(exposure.launch);
    let (exposed, exposure_us, checks) = match &exposure.time {
        Some(tc) => {
            let raw = format!("CAST({} AS STRING)", ident(tc));
            let empty = format!("({raw} IS NULL OR trim({raw}) = '')");
            let parsed = format!("unix_micros(TRY_CAST({} AS TIMESTAMP))", ident(tc));
            let never = match reference {
                Some(r) => r.to_string(),
                None => format!(
                    "raise_error(concat('exposures: unit ', {ucol}, ' has no exposure time and no reference time was given'))"
                ),
            };
            (
                format!("CASE WHEN {empty} THEN 0 ELSE 1 END"),
                format!(
                    "CASE WHEN {empty} THEN CAST({never} AS BIGINT) WHEN {parsed} IS NULL THEN CAST(raise_error(concat('exposures: not an ISO 8601 timestamp: ', {raw})) AS BIGINT) ELSE {parsed} END"
                ),
                true,
            )
        }
        None => {
            let launch = exposure.launch.ok_or_else(|| {
                WindowsError::bad_param("exposure", "", "give an exposure-time column or one launch time for all units")
            })?;
            ("1".to_string(), launch.to_string(), false)
        }
    };
    let _ = checks;
    let anchor = match spec.anchoring() {
        crate::Anchoring::Exact => "exposure_us".to_string(),
        crate::Anchoring::DayStart => format!("({} * {DAY} - {off_us})", local_day("exposure_us", off_us)),
    };
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_units_listed AS\nSELECT trim(CAST({ucol} AS STRING)) AS unit, {grp} AS grp, {exposed} AS exposed,\n    {exposure_us} AS exposure_us\nFROM ac_exposures_src;"
    );
    let base = match spec.population() {
        crate::Population::Exposures => "ac_units_listed".to_string(),
        crate::Population::ExposuresAndEvents => {
            let r = reference.ok_or_else(|| {
                WindowsError::bad_param(
                    "reference",
                    "",
                    "units found only in the events need a reference or launch time",
                )
            })?;
            let unlisted = if exposure.group.is_some() { "unlisted" } else { "all" };
            let _ = writeln!(
                w,
                "CREATE OR REPLACE TEMPORARY VIEW ac_units_all AS\nSELECT * FROM ac_units_listed\nUNION ALL\nSELECT d.unit AS unit, '{unlisted}' AS grp, 0 AS exposed, CAST({r} AS BIGINT) AS exposure_us\nFROM (SELECT DISTINCT trim(CAST({} AS STRING)) AS unit FROM ac_events_src) d LEFT ANTI JOIN ac_units_listed l ON d.unit = l.unit\nWHERE d.unit IS NOT NULL AND d.unit <> '';",
                ident(&spec.columns().unit)
            );
            "ac_units_all".to_string()
        }
    };
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_units AS\nSELECT unit, grp, exposed, {anchor} AS anchor_us FROM {base};"
    );
    let _ = writeln!(
        w,
        "SELECT raise_error(concat('exposures: unit ', unit, ' appears ', CAST(n AS STRING), ' times')) FROM (SELECT unit, count(*) AS n FROM ac_units GROUP BY unit) WHERE n > 1 OR unit IS NULL OR unit = '';"
    );
    if exposure.group.is_some() {
        let _ = writeln!(
            w,
            "SELECT raise_error(concat('exposures: unit ', unit, ' has an empty group')) FROM ac_units WHERE grp IS NULL OR grp = '';"
        );
    }

    // Events with a status, as the native reader classifies them (checks in the same order).
    let c = spec.columns();
    let tracked: Vec<String> = spec.tracked().iter().map(|t| lit(&t.name)).collect();
    let tracked_list = tracked.join(", ");
    let negative_ok: Vec<String> = spec.tracked().iter().filter(|t| t.allow_negative).map(|t| lit(&t.name)).collect();
    let neg_rule = if negative_ok.is_empty() {
        "r.v < 0".to_string()
    } else {
        format!("r.v < 0 AND r.metric NOT IN ({})", negative_ok.join(", "))
    };
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_ev_raw AS\nSELECT trim(CAST({m} AS STRING)) AS metric, trim(CAST({u} AS STRING)) AS unit,\n  CAST({t} AS STRING) AS t_raw, TRY_CAST({t} AS TIMESTAMP) AS t_ts,\n  CAST({v} AS STRING) AS v_raw, TRY_CAST({v} AS DOUBLE) AS v\nFROM ac_events_src;",
        m = ident(&c.metric),
        u = ident(&c.unit),
        t = ident(&c.time),
        v = ident(&c.value)
    );
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_ev_checked AS\nSELECT r.*, a.anchor_us, a.grp,\n  CASE\n    WHEN r.metric IS NULL OR r.metric = '' THEN 'missing'\n    WHEN r.metric NOT IN ({tracked_list}) THEN 'other_metric'\n    WHEN r.unit IS NULL OR r.unit = '' THEN 'missing'\n    WHEN a.unit IS NULL THEN 'unknown_unit'\n    WHEN r.t_raw IS NULL OR trim(r.t_raw) = '' THEN 'missing'\n    WHEN r.t_ts IS NULL THEN 'bad_timestamp'\n    WHEN r.v_raw IS NULL OR trim(r.v_raw) = '' THEN 'missing'\n    WHEN r.v IS NULL OR isnan(r.v) OR abs(r.v) >= 4.611686018427387904E18 THEN 'bad_value'\n    WHEN {neg_rule} THEN 'negative'\n    ELSE 'ok' END AS status\nFROM ac_ev_raw r LEFT JOIN ac_units a ON r.unit = a.unit;"
    );
    if spec.bad_rows() == BadRowPolicy::Error {
        let _ = writeln!(
            w,
            "SELECT raise_error(concat('events: bad row (', status, '): unit=', coalesce(unit, ''), ', time=', coalesce(t_raw, ''), ', metric=', coalesce(metric, ''), ', value=', coalesce(v_raw, ''))) FROM ac_ev_checked WHERE status NOT IN ('ok', 'other_metric') LIMIT 1;"
        );
    }
    let day_expr = local_day("t", off_us);
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_ev AS\nSELECT unit, grp, anchor_us, metric, v, t, {day_expr} AS day FROM (\n  SELECT unit, grp, anchor_us, metric, v, unix_micros(t_ts) AS t FROM ac_ev_checked WHERE status = 'ok');"
    );

    // Per unit and local day: per window and tracked metric, sum and count of events inside.
    let nm = spec.tracked().len();
    let bounds = |wi: usize, a: &str| -> (String, String) {
        match spec.windows()[wi].kind.relative() {
            Some((x, y)) => (format!("{a} + {x}"), format!("{a} + {y}")),
            None => {
                let (x, y) = spec.bounds(wi, 0);
                (x.to_string(), y.to_string())
            }
        }
    };
    let mut day_cols = Vec::new();
    let mut unit_cols = Vec::new();
    for wi in 0..spec.windows().len() {
        let (from, to) = bounds(wi, "anchor_us");
        for (mi, tm) in spec.tracked().iter().enumerate() {
            let cond = format!("metric = {} AND t >= {from} AND t < {to}", lit(&tm.name));
            day_cols.push(format!("SUM(CASE WHEN {cond} THEN v END) AS w{wi}_m{mi}_s"));
            day_cols.push(format!("COUNT(CASE WHEN {cond} THEN 1 END) AS w{wi}_m{mi}_n"));
            unit_cols.push(format!("SUM(w{wi}_m{mi}_s) AS w{wi}_m{mi}_s"));
            unit_cols.push(format!("SUM(w{wi}_m{mi}_n) AS w{wi}_m{mi}_n"));
            unit_cols.push(format!("SUM(CASE WHEN w{wi}_m{mi}_n > 0 THEN 1 ELSE 0 END) AS w{wi}_m{mi}_d"));
        }
    }
    let _ = nm;
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_unit_day AS\nSELECT unit, day,\n  {}\nFROM ac_ev GROUP BY unit, day;",
        day_cols.join(",\n  ")
    );
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_unit_agg AS\nSELECT unit,\n  {}\nFROM ac_unit_day GROUP BY unit;",
        unit_cols.join(",\n  ")
    );

    // The unit table.
    let end = spec.until();
    let complete = |wi: usize| -> String {
        let (from, to) = bounds(wi, "u.anchor_us");
        let mut c = format!("({to} <= {end}");
        if let Some(st) = spec.from() {
            let _ = write!(c, " AND {from} >= {st}");
        }
        c.push(')');
        c
    };
    let mut cols = vec![
        "u.unit AS `unit`".to_string(),
        "u.grp AS `group`".to_string(),
        "CAST(u.exposed AS BIGINT) AS `exposed`".to_string(),
        format!(
            "CASE WHEN pmod(u.anchor_us, 1000000) = 0 THEN date_format(timestamp_micros(u.anchor_us), \"yyyy-MM-dd'T'HH:mm:ssXXX\") ELSE date_format(timestamp_micros(u.anchor_us), \"yyyy-MM-dd'T'HH:mm:ss.SSSSSSXXX\") END AS `anchor`"
        ),
    ];
    for vc in spec.value_columns() {
        let wi = vc.window;
        let comp = complete(wi);
        let name = ident(&vc.name);
        let e = match vc.kind {
            ValueKind::Agg { metric: mi, agg } => {
                let p = format!("a.w{wi}_m{mi}");
                match agg {
                    Aggregation::Sum => format!("CASE WHEN {comp} THEN CAST(coalesce({p}_s, 0) AS DOUBLE) END"),
                    Aggregation::Count => format!("CASE WHEN {comp} THEN CAST(coalesce({p}_n, 0) AS BIGINT) END"),
                    Aggregation::ActiveDays => format!("CASE WHEN {comp} THEN CAST(coalesce({p}_d, 0) AS BIGINT) END"),
                    Aggregation::MeanPerActiveDay => format!(
                        "CASE WHEN {comp} AND coalesce({p}_d, 0) > 0 THEN CAST({p}_s AS DOUBLE) / CAST({p}_d AS DOUBLE) END"
                    ),
                    Aggregation::Any => {
                        format!(
                            "CASE WHEN {comp} THEN CAST(CASE WHEN coalesce({p}_n, 0) > 0 THEN 1 ELSE 0 END AS BIGINT) END"
                        )
                    }
                }
            }
            ValueKind::RatioNum { metric: mi } | ValueKind::RatioDen { metric: mi } => {
                format!("CASE WHEN {comp} THEN CAST(coalesce(a.w{wi}_m{mi}_s, 0) AS DOUBLE) END")
            }
        };
        cols.push(format!("{e} AS {name}"));
    }
    let _ = writeln!(
        w,
        "CREATE OR REPLACE TEMPORARY VIEW ac_out_units AS\nSELECT {}\nFROM ac_units u LEFT JOIN ac_unit_agg a ON u.unit = a.unit;",
        cols.join(",\n  ")
    );

    // The per-group series.
    if let Some(freq) = spec.series() {
        let (b0, b1) = spec.series_days();
        let bucket = match freq {
            SeriesFrequency::Daily => "day".to_string(),
            SeriesFrequency::Weekly => floor_div("day + 3", 7),
        };
        let label = match freq {
            SeriesFrequency::Daily => "b.bucket".to_string(),
            SeriesFrequency::Weekly => "b.bucket * 7 - 3".to_string(),
        };
        let mut agg = Vec::new();
        let mut outc = Vec::new();
        for (mi, tm) in spec.tracked().iter().enumerate() {
            let l = lit(&tm.name);
            agg.push(format!("SUM(CASE WHEN metric = {l} THEN v END) AS m{mi}_s"));
            agg.push(format!("COUNT(CASE WHEN metric = {l} THEN 1 END) AS m{mi}_n"));
            outc.push(format!("CAST(coalesce(s.m{mi}_s, 0) AS DOUBLE) AS {}", ident(&format!("{}_total", tm.name))));
            outc.push(format!("CAST(coalesce(s.m{mi}_n, 0) AS BIGINT) AS {}", ident(&format!("{}_events", tm.name))));
            outc.push(format!(
                "CAST(coalesce(s.m{mi}_s, 0) AS DOUBLE) / CAST(g.units AS DOUBLE) AS {}",
                ident(&format!("{}_per_unit", tm.name))
            ));
        }
        let _ = writeln!(
            w,
            "CREATE OR REPLACE TEMPORARY VIEW ac_out_series AS\nSELECT g.grp AS `group`, date_format(date_add(DATE'1970-01-01', CAST({label} AS INT)), 'yyyy-MM-dd') AS `day`, CAST(g.units AS BIGINT) AS `units`,\n  {}\nFROM (SELECT grp, count(*) AS units FROM ac_units GROUP BY grp) g\nCROSS JOIN (SELECT explode(sequence(CAST({b0} AS BIGINT), CAST({} AS BIGINT))) AS bucket) b\nLEFT JOIN (SELECT grp, bucket, {} FROM (SELECT grp, metric, v, {bucket} AS bucket FROM ac_ev) WHERE bucket >= {b0} AND bucket < {b1} GROUP BY grp, bucket) s\n  ON s.grp = g.grp AND s.bucket = b.bucket;",
            outc.join(",\n  "),
            b1 - 1,
            agg.join(", ")
        );
    }

    // Counts: per window and group, inclusion; per status, event rows; per group, exposed units.
    let mut parts = Vec::new();
    for (wi, win) in spec.windows().iter().enumerate() {
        let (from, to) = bounds(wi, "u.anchor_us");
        let after = format!("{to} > {end}");
        let before = match spec.from() {
            Some(st) => format!("NOT ({after}) AND {from} < {st}"),
            None => "false".to_string(),
        };
        parts.push(format!(
            "SELECT 'window' AS kind, {} AS name, u.grp AS `group`, count(*) AS units, SUM(CASE WHEN {} THEN 1 ELSE 0 END) AS included, SUM(CASE WHEN {after} THEN 1 ELSE 0 END) AS excluded_ends_after_end, SUM(CASE WHEN {before} THEN 1 ELSE 0 END) AS excluded_starts_before_start FROM ac_units u GROUP BY u.grp",
            lit(&win.name),
            complete(wi)
        ));
    }
    parts.push(
        "SELECT 'events' AS kind, status AS name, '' AS `group`, count(*) AS units, 0 AS included, 0 AS excluded_ends_after_end, 0 AS excluded_starts_before_start FROM ac_ev_checked GROUP BY status"
            .to_string(),
    );
    parts.push(
        "SELECT 'exposed' AS kind, CAST(u.exposed AS STRING) AS name, u.grp AS `group`, count(*) AS units, 0 AS included, 0 AS excluded_ends_after_end, 0 AS excluded_starts_before_start FROM ac_units u GROUP BY u.exposed, u.grp"
            .to_string(),
    );
    let _ = writeln!(w, "CREATE OR REPLACE TEMPORARY VIEW ac_out_counts AS\n{};", parts.join("\nUNION ALL\n"));

    let mut outs = vec!["units", "counts"];
    if spec.series().is_some() {
        outs.insert(1, "series");
    }
    for o in outs {
        let order = match o {
            "units" => "ORDER BY `unit`",
            "series" => "ORDER BY `group`, `day`",
            _ => "ORDER BY kind, name, `group`",
        };
        match &plan.output {
            Some(dir) => {
                check_text("Spark output folder", dir)?;
                let path = format!("{}/{o}", dir.trim_end_matches('/'));
                let _ = writeln!(
                    w,
                    "INSERT OVERWRITE DIRECTORY {} USING parquet SELECT /*+ COALESCE(1) */ * FROM ac_out_{o} {order};",
                    lit(&path)
                );
            }
            None => {
                let _ = writeln!(w, "SELECT * FROM ac_out_{o} {order};");
            }
        }
    }
    let _ = writeln!(w, "-- until (data end, exclusive): {}", format_timestamp(end, off));
    Ok(s)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::{Offset, parse_timestamp};

    #[test]
    fn script_is_statement_per_line_end_and_quotes_inputs() {
        let t = |s: &str| parse_timestamp(s, Offset::UTC).unwrap();
        let spec = WindowSpec::params()
            .window(crate::WindowKind::parse("14d").unwrap())
            .metric("orders", &[Aggregation::Sum, Aggregation::ActiveDays])
            .until(t("2024-04-01"))
            .check()
            .unwrap();
        let plan = SparkPlan {
            events: SparkInput::Parquet("/data/it's/events.parquet".into()),
            exposures: SparkInput::Table("warehouse.exposures".into()),
            output: Some("/out".into()),
        };
        let sql = spark_sql(&spec, &ExposureOptions::default(), &plan).unwrap();
        assert!(sql.contains("OPTIONS (path '/data/it\\'s/events.parquet')"));
        assert!(sql.contains("SELECT * FROM warehouse.exposures;"));
        assert!(sql.contains("INSERT OVERWRITE DIRECTORY '/out/units' USING parquet"));
        assert!(sql.contains("`fwd_14d_orders_active_days`"));
        assert!(sql.contains("SET TIME ZONE 'UTC';"));
        let bad = SparkPlan { exposures: SparkInput::Table("x; DROP".into()), ..plan };
        assert!(spark_sql(&spec, &ExposureOptions::default(), &bad).is_err());
    }
}
