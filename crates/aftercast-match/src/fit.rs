//! Running an analysis: propensity model, optional trimming, the estimator, its uncertainty,
//! balance, counts and sensitivity.

use crate::balance::{self, BalanceEntry, PropensityBins, Support};
use crate::design::Design;
use crate::error::{MatchError, MatchResult};
use crate::logit::{self, LogitFit, LogitOptions, PropensityReport};
use crate::nearest::{self, MatchRule};
use crate::params::{Caliper, Estimand, Method, SeparationPolicy, Trim, ValidParams};
use crate::sensitivity::{self, EValues, RosenbaumBounds};
use crate::weighting::{self, Weighting};
use aftercast_core::estimate::{Estimate, Per, Point, PropensityHistogram, Scope, SensitivityCurve};
use aftercast_core::result::{EffectDraws, SampleCounts};
use aftercast_core::units::UnitTable;
use aftercast_resample::rng::{child_seed, par_draws};
use aftercast_resample::summary::quantile_sorted;
use nalgebra::DVector;
use rand_distr::{Distribution, StandardNormal};
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

/// Newton's stopping step for the bootstrap re-fits of the propensity model (the full-sample
/// fit keeps 1e-9). Newton converges quadratically, so stopping at a step below 1e-6 leaves the
/// coefficients about (1e-6)^2 = 1e-12 from where the next step would take them: far below
/// anything a replicate's estimate can show, and it saves one pass over the data per replicate.
const REFIT_TOL: f64 = 1e-6;

/// One bootstrap replicate of a weighting method: (effect, baseline) when defined, the
/// propensity coefficients of its re-fit, and whether the re-fit converged.
type Replicate = (Option<(f64, f64)>, DVector<f64>, bool);

/// Unit counts of an analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Counts {
    /// Treated units in the table.
    pub treated: usize,
    /// Control units in the table.
    pub controls: usize,
    /// Treated units removed by trimming.
    pub treated_trimmed: usize,
    /// Control units removed by trimming.
    pub controls_trimmed: usize,
    /// Treated units that entered the estimate (matched / weighted).
    pub treated_used: usize,
    /// Control units that entered the estimate.
    pub controls_used: usize,
    /// Treated units left out after trimming (no match within the caliper, stratum without
    /// controls).
    pub treated_unmatched: usize,
    /// Kish effective sample size of the treated weights.
    pub ess_treated: f64,
    /// Kish effective sample size of the control weights.
    pub ess_controls: f64,
}

/// The trimming that was applied.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrimReport {
    /// The rule.
    pub rule: Trim,
    /// Propensity limits kept (inclusive).
    pub limits: (f64, f64),
}

/// Bayesian-bootstrap bookkeeping of the weighting estimators.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplicateReport {
    /// Replicates run.
    pub replicates: usize,
    /// Replicates whose propensity re-fit did not meet the convergence criterion.
    pub not_converged: usize,
    /// Replicates in which the estimator was undefined (a group got no weight); dropped.
    pub undefined: usize,
}

/// A fitted analysis.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Fitted {
    /// Estimator.
    pub method: Method,
    /// "ATT", "ATE" or "ATO" (overlap weights).
    pub estimand: String,
    /// Outcome column (and pre-period column when differenced).
    pub outcome: String,
    /// Pre-period outcome column, when the estimate is on the change (matched DiD).
    pub pre_outcome: Option<String>,
    /// Point estimate.
    pub estimate: f64,
    /// Analytic standard error (Abadie-Imbens, nearest only).
    pub se: Option<f64>,
    /// Draws of the effect (Bayesian bootstrap for weighting; normal draws around the
    /// Abadie-Imbens estimate for matching).
    #[serde(skip)]
    pub draws: Vec<f64>,
    /// Counterfactual mean per draw (relative effect), when defined.
    #[serde(skip)]
    pub baseline_draws: Option<Vec<f64>>,
    /// The counterfactual level at the point estimate (the relative effect's denominator).
    pub point_baseline: Option<f64>,
    /// Treated mean minus control mean, all units, no adjustment.
    pub raw_difference: f64,
    /// The propensity model.
    pub propensity: PropensityReport,
    /// Caliper on the logit scale, when matching with one.
    pub caliper: Option<f64>,
    /// Balance of every design column.
    pub balance: Vec<BalanceEntry>,
    /// Counts.
    pub counts: Counts,
    /// Overlap before trimming.
    pub support: Support,
    /// Trimming applied.
    pub trim: Option<TrimReport>,
    /// Propensity distributions before/after.
    pub propensity_bins: PropensityBins,
    /// Rosenbaum bounds (matching only).
    pub rosenbaum: Option<RosenbaumBounds>,
    /// Bootstrap bookkeeping (weighting only).
    pub replicates: Option<ReplicateReport>,
    /// Whether the outcome is 0/1.
    pub binary_outcome: bool,
    /// Pooled SD of the outcome (unadjusted groups), for the standardised difference.
    pub outcome_sd: f64,
    /// Seed used.
    pub seed: u64,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Assumptions in plain words.
    pub assumptions: Vec<String>,
}

