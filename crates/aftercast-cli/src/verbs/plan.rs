//! `aftercast plan`: how long to wait (or how many units to have) to see a change of a given
//! size, from placebo runs of the very set-up the analysis will use.
//!
//! - `plan forecast <the flags of forecast>`: placebo dates in the series' pre-period, each
//!   fitted through the forecast analysis's own path;
//! - `plan synthetic <the flags of synthetic>`: placebo dates for the treated units and the
//!   real start for each donor in turn (placebo in time and in space);
//! - `plan match <the flags of match>`: simulated outcomes on the real covariates and
//!   treatment, at several sample sizes (plasmode);
//! - `plan study STUDY NAME [flags]`: the analysis NAME of a study file, with its own flags.
//!
//! Every kind gives the same `planning` section: power per wait and lift, the minimum
//! detectable effect per wait, the shortest wait per lift and the false-positive rate.

use crate::common::Common;
use crate::failure::bad_input_msg;
use crate::verbs::compare::classify;
use crate::verbs::{forecast, match_, synthetic};
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, RunControl};
use aftercast_core::time::Frequency;
use clap::Parser;
use std::path::PathBuf;

/// Arguments of `plan`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to plan.
    #[command(subcommand)]
    pub what: What,
}

/// The analysis a plan is made for.
#[derive(Debug, clap::Subcommand)]
pub enum What {
    /// A forecast analysis: every flag of `forecast`, plus the plan's own.
    Forecast(ForecastPlanArgs),
    /// A synthetic-control analysis: every flag of `synthetic`, plus the plan's own.
    Synthetic(SyntheticPlanArgs),
    /// A matching or weighting analysis: every flag of `match`, plus the plan's own.
    Match(MatchPlanArgs),
    /// An analysis of a study file, by name, with the flags the study gives it.
    Study(StudyPlanArgs),
}

/// The plan's own flags, shared by every kind.
#[derive(Debug, Clone, clap::Args)]
pub struct PlanOptions {
    /// Placebo runs: placebo dates of a series (and, for a panel, placebo units), or
    /// simulated data sets of a unit table.
    #[arg(long, default_value_t = 50)]
    pub placebos: usize,
    /// Lifts to plan for, in percent of the counterfactual, comma-separated (negative for
    /// falls).
    #[arg(long, allow_hyphen_values = true, value_delimiter = ',', default_value = "1,2,5,10", value_parser = parse_lift)]
    pub lifts: Vec<f64>,
    /// Target power.
    #[arg(long, default_value_t = 0.8, value_parser = parse_power)]
    pub power: f64,
}

/// The flags of a plan over time (a series or a panel).
#[derive(Debug, Clone, clap::Args)]
pub struct TimePlanOptions {
    /// Waits to show, in periods of the series, comma-separated (default: 1, 2, 4 and 8 weeks
    /// for daily data, 2, 4, 8, 13 and 26 weeks for weekly, 3, 6 and 12 months for monthly,
    /// plus the real post-period's length when the data has one; a synthetic control's stop at
    /// that length, so each untouched unit is a placebo too; only those the pre-period can
    /// check).
    #[arg(long, value_delimiter = ',')]
    pub waits: Vec<usize>,
    /// Shortest fitting span of a placebo date, in periods (default for a forecast: one full
    /// cycle of the longest season you give, two of a season that follows the data's frequency
    /// or under --model auto, at least 30, plus any washout; for a synthetic control: a year of
    /// periods, at most half the pre-period, at least 10).
    #[arg(long)]
    pub min_train: Option<usize>,
    /// Write each finished placebo run to this JSON-lines file as it completes.
    #[arg(long)]
    pub partial: Option<PathBuf>,
}

/// `plan forecast`.
#[derive(Debug, clap::Args)]
pub struct ForecastPlanArgs {
    /// The analysis.
    #[command(flatten)]
    pub analysis: forecast::Args,
    /// The plan.
    #[command(flatten)]
    pub plan: PlanOptions,
    /// The plan over time.
    #[command(flatten)]
    pub time: TimePlanOptions,
}

/// `plan synthetic`.
#[derive(Debug, clap::Args)]
pub struct SyntheticPlanArgs {
    /// The analysis.
    #[command(flatten)]
    pub analysis: synthetic::Args,
    /// The plan.
    #[command(flatten)]
    pub plan: PlanOptions,
    /// The plan over time.
    #[command(flatten)]
    pub time: TimePlanOptions,
}

