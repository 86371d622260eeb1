//! `aftercast compare`: observational estimates against a randomized experiment's answer, and
//! the per-method summary of a comparison history.

use crate::common::{Common, DataOptions, read_table};
use crate::failure::{bad_input, bad_input_msg};
use aftercast_calibrate::adapters::matching::MatchEstimator;
use aftercast_calibrate::history;
use aftercast_calibrate::sample::{UnitCompareSpec, read_experiment, read_pool};
use aftercast_calibrate::{CalibrateError, Naive, Regression, RegressionKind, UnitEstimator, compare_units};
use aftercast_match::Method;
use aftercast_report::Table;
use aftercast_report::numbers::{decimals_for, signed};
use std::path::PathBuf;

/// Arguments of `compare` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The randomized experiment: one row per unit with the arm, outcome and covariates.
    #[arg(long, required_unless_present_any = ["summarize", "arms_data", "plasmode"])]
    pub experiment: Option<PathBuf>,
    /// Randomized arm column of the experiment (treated/control, 1/0, ...).
    #[arg(long, required_unless_present_any = ["summarize", "arms_data", "plasmode"])]
    pub arm: Option<String>,
    /// Outcome column (in the experiment and in every pool).
    #[arg(long, required_unless_present_any = ["summarize", "arms_data"])]
    pub outcome: Option<String>,
    /// A non-experimental pool of untreated units (repeat for several pools).
    #[arg(long, required_unless_present_any = ["summarize", "arms_data", "plasmode"])]
    pub pool: Vec<PathBuf>,
    /// Numeric covariates, comma-separated (in the experiment and in every pool).
    #[arg(long, required_unless_present_any = ["summarize", "arms_data"], value_delimiter = ',')]
    pub covariates: Vec<String>,
    /// Observational methods, comma-separated: naive, regression, regression-imputation,
    /// nearest, strata, ipw, overlap, aipw.
    #[arg(
        long,
        value_delimiter = ',',
        default_value = "naive,regression,regression-imputation,nearest,strata,ipw,overlap,aipw"
    )]
    pub methods: Vec<String>,
    /// Extra propensity-model terms for the matching methods: `spend_pre^2`, `zero(spend_pre)`,
    /// `visits_pre:tenure_months`.
    #[arg(long, value_delimiter = ',')]
    pub terms: Vec<aftercast_match::design::Term>,
    /// Plasmode simulation instead of an experiment: a unit table whose covariates and
    /// treatment are kept while outcomes are simulated with a known effect (--effect), so each
    /// method is compared with a truth known by construction (with --treatment, --covariates).
    #[arg(long, conflicts_with_all = ["experiment", "summarize", "arms_data"])]
    pub plasmode: Option<PathBuf>,
    /// Treatment column of the --plasmode table.
    #[arg(long, default_value = "treatment")]
    pub treatment: String,
    /// The known effect added to the treated units' simulated outcomes (outcome units).
    #[arg(long, default_value_t = 0.0, allow_negative_numbers = true)]
    pub effect: f64,
    /// Simulated data sets of --plasmode.
    #[arg(long, default_value_t = 100)]
    pub replicates: usize,
    /// Append each comparison (method, setting, truth, estimate, interval) to this JSON-lines file.
    #[arg(long)]
    pub history: Option<PathBuf>,
    /// Summarise a history file per method instead (mean bias, RMSE, coverage, inflation factor).
    #[arg(long)]
    pub summarize: Option<PathBuf>,
    /// Series-level comparison instead: a file of per-period totals of both arms of a past
    /// experiment (with --time, --treated-arm, --control-arm, --start, --end).
    #[arg(long)]
    pub arms_data: Option<PathBuf>,
    /// Time column of --arms-data.
    #[arg(long, default_value = "date")]
    pub time: String,
    /// Treated-arm total column of --arms-data.
    #[arg(long, default_value = "treated")]
    pub treated_arm: String,
    /// Control-arm total column of --arms-data.
    #[arg(long, default_value = "control")]
    pub control_arm: String,
    /// Traffic shares of the treated and control arms, `T:C` (e.g. 0.5:0.5 or 0.1:0.9).
    #[arg(long, default_value = "0.5:0.5")]
    pub allocation: String,
    /// First period of the test window (--arms-data).
    #[arg(long)]
    pub start: Option<String>,
    /// Last period of the test window (--arms-data; default: the end of the file).
    #[arg(long)]
    pub end: Option<String>,
    /// Control series untouched by the test, comma-separated (regressors of the forecast model).
    #[arg(long, value_delimiter = ',')]
    pub controls: Vec<String>,
    /// Other segments untouched by the test, comma-separated (donors of the synthetic control).
    #[arg(long, value_delimiter = ',')]
    pub donors: Vec<String>,
    /// Segment column (text) of the experiment and the pools: the comparison is run within each
    /// segment (its own truth, each method fitted on the segment's units), and the experiment's
    /// answer is pooled over the segments by their treated units.
    #[arg(long, conflicts_with_all = ["summarize", "arms_data", "plasmode"])]
    pub by: Option<String>,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Exit code 2 for the errors the input causes; internal failure otherwise.
