//! `aftercast backtest`: placebo dates in a series' pre-period: false-positive rate, interval
//! coverage, counterfactual error, power for injected lifts and minimum detectable effects.

use crate::common::{Common, DataOptions, read_table};
use crate::failure::bad_input_msg;
use crate::verbs::compare::classify;
use aftercast_calibrate::adapters::forecast::StructuralModel;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, RunControl};
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_forecast::Season;
use aftercast_forecast::structural::{SeasonKind, Trend};
use std::path::PathBuf;

/// Arguments of `backtest`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Series file (CSV or Parquet): a time column, the outcome and any control series.
    #[arg(long, required_unless_present = "plasmode")]
    pub data: Option<PathBuf>,
    /// Time column.
    #[arg(long, required_unless_present = "plasmode")]
    pub time: Option<String>,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Control series the change did not touch, comma-separated (regressors).
    #[arg(long, value_delimiter = ',')]
    pub controls: Vec<String>,
    /// First period of the real change: placebo dates are placed before it.
    #[arg(long, required_unless_present = "plasmode")]
    pub start: Option<String>,
    /// Last period of the real post-period (sets the placebo window length); default: the end.
    #[arg(long)]
    pub end: Option<String>,
    /// Model family of the placebo fits: structural.
    #[arg(long, default_value = "structural", value_parser = ["structural"])]
    pub model: String,
    /// Structural trend: level, linear-trend or damped-trend (as for forecast).
    #[arg(long, default_value = "level")]
    pub trend: Trend,
    /// Seasons, repeatable, as for forecast: `7` (dummy seasonal) or `365.25:4` (trigonometric
    /// with 4 harmonics). Without it the seasons follow the data's frequency, as for forecast.
    #[arg(long)]
    pub season: Vec<Season>,
    /// Number of placebo dates.
    #[arg(long, default_value_t = 50)]
    pub placebos: usize,
    /// Window lengths for power and MDE, comma-separated (default: a quarter, half and all of the post-period).
    #[arg(long, value_delimiter = ',')]
    pub lengths: Vec<usize>,
    /// Injected multiplicative lifts in percent, comma-separated (negative values allowed).
    #[arg(long, allow_hyphen_values = true, value_delimiter = ',', default_value = "-5,1,2,5,10", value_parser = parse_lift)]
    pub lifts: Vec<f64>,
    /// Shortest fitting span in periods (default: twice the post-period, at least 10).
    #[arg(long)]
    pub min_train: Option<usize>,
    /// Target power of the minimum detectable effect.
    #[arg(long, default_value_t = 0.8)]
    pub power: f64,
    /// Write each finished placebo date to this JSON-lines file as it completes.
    #[arg(long)]
    pub partial: Option<PathBuf>,
    /// Plasmode simulation instead: a unit table whose covariates and treatment are kept while
    /// outcomes are simulated with a known effect (with --treatment, --covariates, --effect).
    #[arg(long)]
    pub plasmode: Option<PathBuf>,
    /// Treatment column of the --plasmode table.
    #[arg(long, default_value = "treatment")]
    pub treatment: String,
    /// Numeric covariates of the --plasmode table, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub covariates: Vec<String>,
    /// The known effect added to the treated units' simulated outcomes (outcome units).
    #[arg(long, default_value_t = 0.0)]
    pub effect: f64,
    /// Simulated data sets.
    #[arg(long, default_value_t = 100)]
    pub replicates: usize,
    /// Methods of the plasmode simulation, comma-separated (as for compare).
    #[arg(long, value_delimiter = ',', default_value = "naive,regression-imputation,nearest,ipw,aipw")]
    pub methods: Vec<String>,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// A lift in percent (`5` or `5%`) as a fraction.
fn parse_lift(s: &str) -> Result<f64, String> {
    let v: f64 = s.trim().trim_end_matches('%').parse().map_err(|_| format!("'{s}' is not a lift in percent"))?;
    if v.is_finite() && v > -100.0 { Ok(v / 100.0) } else { Err(format!("'{s}' is not a lift above -100%")) }
}

