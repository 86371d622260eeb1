//! `aftercast inspect`: read and validate an input file as the analyses would, and describe it.
//! Every reader check runs here, so a file that inspects cleanly will load in an analysis.

use crate::common::{DataOptions, comma_list, read_table};
use aftercast_core::column::{Column, ColumnKind};
use aftercast_core::panel::{LongPanelSpec, Panel};
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_core::table::Projection;
use aftercast_core::table::parse_number_text;
use aftercast_core::units::{UnitSpec, UnitTable};
use serde_json::json;
use std::path::PathBuf;

/// The shape an input is read as.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Shape {
    /// Only the table: columns, rows, what each column holds.
    Table,
    /// A dated series (needs --time and --outcome).
    Series,
    /// A long panel (needs --unit, --time, --outcome).
    Panel,
    /// A wide panel: --time plus one column per unit.
    WidePanel,
    /// A unit table (needs --treatment).
    Units,
}

/// Arguments of `inspect`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Input file (CSV, or Parquet by extension .parquet or .pq).
    #[arg(long)]
    pub data: PathBuf,
    /// How to read it.
    #[arg(long, value_enum, default_value_t = Shape::Table)]
    pub shape: Shape,
    /// Time column (series, panels).
    #[arg(long)]
    pub time: Option<String>,
    /// Outcome column(s).
    #[arg(long)]
    pub outcome: Option<String>,
    /// Control series (series) , comma-separated.
    #[arg(long, default_value = "")]
    pub controls: String,
    /// Unit column (long panels).
    #[arg(long)]
    pub unit: Option<String>,
    /// Treatment or arm column (unit tables).
    #[arg(long)]
    pub treatment: Option<String>,
    /// Numeric covariates, comma-separated (panels, unit tables).
    #[arg(long, default_value = "")]
    pub covariates: String,
    /// Categorical covariates, comma-separated (unit tables).
    #[arg(long, default_value = "")]
    pub categorical: String,
    /// Unit id column (unit tables; checked for duplicates).
    #[arg(long)]
    pub id: Option<String>,
    /// Intervention start (series, panels): counts pre- and post-periods and checks there are
    /// enough pre-periods.
    #[arg(long)]
    pub start: Option<String>,
    /// End of the post-period (inclusive).
    #[arg(long)]
    pub end: Option<String>,
    /// Fewest pre-periods accepted with --start.
    #[arg(long, default_value_t = 3)]
    pub min_pre: usize,
    /// Treated unit(s) of a panel, comma-separated: checked to exist.
    #[arg(long)]
    pub treated: Option<String>,
    #[command(flatten)]
    /// Reading options.
    pub data_options: DataOptions,
    /// Write the description as JSON to this file.
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Print nothing on success.
    #[arg(long)]
    pub quiet: bool,
}

fn need<'a>(v: &'a Option<String>, flag: &str, shape: &str) -> anyhow::Result<&'a str> {
    v.as_deref().ok_or_else(|| crate::failure::bad_input_msg(format!("--shape {shape} needs {flag}")))
}

fn series_spec(a: &Args) -> anyhow::Result<SeriesSpec> {
    Ok(SeriesSpec {
        time: need(&a.time, "--time", "series")?.to_string(),
        outcome: need(&a.outcome, "--outcome", "series")?.to_string(),
        controls: comma_list(&a.controls),
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    })
}

fn panel_spec(a: &Args) -> anyhow::Result<LongPanelSpec> {
    Ok(LongPanelSpec {
        unit: need(&a.unit, "--unit", "panel")?.to_string(),
        time: need(&a.time, "--time", "panel")?.to_string(),
        outcome: need(&a.outcome, "--outcome", "panel")?.to_string(),
        covariates: comma_list(&a.covariates),
        date_format: a.data_options.date_format(),
    })
}

fn unit_spec(a: &Args) -> anyhow::Result<UnitSpec> {
    Ok(UnitSpec {
        id: a.id.clone(),
        treatment: need(&a.treatment, "--treatment", "units")?.to_string(),
        outcomes: a.outcome.as_deref().map(comma_list).unwrap_or_default(),
        numeric: comma_list(&a.covariates),
        categorical: comma_list(&a.categorical),
        missing: a.data_options.missing,
    })
}

/// The columns each shape reads: the whole table as numbers (with every other cell's text kept)
/// for `table`, only the named columns otherwise.
fn projection(a: &Args) -> anyhow::Result<Projection> {
    Ok(match a.shape {
        Shape::Table => Projection::all(ColumnKind::Number),
        Shape::Series => series_spec(a)?.projection(),
        Shape::Panel => panel_spec(a)?.projection(),
        Shape::WidePanel => Panel::wide_projection(need(&a.time, "--time", "wide-panel")?, None),
        Shape::Units => unit_spec(a)?.projection(),
    })
}