pub(crate) fn classify(e: CalibrateError) -> anyhow::Error {
    match e {
        CalibrateError::Io { .. } | CalibrateError::Interrupted => anyhow::Error::new(e),
        CalibrateError::Data(d) => anyhow::Error::new(d),
        other => bad_input(other),
    }
}

/// The per-method table of a comparison history.
fn history_table(rows: &[history::MethodSummary]) -> Table {
    let d = decimals_for(&rows.iter().flat_map(|r| [r.mean_bias, r.rmse]).collect::<Vec<_>>());
    Table {
        title: "How far each method has landed from experimental truths".into(),
        headers: vec![
            "method".into(),
            "records".into(),
            "mean bias".into(),
            "mean relative bias".into(),
            "RMSE".into(),
            "coverage".into(),
            "widen intervals by".into(),
        ],
        rows: rows
            .iter()
            .map(|r| {
                vec![
                    r.method.clone(),
                    r.records.to_string(),
                    signed(r.mean_bias, d),
                    r.mean_relative_bias.map_or("n/a".into(), aftercast_report::numbers::percent),
                    signed(r.rmse, d).trim_start_matches('+').to_string(),
                    format!("{:.0}% at {:.0}%", 100.0 * r.coverage, 100.0 * r.level),
                    format!("x{:.2}", r.inflation_factor),
                ]
            })
            .collect(),
        note: Some(
            "Widen a new interval of a method by its factor before trusting its nominal level (docs/calibrate.md)."
                .into(),
        ),
    }
}

fn summarize_history(a: &Args, path: &std::path::Path) -> anyhow::Result<crate::verbs::Outcome> {
    let records = history::read(path).map_err(|e| match e {
        CalibrateError::Io { .. } => bad_input(e),
        other => classify(other),
    })?;
    if records.is_empty() {
        return Err(bad_input_msg(format!("{}: the history holds no comparison", path.display())));
    }
    let est = history::estimate(&records).map_err(classify)?;
    let table = history_table(&est.diagnostics.history_summary);
    let headline = format!("history of {} comparisons ({})", records.len(), path.display());
    let mut out = crate::verbs::Outcome::new(est, &a.common.inference(), Vec::new(), headline)?;
    out.tables.push(table);
    Ok(out)
}

fn compare_arm_series(a: &Args, path: &std::path::Path) -> anyhow::Result<crate::verbs::Outcome> {
    use aftercast_calibrate::adapters::forecast::StructuralModel;
    use aftercast_calibrate::adapters::synthetic::SyntheticModel;
    use aftercast_calibrate::backtest::PathModel;
    use aftercast_calibrate::series::{ArmSeries, compare_series};
    use aftercast_core::series::{Series, SeriesSpec};
    let controls = a.controls.clone();
    let donors = a.donors.clone();
    let mut cols = vec![a.control_arm.clone()];
    cols.extend(controls.iter().cloned());
    cols.extend(donors.iter().cloned());
    let spec = SeriesSpec {
        time: a.time.clone(),
        outcome: a.treated_arm.clone(),
        controls: cols,
        date_format: a.data_options.date_format(),
        missing: a.data_options.missing,
        gaps: a.data_options.gaps,
    };
    let table = read_table(path, &spec.projection())?;
    let series = Series::from_table(&table, &spec)?;
    let start = a.start.clone().ok_or_else(|| bad_input_msg("--start is required with --arms-data"))?;
    let split = series.split(&start, a.end.as_deref(), 0, 3)?;
    let (ts, cs) = a
        .allocation
        .split_once(':')
        .ok_or_else(|| bad_input_msg(format!("--allocation '{}': write T:C, e.g. 0.5:0.5", a.allocation)))?;
    let share = |t: &str| crate::common::parse_arg::<f64>("--allocation", t);
    let col =
        |name: &String| series.controls.iter().find(|(n, _)| n == name).map(|(_, v)| v.clone()).unwrap_or_default();
    let arms = ArmSeries {
        name: series.name.clone(),
        treated: series.outcome.clone(),
        control: col(&a.control_arm),
        treated_share: share(ts)?,
        control_share: share(cs)?,
        window_start: split.post_start,
        window_end: split.post_end,
        controls: controls.iter().map(|n| (n.clone(), col(n))).collect(),
        donors: donors.iter().map(|n| (n.clone(), col(n))).collect(),
        inputs: vec![series.input.clone()],
    };
    let daily = series.frequency() == aftercast_core::time::Frequency::Daily;
    let forecast = if daily { StructuralModel::daily() } else { StructuralModel::local_level() };
    let synthetic = SyntheticModel { level: a.common.level, ..SyntheticModel::default() };
    let donor_models: Vec<&dyn PathModel> = if donors.is_empty() { Vec::new() } else { vec![&synthetic] };
    let inf = a.common.inference();
    let c = compare_series(&arms, &[&forecast], &donor_models, &inf).map_err(classify)?;
    if let Some(h) = &a.history {
        history::append(h, &c.history_records()).map_err(classify)?;
    }
    let headline = format!(
        "series methods against a past experiment on '{}' ({} window periods)",
        a.treated_arm,
        split.post_len()
    );
    crate::verbs::Outcome::new(c.estimate(), &inf, c.inputs.clone(), headline)
}