struct Propensity {
    fit: LogitFit,
    report: PropensityReport,
    eta: Vec<f64>,
}

fn fit_propensity(
    design: &Design,
    y: &[bool],
    params: &ValidParams,
    warnings: &mut Vec<String>,
) -> MatchResult<Propensity> {
    let p = params.params();
    let opts = LogitOptions { penalty: p.penalty, ..LogitOptions::default() };
    let _stage = aftercast_core::progress::stage(format!("fitting the propensity model on {} units", design.n), None);
    let single = logit::single_column_separation(design, y);
    let mut fit = logit::fit(design, y, None, &opts, None);
    let eta = logit::linear_predictor(design, &fit.beta);
    let extreme = |eta: &[f64]| eta.iter().filter(|&&v| v.abs() > 18.42).count();
    let diverged = !fit.converged;
    let separated = p.penalty == 0.0 && (single.is_some() || diverged);
    if separated {
        let (cov, detail) = match &single {
            Some((c, d)) => (Some(c.clone()), d.clone()),
            None => {
                let j =
                    (1..fit.beta.len()).max_by(|&a, &b| fit.beta[a].abs().total_cmp(&fit.beta[b].abs())).unwrap_or(1);
                (
                    Some(design.names[j - 1].clone()),
                    format!(
                        "Newton's method did not converge in {} iterations; {} units have fitted probabilities within 1e-8 of 0 or 1",
                        fit.iterations,
                        extreme(&eta)
                    ),
                )
            }
        };
        match p.separation {
            SeparationPolicy::Error => return Err(MatchError::Separation { covariate: cov, detail }),
            SeparationPolicy::Penalise(lambda) => {
                warnings.push(format!(
                    "separation in the propensity model: treatment is (almost) perfectly predicted ({detail}{}); it was refitted with an L2 penalty of {lambda} on the standardised coefficients, so the scores are shrunk towards each other and treated and control units may still differ on that covariate: check the balance table, and keep only units where both groups occur on it",
                    cov.as_ref().map(|c| format!("; largest coefficient: '{c}'")).unwrap_or_default()
                ));
                let o2 = LogitOptions { penalty: lambda, ..opts };
                fit = logit::fit(design, y, None, &o2, None);
            }
        }
    } else if !fit.converged {
        return Err(MatchError::NotConverged { iterations: fit.iterations, last_step: fit.last_step });
    }
    if !fit.converged {
        return Err(MatchError::NotConverged { iterations: fit.iterations, last_step: fit.last_step });
    }
    // the scores of the fit kept (computed again only after a penalised re-fit)
    let eta = if separated { logit::linear_predictor(design, &fit.beta) } else { eta };
    let report = PropensityReport::new(design, &fit, separated, extreme(&eta));
    Ok(Propensity { fit, report, eta })
}

fn mean_sd(v: impl Iterator<Item = f64> + Clone) -> (f64, f64) {
    let n = v.clone().count() as f64;
    let m = v.clone().sum::<f64>() / n;
    let s = (v.map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1.0)).sqrt();
    (m, s)
}

