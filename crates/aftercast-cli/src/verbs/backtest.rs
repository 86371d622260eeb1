//! `aftercast backtest`: placebo dates in a series' pre-period: false-positive rate, interval
//! coverage, counterfactual error, power for injected lifts and minimum detectable effects.

use crate::common::{Common, DataOptions, comma_list, parse_arg, read_table};
use crate::failure::bad_input_msg;
use crate::verbs::compare::classify;
use aftercast_calibrate::adapters::forecast::StructuralModel;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, RunControl};
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_forecast::structural::{SeasonKind, Trend};
use std::path::PathBuf;

/// Arguments of `backtest`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Series file (CSV or Parquet): a time column, the outcome and any control series.
    #[arg(long)]
    pub data: PathBuf,
    /// Time column.
    #[arg(long)]
    pub time: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Control series the change did not touch, comma-separated (regressors).
    #[arg(long, default_value = "")]
    pub controls: String,
    /// First period of the real change: placebo dates are placed before it.
    #[arg(long)]
    pub start: String,
    /// Last period of the real post-period (sets the placebo window length); default: the end.
    #[arg(long)]
    pub end: Option<String>,
    /// Model: structural (local linear trend) or local-level.
    #[arg(long, default_value = "structural")]
    pub model: String,
    /// Seasons, repeatable: `P` (dummy seasonal of integer period P) or `P:K` (trigonometric,
    /// K harmonics). Default for daily data: 7, plus 365.25:4 when the pre-period has two years.
    #[arg(long)]
    pub season: Vec<String>,
    /// Number of placebo dates.
    #[arg(long, default_value_t = 50)]
    pub placebos: usize,
    /// Window lengths for power and MDE, comma-separated (default: a quarter, half and all of the post-period).
    #[arg(long, default_value = "")]
    pub lengths: String,
    /// Injected multiplicative lifts in percent, comma-separated.
    #[arg(long, default_value = "-5,1,2,5,10")]
    pub lifts: String,
    /// Shortest fitting span in periods (default: twice the post-period, at least 10).
    #[arg(long)]
    pub min_train: Option<usize>,
    /// Target power of the minimum detectable effect.
    #[arg(long, default_value_t = 0.8)]
    pub power: f64,
    /// Write each finished placebo date to this JSON-lines file as it completes.
    #[arg(long)]
    pub partial: Option<PathBuf>,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad dates or options, a series too
/// short for the placebo windows; internal failures otherwise (an unwritable partial file, an
/// interruption before any placebo date finished).
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    let table = read_table(&a.data)?;
    let spec = SeriesSpec {
        time: a.time.clone(),
        outcome: a.outcome.clone(),
        controls: comma_list(&a.controls),
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    };
    let series = Series::from_table(&table, &spec)?;
    let split = series.split(&a.start, a.end.as_deref(), 0, 3)?;
    let pre = split.pre_end;
    let mut bspec = BacktestSpec::new(split.post_len());
    bspec.placebos = a.placebos;
    bspec.draws = usize::try_from(a.common.draws).unwrap_or(usize::MAX);
    bspec.level = a.common.level;
    bspec.seed = a.common.seed;
    bspec.power = a.power;
    if let Some(m) = a.min_train {
        bspec.min_train = m;
    }
    let lengths = comma_list(&a.lengths);
    if !lengths.is_empty() {
        bspec.lengths = lengths.iter().map(|l| parse_arg::<usize>("--lengths", l)).collect::<anyhow::Result<_>>()?;
    }
    bspec.lifts = comma_list(&a.lifts)
        .iter()
        .map(|l| parse_arg::<f64>("--lifts", l.trim_end_matches('%')).map(|v| v / 100.0))
        .collect::<anyhow::Result<_>>()?;
    let trend = match a.model.as_str() {
        "structural" => Trend::LinearTrend,
        "local-level" => Trend::Level,
        other => return Err(bad_input_msg(format!("--model: '{other}' is not one of structural, local-level"))),
    };
    let mut seasons: Vec<SeasonKind> = Vec::new();
    if a.season.is_empty() {
        if series.frequency() == aftercast_core::time::Frequency::Daily {
            seasons.push(SeasonKind::Dummy { period: 7 });
            if pre >= 730 {
                seasons.push(SeasonKind::Trig { period: 365.25, harmonics: 4 });
            }
        }
    } else {
        for text in &a.season {
            let kind = match text.split_once(':') {
                Some((p, k)) => {
                    let period = parse_arg::<f64>("--season", p)?;
                    let harmonics = parse_arg::<usize>("--season", k)?;
                    if !(period > 2.0 && harmonics >= 1 && 2.0 * harmonics as f64 <= period) {
                        return Err(bad_input_msg(format!(
                            "--season {text}: a trigonometric season needs period > 2 and 1 <= K <= period/2"
                        )));
                    }
                    SeasonKind::Trig { period, harmonics }
                }
                None => {
                    let period = parse_arg::<usize>("--season", text)?;
                    if period < 2 {
                        return Err(bad_input_msg(format!("--season {text}: a seasonal period must be at least 2")));
                    }
                    SeasonKind::Dummy { period }
                }
            };
            seasons.push(kind);
        }
    }
    let model = StructuralModel { trend, seasons, parameter_uncertainty: true, parameter_sets: 20 };
    let controls: Vec<Vec<f64>> = series.controls.iter().map(|(_, v)| v[..pre].to_vec()).collect();
    let data = BacktestData {
        name: &series.name,
        y: &series.outcome[..pre],
        controls: &controls,
        times: Some(&series.axis.points()[..pre]),
    };
    let flag = aftercast_calibrate::interrupt::stop_flag().map_err(|m| anyhow::anyhow!("cannot handle Ctrl-C: {m}"))?;
    let control = RunControl { stop: Some(&flag), partial: a.partial.as_deref(), progress: !a.common.quiet };
    let report = backtest::run(&model, &data, &bspec, &control).map_err(classify)?;
    let result = report.to_result(&a.common.rope, vec![series.input.clone()]);
    let mde = report
        .mde
        .iter()
        .map(|m| match m.increase {
            Some(v) => format!("{} periods {:.1}%", m.length, 100.0 * v),
            None => format!("{} periods: not reached", m.length),
        })
        .collect::<Vec<_>>()
        .join(", ");
    let headline = format!(
        "{} on '{}': {} of {} placebo dates{}; false positives {:.0}% at level {:.0}%, MDE at {:.0}% power: {}",
        report.model,
        a.outcome,
        report.origins_completed,
        report.origins_planned,
        if report.interrupted { " (interrupted)" } else { "" },
        100.0 * report.false_positive_rate,
        100.0 * bspec.level,
        100.0 * bspec.power,
        mde
    );
    Ok(crate::verbs::Outcome { result, headline })
}