/// The unit-level methods named in a comma list.
///
/// # Errors
/// Bad input for an unknown name.
pub(crate) fn methods_from(
    list: &[String],
    terms: &[aftercast_match::design::Term],
) -> anyhow::Result<Vec<Box<dyn UnitEstimator>>> {
    let mut methods: Vec<Box<dyn UnitEstimator>> = Vec::new();
    for m in list.iter().map(|m| m.trim()).filter(|m| !m.is_empty()) {
        methods.push(match m {
            "naive" => Box::new(Naive),
            "regression" => Box::new(Regression { kind: RegressionKind::Coefficient }),
            "regression-imputation" => Box::new(Regression { kind: RegressionKind::Imputation }),
            other => {
                let method: Method = other.parse().map_err(|_| {
                    bad_input_msg(format!(
                        "--methods: unknown method '{other}' (naive, regression, regression-imputation, nearest, strata, ipw, overlap, aipw)"
                    ))
                })?;
                Box::new(MatchEstimator::new(method, terms.to_vec()))
            }
        });
    }
    Ok(methods)
}

/// Plasmode simulation: every method against a known effect on simulated outcomes.
fn run_plasmode(a: &Args, path: &std::path::Path) -> anyhow::Result<crate::verbs::Outcome> {
    use aftercast_calibrate::plasmode::{PlasmodeSpec, plasmode};
    use aftercast_core::units::{UnitSpec, UnitTable};
    let outcome = a.outcome.clone().ok_or_else(|| bad_input_msg("--outcome is required with --plasmode"))?;
    if a.covariates.is_empty() {
        return Err(bad_input_msg("--covariates is required with --plasmode"));
    }
    let spec = UnitSpec {
        treatment: a.treatment.clone(),
        outcomes: vec![outcome.clone()],
        numeric: a.covariates.clone(),
        missing: a.data_options.missing,
        ..Default::default()
    };
    let units = UnitTable::read(path, &spec)?;
    let methods = methods_from(&a.methods, &a.terms)?;
    let refs: Vec<&dyn UnitEstimator> = methods.iter().map(|m| m.as_ref()).collect();
    let opts = a.common.inference();
    let pspec = PlasmodeSpec { effect: a.effect, replicates: a.replicates };
    let reports = plasmode(&units, &outcome, &a.covariates, &refs, &pspec, &opts).map_err(classify)?;
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
/// Bad input (exit 2) for unreadable files, unknown columns, unknown methods, empty arms;
/// internal failures (exit 1) for an unwritable history file.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    if let Some(p) = &a.plasmode {
        return run_plasmode(a, p);
    }
    if let Some(p) = &a.summarize {
        return summarize_history(a, p);
    }
    if let Some(p) = &a.arms_data {
        return compare_arm_series(a, p);
    }
    let need = |v: &Option<String>, flag: &str| v.clone().ok_or_else(|| bad_input_msg(format!("{flag} is required")));
    let spec = UnitCompareSpec {
        arm: need(&a.arm, "--arm")?,
        outcome: need(&a.outcome, "--outcome")?,
        covariates: a.covariates.clone(),
        missing: a.data_options.missing,
    };
    let exp_path = a.experiment.clone().ok_or_else(|| bad_input_msg("--experiment is required"))?;
    let experiment =
        read_experiment(&read_table(&exp_path, &spec.experiment_projection())?, &spec).map_err(classify)?;
    let mut pools = Vec::new();
    for p in &a.pool {
        pools.push(read_pool(&read_table(p, &spec.pool_projection())?, &spec, None).map_err(classify)?);
    }
    let methods = methods_from(&a.methods, &a.terms)?;
    let refs: Vec<&dyn UnitEstimator> = methods.iter().map(|m| m.as_ref()).collect();
    let inf = a.common.inference();
    if let Some(by) = &a.by {
        return compare_by(a, by, &exp_path, &experiment, &pools, &spec, &refs, &inf);
    }
    let c = compare_units(&experiment, &pools, &spec, &refs, &inf).map_err(classify)?;
    if let Some(h) = &a.history {
        history::append(h, &c.history_records()).map_err(classify)?;
    }
    let headline = format!(
        "observational methods against a randomized experiment on '{}' ({} treated, {} control)",
        spec.outcome,
        experiment.n_treated(),
        experiment.len() - experiment.n_treated(),
    );
    crate::verbs::Outcome::new(c.estimate(), &inf, c.inputs.clone(), headline)
}