impl ValidParams {
    /// Run the analysis on `units` for the outcome column `outcome` (an outcome or numeric
    /// column of the table).
    ///
    /// # Errors
    /// Unknown columns, degenerate design, separation (policy `Error`), non-convergence, no
    /// overlap, no matches within the caliper, too few units.
    pub fn fit(&self, units: &UnitTable, outcome: &str) -> MatchResult<Fitted> {
        let p = self.params();
        let mut warnings = Vec::new();
        // columns are borrowed from the unit table; a copy is made only where rows are dropped
        let col = |name: &str, what: &'static str| -> MatchResult<&[f64]> {
            units.outcome(name).or_else(|| units.numeric(name)).ok_or_else(|| MatchError::UnknownColumn {
                what,
                name: name.into(),
                available: units.outcomes.iter().chain(units.numeric.iter()).map(|(n, _)| n.clone()).collect(),
            })
        };
        let y_post = col(outcome, "outcome")?;
        let y_pre = p.pre_outcome.as_deref().map(|c| col(c, "pre-period outcome")).transpose()?;
        let y_all: Cow<[f64]> = match &y_pre {
            Some(pre) => Cow::Owned(y_post.iter().zip(pre.iter()).map(|(a, b)| a - b).collect()),
            None => Cow::Borrowed(y_post),
        };
        let exact_cols: Vec<&aftercast_core::units::Categorical> = p
            .exact
            .iter()
            .map(|c| {
                units.categorical.iter().find(|k| &k.name == c).ok_or_else(|| MatchError::UnknownColumn {
                    what: "categorical exact-matching column",
                    name: c.clone(),
                    available: units.categorical.iter().map(|k| k.name.clone()).collect(),
                })
            })
            .collect::<MatchResult<_>>()?;
        let n_all = units.len();
        let n1_all = units.n_treated();
        // An interval needs spread among the treated: one treated unit gives a zero-width
        // interval and a confident verdict it has no right to.
        if n1_all < 2 || n_all - n1_all < 2 {
            return Err(MatchError::TooFew {
                what: format!("{} treated units and {} untreated units", n1_all, n_all - n1_all),
                found: n1_all.min(n_all - n1_all),
                needed: 2,
            });
        }
        for c in &exact_cols {
            // exact matching is for categories; a column with about as many values as units
            // (an amount, an id) leaves nobody a partner and takes very long to find that out
            if c.levels.len() > (n_all / 2).max(2) {
                return Err(MatchError::BadParameter {
                    name: "--exact",
                    value: c.name.clone(),
                    detail: format!(
                        "{} distinct values for {n_all} units: exact matching needs a category (region, segment), not an amount or an id",
                        c.levels.len()
                    ),
                });
            }
        }
        let (m1, s1) = mean_sd((0..n_all).filter(|&i| units.treated[i]).map(|i| y_post[i]));
        let (m0, s0) = mean_sd((0..n_all).filter(|&i| !units.treated[i]).map(|i| y_post[i]));
        let raw_difference = m1 - m0;
        let binary_outcome = y_pre.is_none() && y_post.iter().all(|&v| v == 0.0 || v == 1.0);
        let outcome_sd = ((s1 * s1 + s0 * s0) / 2.0).sqrt();

        // propensity model on everyone
        let spec = self.design_spec();
        let all_rows: Vec<usize> = (0..n_all).collect();
        let mut design = Design::build(units, &spec, &all_rows)?;
        let mut rows = all_rows;
        let mut tr: Vec<bool> = units.treated.clone();
        let mut ps = fit_propensity(&design, &tr, self, &mut warnings)?;
        let e_all: Vec<f64> = ps.eta.iter().map(|&v| logit::prob(v)).collect();
        let support = balance::support(&e_all, &tr);
        if support.treated_range.0 > support.control_range.1 || support.control_range.0 > support.treated_range.1 {
            return Err(MatchError::NoOverlap {
                detail: format!(
                    "treated propensities span [{:.4}, {:.4}], controls [{:.4}, {:.4}]",
                    support.treated_range.0, support.treated_range.1, support.control_range.0, support.control_range.1
                ),
            });
        }
        if support.treated_outside > 0 {
            warnings.push(format!(
                "{} of {} treated units have a propensity score outside the controls' range [{:.4}, {:.4}], so no control resembles them and the estimate extrapolates for them: drop them with --trim minmax, or use --method nearest with a --caliper",
                support.treated_outside, n1_all, support.control_range.0, support.control_range.1
            ));
        }

