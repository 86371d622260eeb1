//! Plasmode simulation for unit-level methods (Franklin et al. 2014, "Plasmode simulation for
//! the evaluation of pharmacoepidemiologic methods in complex healthcare databases", Comput.
//! Stat. Data Anal. 72:219-226): keep the real covariates and the real treatment assignment,
//! replace the outcome by one simulated from an outcome model with a known effect, and see
//! how each method does.
//!
//! Outcome model: ordinary least squares of the outcome on `1 + covariates` among the untreated
//! units, `y = x'b + e`, with `sigma` the residual sd. Replicate `r` draws
//! `y_i = x_i'b + effect · treated_i + sigma · z_i`, `z_i ~ N(0, 1)`, so the true effect on the
//! treated is `effect` exactly (the selection of the real data is kept, and it is on the
//! covariates only, so the methods' no-unmeasured-confounding assumption holds by construction).

use crate::error::{CalibrateError, CalibrateResult};
use crate::estimators::{UnitEstimator, outcome_of, wls};
use aftercast_core::estimate::Inference;
use aftercast_core::units::UnitTable;
use aftercast_resample::rng::{child_seed, par_draws};
use aftercast_resample::summary::summarize;
use rand::RngExt;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};

/// Settings of a plasmode simulation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlasmodeSpec {
    /// The known effect added to the treated units' simulated outcomes.
    pub effect: f64,
    /// Number of simulated data sets.
    pub replicates: usize,
}

/// How one method did over the simulated data sets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlasmodeReport {
    /// Method.
    pub method: String,
    /// The known effect.
    pub effect: f64,
    /// Replicates that finished.
    pub replicates: usize,
    /// Replicates where the method failed.
    pub failures: usize,
    /// Mean of estimate - effect.
    pub bias: f64,
    /// Monte-Carlo standard error of that mean.
    pub bias_se: f64,
    /// Root mean square error.
    pub rmse: f64,
    /// Share of intervals holding the known effect.
    pub coverage: f64,
    /// Share of intervals excluding zero on the effect's side (the false-positive rate when
    /// the effect is zero: share excluding zero on either side).
    pub power: f64,
    /// Mean interval width.
    pub mean_width: f64,
    /// The outcome model: residual sd.
    pub sigma: f64,
    /// Point estimate of every finished replicate, in replicate order.
    #[serde(skip)]
    pub estimates: Vec<f64>,
}

/// The fitted outcome model: coefficients on standardised covariates and residual sd.
struct OutcomeModel {
    cols: Vec<Vec<f64>>,
    beta: Vec<f64>,
    sigma: f64,
}

fn outcome_model(units: &UnitTable, outcome: &str, covariates: &[String]) -> CalibrateResult<OutcomeModel> {
    let y = outcome_of(units, outcome)?;
    let n = units.len();
    let mut cols = vec![vec![1.0; n]];
    // a categorical covariate enters as one indicator per level but the first
    let categorical: Vec<&aftercast_core::units::Categorical> =
        units.categorical.iter().filter(|c| covariates.contains(&c.name)).collect();
    let covariates: Vec<String> =
        covariates.iter().filter(|c| !categorical.iter().any(|k| &k.name == *c)).cloned().collect();
    let covariates = covariates.as_slice();
    for c in &categorical {
        for level in 1..c.levels.len() {
            let col: Vec<f64> = c.codes.iter().map(|&k| if k == level { 1.0 } else { 0.0 }).collect();
            if col.iter().any(|v| *v != 0.0) {
                cols.push(col);
            }
        }
    }
    for c in covariates {
        let v = units.numeric(c).ok_or_else(|| CalibrateError::MissingColumn {
            path: units.input.path.clone().into(),
            name: c.clone(),
            what: "covariate",
        })?;
        let m = v.iter().sum::<f64>() / n as f64;
        let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n as f64).sqrt();
        if sd.is_nan() || sd <= 0.0 {
            return Err(CalibrateError::Singular { columns: covariates.to_vec() });
        }
        cols.push(v.iter().map(|x| (x - m) / sd).collect());
    }
    let controls: Vec<usize> = (0..n).filter(|&i| !units.treated[i]).collect();
    let refs: Vec<&[f64]> = cols.iter().map(Vec::as_slice).collect();
    let beta = wls(&refs, y, &vec![1.0; controls.len()], &controls)
        .ok_or_else(|| CalibrateError::Singular { columns: covariates.to_vec() })?;
    let p = cols.len();
    let rss: f64 = controls
        .iter()
        .map(|&i| {
            let f: f64 = (0..p).map(|j| cols[j][i] * beta[j]).sum();
            (y[i] - f).powi(2)
        })
        .sum();
    let dof = controls.len().saturating_sub(p).max(1);
    Ok(OutcomeModel { cols, beta: beta.iter().copied().collect(), sigma: (rss / dof as f64).sqrt() })
}

