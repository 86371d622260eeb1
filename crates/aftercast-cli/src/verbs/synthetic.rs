//! `aftercast synthetic`: synthetic control of treated units from a panel of donors.

use crate::common::{Common, DataOptions, read_table};
use crate::failure::{bad_input, bad_input_msg};
use aftercast_core::panel::{LongPanelSpec, Panel};
use aftercast_synth::{Aggregation, Method, RunOptions, SynthParams};
use std::path::PathBuf;

/// Arguments of `synthetic` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Panel in long format (CSV, or Parquet by extension .parquet or .pq): one row per unit and period.
    #[arg(long)]
    pub data: PathBuf,
    /// Unit column.
    #[arg(long)]
    pub unit: String,
    /// Time column (ISO dates or integer periods).
    #[arg(long)]
    pub time: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Treated unit(s), comma-separated.
    #[arg(long, required = true, value_delimiter = ',')]
    pub treated: Vec<String>,
    /// First period of the change (date or integer period, as in the time column).
    #[arg(long)]
    pub start: String,
    /// Last period used (default: the end of the data).
    #[arg(long)]
    pub end: Option<String>,
    /// Estimator: weights, predictors, intercept, ridge, sdid.
    #[arg(long, default_value = "weights")]
    pub method: Method,
    /// Covariate columns used as predictors (averaged over the pre-period), comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub predictors: Vec<String>,
    /// Number of pre-period outcome block averages used as predictors.
    #[arg(long, default_value_t = 3)]
    pub outcome_blocks: usize,
    /// Units left out of the donor pool, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub exclude: Vec<String>,
    /// Drop placebos whose pre-period RMSPE exceeds K times the treated unit's.
    #[arg(long)]
    pub placebo_exclude: Option<f64>,
    /// Fixed ridge penalty for --method ridge (default: cross-validated).
    #[arg(long)]
    pub ridge_lambda: Option<f64>,
    /// Column giving each unit's size: several treated units are averaged with their
    /// pre-period mean of this column as weights (default: plain mean).
    #[arg(long)]
    pub size: Option<String>,
    /// Skip conformal inference, placebo in time and leave-one-out.
    #[arg(long)]
    pub no_robustness: bool,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// A synthetic-control set-up read from the flags. `synthetic` fits it; `plan synthetic`
/// runs placebo dates and placebo units of it.
pub struct Setup {
    /// The panel.
    pub panel: Panel,
    /// The treated units.
    pub treated: Vec<String>,
    /// The first period of the change.
    pub start: aftercast_core::TimePoint,
    /// The checked parameters.
    pub params: aftercast_synth::ValidParams,
    /// The input file.
    pub input: aftercast_core::InputInfo,
}

/// Read the panel and check the flags of a synthetic-control analysis.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, bad times or options.
pub fn setup(a: &Args) -> anyhow::Result<Setup> {
    let mut covariates = a.predictors.clone();
    if let Some(s) = &a.size
        && !covariates.contains(s)
    {
        covariates.push(s.clone());
    }
    let spec = LongPanelSpec {
        unit: a.unit.clone(),
        time: a.time.clone(),
        outcome: a.outcome.clone(),
        covariates: covariates.clone(),
        date_format: a.data_options.date_format(),
    };
    let table = read_table(&a.data, &spec.projection())?;
    let panel = Panel::from_long(&table, &spec)?;
    let treated = a.treated.clone();
    if treated.is_empty() {
        return Err(bad_input_msg("--treated: name at least one treated unit"));
    }
    let start = panel.axis.parse_user_time("--start", &a.start)?;
    let end = match &a.end {
        Some(e) => Some(panel.axis.parse_user_time("--end", e)?),
        None => None,
    };
    let aggregate = match &a.size {
        None => Aggregation::Mean,
        Some(col) => Aggregation::BySize(col.clone()),
    };
    let params = SynthParams::new()
        .method(a.method)
        .inference(a.common.inference())
        .end(end)
        .exclude(a.exclude.clone())
        .placebo_exclude_factor(a.placebo_exclude)
        .predictors(a.predictors.clone())
        .predictor_outcome_blocks(a.outcome_blocks)
        .ridge_lambda(a.ridge_lambda)
        .aggregate(aggregate)
        .sdid_placebo_reps(usize::try_from(a.common.draws).unwrap_or(usize::MAX).clamp(20, 500))
        .check()
        .map_err(bad_input)?;
    Ok(Setup { panel, treated, start, params, input: table.info() })
}

/// Errors of a synthetic fit: a solver that could not reach a usable answer is our failure
/// (exit 1), everything else the input's (exit 2).
pub(crate) fn classify(e: aftercast_synth::SynthError) -> anyhow::Error {
    match e {
        aftercast_synth::SynthError::NotConverged { .. } | aftercast_synth::SynthError::Numerical { .. } => {
            anyhow::Error::new(e)
        }
        other => bad_input(other),
    }
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns, units or options, too few donors or
/// pre-periods, constant treated series; internal failures otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    let Setup { panel, treated, start, params, input } = setup(a)?;
    let method = a.method;
    let inf = a.common.inference();
    let opts = RunOptions { robustness: !a.no_robustness };
    let (fit, est) = aftercast_synth::run(&panel, &treated, start, &params, opts).map_err(classify)?;
    let d = &est.diagnostics;
    let rmspe = d.pre_rmspe;
    let who = if treated.len() == 1 {
        treated[0].clone()
    } else {
        format!("{} treated units (numbers per treated unit, and their total)", treated.len())
    };
    let headline = format!(
        "effect on '{}' of {who} from {} by synthetic control ({}; {} donors, {} with weight, pre-period RMSPE {})",
        a.outcome,
        a.start,
        method.name(),
        fit.donors.len(),
        d.nonzero_donors,
        aftercast_report::numbers::signed(rmspe, aftercast_report::numbers::decimals_for(&[rmspe]))
            .trim_start_matches('+'),
    );
    crate::verbs::Outcome::new(est, &inf, vec![input], headline)
}