/// Run `inspect`.
///
/// # Errors
/// Bad input (exit 2) for every reader failure; write failures (exit 1).
pub fn run(a: &Args) -> anyhow::Result<()> {
    let table = read_table(&a.data, &projection(a)?)?;
    let info = table.info();
    let mut lines = vec![format!(
        "{}: {} rows, {} columns ({})",
        info.path,
        info.rows,
        table.header().len(),
        table.format().name()
    )];
    let mut doc = json!({ "input": info, "columns": table.header() });
    match a.shape {
        Shape::Table => {
            let mut cols = Vec::new();
            for (c, name) in table.header().iter().enumerate() {
                let mut numeric = table.row_count();
                let mut empty = 0usize;
                let mut text = 0usize;
                if let Column::Number(col) = table.data(c) {
                    for (_, cell) in col.exceptions() {
                        numeric -= 1;
                        match parse_number_text(cell) {
                            Ok(Some(_)) => numeric += 1,
                            Ok(None) => empty += 1,
                            Err(_) => text += 1,
                        }
                    }
                }
                lines.push(format!("  {name}: {numeric} numeric, {text} text, {empty} empty"));
                cols.push(json!({"name": name, "numeric": numeric, "text": text, "empty": empty}));
            }
            doc["column_summary"] = json!(cols);
        }
        Shape::Series => {
            let spec = series_spec(a)?;
            let s = Series::from_table(&table, &spec)?;
            let first = s.axis.points().first().map(|p| p.to_string()).unwrap_or_default();
            let last = s.axis.points().last().map(|p| p.to_string()).unwrap_or_default();
            lines.push(format!(
                "  series '{}': {} {:?} periods from {first} to {last}, {} missing, {} control(s)",
                s.name,
                s.len(),
                s.frequency(),
                s.missing_count(),
                s.controls.len()
            ));
            lines.extend(s.notes.iter().map(|n| format!("  note: {n}")));
            if let Some(start) = &a.start {
                let sp = s.split(start, a.end.as_deref(), 0, a.min_pre)?;
                lines.push(format!("  {} pre-period and {} post-period observations", sp.pre_end, sp.post_len()));
                doc["split"] = json!({"pre": sp.pre_end, "post": sp.post_len()});
            }
            doc["series"] = json!({"periods": s.len(), "frequency": s.frequency(), "first": first, "last": last,
                "missing": s.missing_count(), "controls": spec.controls, "notes": s.notes});
        }
        Shape::Panel | Shape::WidePanel => {
            let p = if a.shape == Shape::Panel {
                let spec = panel_spec(a)?;
                Panel::from_long(&table, &spec)?
            } else {
                let time = need(&a.time, "--time", "wide-panel")?;
                Panel::from_wide(
                    &table,
                    time,
                    None,
                    &a.data_options.date_format(),
                    a.outcome.as_deref().unwrap_or("outcome"),
                )?
            };
            lines.push(format!("  panel: {} units x {} {:?} periods", p.units.len(), p.periods(), p.axis.frequency()));
            if let Some(t) = &a.treated {
                for u in comma_list(t) {
                    p.unit_index(&u, a.unit.as_deref().unwrap_or("(column header)"))?;
                }
            }
            if let Some(start) = &a.start {
                let sp =
                    aftercast_core::series::split_axis(&p.axis, &p.input.path, start, a.end.as_deref(), 0, a.min_pre)?;
                lines.push(format!("  {} pre-periods and {} post-periods", sp.pre_end, sp.post_len()));
                doc["split"] = json!({"pre": sp.pre_end, "post": sp.post_len()});
            }
            doc["panel"] = json!({"units": p.units, "periods": p.periods(), "frequency": p.axis.frequency()});
        }
        Shape::Units => {
            let spec = unit_spec(a)?;
            let u = UnitTable::from_table(&table, &spec)?;
            lines.push(format!(
                "  units: {} ({} treated, {} untreated), {} dropped for empty cells",
                u.len(),
                u.n_treated(),
                u.len() - u.n_treated(),
                u.dropped_rows
            ));
            doc["units"] = json!({"n": u.len(), "treated": u.n_treated(), "dropped_rows": u.dropped_rows});
        }
    }
    if let Some(p) = &a.json {
        aftercast_report::write_json(p, &doc)?;
    }
    if !a.quiet {
        sayln!("{}", lines.join("\n"));
    }
    Ok(())
}
