//! From a [`Fitted`] synthetic control to the shared JSON document ([`AnalysisResult`]).

use crate::fit::Fitted;
use crate::params::Method;
use aftercast_core::result::{AnalysisResult, EffectDraws, PlaceboSummary, Rope, TOOL_VERSION};
use aftercast_core::table::InputInfo;
use aftercast_resample::summary::{pre_point, series_effects};
use serde_json::{Map, Value, json};

/// What the result document needs beyond the fit.
#[derive(Debug, Clone)]
pub struct ResultOptions {
    /// Interval level.
    pub level: f64,
    /// Region of practical equivalence.
    pub rope: Rope,
    /// Optional threshold for `prob_above_threshold`.
    pub threshold: Option<f64>,
    /// Seed of the run.
    pub seed: u64,
    /// Input files.
    pub inputs: Vec<InputInfo>,
}

impl Fitted {
    /// The counterfactual draws in the shared form (post-period paths of the aggregate).
    pub fn effect_draws(&self) -> EffectDraws {
        EffectDraws::Path {
            times: self.post_times().to_vec(),
            observed: self.post_observed().to_vec(),
            counterfactual: self.draws.counterfactual.clone(),
        }
    }
}

fn sentence_assumptions(method: Method) -> Vec<String> {
    let mut a = vec![
        "No donor unit was affected by the change (no spill-over into the donor pool).".to_string(),
        "Without the change, the treated outcome would have kept following the same combination of donors as before the start.".to_string(),
        "Nothing else that affects only the treated units happened at the start (no coincident shock).".to_string(),
    ];
    match method {
        Method::Intercept => a.push("The treated unit may differ from the synthetic control by a constant level, and only by that.".into()),
        Method::Ridge => a.push("The outcome is close to linear in the pre-period outcomes, so the ridge model's bias correction is valid (it may extrapolate: weights can be negative).".into()),
        Method::Predictors => a.push("Matching the chosen predictors with the selected importance weights reproduces the treated unit's untreated outcome.".into()),
        Method::Sdid => a.push("After unit and time weighting, treated and control units would have moved in parallel (weighted parallel trends).".into()),
        Method::Weights => {}
    }
    a.push("Intervals come from placebo runs on the donors (see docs/synthetic.md): they describe how far a synthetic control misses when nothing happened, not a sampling distribution.".into());
    a
}

/// Donor weights of the aggregate: the unit's own for one treated unit, the share-weighted
/// mean of the units' weights for several.
fn weights_of(fit: &Fitted) -> Vec<aftercast_core::result::UnitWeight> {
    if fit.units.len() == 1 {
        return fit.units[0].weights.clone();
    }
    (0..fit.donors.len())
        .map(|j| aftercast_core::result::UnitWeight {
            unit: fit.donors[j].clone(),
            weight: fit.units.iter().zip(&fit.unit_shares).map(|(u, s)| s * u.weights[j].weight).sum(),
        })
        .collect()
}

