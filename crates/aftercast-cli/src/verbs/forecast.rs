//! `aftercast forecast`: counterfactual of one series from its own past and control series.

use crate::common::{Common, DataOptions, read_table};
use crate::failure::bad_input;
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_forecast::holt_winters::Seasonality;
use aftercast_forecast::params::TrendOption;
use aftercast_forecast::{Choice, EventCalendar, ForecastParams, ModelKind, Season, analyse};
use std::path::PathBuf;

/// Arguments of `forecast` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Series file (CSV, or Parquet by extension .parquet or .pq): one row per period.
    #[arg(long)]
    pub data: PathBuf,
    /// Time column (ISO dates or integer periods).
    #[arg(long)]
    pub time: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Control series the change did not touch, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub controls: Vec<String>,
    /// First period of the change (date or integer period, as in the time column).
    #[arg(long)]
    pub start: String,
    /// Last period of the post-period (default: the end of the data).
    #[arg(long)]
    pub end: Option<String>,
    /// Group column of a long file (one row per group and period): one counterfactual per
    /// group and one of the total over the groups (the headline).
    #[arg(long)]
    pub group: Option<String>,
    /// Periods just before --start left out of the fit (washout gap).
    #[arg(long, default_value_t = 0)]
    pub washout: usize,
    /// Model: structural, holt-winters, harmonic or auto (rolling backtest, lowest CRPS).
    #[arg(long, default_value = "structural")]
    pub model: ModelKind,
    /// Seasonal component, repeatable: `7` (dummy seasonal) or `365.25:4` (trigonometric with
    /// 4 harmonics). Without it the seasons follow the data's frequency.
    #[arg(long)]
    pub season: Vec<Season>,
    /// No seasonal component at all.
    #[arg(long, conflicts_with = "season")]
    pub no_season: bool,
    /// Structural trend: auto (a local level or a local linear trend, whichever forecast the
    /// pre-period's own held-out stretches better; a local level when the pre-period is too
    /// short to check), level (the forecast carries the last level forward), linear-trend or
    /// damped-trend (a slope is extrapolated into the post-period).
    #[arg(long, default_value = "auto")]
    pub trend: TrendOption,
    /// AR(1) component of the structural model: auto (added when the pre-period's one-step
    /// errors are correlated and it improves the fit), on or off.
    #[arg(long, default_value = "auto")]
    pub ar: Choice,
    /// Shrink the control coefficients together (an empirical-Bayes ridge prior, for many
    /// candidate controls): auto (from 5 controls on), on or off.
    #[arg(long, default_value = "auto")]
    pub shrink_controls: Choice,
    /// Holt-Winters seasonality: additive or multiplicative.
    #[arg(long, default_value = "additive")]
    pub hw_seasonality: Seasonality,
    /// Damped Holt-Winters trend.
    #[arg(long)]
    pub damped: bool,
    /// Calendar of known events or holidays: CSV with columns date,name (one indicator per name).
    #[arg(long)]
    pub events: Option<PathBuf>,
    /// Control series to enter on the log scale (comma-separated names from --controls), e.g.
    /// a count that relates to the outcome multiplicatively; each value must be positive.
    #[arg(long, value_delimiter = ',')]
    pub log_controls: Vec<String>,
    /// Model the log of the outcome (multiplicative effects).
    #[arg(long)]
    pub log: bool,
    /// Rolling origins of the pre-period backtest (0 = none; --model auto needs at least 1, and
    /// with --trend auto and 0 folds the forecast keeps a local level).
    #[arg(long, default_value_t = 3)]
    pub folds: usize,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Errors of the model caused by the input exit 2; optimiser and linear-algebra failures exit 1.
pub(crate) fn classify(e: aftercast_forecast::ForecastError) -> anyhow::Error {
    use aftercast_forecast::ForecastError as E;
    match e {
        E::Optimiser { .. } | E::Singular { .. } => anyhow::Error::new(e),
        other => bad_input(other),
    }
}

/// How the series file of a forecast's flags is read.
fn series_spec(a: &Args) -> SeriesSpec {
    SeriesSpec {
        time: a.time.clone(),
        outcome: a.outcome.clone(),
        controls: a.controls.clone(),
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    }
}

/// An analysis set-up read from the flags: the series, its split, the checked parameters and
/// the event calendar. `forecast` analyses it; `plan forecast` runs placebo dates of it.
pub struct Setup {
    /// The series.
    pub series: Series,
    /// Pre-period, washout and post-period.
    pub split: aftercast_core::series::Split,
    /// The checked parameters.
    pub params: aftercast_forecast::ValidParams,
    /// The event calendar, if given.
    pub events: Option<EventCalendar>,
    /// Input files read.
    pub inputs: Vec<aftercast_core::InputInfo>,
}