        // trimming
        let mut trim_report = None;
        let (mut treated_trimmed, mut controls_trimmed) = (0, 0);
        if p.trim != Trim::None {
            let limits = match p.trim {
                Trim::MinMax => (
                    support.treated_range.0.max(support.control_range.0),
                    support.treated_range.1.min(support.control_range.1),
                ),
                Trim::Crump => {
                    let a = balance::crump_alpha(&e_all);
                    (a, 1.0 - a)
                }
                Trim::Fixed(a) => (a, 1.0 - a),
                Trim::None => (0.0, 1.0),
            };
            let keep: Vec<usize> = (0..n_all).filter(|&i| e_all[i] >= limits.0 && e_all[i] <= limits.1).collect();
            treated_trimmed =
                (0..n_all).filter(|&i| units.treated[i] && !(e_all[i] >= limits.0 && e_all[i] <= limits.1)).count();
            controls_trimmed = n_all - keep.len() - treated_trimmed;
            let kt = keep.iter().filter(|&&i| units.treated[i]).count();
            if kt == 0 || kt == keep.len() {
                return Err(MatchError::NoOverlap {
                    detail: format!(
                        "trimming to propensities in [{:.4}, {:.4}] leaves {} treated and {} control units",
                        limits.0,
                        limits.1,
                        kt,
                        keep.len() - kt
                    ),
                });
            }
            if keep.len() < n_all {
                design = Design::build(units, &spec, &keep)?;
                tr = keep.iter().map(|&i| units.treated[i]).collect();
                ps = fit_propensity(&design, &tr, self, &mut warnings)?;
                rows = keep;
            }
            trim_report = Some(TrimReport { rule: p.trim, limits });
        }
        let n = rows.len();
        let trimmed = n < n_all;
        let pick = |v: &[f64]| rows.iter().map(|&i| v[i]).collect::<Vec<f64>>();
        let y: Cow<[f64]> = if trimmed { Cow::Owned(pick(&y_all)) } else { Cow::Borrowed(&y_all) };
        let ypost: Cow<[f64]> = if trimmed { Cow::Owned(pick(y_post)) } else { Cow::Borrowed(y_post) };
        let eta: &[f64] = &ps.eta;
        let e: Cow<[f64]> =
            if trimmed { Cow::Owned(eta.iter().map(|&v| logit::prob(v)).collect()) } else { Cow::Borrowed(&e_all) };
        let n1 = tr.iter().filter(|t| **t).count();