/// Build the shared result document of the `synthetic` verb.
///
/// `extra_diagnostics` is merged into `diagnostics` (e.g. conformal, placebo in time,
/// leave-one-out sections from [`crate::inference`]).
pub fn to_analysis_result(fit: &Fitted, opts: &ResultOptions, extra_diagnostics: Map<String, Value>) -> AnalysisResult {
    let eff = series_effects(
        fit.post_times(),
        fit.post_observed(),
        &fit.draws.counterfactual,
        opts.level,
        &opts.rope,
        opts.threshold,
    );
    let mut path = Vec::with_capacity(fit.times.len());
    for t in 0..fit.first_post {
        let mut d = [fit.synthetic[t]];
        path.push(pre_point(fit.times[t], fit.observed[t], &mut d, opts.level));
    }
    path.extend(eff.path.iter().cloned());
    let mut warnings = fit.warnings.clone();
    if eff.nonfinite_relative > 0 {
        warnings.push(format!(
            "{} draws had a zero counterfactual sum; their relative effect is undefined",
            eff.nonfinite_relative
        ));
    }
    let mut diag = Map::new();
    let units: Vec<Value> = fit
        .units
        .iter()
        .map(|u| {
            json!({
                "unit": u.unit,
                "pre_rmspe": u.pre_rmspe,
                "post_rmspe": u.post_rmspe,
                "rmspe_ratio": u.rmspe_ratio,
                "r2_pre": u.r2_pre,
                "nonzero_donors": u.nonzero_donors,
                "outside_range_share": u.outside_range_share,
                "outside_hull": u.outside_hull,
                "intercept": u.intercept,
                "ridge_lambda": u.ridge_lambda,
                "v_objective": u.v_objective,
                "solver": u.solver,
                "balance": u.balance,
                "weights": u.weights,
                "simplex_weights": u.simplex_weights,
                "gap": u.gap,
            })
        })
        .collect();
    diag.insert("treated".into(), Value::Array(units));
    diag.insert("donors".into(), json!(fit.donors.len()));
    diag.insert("unit_shares".into(), json!(fit.unit_shares));
    diag.insert("pre_periods".into(), json!(fit.first_post));
    diag.insert("post_periods".into(), json!(fit.times.len() - fit.first_post));
    diag.insert("draws".into(), json!({"source": fit.draws.source, "count": fit.draws.counterfactual.len()}));
    // Pre-period fit of the aggregated path (for one treated unit: that unit's).
    let p0 = fit.first_post;
    let gap: Vec<f64> = (0..p0).map(|t| fit.observed[t] - fit.synthetic[t]).collect();
    let ybar = fit.observed[..p0].iter().sum::<f64>() / p0 as f64;
    let sst: f64 = fit.observed[..p0].iter().map(|y| (y - ybar).powi(2)).sum();
    diag.insert("pre_rmspe".into(), json!(crate::fit::rmspe(&gap)));
    diag.insert("r2_pre".into(), json!(1.0 - gap.iter().map(|g| g * g).sum::<f64>() / sst));
    let nonzero = weights_of(fit).iter().filter(|w| w.weight.abs() > crate::fit::WEIGHT_ZERO).count();
    diag.insert("nonzero_donors".into(), json!(nonzero));
    if let Some(pl) = &fit.placebo {
        diag.insert("placebo_runs".into(), serde_json::to_value(pl).unwrap_or(Value::Null));
    }
    if let Some(s) = &fit.sdid {
        diag.insert("sdid".into(), serde_json::to_value(s).unwrap_or(Value::Null));
    }
    diag.extend(extra_diagnostics);
    let weights = Some(weights_of(fit));
    let placebo = fit.placebo.as_ref().map(|pl| {
        if pl.ranks.len() == 1 {
            let r = &pl.ranks[0];
            PlaceboSummary { p_value: r.p_value, rank: r.rank, units: r.units }
        } else {
            let p = pl.joint_p_value.unwrap_or(f64::NAN);
            PlaceboSummary { p_value: p, rank: 0, units: pl.runs.len() + pl.ranks.len() }
        }
    });
    AnalysisResult {
        tool_version: TOOL_VERSION.to_string(),
        verb: "synthetic".into(),
        method: fit.method.name().into(),
        level: opts.level,
        seed: opts.seed,
        inputs: opts.inputs.clone(),
        estimand: Some(if fit.units.len() > 1 || fit.method == Method::Sdid {
            "ATT (average over treated units and post-periods)".into()
        } else {
            "effect on the treated unit, per post-period".into()
        }),
        effect: eff.effect,
        verdict: eff.verdict,
        rope: opts.rope,
        diagnostics: diag,
        warnings,
        path: Some(path),
        weights,
        placebo,
        balance: None,
        sample: None,
        truth: None,
        estimates: None,
        assumptions: sentence_assumptions(fit.method),
        extra: Map::new(),
    }
}

/// Options of [`run`] beyond the estimator's parameters.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// Region of practical equivalence.
    pub rope: Rope,
    /// Optional threshold for `prob_above_threshold`.
    pub threshold: Option<f64>,
    /// Input files.
    pub inputs: Vec<InputInfo>,
    /// Also run the robustness checks (conformal inference, placebo in time, leave-one-out)
    /// and put them into `diagnostics`. A check that cannot run becomes a warning.
    pub robustness: bool,
}

/// Fit and build the result document in one call (what the `synthetic` verb calls).
/// Level and seed come from the parameters.
///
/// # Errors
/// As [`ValidParams::fit`](crate::ValidParams::fit); all of them are caused by the input.
pub fn run(
    panel: &aftercast_core::panel::Panel,
    treated: &[String],
    start: aftercast_core::time::TimePoint,
    params: &crate::ValidParams,
    opts: &RunOptions,
) -> crate::SynthResult<(Fitted, AnalysisResult)> {
    let fit = params.fit(panel, treated, start)?;
    let mut extra = Map::new();
    let mut warnings = Vec::new();
    if opts.robustness && fit.method != Method::Sdid {
        if treated.len() == 1 && matches!(fit.method, Method::Weights | Method::Intercept) {
            match crate::inference::conformal(params, panel, &treated[0], start) {
                Ok(c) => {
                    extra.insert("conformal".into(), serde_json::to_value(c).unwrap_or(Value::Null));
                }
                Err(e) => warnings.push(format!("conformal inference skipped: {e}")),
            }
        }
        match crate::inference::placebo_in_time(params, panel, treated, start, None) {
            Ok(p) => {
                extra.insert("placebo_in_time".into(), serde_json::to_value(p).unwrap_or(Value::Null));
            }
            Err(e) => warnings.push(format!("placebo in time skipped: {e}")),
        }
        match crate::inference::leave_one_out(params, panel, treated, start, &fit) {
            Ok(l) => {
                extra.insert("leave_one_out".into(), serde_json::to_value(l).unwrap_or(Value::Null));
            }
            Err(e) => warnings.push(format!("leave-one-out skipped: {e}")),
        }
    }
    let ro = ResultOptions {
        level: params.get().level,
        rope: opts.rope,
        threshold: opts.threshold,
        seed: params.get().seed,
        inputs: opts.inputs.clone(),
    };
    let mut doc = to_analysis_result(&fit, &ro, extra);
    doc.warnings.extend(warnings);
    Ok((fit, doc))
}