fn run_plasmode(a: &Args, path: &std::path::Path) -> anyhow::Result<crate::verbs::Outcome> {
    use aftercast_calibrate::plasmode::{PlasmodeSpec, plasmode};
    use aftercast_core::units::{UnitSpec, UnitTable};
    let covariates = a.covariates.clone();
    if covariates.is_empty() {
        return Err(bad_input_msg("--covariates is required with --plasmode"));
    }
    let spec = UnitSpec {
        treatment: a.treatment.clone(),
        outcomes: vec![a.outcome.clone()],
        numeric: covariates.clone(),
        missing: a.data_options.missing,
        ..Default::default()
    };
    let units = UnitTable::read(path, &spec)?;
    let methods = crate::verbs::compare::methods_from(&a.methods, &[])?;
    let refs: Vec<&dyn aftercast_calibrate::UnitEstimator> = methods.iter().map(|m| m.as_ref()).collect();
    let opts = a.common.inference();
    let pspec = PlasmodeSpec { effect: a.effect, replicates: a.replicates };
    let reports = plasmode(&units, &a.outcome, &covariates, &refs, &pspec, &opts).map_err(classify)?;
    let est = aftercast_calibrate::plasmode::estimate(&reports, &pspec, units.n_treated()).map_err(classify)?;
    let headline = format!("plasmode: {} simulated data sets, known effect {}", a.replicates, a.effect);
    let d = aftercast_report::numbers::decimals_for(&reports.iter().flat_map(|r| [r.bias, r.rmse]).collect::<Vec<_>>());
    let table = aftercast_report::Table {
        title: "How each method does on data with a known effect".into(),
        headers: ["method", "bias", "RMSE", "coverage", "power", "failures"].map(String::from).to_vec(),
        rows: reports
            .iter()
            .map(|r| {
                vec![
                    r.method.clone(),
                    aftercast_report::numbers::signed(r.bias, d),
                    aftercast_report::numbers::signed(r.rmse, d).trim_start_matches('+').to_string(),
                    format!("{:.0}%", 100.0 * r.coverage),
                    format!("{:.0}%", 100.0 * r.power),
                    r.failures.to_string(),
                ]
            })
            .collect(),
        note: None,
    };
    let mut out = crate::verbs::Outcome::new(est, &opts, vec![units.input.clone()], headline)?;
    out.tables.push(table);
    Ok(out)
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad dates or options, a series too
/// short for the placebo windows; internal failures otherwise (an unwritable partial file, an
/// interruption before any placebo date finished).
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    if let Some(p) = &a.plasmode {
        return run_plasmode(a, p);
    }
    let data_path = a.data.clone().ok_or_else(|| bad_input_msg("--data is required"))?;
    let spec = SeriesSpec {
        time: a.time.clone().ok_or_else(|| bad_input_msg("--time is required"))?,
        outcome: a.outcome.clone(),
        controls: a.controls.clone(),
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    };
    let table = read_table(&data_path, &spec.projection())?;
    let series = Series::from_table(&table, &spec)?;
    let start = a.start.clone().ok_or_else(|| bad_input_msg("--start is required"))?;
    let split = series.split(&start, a.end.as_deref(), 0, 3)?;
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
    if !a.lengths.is_empty() {
        bspec.lengths = a.lengths.clone();
    }
    bspec.lifts = a.lifts.clone();
    // the seasons of forecast: the user's, or those that follow the data's frequency, each
    // kept only when the pre-period holds two of its cycles
    let seasons: Vec<SeasonKind> = if a.season.is_empty() {
        Season::defaults(series.frequency())
            .into_iter()
            .filter(|s| s.period * 2.0 <= pre as f64)
            .map(|s| s.structural_kind())
            .collect()
    } else {
        a.season.iter().map(Season::structural_kind).collect()
    };
    let trend = a.trend;
    let model = StructuralModel { trend, seasons, parameter_uncertainty: true, parameter_sets: 20 };
    let controls: Vec<Vec<f64>> = series.controls.iter().map(|(_, v)| v[..pre].to_vec()).collect();
    let data = BacktestData {
        name: &series.name,
        y: &series.outcome[..pre],
        controls: &controls,
        times: Some(&series.axis.points()[..pre]),
    };
    let flag = crate::progress::stop_flag().map_err(|m| anyhow::anyhow!("cannot handle Ctrl-C: {m}"))?;
    let bar = crate::progress::Bar::new(!a.common.quiet);
    let control = RunControl { stop: Some(&flag), partial: a.partial.as_deref(), progress: Some(&bar) };
    let report = backtest::run(&model, &data, &bspec, &control).map_err(classify)?;
    let headline = format!(
        "planning on '{}' with the {} model: {} of {} placebo dates{}",
        a.outcome,
        report.model,
        report.origins_completed,
        report.origins_planned,
        if report.interrupted { " (interrupted)" } else { "" },
    );
    let table = planning_table(&report, bspec.power);
    let mut out =
        crate::verbs::Outcome::new(report.estimate(), &a.common.inference(), vec![series.input.clone()], headline)?;
    out.tables.push(table);
    if report.interrupted {
        out.interrupted = Some(format!(
            "{} of {} placebo dates finished; the results above and in the outputs cover them{}",
            report.origins_completed,
            report.origins_planned,
            a.partial.as_ref().map(|p| format!(" (each is also in {})", p.display())).unwrap_or_default()
        ));
    }
    Ok(out)
}

/// The planning table: per wait, the smallest visible lift and the power at each lift asked.
fn planning_table(report: &aftercast_calibrate::BacktestReport, power: f64) -> aftercast_report::Table {
    use aftercast_report::numbers::percent;
    let mut lifts: Vec<f64> = report.power.iter().map(|p| p.lift).collect();
    lifts.sort_by(f64::total_cmp);
    lifts.dedup();
    let mut headers = vec!["wait (periods)".to_string(), format!("smallest lift seen at {:.0}% power", 100.0 * power)];
    headers.extend(lifts.iter().map(|l| format!("power at {}", percent(*l))));
    let rows = report
        .mde
        .iter()
        .map(|m| {
            let mut row = vec![
                m.length.to_string(),
                m.increase.map_or("not reached".into(), |v| percent(v).trim_start_matches('+').to_string()),
            ];
            for l in &lifts {
                let p = report.power.iter().find(|p| p.length == m.length && p.lift == *l);
                row.push(p.map_or("n/a".into(), |p| format!("{:.0}%", 100.0 * p.power)));
            }
            row
        })
        .collect();
    aftercast_report::Table {
        title: "How long to wait".into(),
        headers,
        rows,
        note: Some(format!(
            "False positives where nothing happened: {:.0}% of {} placebo dates (interval level {:.0}%).",
            100.0 * report.false_positive_rate,
            report.origins_completed,
            100.0 * report.spec.level
        )),
    }
}