        let estimand = match (p.method, p.estimand) {
            (Method::Overlap, _) => "ATO",
            (_, Estimand::Att) => "ATT",
            (_, Estimand::Ate) => "ATE",
        }
        .to_string();
        let att = p.estimand == Estimand::Att;
        let draws_seed = child_seed(p.inference.seed, "match-draws");
        let mut se = None;
        let mut caliper = None;
        let mut rosenbaum = None;
        let mut replicates = None;
        let estimate;
        let draws: Vec<f64>;
        let baseline_draws: Option<Vec<f64>>;
        let point_baseline: Option<f64>;
        let after: Vec<f64>;
        let treated_unmatched;
        match p.method {
            Method::Nearest => {
                let cal = match p.caliper {
                    Caliper::None => None,
                    Caliper::SdOfLogit(c) => {
                        let (_, sd) = mean_sd(eta.iter().copied());
                        Some(c * sd)
                    }
                };
                caliper = cal;
                let keys: Option<Vec<u64>> = (!exact_cols.is_empty()).then(|| {
                    rows.iter()
                        .map(|&i| {
                            exact_cols
                                .iter()
                                .fold(0u64, |acc, c| acc.wrapping_mul(1_000_003).wrapping_add(c.codes[i] as u64 + 1))
                        })
                        .collect()
                });
                let rule = MatchRule { k: p.k, replace: p.replace, caliper: cal, mahalanobis: p.mahalanobis };
                let inv = p.mahalanobis.then(|| nearest::inverse_covariance(&design));
                let maha = inv.as_ref().map(|m| (&design, m));
                let treated_idx: Vec<usize> = (0..n).filter(|&i| tr[i]).collect();
                let control_idx: Vec<usize> = (0..n).filter(|&i| !tr[i]).collect();
                let to_c = nearest::match_units(eta, &treated_idx, &control_idx, keys.as_deref(), &rule, maha);
                let to_t =
                    (!att).then(|| nearest::match_units(eta, &control_idx, &treated_idx, keys.as_deref(), &rule, maha));
                let sigma2 = nearest::conditional_variances(eta, &tr, &y, p.variance_neighbours);
                let est = nearest::estimate(&y, &tr, &to_c, to_t.as_ref(), &sigma2, p.bias_correct.then_some(&design))
                    .ok_or(MatchError::NoMatches { caliper: cal.unwrap_or(f64::INFINITY) })?;
                if att && est.focal_matched == 0 {
                    return Err(MatchError::NoMatches { caliper: cal.unwrap_or(f64::INFINITY) });
                }
                treated_unmatched = n1 - est.focal_matched;
                if treated_unmatched > 0 {
                    warnings.push(format!(
                        "{treated_unmatched} of {n1} treated units found no control within the caliper and are left out; the estimate describes the matched treated units only: widen --caliper (or --caliper none) to keep them, at the cost of less similar matches"
                    ));
                }
                estimate = est.estimate;
                se = Some(est.se);
                draws = par_draws(draws_seed, p.inference.draws, |_, s| {
                    let z: f64 = StandardNormal.sample(s);
                    est.estimate + est.se * z
                });
                let matched_treated_mean = {
                    let (mut s, mut c) = (0.0, 0.0);
                    for (r, js) in to_c.matched.iter().enumerate() {
                        if !js.is_empty() {
                            s += ypost[to_c.focal[r]];
                            c += 1.0;
                        }
                    }
                    s / c
                };
                baseline_draws = if att {
                    Some(draws.iter().map(|d| matched_treated_mean - d).collect())
                } else if y_pre.is_none() {
                    Some(vec![est.baseline; draws.len()])
                } else {
                    None
                };
                point_baseline =
                    if att { Some(matched_treated_mean - estimate) } else { y_pre.is_none().then_some(est.baseline) };
                rosenbaum = sensitivity::rosenbaum(
                    &est.pair_differences.iter().map(|d| if estimate >= 0.0 { *d } else { -*d }).collect::<Vec<_>>(),
                    &[1.0, 1.1, 1.2, 1.3, 1.4, 1.5, 1.75, 2.0, 2.5, 3.0, 4.0, 5.0],
                    p.alpha,
                );
                if p.k > 1 && rosenbaum.is_some() {
                    warnings.push(
                        "Rosenbaum bounds treat each treated unit and the mean of its matches as a pair (k > 1), so the sensitivity figures are approximate: rerun with --k 1 for exact bounds".into(),
                    );
                }
                after = est.weights;
            }
            Method::Ipw | Method::Overlap | Method::Strata | Method::Aipw => {
                let wm = match p.method {
                    Method::Ipw => Weighting::Ipw,
                    Method::Overlap => Weighting::Overlap,
                    Method::Strata => Weighting::Strata(p.strata),
                    _ => Weighting::Aipw,
                };
                let ones = vec![1.0; n];
                // one replicate's effect and baseline from its weights
                let replicate = |r: &weighting::WeightedEstimate, omega: &[f64]| {
                    let base = if att {
                        let (mut sy, mut sw) = (0.0, 0.0);
                        for i in 0..n {
                            if tr[i] {
                                sy += omega[i] * ypost[i];
                                sw += omega[i];
                            }
                        }
                        sy / sw - r.effect
                    } else {
                        r.baseline
                    };
                    (r.effect, base)
                };
                let point = weighting::evaluate(wm, att, &y, &tr, &e, &ones, &design)
                    .ok_or_else(|| MatchError::NoOverlap { detail: "a group receives no weight".into() })?;
                estimate = point.effect;
                point_baseline = if att {
                    let (sy, sw) = (0..n).filter(|&i| tr[i]).fold((0.0, 0.0), |(a, b), i| (a + ypost[i], b + 1.0));
                    Some(sy / sw - point.effect)
                } else {
                    y_pre.is_none().then_some(point.baseline)
                };
                treated_unmatched = point.treated_dropped;
                if point.treated_dropped > 0 {
                    warnings.push(format!(
                        "{} treated units sit in propensity strata without controls and are left out, so the estimate describes the other treated units only: fewer --strata (wider strata) keep more of them",
                        point.treated_dropped
                    ));
                }
                let penalty = ps.fit.penalty;
                let start = ps.fit.beta.clone();
                let key = refits::key(&design, &tr, penalty, &start, draws_seed, p.inference.draws);
                let known = refits::lookup(key);
                let reps: Vec<Replicate> = par_draws(draws_seed, p.inference.draws, |d, s| {
                    let omega: Vec<f64> = (0..n).map(|_| s.exp1()).collect();
                    let (beta, converged) = match &known {
                        Some(k) => k[d].clone(),
                        None => {
                            let opts =
                                LogitOptions { penalty, parallel: false, tol: REFIT_TOL, ..LogitOptions::default() };
                            let f = logit::fit(&design, &tr, Some(&omega), &opts, Some(&start));
                            (f.beta, f.converged)
                        }
                    };
                    let er: Vec<f64> =
                        logit::linear_predictor(&design, &beta).iter().map(|&v| logit::prob(v)).collect();
                    let r = weighting::evaluate(wm, att, &y, &tr, &er, &omega, &design);
                    (r.map(|r| replicate(&r, &omega)), beta, converged)
                });
                if known.is_none() {
                    refits::store(key, reps.iter().map(|(_, b, c)| (b.clone(), *c)).collect());
                }
                let reps: Vec<Option<(f64, f64, bool)>> =
                    reps.into_iter().map(|(r, _, c)| r.map(|(e, b)| (e, b, c))).collect();

                let undefined = reps.iter().filter(|r| r.is_none()).count();
                let ok: Vec<(f64, f64, bool)> = reps.into_iter().flatten().collect();
                if ok.len() < 10 {
                    return Err(MatchError::TooFew {
                        what: "bootstrap replicates with a defined estimate".into(),
                        found: ok.len(),
                        needed: 10,
                    });
                }
                let not_converged = ok.iter().filter(|r| !r.2).count();
                if not_converged > 0 {
                    warnings.push(format!(
                        "{not_converged} bootstrap re-fits of the propensity model did not converge, so the interval may be slightly off: if that is many of the --draws, simplify the propensity model (fewer --squares, --interact or --terms) or give a --penalty"
                    ));
                }
                if undefined > 0 {
                    warnings.push(format!(
                        "{undefined} bootstrap replicates left a group without weight and were dropped, so the interval rests on fewer draws and may be too narrow if that is many: check the overlap of the groups' propensity scores and consider --trim"
                    ));
                }
                replicates = Some(ReplicateReport { replicates: p.inference.draws, not_converged, undefined });
                draws = ok.iter().map(|r| r.0).collect();
                baseline_draws = if y_pre.is_none() || att { Some(ok.iter().map(|r| r.1).collect()) } else { None };
                after = point.weights;
            }
        }