/// Read the inputs and check the flags of a forecast analysis. With `before_data_end` false,
/// a --start after the last period is allowed (a plan made before the change: the whole
/// series is the pre-period).
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad options, too short a
/// pre-period.
pub fn setup(a: &Args, before_data_end: bool) -> anyhow::Result<Setup> {
    let spec = series_spec(a);
    let table = read_table(&a.data, &spec.projection())?;
    let series = Series::from_table(&table, &spec).map_err(bad_input)?;
    let split = match series.split(&a.start, a.end.as_deref(), a.washout, 8) {
        Ok(s) => s,
        Err(aftercast_core::DataError::NoPostPeriod { .. })
            if !before_data_end
                && series
                    .axis
                    .parse_user_time("--start", &a.start)
                    .is_ok_and(|t| series.axis.points().last().is_some_and(|last| t > *last)) =>
        {
            let n = series.len();
            aftercast_core::series::Split { pre_end: n.saturating_sub(a.washout), post_start: n, post_end: n }
        }
        Err(e) => return Err(bad_input(e)),
    };
    let (params, events, more) = params_and_events(a)?;
    let mut inputs = vec![table.info()];
    inputs.extend(more);
    Ok(Setup { series, split, params, events, inputs })
}

/// The checked model parameters and the event calendar of a forecast's flags, and the input
/// files read for them.
///
/// # Errors
/// Bad options, an unreadable calendar.
fn params_and_events(
    a: &Args,
) -> anyhow::Result<(aftercast_forecast::ValidParams, Option<EventCalendar>, Vec<aftercast_core::InputInfo>)> {
    let model = a.model;
    let inf = a.common.inference();
    let mut params = ForecastParams::builder()
        .model(model)
        .trend(a.trend.0)
        .ar(a.ar)
        .shrink_controls(a.shrink_controls)
        .log(a.log)
        .log_controls(a.log_controls.clone())
        .inference(inf)
        .backtest_folds(a.folds);
    params.hw_seasonality = a.hw_seasonality;
    params.hw_damped = a.damped;
    if a.no_season {
        params = params.no_seasons();
    }
    for s in &a.season {
        params = params.season(*s);
    }
    if model == ModelKind::Auto && a.folds == 0 {
        return Err(crate::failure::bad_input_msg(
            "--model auto chooses the model on a backtest, so it needs --folds 1 or more (it is 0)",
        ));
    }
    let params = params.check().map_err(bad_input)?;
    let mut inputs = Vec::new();
    let events = match &a.events {
        Some(p) => {
            let t = read_table(p, &EventCalendar::projection())?;
            inputs.push(t.info());
            Some(EventCalendar::from_table(&t).map_err(bad_input)?)
        }
        None => None,
    };
    Ok((params, events, inputs))
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad options, too short a
/// pre-period, non-positive values under --log, an unidentified model; internal failures
/// otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    if let Some(g) = &a.group {
        return run_groups(a, g);
    }
    let Setup { series, split, params, events, inputs } = setup(a, true)?;
    let inf = a.common.inference();
    let run = analyse(&series, split, &params, events.as_ref()).map_err(classify)?;
    let mut est = run.estimate();
    est.warnings.splice(0..0, series.notes.iter().cloned());
    let with_ar = match &run.fitted.model {
        aftercast_forecast::FittedModel::Structural(f) if f.spec.ar => " with an AR(1) component",
        _ => "",
    };
    let headline = format!(
        "{} of '{}' from {} ({} model{with_ar}, {} pre-periods, {} post-periods)",
        if a.log { "Multiplicative effect" } else { "Effect" },
        a.outcome,
        a.start,
        run.chosen,
        split.pre_end,
        split.post_len()
    );
    crate::verbs::Outcome::new(est, &inf, inputs, headline)
}

/// One group's rows (or the total's) as a table of its own: the time column, the outcome and
/// the controls, under a name saying which group (so its messages name it).
fn sub_table(
    path: &std::path::Path,
    label: &str,
    header: &[String],
    rows: &[Vec<String>],
) -> anyhow::Result<aftercast_core::RawTable> {
    let mut text = header.join(",");
    text.push('\n');
    for r in rows {
        text.push_str(&r.join(","));
        text.push('\n');
    }
    let name = std::path::PathBuf::from(format!("{} [{label}]", path.display()));
    aftercast_core::RawTable::from_csv_bytes(&name, text.as_bytes()).map_err(bad_input)
}