/// `plan match`.
#[derive(Debug, clap::Args)]
pub struct MatchPlanArgs {
    /// The analysis.
    #[command(flatten)]
    pub analysis: match_::Args,
    /// Sample sizes to plan for, in units, comma-separated (default: a quarter, half, all and
    /// twice the table's units; units are drawn with replacement, keeping the share treated).
    #[arg(long, value_delimiter = ',')]
    pub sizes: Vec<usize>,
    /// Bootstrap draws behind each simulated data set's interval (--draws is the analysis's
    /// own; 200 draws place an interval's end within about a tenth of a standard error, enough
    /// for a share of runs, and keep a plan of the refitting methods to minutes).
    #[arg(long, default_value_t = 200, value_parser = clap::value_parser!(u64).range(50..=100_000))]
    pub run_draws: u64,
    /// The plan.
    #[command(flatten)]
    pub plan: PlanOptions,
}

/// `plan study`.
#[derive(Debug, clap::Args)]
pub struct StudyPlanArgs {
    /// The study file.
    pub study: PathBuf,
    /// The analysis's name in the study.
    pub analysis: String,
    /// Further flags: the plan's own (--waits, --lifts, ...) and outputs (--json, --out).
    #[arg(trailing_var_arg = true, allow_hyphen_values = true)]
    pub rest: Vec<String>,
}

/// A target power strictly between 0 and 1.
fn parse_power(s: &str) -> Result<f64, String> {
    let v: f64 = s.trim().parse().map_err(|_| format!("'{s}' is not a number"))?;
    if v > 0.0 && v < 1.0 { Ok(v) } else { Err(format!("'{s}' is not a power strictly between 0 and 1 (e.g. 0.8)")) }
}

/// A lift in percent (`5` or `5%`) as a fraction.
fn parse_lift(s: &str) -> Result<f64, String> {
    let v: f64 = s.trim().trim_end_matches('%').parse().map_err(|_| format!("'{s}' is not a lift in percent"))?;
    if v.is_finite() && v > -100.0 && v != 0.0 {
        Ok(v / 100.0)
    } else {
        Err(format!("'{s}' is not a non-zero lift above -100%"))
    }
}

/// The common flags of a plan (threads, quiet, outputs); None for a study plan, whose flags
/// are known once the study is read.
pub fn common(a: &Args) -> Option<&Common> {
    match &a.what {
        What::Forecast(f) => Some(&f.analysis.common),
        What::Synthetic(s) => Some(&s.analysis.common),
        What::Match(m) => Some(&m.analysis.common),
        What::Study(_) => None,
    }
}

/// Whether the plan runs quietly.
pub fn quiet(a: &Args) -> bool {
    match &a.what {
        What::Study(s) => s.rest.iter().any(|r| r == "--quiet"),
        _ => common(a).is_some_and(|c| c.quiet),
    }
}

/// The plan of a study's analysis as the command line it stands for:
/// `aftercast plan <verb> <the study's flags> <further flags>`.
///
/// # Errors
/// Bad input for an unreadable study, an unknown name, or an analysis that cannot be planned.
pub fn study_argv(s: &StudyPlanArgs) -> anyhow::Result<Vec<String>> {
    let study = crate::study::Study::read(&s.study)?;
    let a = study.analyses.iter().find(|a| a.name == s.analysis).ok_or_else(|| {
        let names: Vec<&str> = study.analyses.iter().map(|a| a.name.as_str()).collect();
        bad_input_msg(format!(
            "{}: no analysis named '{}' (the study has: {})",
            s.study.display(),
            aftercast_core::error::shown(&s.analysis),
            names.join(", ")
        ))
    })?;
    let base = s.study.parent().map(PathBuf::from).unwrap_or_else(|| PathBuf::from("."));
    // a flag given after the name replaces the study's own (`--start`, `--draws`, ...)
    let given: Vec<String> = s
        .rest
        .iter()
        .filter_map(|r| r.strip_prefix("--"))
        .map(|k| k.split('=').next().unwrap_or(k).replace('_', "-"))
        .collect();
    let keep = |k: &String| !given.contains(&k.replace('_', "-"));
    let mut a = a.clone();
    a.flags.retain(|k, _| keep(k));
    let mut study = study.clone();
    study.defaults.retain(|k, _| keep(k));
    let argv = study.argv(&a, &base, std::path::Path::new("."))?;
    // argv is ["aftercast", <verb words>..., flags...]; a planned analysis is planned as it is
    let words: Vec<&str> = a.verb.split_whitespace().collect();
    let mut out = vec!["aftercast".to_string()];
    match words.as_slice() {
        ["forecast" | "synthetic" | "match"] => out.push("plan".into()),
        ["plan", "forecast" | "synthetic" | "match"] => {}
        _ => {
            return Err(bad_input_msg(format!(
                "{}: analysis '{}' runs '{}', which has no plan (forecast, synthetic and match analyses do)",
                s.study.display(),
                a.name,
                a.verb
            )));
        }
    }
    out.extend(argv.into_iter().skip(1));
    out.extend(s.rest.iter().cloned());
    Ok(out)
}