/// Run a plasmode simulation of `methods` on the real covariates and treatment of `units`.
///
/// # Errors
/// [`CalibrateError::BadParameter`] for a non-finite effect or no replicates; errors of the
/// outcome model (missing column, singular design).
pub fn plasmode(
    units: &UnitTable,
    outcome: &str,
    covariates: &[String],
    methods: &[&dyn UnitEstimator],
    spec: &PlasmodeSpec,
    opts: &Inference,
) -> CalibrateResult<Vec<PlasmodeReport>> {
    opts.check()?;
    if !spec.effect.is_finite() || spec.replicates == 0 {
        return Err(CalibrateError::BadParameter {
            name: "--replicates/--effect",
            value: format!("{} / {}", spec.replicates, spec.effect),
            detail: "a finite effect and at least one replicate".into(),
        });
    }
    // one result per replicate and method is kept (32 bytes), and each replicate in flight
    // holds a simulated outcome column
    aftercast_core::budget::check(
        "--replicates",
        spec.replicates as u64,
        32 * methods.len().max(1) as u64,
        8 * units.len() as u64 * rayon::current_num_threads() as u64,
    )?;
    let model = outcome_model(units, outcome, covariates)?;
    let n = units.len();
    let fitted: Vec<f64> =
        (0..n).map(|i| model.cols.iter().zip(&model.beta).map(|(c, b)| c[i] * b).sum::<f64>()).collect();
    let seed = child_seed(opts.seed, "plasmode-outcomes");
    let mut reports = Vec::with_capacity(methods.len());
    for m in methods {
        let name = m.name();
        let results: Vec<Option<(f64, f64, f64)>> = par_draws(seed, spec.replicates, |r, rng| {
            let y: Vec<f64> = (0..n)
                .map(|i| {
                    let z: f64 = rng.sample(StandardNormal);
                    fitted[i] + if units.treated[i] { spec.effect } else { 0.0 } + model.sigma * z
                })
                .collect();
            let mut sim = units.clone();
            sim.outcomes = vec![(outcome.to_string(), y)];
            let o = Inference { seed: child_seed(opts.seed, &format!("plasmode-{r}")), ..*opts };
            let est = m.estimate(&sim, outcome, covariates, &o).ok()?;
            let s = summarize(&est.draws, opts.level, None);
            Some((est.point, s.lower, s.upper))
        });
        let ok: Vec<(f64, f64, f64)> = results.iter().flatten().copied().collect();
        let k = ok.len().max(1) as f64;
        let bias: Vec<f64> = ok.iter().map(|(e, _, _)| e - spec.effect).collect();
        let mb = bias.iter().sum::<f64>() / k;
        let sd = (bias.iter().map(|b| (b - mb).powi(2)).sum::<f64>() / (k - 1.0).max(1.0)).sqrt();
        let detect = |lo: f64, hi: f64| {
            if spec.effect > 0.0 {
                lo > 0.0
            } else if spec.effect < 0.0 {
                hi < 0.0
            } else {
                lo > 0.0 || hi < 0.0
            }
        };
        reports.push(PlasmodeReport {
            method: name,
            effect: spec.effect,
            replicates: ok.len(),
            failures: spec.replicates - ok.len(),
            bias: mb,
            bias_se: sd / k.sqrt(),
            rmse: (bias.iter().map(|b| b * b).sum::<f64>() / k).sqrt(),
            coverage: ok.iter().filter(|(_, lo, hi)| *lo <= spec.effect && spec.effect <= *hi).count() as f64 / k,
            power: ok.iter().filter(|(_, lo, hi)| detect(*lo, *hi)).count() as f64 / k,
            mean_width: ok.iter().map(|(_, lo, hi)| hi - lo).sum::<f64>() / k,
            sigma: model.sigma,
            estimates: ok.iter().map(|(e, _, _)| *e).collect(),
        });
    }
    Ok(reports)
}

