//! `aftercast match`: propensity-score matching and weighting on a unit table.

use crate::common::{Common, DataOptions};
use crate::failure::bad_input;
use aftercast_core::units::UnitTable;
use aftercast_match::{Caliper, Estimand, MatchParams, Method, SeparationPolicy, Trim};
use std::path::PathBuf;

/// Arguments of `match` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Unit table (CSV, or Parquet by extension .parquet or .pq): one row per unit.
    #[arg(long)]
    pub data: PathBuf,
    /// Treatment column (1/0, true/false, yes/no, treated/control).
    #[arg(long)]
    pub treatment: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Covariates of the propensity model, comma-separated (numeric unless named in --categorical).
    #[arg(long, required = true, value_delimiter = ',')]
    pub covariates: Vec<String>,
    /// Categorical covariates (one-hot coded), comma-separated; a column named here is a
    /// covariate of the propensity model whether or not --covariates lists it.
    #[arg(long, value_delimiter = ',')]
    pub categorical: Vec<String>,
    /// Optional unit id column (checked for duplicates).
    #[arg(long)]
    pub id: Option<String>,
    /// Estimator: nearest, strata, ipw, overlap, aipw.
    #[arg(long, default_value = "nearest")]
    pub method: Method,
    /// Estimand: att or ate (overlap weights always estimate the overlap-population effect).
    #[arg(long, default_value = "att")]
    pub estimand: Estimand,
    /// Caliper in standard deviations of the logit of the propensity score, or `none`.
    #[arg(long, default_value = "0.2")]
    pub caliper: Caliper,
    /// Match with replacement.
    #[arg(long)]
    pub replace: bool,
    /// Matches per unit.
    #[arg(long, default_value_t = 1)]
    pub k: usize,
    /// Categorical columns to match exactly on, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub exact: Vec<String>,
    /// Among controls within the caliper, choose by Mahalanobis distance on the covariates.
    #[arg(long)]
    pub mahalanobis: bool,
    /// Bias-corrected matching (Abadie & Imbens 2011): each matched outcome is corrected by a
    /// regression on the covariates for the covariate gap left between the pair.
    #[arg(long)]
    pub bias_correct: bool,
    /// Add squares of these numeric covariates, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub squares: Vec<String>,
    /// Add products `a:b`, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub interact: Vec<String>,
    /// Further terms, comma-separated: `tenure_months^3`, `spend_pre^2:visits_pre`,
    /// `zero(spend_pre)`, `log1p(spend_pre)`.
    #[arg(long, value_delimiter = ',')]
    pub terms: Vec<aftercast_match::design::Term>,
    /// Pre-period outcome column: estimate on the change (matched difference-in-differences).
    #[arg(long)]
    pub pre_outcome: Option<String>,
    /// Common-support trimming: none, minmax, crump, or a limit a (keep a <= e <= 1-a).
    #[arg(long, default_value = "none")]
    pub trim: Trim,
    /// Number of propensity strata (--method strata).
    #[arg(long, default_value_t = 5)]
    pub strata: usize,
    /// L2 penalty on the standardised propensity coefficients (0 = maximum likelihood).
    #[arg(long, default_value_t = 0.0)]
    pub penalty: f64,
    /// On separation of the groups: `penalise` (warn, refit with penalty 1) or `error`.
    #[arg(long, default_value = "penalise")]
    pub separation: SeparationPolicy,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Read the unit table and check the flags of a matching analysis: the table and the
/// parameters `match` fits and `plan match` simulates with.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns and bad options.
pub fn setup(a: &Args) -> anyhow::Result<(UnitTable, MatchParams)> {
    // a categorical column is a covariate even when only --categorical names it
    let mut covariates = a.covariates.clone();
    for c in &a.categorical {
        if !covariates.contains(c) {
            covariates.push(c.clone());
        }
    }
    let exact = a.exact.clone();
    let mut params = MatchParams::new(covariates.clone())
        .squares(a.squares.clone())
        .interact(a.interact.clone())
        .map_err(bad_input)?;
    params = params.terms(a.terms.iter().cloned());
    params = params.exact(exact);
    if let Some(p) = &a.pre_outcome {
        params = params.pre_outcome(p.clone());
    }
    let spec = params.unit_spec(&a.treatment, &a.outcome, &a.categorical.clone(), a.id.clone(), a.data_options.missing);
    let units = UnitTable::read(&a.data, &spec)?;
    params = params
        .method(a.method)
        .estimand(a.estimand)
        .k(a.k)
        .replace(a.replace)
        .caliper(a.caliper)
        .mahalanobis(a.mahalanobis)
        .bias_correct(a.bias_correct)
        .trim(a.trim)
        .strata(a.strata)
        .penalty(a.penalty)
        .separation(a.separation)
        .inference(a.common.inference());
    Ok((units, params))
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns and options, separation with
/// `--separation error`, no overlap, no match within the caliper; internal failures otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    let (units, params) = setup(a)?;
    let method = a.method;
    let inf = params.inference;
    let (fitted, est) = aftercast_match::run(&units, &a.outcome, params).map_err(bad_input)?;
    let headline = format!(
        "{} of '{}' on '{}'{} by {} ({} treated, {} controls used, {} treated left out)",
        fitted.estimand,
        a.treatment,
        a.outcome,
        a.pre_outcome.as_ref().map(|p| format!(" minus '{p}'")).unwrap_or_default(),
        method.name(),
        fitted.counts.treated,
        fitted.counts.controls_used,
        fitted.counts.treated_unmatched + fitted.counts.treated_trimmed
    );
    crate::verbs::Outcome::new(est, &inf, vec![units.input.clone()], headline)
}