/// The plan a study plan stands for, parsed.
fn resolve(s: &StudyPlanArgs) -> anyhow::Result<Args> {
    let argv = study_argv(s)?;
    let cli = crate::Cli::try_parse_from(&argv).map_err(|e| {
        let text = e.render().to_string();
        bad_input_msg(format!(
            "plan study {} {}: {} (flags come from the study and from after the name)",
            s.study.display(),
            s.analysis,
            crate::study::one_line(&text).trim_start_matches("error: ")
        ))
    })?;
    match cli.verb {
        crate::Verb::Plan(a) if !matches!(a.what, What::Study(_)) => Ok(a),
        _ => Err(bad_input_msg(format!(
            "{}: analysis '{}' cannot be planned: only forecast, synthetic and match analyses have a plan",
            s.study.display(),
            s.analysis
        ))),
    }
}

/// Run a plan and write its outputs.
///
/// # Errors
/// As [`run`], and output failures.
pub fn run_verb(a: &Args) -> anyhow::Result<()> {
    if let What::Study(s) = &a.what {
        let inner = resolve(s)?;
        // the study's flags are known now: --threads among the further flags takes effect here
        if let Some(n) = common(&inner).and_then(|c| c.threads) {
            let _ = rayon::ThreadPoolBuilder::new().num_threads(n as usize).build_global();
        }
        return run_verb(&inner);
    }
    let common = common(a).ok_or_else(|| anyhow::anyhow!("a study plan resolves to an analysis"))?;
    crate::verbs::finish(common, run(a)?)
}

/// Run the plan and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for the analysis's own bad input and for a series too short for the
/// placebo windows; internal failures otherwise (an unwritable partial file, an interruption
/// before any placebo run finished).
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    match &a.what {
        What::Forecast(f) => plan_forecast(f),
        What::Synthetic(s) => crate::verbs::plan_panel::plan_synthetic(s),
        What::Match(m) => crate::verbs::plan_panel::plan_match(m),
        What::Study(s) => run(&resolve(s)?),
    }
}

/// What one step of a series' wait is.
pub fn wait_unit(f: Frequency) -> &'static str {
    match f {
        Frequency::Daily => "days",
        Frequency::Weekly => "weeks",
        Frequency::Monthly => "months",
        Frequency::Quarterly => "quarters",
        _ => "periods",
    }
}

/// The default waits of a frequency (before the real post length is added and the pre-period's
/// room applied).
pub fn default_waits(f: Frequency) -> Vec<usize> {
    match f {
        Frequency::Daily => vec![7, 14, 28, 56],
        Frequency::Weekly => vec![2, 4, 8, 13, 26],
        Frequency::Monthly => vec![3, 6, 12],
        Frequency::Quarterly => vec![2, 4, 8],
        _ => vec![5, 10, 20, 40],
    }
}