/// A plan of a unit-level analysis by plasmode simulation at several sample sizes.
#[derive(Debug, Clone, PartialEq)]
pub struct SizePlan {
    /// Per simulated data set, per size: the smallest increase and decrease seen (fractions of
    /// `base`); NaN where the method failed on that data set.
    pub thresholds: crate::plan::Thresholds,
    /// The treated units' mean outcome without the change under the outcome model (the level
    /// lifts are fractions of).
    pub base: f64,
    /// Residual sd of the outcome model.
    pub sigma: f64,
    /// Failures: (size, message), one per failed data set.
    pub failures: Vec<(usize, String)>,
    /// Whether the run was stopped early.
    pub interrupted: bool,
}

/// What a unit-table plan asks: the sample sizes and the simulated data sets per size.
#[derive(Debug, Clone, PartialEq)]
pub struct SizeQuestion {
    /// Sample sizes (units).
    pub sizes: Vec<usize>,
    /// Simulated data sets (each analysed at every size).
    pub runs: usize,
}

/// Stratified resample of `n` units keeping the share treated (at least two of each group).
fn resample_rows(
    treated: &[usize],
    controls: &[usize],
    n: usize,
    rng: &mut aftercast_resample::rng::Stream,
) -> Vec<usize> {
    let share = treated.len() as f64 / (treated.len() + controls.len()) as f64;
    let nt = ((n as f64 * share).round() as usize).clamp(2, n.saturating_sub(2).max(2));
    let nc = n.saturating_sub(nt).max(2);
    let mut rows = Vec::with_capacity(nt + nc);
    rows.extend((0..nt).map(|_| treated[rng.random_range(0..treated.len())]));
    rows.extend((0..nc).map(|_| controls[rng.random_range(0..controls.len())]));
    rows
}

/// Plan a unit-level analysis: at each sample size, `runs` simulated data sets with no effect
/// (units drawn with replacement from the real table, keeping the share treated; outcomes from
/// the outcome model of [`plasmode`]), each analysed by `method`. The HDI `[lo, hi]` of its
/// estimate gives the thresholds `(-lo / base, hi / base)`: a constant effect `δ · base` added
/// to every treated outcome shifts the estimate and every draw of the methods here by exactly
/// that amount (their weights and matches depend on the covariates only; checked in the
/// tests), so the lift is seen when `lo + δ · base > 0`.
///
/// # Errors
/// Bad settings, errors of the outcome model, [`CalibrateError::BadParameter`] when the
/// treated units' level is not positive (lifts in percent need one), and
/// [`CalibrateError::Interrupted`] when stopped before any data set finished.
pub fn plan_sizes(
    units: &UnitTable,
    outcome: &str,
    covariates: &[String],
    method: &dyn UnitEstimator,
    question: &SizeQuestion,
    opts: &Inference,
    control: &crate::backtest::RunControl<'_>,
) -> CalibrateResult<SizePlan> {
    use std::sync::atomic::Ordering;
    opts.check()?;
    let (sizes, runs) = (&question.sizes, question.runs);
    if runs == 0 || sizes.is_empty() || sizes.iter().any(|n| *n < 4) {
        return Err(CalibrateError::BadParameter {
            name: "--sizes/--placebos",
            value: format!("{sizes:?} / {runs}"),
            detail: "at least one size of 4 units or more, and at least one simulated data set".into(),
        });
    }
    let model = outcome_model(units, outcome, covariates)?;
    let n = units.len();
    let fitted: Vec<f64> =
        (0..n).map(|i| model.cols.iter().zip(&model.beta).map(|(c, b)| c[i] * b).sum::<f64>()).collect();
    let treated: Vec<usize> = (0..n).filter(|&i| units.treated[i]).collect();
    let controls: Vec<usize> = (0..n).filter(|&i| !units.treated[i]).collect();
    if treated.len() < 2 || controls.len() < 2 {
        return Err(CalibrateError::EmptyGroup {
            what: if treated.len() < 2 { "treated units (two are needed)" } else { "control units (two are needed)" },
            path: units.input.path.clone().into(),
        });
    }
    let base = treated.iter().map(|&i| fitted[i]).sum::<f64>() / treated.len() as f64;
    if !(base.is_finite() && base > 0.0) {
        return Err(CalibrateError::BadParameter {
            name: "--lifts",
            value: format!("{base}"),
            detail: format!(
                "lifts are percentages of the treated units' level of '{outcome}' without the change, which the outcome model puts at {base:.4}; a plan in percent needs a positive level"
            ),
        });
    }
    let mut sizes = sizes.to_vec();
    sizes.sort_unstable();
    sizes.dedup();
    if let Some(p) = control.progress {
        p.start(runs as u64, "simulated data sets");
    }
    let seed = child_seed(opts.seed, "plan-sizes");
    type Run = Option<Vec<Result<(f64, f64), String>>>;
    let results: Vec<Run> = par_draws(seed, runs, |r, rng| {
        if control.stop.is_some_and(|s| s.load(Ordering::SeqCst)) {
            return None;
        }
        let per_size = sizes
            .iter()
            .map(|&size| {
                let rows = resample_rows(&treated, &controls, size, rng);
                let mut sim = units.take(&rows);
                sim.ids.clear();
                let y: Vec<f64> = rows
                    .iter()
                    .map(|&i| {
                        let z: f64 = rng.sample(StandardNormal);
                        fitted[i] + model.sigma * z
                    })
                    .collect();
                sim.outcomes = vec![(outcome.to_string(), y)];
                let o = Inference { seed: child_seed(opts.seed, &format!("plan-{r}-{size}")), ..*opts };
                let est = method.estimate(&sim, outcome, covariates, &o).map_err(|e| e.to_string())?;
                let s = summarize(&est.draws, opts.level, None);
                if !(s.hdi_lower.is_finite() && s.hdi_upper.is_finite()) {
                    return Err("the method gave no interval".to_string());
                }
                Ok((-s.hdi_lower / base, s.hdi_upper / base))
            })
            .collect();
        if let Some(p) = control.progress {
            p.step();
        }
        Some(per_size)
    });
    if let Some(p) = control.progress {
        p.finish();
    }
    let interrupted = results.iter().any(Option::is_none);
    let done: Vec<Vec<Result<(f64, f64), String>>> = results.into_iter().flatten().collect();
    if done.is_empty() {
        return Err(CalibrateError::Interrupted);
    }
    let mut failures = Vec::new();
    let runs: Vec<Vec<(f64, f64)>> = done
        .into_iter()
        .map(|per| {
            per.into_iter()
                .zip(&sizes)
                .map(|(r, &size)| match r {
                    Ok(t) => t,
                    Err(m) => {
                        failures.push((size, m));
                        (f64::NAN, f64::NAN)
                    }
                })
                .collect()
        })
        .collect();
    Ok(SizePlan {
        thresholds: crate::plan::Thresholds { waits: sizes, runs },
        base,
        sigma: model.sigma,
        failures,
        interrupted,
    })
}