        // balance and counts
        let bal = balance::balance(&design, &tr, &after);
        let flagged: Vec<&str> = bal.iter().filter(|b| b.smd_flag).map(|b| b.covariate.as_str()).collect();
        if !flagged.is_empty() {
            warnings.push(format!(
                "after adjustment {} design column(s) still differ between treated and control units (|SMD| > 0.1), so part of the estimate may come from that difference rather than the change: {}; add terms for them (--squares, --interact, --terms), or use --bias-correct or --method aipw",
                flagged.len(),
                flagged.join(", ")
            ));
        }
        let vr: Vec<&str> = bal.iter().filter(|b| b.var_ratio_flag).map(|b| b.covariate.as_str()).collect();
        if !vr.is_empty() {
            warnings.push(format!(
                "after adjustment the spread of these columns still differs between treated and control units (variance ratio outside [0.5, 2]), so the groups are not fully comparable on them: {}; add their squares (--squares) or other --terms to the propensity model",
                vr.join(", ")
            ));
        }
        let ess_t = balance::ess((0..n).filter(|&i| tr[i]).map(|i| after[i]));
        let ess_c = balance::ess((0..n).filter(|&i| !tr[i]).map(|i| after[i]));
        let counts = Counts {
            treated: n1_all,
            controls: n_all - n1_all,
            treated_trimmed,
            controls_trimmed,
            treated_used: (0..n).filter(|&i| tr[i] && after[i] > 0.0).count(),
            controls_used: (0..n).filter(|&i| !tr[i] && after[i] > 0.0).count(),
            treated_unmatched,
            ess_treated: ess_t,
            ess_controls: ess_c,
        };
        let bins = balance::propensity_bins(&e, &tr, &after, p.bins);
        let mut assumptions = vec![
            "No unmeasured confounding: once the listed covariates are accounted for, which units were treated is unrelated to how they would have fared either way.".to_string(),
            "Overlap: every kind of unit in the target population could have been treated or not; units without comparable counterparts are reported, not extrapolated silently.".to_string(),
            "No interference: one unit's treatment does not change another unit's outcome.".to_string(),
            "The covariates were measured before the treatment and are not affected by it.".to_string(),
        ];
        if p.method != Method::Nearest {
            assumptions.push("The propensity model (logistic, with the listed terms) describes treatment assignment well enough that the weights balance the covariates; check the balance table.".into());
        }
        if p.method == Method::Aipw {
            assumptions.push(
                "Doubly robust: consistent if either the propensity model or the linear outcome model is right.".into(),
            );
        }
        if y_pre.is_some() {
            assumptions.push("Parallel trends after matching: without the change, treated and matched control outcomes would have moved by the same amount from the pre-period.".into());
        }
        Ok(Fitted {
            method: p.method,
            estimand,
            outcome: outcome.to_string(),
            pre_outcome: p.pre_outcome.clone(),
            estimate,
            se,
            draws,
            baseline_draws,
            point_baseline,
            raw_difference,
            propensity: ps.report,
            caliper,
            balance: bal,
            counts,
            support,
            trim: trim_report,
            propensity_bins: bins,
            rosenbaum,
            replicates,
            binary_outcome,
            outcome_sd,
            seed: p.inference.seed,
            warnings,
            assumptions,
        })
    }
}

