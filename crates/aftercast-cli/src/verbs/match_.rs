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
    /// Segment column (any text): one estimate per segment, each with its own propensity and
    /// outcome models, and the overall estimate pooled from them.
    #[arg(long)]
    pub by: Option<String>,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// The segment of each unit of a table, read from the same file by source line.
///
/// # Errors
/// Bad input for a missing column or an empty cell (located).
pub fn unit_segments(path: &std::path::Path, units: &UnitTable, by: &str) -> anyhow::Result<Vec<String>> {
    let at_line = crate::common::segments_by_line(path, by)?;
    Ok(units.lines.iter().map(|l| at_line.get(l).cloned().unwrap_or_default()).collect())
}

/// Fit every segment on its own units (own propensity and outcome models: the segment is
/// interacted with every term, which is what a separate fit is) with its own random stream,
/// and pool them weighted by the units the estimand averages over.
fn run_by(a: &Args, units: &UnitTable, params: MatchParams, by: &str) -> anyhow::Result<crate::verbs::Outcome> {
    let seg = unit_segments(&a.data, units, by)?;
    let names = crate::common::ordered_segments(&seg);
    let inf = params.inference;
    let mut parts = Vec::new();
    let mut left_out = Vec::new();
    for name in &names {
        let rows: Vec<usize> = (0..units.len()).filter(|&i| seg[i] == *name).collect();
        let part = units.take(&rows);
        let treated = part.n_treated();
        let controls = part.len() - treated;
        if treated < 2 || controls < 2 {
            left_out.push((
                name.clone(),
                format!("{treated} treated and {controls} control units; at least 2 of each are needed"),
            ));
            continue;
        }
        let p = params.clone().seed(aftercast_resample::rng::child_seed(inf.seed, &format!("segment-{name}")));
        match aftercast_match::run(&part, &a.outcome, p) {
            Ok((fitted, est)) => {
                let used = fitted
                    .counts
                    .treated
                    .saturating_sub(fitted.counts.treated_unmatched + fitted.counts.treated_trimmed);
                let weight = match a.estimand {
                    aftercast_match::Estimand::Ate => part.len(),
                    aftercast_match::Estimand::Att => used,
                };
                parts.push(aftercast_resample::segments::Segment {
                    name: name.clone(),
                    estimate: est,
                    weight: weight as f64,
                    units: used,
                });
            }
            Err(e) => left_out.push((name.clone(), e.to_string())),
        }
    }
    let weighting = match a.estimand {
        aftercast_match::Estimand::Ate => "weighted by the segment's units",
        aftercast_match::Estimand::Att => "weighted by the segment's treated units kept",
    };
    let est = aftercast_resample::segments::pool(by, weighting, parts, left_out).map_err(bad_input)?;
    let headline = format!(
        "effect of '{}' on '{}' by {} within each segment of '{by}' ({} segments)",
        a.treatment,
        a.outcome,
        a.method.name(),
        names.len()
    );
    crate::verbs::Outcome::new(est, &inf, vec![units.input.clone()], headline)
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
    if let Some(by) = &a.by {
        return run_by(a, &units, params, by);
    }
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