/// The typed diagnostics of a plasmode simulation.
#[derive(Debug, Clone, Serialize)]
pub struct PlasmodeDiagnostics {
    /// What the effect summaries describe.
    pub effect_is: String,
    /// The known effect of the simulation.
    pub known_effect: f64,
    /// One report per method.
    pub plasmode: Vec<PlasmodeReport>,
}

/// The one estimate of a plasmode simulation: the first method's estimates over the simulated
/// data sets as the draws (their spread is what the method would report over repeated data),
/// every method's report as diagnostics. There is no counterfactual level, so a percent ROPE
/// judges only the sign.
///
/// # Errors
/// [`CalibrateError::BadParameter`] when no method ran.
pub fn estimate(
    reports: &[PlasmodeReport],
    spec: &PlasmodeSpec,
    n_treated: usize,
) -> CalibrateResult<aftercast_core::Estimate<PlasmodeDiagnostics>> {
    use aftercast_core::estimate::{Per, Point, Scope};
    let first = reports.first().ok_or_else(|| CalibrateError::BadParameter {
        name: "--methods",
        value: String::new(),
        detail: "at least one method".into(),
    })?;
    let finite: Vec<f64> = first.estimates.iter().copied().filter(|v| v.is_finite()).collect();
    let point = finite.iter().sum::<f64>() / finite.len().max(1) as f64;
    let mut est = aftercast_core::Estimate::new(
        "compare",
        "plasmode",
        "ATT of the simulated outcomes",
        Point::Scalar { effect: point, baseline: None },
        aftercast_core::EffectDraws::Scalar { effect: first.estimates.clone(), baseline: None },
        Scope { per: Per::Unit, units: n_treated },
        PlasmodeDiagnostics {
            effect_is: format!("estimates of {} over the simulated data sets", first.method),
            known_effect: spec.effect,
            plasmode: reports.to_vec(),
        },
    );
    est.assumptions = vec![
        "The outcome model (linear in the covariates, normal noise) is a fair stand-in for the real outcomes.".into(),
        "Treatment depends on the covariates only, as in the simulated data by construction.".into(),
    ];
    Ok(est)
}
