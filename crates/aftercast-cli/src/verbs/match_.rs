//! `aftercast match`: propensity-score matching and weighting on a unit table.

use crate::common::{Common, DataOptions, comma_list, parse_arg, read_table};
use crate::failure::bad_input;
use aftercast_core::units::{UnitSpec, UnitTable};
use aftercast_match::{Caliper, Estimand, MatchParams, Method, SeparationPolicy, Trim};
use std::path::PathBuf;

/// Arguments of `match` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Unit table (CSV, or Parquet by extension .parquet): one row per unit.
    #[arg(long)]
    pub data: PathBuf,
    /// Treatment column (1/0, true/false, yes/no, treated/control).
    #[arg(long)]
    pub treatment: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Covariates of the propensity model, comma-separated (numeric unless named in --categorical).
    #[arg(long)]
    pub covariates: String,
    /// Which covariates are categorical (one-hot coded), comma-separated.
    #[arg(long, default_value = "")]
    pub categorical: String,
    /// Optional unit id column (checked for duplicates).
    #[arg(long)]
    pub id: Option<String>,
    /// Estimator: nearest, strata, ipw, overlap, aipw.
    #[arg(long, default_value = "nearest")]
    pub method: String,
    /// Estimand: att or ate (overlap weights always estimate the overlap-population effect).
    #[arg(long, default_value = "att")]
    pub estimand: String,
    /// Caliper in standard deviations of the logit of the propensity score, or `none`.
    #[arg(long, default_value = "0.2")]
    pub caliper: String,
    /// Match with replacement.
    #[arg(long)]
    pub replace: bool,
    /// Matches per unit.
    #[arg(long, default_value_t = 1)]
    pub k: usize,
    /// Categorical columns to match exactly on, comma-separated.
    #[arg(long, default_value = "")]
    pub exact: String,
    /// Among controls within the caliper, choose by Mahalanobis distance on the covariates.
    #[arg(long)]
    pub mahalanobis: bool,
    /// Abadie-Imbens (2011) regression bias correction of the matching estimator.
    #[arg(long)]
    pub bias_adjust: bool,
    /// Add squares of these numeric covariates, comma-separated.
    #[arg(long, default_value = "")]
    pub squares: String,
    /// Add products `a:b`, comma-separated.
    #[arg(long, default_value = "")]
    pub interact: String,
    /// Further terms, comma-separated: `age^3`, `age^2:educ`, `zero(re74)`.
    #[arg(long, default_value = "")]
    pub terms: String,
    /// Pre-period outcome column: estimate on the change (matched difference-in-differences).
    #[arg(long)]
    pub pre_outcome: Option<String>,
    /// Common-support trimming: none, minmax, crump, or a limit a (keep a <= e <= 1-a).
    #[arg(long, default_value = "none")]
    pub trim: String,
    /// Number of propensity strata (--method strata).
    #[arg(long, default_value_t = 5)]
    pub strata: usize,
    /// L2 penalty on the standardised propensity coefficients (0 = maximum likelihood).
    #[arg(long, default_value_t = 0.0)]
    pub penalty: f64,
    /// On separation of the groups: `penalise` (warn, refit with penalty 1) or `error`.
    #[arg(long, default_value = "penalise")]
    pub separation: String,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Run the verb and return the result document plus a one-line headline for the terminal.
///
/// # Errors
/// Bad input (exit 2) for unreadable data, unknown columns and options, separation with
/// `--separation error`, no overlap, no match within the caliper; internal failures otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    let table = read_table(&a.data)?;
    let covariates = comma_list(&a.covariates);
    let exact = comma_list(&a.exact);
    let mut categorical = comma_list(&a.categorical);
    for e in &exact {
        if !categorical.contains(e) {
            categorical.push(e.clone());
        }
    }
    let mut numeric: Vec<String> = covariates.iter().filter(|c| !categorical.contains(c)).cloned().collect();
    let mut outcomes = vec![a.outcome.clone()];
    if let Some(p) = &a.pre_outcome {
        outcomes.push(p.clone());
    }
    // term factors must be read as numbers too
    let mut params = MatchParams::new(covariates.clone())
        .squares(comma_list(&a.squares))
        .interact(comma_list(&a.interact))
        .map_err(bad_input)?;
    for t in comma_list(&a.terms) {
        params = params.terms([t.parse().map_err(bad_input)?]);
    }
    for t in &params.terms {
        for f in &t.factors {
            let name = match f {
                aftercast_match::design::Factor::Power { name, .. }
                | aftercast_match::design::Factor::Zero { name }
                | aftercast_match::design::Factor::Log1p { name } => name,
            };
            if !numeric.contains(name) && !categorical.contains(name) && !outcomes.contains(name) {
                numeric.push(name.clone());
            }
        }
    }
    let spec = UnitSpec {
        id: a.id.clone(),
        treatment: a.treatment.clone(),
        outcomes,
        numeric,
        categorical,
        missing: a.data_options.missing,
    };
    let units = UnitTable::from_table(&table, &spec)?;
    let caliper = if a.caliper.trim().eq_ignore_ascii_case("none") {
        Caliper::None
    } else {
        Caliper::SdOfLogit(parse_arg::<f64>("--caliper", &a.caliper)?)
    };
    let separation = match a.separation.trim() {
        "penalise" | "penalize" => SeparationPolicy::Penalise(1.0),
        "error" => SeparationPolicy::Error,
        other => {
            return Err(crate::failure::bad_input_msg(format!(
                "invalid --separation: '{other}' (use penalise or error)"
            )));
        }
    };
    let method: Method = a.method.parse().map_err(bad_input)?;
    let estimand: Estimand = a.estimand.parse().map_err(bad_input)?;
    let trim: Trim = a.trim.parse().map_err(bad_input)?;
    params = params
        .method(method)
        .estimand(estimand)
        .k(a.k)
        .replace(a.replace)
        .caliper(caliper)
        .mahalanobis(a.mahalanobis)
        .exact(exact)
        .bias_adjust(a.bias_adjust)
        .trim(trim)
        .strata(a.strata)
        .penalty(a.penalty)
        .separation(separation)
        .inference(a.common.inference());
    if let Some(p) = &a.pre_outcome {
        params = params.pre_outcome(p.clone());
    }
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