/// The waits a plan shows: the user's, or the defaults plus the real post length; only those
/// the pre-period has room for (`room` = pre-period length minus the shortest fitting span),
/// with a warning for any left out.
///
/// # Errors
/// Bad input when no wait fits.
pub fn waits(
    asked: &[usize],
    freq: Frequency,
    post_len: usize,
    room: usize,
    what: &str,
) -> anyhow::Result<(Vec<usize>, Option<String>)> {
    let unit = wait_unit(freq);
    let mut w: Vec<usize> = if asked.is_empty() {
        let mut d = default_waits(freq);
        if post_len > 0 {
            d.push(post_len);
        }
        d
    } else {
        asked.to_vec()
    };
    if w.contains(&0) {
        return Err(bad_input_msg("--waits: every wait must be at least 1 period"));
    }
    w.sort_unstable();
    w.dedup();
    let (keep, drop): (Vec<usize>, Vec<usize>) = w.into_iter().partition(|x| *x <= room);
    if room == 0 {
        return Err(bad_input_msg(format!(
            "{what}: the pre-period is no longer than the shortest fitting span, so no placebo window fits before the change; give more history, an earlier series, or a smaller --min-train"
        )));
    }
    if keep.is_empty() {
        return Err(bad_input_msg(format!(
            "{what}: the pre-period leaves room for placebo windows of at most {room} {unit} after the shortest fitting span, too short for any wait asked ({}); give shorter --waits, a smaller --min-train, or more history",
            drop.iter().map(ToString::to_string).collect::<Vec<_>>().join(", ")
        )));
    }
    let note = (!drop.is_empty()).then(|| {
        format!(
            "waits of {} {unit} cannot be checked and are left out of the plan: placebo windows must end before the real change and start after the shortest fitting span, which leaves room for {room} {unit}; a smaller --min-train or more history would check them",
            drop.iter().map(ToString::to_string).collect::<Vec<_>>().join(", ")
        )
    });
    Ok((keep, note))
}

/// Ctrl-C handling for a plan's runs (their progress is shown by the stage line every verb
/// shows on a terminal: the runs are drawn in parallel and counted as they finish).
pub(crate) struct Watch {
    flag: std::sync::Arc<std::sync::atomic::AtomicBool>,
}

impl Watch {
    /// Watch a plan's runs.
    ///
    /// # Errors
    /// When Ctrl-C cannot be handled.
    pub(crate) fn new() -> anyhow::Result<Watch> {
        let flag = crate::progress::stop_flag().map_err(|m| anyhow::anyhow!("cannot handle Ctrl-C: {m}"))?;
        Ok(Watch { flag })
    }

    /// The run control over the watched runs, writing finished runs to `partial`.
    pub(crate) fn control<'a>(&'a self, partial: Option<&'a std::path::Path>) -> RunControl<'a> {
        RunControl { stop: Some(&self.flag), partial, progress: None }
    }
}

/// The outcome of a plan from placebo runs: the estimate with its notes, the headline, the
/// table, and the interruption message when the user stopped it.
pub(crate) fn placebo_outcome(
    report: &backtest::BacktestReport,
    notes: Vec<String>,
    common: &Common,
    inputs: Vec<aftercast_core::InputInfo>,
    headline: String,
    partial: Option<&std::path::Path>,
) -> anyhow::Result<crate::verbs::Outcome> {
    let mut est = report.estimate();
    for n in notes {
        est.warn(n);
    }
    let mut out = crate::verbs::Outcome::new(est, &common.inference(), inputs, headline)?;
    out.tables.push(plan_table(&report.planning));
    if report.interrupted {
        out.interrupted = Some(format!(
            "{} of {} placebo runs finished; the results above and in the outputs cover them{}",
            report.origins_completed,
            report.origins_planned,
            partial.map(|p| format!(" (each is also in {})", p.display())).unwrap_or_default()
        ));
    }
    Ok(out)
}