/// `compare --by`: the comparison within each segment (the experiment's units and every pool's
/// units of that segment), with its own random stream. The headline is the experiment's answer
/// pooled over the segments by treated units; each method's row is kept per segment and judged
/// against that segment's own experimental answer.
#[allow(clippy::too_many_arguments)]
fn compare_by(
    a: &Args,
    by: &str,
    exp_path: &std::path::Path,
    experiment: &aftercast_core::units::UnitTable,
    pools: &[aftercast_calibrate::sample::Pool],
    spec: &UnitCompareSpec,
    methods: &[&dyn UnitEstimator],
    inf: &aftercast_core::Inference,
) -> anyhow::Result<crate::verbs::Outcome> {
    let exp_seg = crate::common::segments_by_line(exp_path, by)?;
    let pool_segs: Vec<std::collections::HashMap<u64, String>> =
        a.pool.iter().map(|p| crate::common::segments_by_line(p, by)).collect::<anyhow::Result<_>>()?;
    let seg_of_exp: Vec<String> =
        experiment.lines.iter().map(|l| exp_seg.get(l).cloned().unwrap_or_default()).collect();
    let names = crate::common::ordered_segments(&seg_of_exp);
    let mut parts = Vec::new();
    let mut left_out = Vec::new();
    let mut rows = Vec::new();
    for name in &names {
        let idx: Vec<usize> = (0..experiment.len()).filter(|&i| seg_of_exp[i] == *name).collect();
        let part = experiment.take(&idx);
        let treated = part.n_treated();
        if treated < 2 || part.len() - treated < 2 {
            left_out.push((
                name.clone(),
                format!(
                    "the experiment has {treated} treated and {} control units in it; at least 2 of each are needed",
                    part.len() - treated
                ),
            ));
            continue;
        }
        let sub_pools: Vec<aftercast_calibrate::sample::Pool> = pools
            .iter()
            .zip(&pool_segs)
            .map(|(p, segs)| {
                let keep: Vec<usize> = (0..p.lines.len()).filter(|&i| segs.get(&p.lines[i]) == Some(name)).collect();
                aftercast_calibrate::sample::Pool {
                    name: p.name.clone(),
                    input: p.input.clone(),
                    lines: keep.iter().map(|&i| p.lines[i]).collect(),
                    outcome: keep.iter().map(|&i| p.outcome[i]).collect(),
                    numeric: p.numeric.iter().map(|(n, v)| (n.clone(), keep.iter().map(|&i| v[i]).collect())).collect(),
                    dropped_rows: 0,
                }
            })
            .collect();
        if sub_pools.iter().all(|p| p.lines.len() < 2) {
            left_out.push((name.clone(), "no pool has at least 2 units in it".into()));
            continue;
        }
        let seg_inf = aftercast_core::Inference {
            seed: aftercast_resample::rng::child_seed(inf.seed, &format!("segment-{name}")),
            ..*inf
        };
        match compare_units(&part, &sub_pools, spec, methods, &seg_inf) {
            Ok(c) => {
                let est = c.estimate();
                if let Some(es) = &est.sections.estimates {
                    rows.extend(es.iter().map(|r| aftercast_core::result::EstimateRow {
                        method: format!("{name} · {}", r.method),
                        ..r.clone()
                    }));
                }
                parts.push(aftercast_resample::segments::Segment {
                    name: name.clone(),
                    estimate: est,
                    weight: treated as f64,
                    units: treated,
                });
            }
            Err(e) => left_out.push((name.clone(), e.to_string())),
        }
    }
    let mut est = aftercast_resample::segments::pool(by, "weighted by the experiment's treated units", parts, left_out)
        .map_err(bad_input)?;
    if let (aftercast_core::Point::Scalar { effect, .. }, aftercast_core::EffectDraws::Scalar { effect: draws, .. }) =
        (&est.point, &est.draws)
    {
        est.sections.truth = Some(aftercast_resample::summarize(draws, inf.level, None).with_estimate(*effect));
    }
    est.sections.estimates = Some(rows);
    let headline = format!(
        "observational methods against a randomized experiment on '{}', within each segment of '{by}' ({} segments)",
        spec.outcome,
        names.len()
    );
    let mut inputs = vec![experiment.input.clone()];
    inputs.extend(pools.iter().map(|p| p.input.clone()));
    crate::verbs::Outcome::new(est, inf, inputs, headline)
}