impl Fitted {
    /// Equal-tailed interval of the draws at `level`.
    pub fn interval(&self, level: f64) -> (f64, f64) {
        let mut s = self.draws.clone();
        s.sort_unstable_by(f64::total_cmp);
        let tail = (1.0 - level) / 2.0;
        (quantile_sorted(&s, tail), quantile_sorted(&s, 1.0 - tail))
    }

    /// E-values at `level` (risk ratio for a 0/1 outcome, standardised difference otherwise).
    pub fn evalues(&self, level: f64) -> EValues {
        let (lo, hi) = self.interval(level);
        match (&self.baseline_draws, self.binary_outcome) {
            (Some(b), true) => {
                let mut rr: Vec<f64> = self.draws.iter().zip(b).map(|(d, b)| (b + d) / b).collect();
                rr.sort_unstable_by(f64::total_cmp);
                let tail = (1.0 - level) / 2.0;
                let bmean = b.iter().sum::<f64>() / b.len() as f64;
                sensitivity::evalue_binary(
                    (bmean + self.estimate) / bmean,
                    quantile_sorted(&rr, tail),
                    quantile_sorted(&rr, 1.0 - tail),
                )
            }
            _ => sensitivity::evalue_continuous(self.estimate, lo, hi, self.outcome_sd),
        }
    }

    /// The one estimate of a matching or weighting fit: the point ATT/ATE, its draws, the
    /// balance table, counts, typed diagnostics and the propensity and sensitivity figures.
    /// `level` sets the E-value's interval.
    pub fn estimate(&self, level: f64) -> Estimate<MatchDiagnostics> {
        let diagnostics = MatchDiagnostics {
            point_estimate: self.estimate,
            standard_error: self.se,
            raw_difference: self.raw_difference,
            outcome: self.outcome.clone(),
            pre_outcome: self.pre_outcome.clone(),
            propensity_model: self.propensity.clone(),
            caliper_logit: self.caliper,
            balance_detail: self.balance.clone(),
            counts: self.counts.clone(),
            support: self.support.clone(),
            trim: self.trim.clone(),
            propensity_bins: self.propensity_bins.clone(),
            rosenbaum: self.rosenbaum.clone(),
            bootstrap: self.replicates.clone(),
            e_value: self.evalues(level),
            uncertainty: match self.method {
                Method::Nearest => "normal draws around the estimate with the Abadie-Imbens (2006) standard error",
                _ => "Bayesian bootstrap (Exp(1) unit weights) re-fitting the propensity model in every replicate",
            }
            .into(),
        };
        let mut est = Estimate::new(
            "match",
            self.method.name(),
            &self.estimand,
            Point::Scalar { effect: self.estimate, baseline: self.point_baseline },
            EffectDraws::Scalar { effect: self.draws.clone(), baseline: self.baseline_draws.clone() },
            Scope { per: Per::Unit, units: self.counts.treated_used },
            diagnostics,
        );
        est.sections.balance = Some(self.balance.iter().map(BalanceEntry::row).collect());
        est.sections.sample = Some(SampleCounts {
            treated: self.counts.treated,
            controls_used: self.counts.controls_used,
            treated_dropped: self.counts.treated_unmatched + self.counts.treated_trimmed,
        });
        let b = &self.propensity_bins;
        est.figures.propensity = Some(PropensityHistogram {
            edges: b.edges.clone(),
            treated_before: b.treated_before.clone(),
            control_before: b.control_before.clone(),
            treated_after: b.treated_after.clone(),
            control_after: b.control_after.clone(),
        });
        est.figures.sensitivity = self.rosenbaum.as_ref().map(|r| SensitivityCurve {
            gamma: r.grid.iter().map(|p| p.gamma).collect(),
            p_upper: r.grid.iter().map(|p| p.p_upper).collect(),
            alpha: r.alpha,
        });
        for w in &self.warnings {
            est.warn(w.clone());
        }
        est.assumptions = self.assumptions.clone();
        est
    }
}