fn plan_forecast(f: &ForecastPlanArgs) -> anyhow::Result<crate::verbs::Outcome> {
    let a = &f.analysis;
    let setup = forecast::setup(a, false)?;
    let mut model = aftercast_calibrate::adapters::forecast::ForecastPlan::new(
        &setup.series,
        setup.split,
        &setup.params,
        setup.events.as_ref(),
    )
    .map_err(forecast::classify)?;
    let pre = setup.split.pre_end;
    // a span given by the user is of fitted periods: the washout comes on top, as for the default
    let min_train = f.time.min_train.map_or_else(|| model.min_train(), |m| m + a.washout);
    let pre_values: Vec<f64> =
        setup.series.outcome[..setup.split.pre_end].iter().copied().filter(|v| v.is_finite()).collect();
    let level = pre_values.iter().sum::<f64>() / pre_values.len().max(1) as f64;
    if level.is_nan() || level <= 0.0 {
        return Err(bad_input_msg(format!(
            "plan forecast: lifts are percentages of the counterfactual, but '{}' averages {level} before --start; plan a series whose level is positive (e.g. counts or revenue)",
            a.outcome
        )));
    }
    let freq = setup.series.frequency();
    let (waits, note) =
        waits(&f.time.waits, freq, setup.split.post_len(), pre.saturating_sub(min_train), "plan forecast")?;
    let spec = spec_of(&f.plan, &a.common, waits, min_train, wait_unit(freq));
    {
        let _stage =
            aftercast_core::progress::stage("choosing and fitting the analysis's model on the pre-period", None);
        model.choose(spec.horizon()).map_err(forecast::classify)?;
    }
    let y = &setup.series.outcome[..pre];
    let data =
        BacktestData { name: &setup.series.name, y, controls: &[], times: Some(&setup.series.axis.points()[..pre]) };
    let watch = Watch::new()?;
    let report = {
        let _stage = aftercast_core::progress::stage(format!("{} placebo dates", spec.placebos), None);
        backtest::run(&model, &data, &spec, &watch.control(f.time.partial.as_deref())).map_err(classify)?
    };
    let headline = format!(
        "plan for '{}' before {}: {} of {} placebo dates, each fitted as the analysis will be{}",
        a.outcome,
        a.start,
        report.origins_completed,
        report.origins_planned,
        if report.interrupted { " (interrupted)" } else { "" },
    );
    placebo_outcome(&report, note.into_iter().collect(), &a.common, setup.inputs, headline, f.time.partial.as_deref())
}

/// The backtest settings of a plan.
pub(crate) fn spec_of(
    plan: &PlanOptions,
    common: &Common,
    waits: Vec<usize>,
    min_train: usize,
    unit: &str,
) -> BacktestSpec {
    let mut spec = BacktestSpec::new(waits, min_train);
    spec.placebos = plan.placebos;
    spec.lifts = plan.lifts.clone();
    spec.power = plan.power;
    spec.draws = usize::try_from(common.draws).unwrap_or(usize::MAX);
    spec.level = common.level;
    spec.seed = common.seed;
    spec.wait_unit = unit.to_string();
    spec
}

/// The plan as a table: per wait, the smallest lift seen at the target power and the power at
/// each lift asked.
pub(crate) fn plan_table(p: &aftercast_core::result::Planning) -> aftercast_report::Table {
    use aftercast_report::numbers::percent;
    let mut lifts: Vec<f64> = p.power.iter().map(|x| x.lift).collect();
    lifts.sort_by(f64::total_cmp);
    lifts.dedup();
    let units = p.wait_unit == "units";
    let first = if units { "units".to_string() } else { format!("wait ({})", p.wait_unit) };
    let mut headers = vec![first, format!("smallest lift seen at {:.0}% power", 100.0 * p.target_power)];
    headers.extend(lifts.iter().map(|l| format!("power at {}", percent(*l))));
    let rows = p
        .mde
        .iter()
        .map(|m| {
            let mut row = vec![
                m.wait.to_string(),
                m.mde.map_or("not reached".into(), |v| percent(v).trim_start_matches('+').to_string()),
            ];
            for l in &lifts {
                let x = p.power.iter().find(|x| x.wait == m.wait && x.lift == *l);
                // floored, so a power shown at the target has reached it
                row.push(
                    x.filter(|x| x.power.is_finite())
                        .map_or("n/a".into(), |x| format!("{:.0}%", (100.0 * x.power + 1e-9).floor())),
                );
            }
            row
        })
        .collect();
    let fp = &p.false_positive_rate;
    aftercast_report::Table {
        title: if units { "How many units".into() } else { "How long to wait".into() },
        headers,
        rows,
        note: Some(format!(
            "False positives where nothing happened: {:.0}% of {} placebo runs ({:.0}% interval {:.0}% to {:.0}%); the interval level allows {:.0}%. The answer's waits are checked at every step, not only the rows shown: each is the first from which the power stays at the target for every longer wait.",
            100.0 * fp.rate,
            fp.placebos,
            100.0 * p.level,
            100.0 * fp.lower,
            100.0 * fp.upper,
            100.0 * (1.0 - p.level)
        )),
    }
}
