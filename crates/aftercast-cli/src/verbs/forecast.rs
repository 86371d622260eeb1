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
    let spec = SeriesSpec {
        time: a.time.clone(),
        outcome: a.outcome.clone(),
        controls: a.controls.clone(),
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    };
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
    let mut inputs = vec![table.info()];
    let events = match &a.events {
        Some(p) => {
            let t = read_table(p, &EventCalendar::projection())?;
            inputs.push(t.info());
            Some(EventCalendar::from_table(&t).map_err(bad_input)?)
        }
        None => None,
    };
    Ok(Setup { series, split, params, events, inputs })
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad options, too short a
/// pre-period, non-positive values under --log, an unidentified model; internal failures
/// otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
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