/// The typed diagnostics of a matching or weighting estimate.
#[derive(Debug, Clone, Serialize)]
pub struct MatchDiagnostics {
    /// The point estimate.
    pub point_estimate: f64,
    /// Its standard error, where the method has an analytic one.
    pub standard_error: Option<f64>,
    /// Treated mean minus control mean, unadjusted.
    pub raw_difference: f64,
    /// Outcome column.
    pub outcome: String,
    /// Pre-period outcome column (matched difference-in-differences).
    pub pre_outcome: Option<String>,
    /// The propensity model.
    pub propensity_model: PropensityReport,
    /// Caliper on the logit scale.
    pub caliper_logit: Option<f64>,
    /// Balance of every design column.
    pub balance_detail: Vec<BalanceEntry>,
    /// Counts.
    pub counts: Counts,
    /// Common support.
    pub support: Support,
    /// Trimming.
    pub trim: Option<TrimReport>,
    /// Propensity histogram.
    pub propensity_bins: PropensityBins,
    /// Rosenbaum bounds.
    pub rosenbaum: Option<RosenbaumBounds>,
    /// Bootstrap replicate report.
    pub bootstrap: Option<ReplicateReport>,
    /// E-values.
    pub e_value: EValues,
    /// How the draws were made.
    pub uncertainty: String,
}

/// One call for the command line: check `params`, fit on `units`, and hand back the fit and
/// its estimate.
///
/// # Errors
/// Any [`MatchError`] of [`MatchParams::check`](crate::MatchParams::check) or [`ValidParams::fit`].
pub fn run(
    units: &UnitTable,
    outcome: &str,
    params: crate::MatchParams,
) -> MatchResult<(Fitted, Estimate<MatchDiagnostics>)> {
    let level = params.inference.level;
    let fitted = params.check()?.fit(units, outcome)?;
    let est = fitted.estimate(level);
    Ok((fitted, est))
}

/// Bootstrap re-fits of the propensity model, kept for the other analyses of this process that
/// fit the same model to the same units with the same replicate weights (ipw and aipw of one
/// study; the weighting methods of a comparison, which share their replicate weights). Each
/// replicate's coefficients are exactly what the re-fit would give again, so reusing them
/// changes no number; it only saves the work.
mod refits {
    use crate::design::Design;
    use nalgebra::DVector;
    use std::collections::hash_map::DefaultHasher;
    use std::hash::{Hash, Hasher};
    use std::sync::{Arc, Mutex};

    type Refits = Arc<Vec<(DVector<f64>, bool)>>;

    /// Sets kept (a study runs a few weighting analyses; each set is small: draws x columns).
    const KEPT: usize = 4;

    static KNOWN: Mutex<Vec<(u64, Refits)>> = Mutex::new(Vec::new());

    /// A fingerprint of everything a set of re-fits depends on.
    pub(super) fn key(
        design: &Design,
        tr: &[bool],
        penalty: f64,
        start: &DVector<f64>,
        seed: u64,
        draws: usize,
    ) -> u64 {
        let mut h = DefaultHasher::new();
        (design.n, design.width(), seed, draws, penalty.to_bits()).hash(&mut h);
        design.z.iter().for_each(|v| v.to_bits().hash(&mut h));
        tr.hash(&mut h);
        start.iter().for_each(|v| v.to_bits().hash(&mut h));
        h.finish()
    }

    pub(super) fn lookup(key: u64) -> Option<Refits> {
        let known = KNOWN.lock().unwrap_or_else(|e| e.into_inner());
        known.iter().find(|(k, _)| *k == key).map(|(_, r)| r.clone())
    }

    pub(super) fn store(key: u64, refits: Vec<(DVector<f64>, bool)>) {
        let mut known = KNOWN.lock().unwrap_or_else(|e| e.into_inner());
        if known.len() >= KEPT {
            known.remove(0);
        }
        known.push((key, Arc::new(refits)));
    }
}