/// `--group COL`: the total over the groups by period (the outcome summed; a control summed when
/// it differs between groups in a period, taken as is when every group shares its value), and
/// each group, each with its own forecast from the same options. The result is the total's; the
/// groups' average effects per period are a breakdown, with their sum beside the total's own.
fn run_groups(a: &Args, group: &str) -> anyhow::Result<crate::verbs::Outcome> {
    use aftercast_core::estimate::{BreakdownInput, PartInput};
    use aftercast_core::result::EffectDraws;
    let mut projection = series_spec(a).projection();
    projection = projection.text(group);
    let table = read_table(&a.data, &projection)?;
    let gc = table.column(group).map_err(bad_input)?;
    let tc = table.column(&a.time).map_err(bad_input)?;
    let yc = table.column(&a.outcome).map_err(bad_input)?;
    let cc: Vec<usize> = a.controls.iter().map(|c| table.column(c)).collect::<Result<_, _>>().map_err(bad_input)?;
    let mut header = vec![a.time.clone(), a.outcome.clone()];
    header.extend(a.controls.iter().cloned());
    let mut groups: Vec<String> = Vec::new();
    let mut rows_of: std::collections::HashMap<String, Vec<Vec<String>>> = std::collections::HashMap::new();
    let mut times: Vec<String> = Vec::new();
    let mut totals: std::collections::HashMap<String, (f64, Vec<Vec<f64>>)> = std::collections::HashMap::new();
    for r in 0..table.row_count() {
        let g = table.text(r, gc).trim().to_string();
        if g.is_empty() {
            return Err(bad_input(aftercast_core::DataError::MissingValue { at: table.at(r, gc) }));
        }
        let t = table.text(r, tc).trim().to_string();
        let y = table.parse_number(r, yc).map_err(bad_input)?;
        let mut row = vec![t.clone(), y.map(|v| format!("{v:?}")).unwrap_or_default()];
        let e = totals.entry(t.clone()).or_insert_with(|| {
            times.push(t.clone());
            (0.0, vec![Vec::new(); cc.len()])
        });
        e.0 += y.unwrap_or(f64::NAN);
        for (k, &c) in cc.iter().enumerate() {
            let v = table.parse_number(r, c).map_err(bad_input)?;
            row.push(v.map(|v| format!("{v:?}")).unwrap_or_default());
            e.1[k].push(v.unwrap_or(f64::NAN));
        }
        if !rows_of.contains_key(&g) {
            groups.push(g.clone());
        }
        rows_of.entry(g).or_default().push(row);
    }
    if groups.len() < 2 {
        return Err(crate::failure::bad_input_msg(format!(
            "--group {group}: {} has {} group(s); a grouped forecast needs at least two",
            a.data.display(),
            groups.len()
        )));
    }
    let total_rows: Vec<Vec<String>> = times
        .iter()
        .map(|t| {
            let (y, cs) = &totals[t];
            let mut row = vec![t.clone(), format!("{y:?}")];
            for v in cs {
                let shared = v.iter().all(|x| x == &v[0]);
                let value = if shared { v[0] } else { v.iter().sum() };
                row.push(format!("{value:?}"));
            }
            row
        })
        .collect();
    let inf = a.common.inference();
    let fit = |label: &str, rows: &[Vec<String>]| -> anyhow::Result<aftercast_forecast::ForecastRun> {
        let sub = sub_table(&a.data, label, &header, rows)?;
        let series = Series::from_table(&sub, &series_spec(a)).map_err(bad_input)?;
        let split = series.split(&a.start, a.end.as_deref(), a.washout, 8).map_err(bad_input)?;
        let (params, events, _) = params_and_events(a)?;
        analyse(&series, split, &params, events.as_ref()).map_err(classify)
    };
    let total = fit("total", &total_rows)?;
    let mut est = total.estimate();
    let mean_effects = |e: &EffectDraws, point: &[f64]| -> (f64, Vec<f64>) {
        match e {
            EffectDraws::Path { observed, counterfactual, .. } => {
                let n = observed.iter().filter(|v| v.is_finite()).count().max(1) as f64;
                let avg = |cf: &[f64]| {
                    observed.iter().zip(cf).filter(|(y, _)| y.is_finite()).map(|(y, c)| y - c).sum::<f64>() / n
                };
                (avg(point), counterfactual.iter().map(|cf| avg(cf)).collect())
            }
            EffectDraws::Scalar { effect, .. } => (f64::NAN, effect.clone()),
        }
    };
    let mut rows = Vec::new();
    for g in &groups {
        let run = fit(&format!("{group} = {g}"), &rows_of[g])?;
        let e = run.estimate();
        let aftercast_core::Point::Path(point) = &e.point else { continue };
        let (p, d) = mean_effects(&e.draws, point.as_slice());
        rows.push(PartInput { label: g.clone(), key: None, point: p, draws: d, units: 1, note: None });
        for w in &e.warnings {
            est.warn(format!("group '{g}': {w}"));
        }
    }
    let nd = rows.iter().map(|r| r.draws.len()).min().unwrap_or(0);
    let sum_point: f64 = rows.iter().map(|r| r.point).sum();
    let sum_draws: Vec<f64> = (0..nd).map(|d| rows.iter().map(|r| r.draws[d]).sum()).collect();
    rows.push(PartInput {
        label: "sum of the groups".into(),
        key: None,
        point: sum_point,
        draws: sum_draws,
        units: groups.len(),
        note: Some("the groups' own forecasts added up; compare with the total's average effect".into()),
    });
    est.sections.breakdowns.push(BreakdownInput {
        by: "segment".into(),
        title: format!("Average effect per period by '{group}' (each group forecast on its own)"),
        rows,
        joint: None,
        clusters: None,
    });
    est.assumptions.push(format!(
        "Each group of '{group}' and their total are forecast separately with the same options; the headline is the total's."
    ));
    let headline = format!(
        "Effect on the total '{}' of {} groups of '{group}' from {} ({} model), and per group",
        a.outcome,
        groups.len(),
        a.start,
        total.chosen
    );
    crate::verbs::Outcome::new(est, &inf, vec![table.info()], headline)
}
