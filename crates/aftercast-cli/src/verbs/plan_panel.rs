//! `plan synthetic` and `plan match`: the plans of a panel and of a unit table, with the same
//! `planning` section as `plan forecast`.

use crate::failure::bad_input_msg;
use crate::verbs::compare::classify;
use crate::verbs::plan::{
    MatchPlanArgs, SyntheticPlanArgs, Watch, placebo_outcome, plan_table, spec_of, wait_unit, waits,
};
use aftercast_calibrate::backtest::{self, PlaceboJob, PlaceboWindow};
use aftercast_calibrate::plan::{PlanQuestion, planning};
use aftercast_core::estimate::{Per, Point, Scope};
use aftercast_core::{EffectDraws, Estimate};

/// Placebo dates for the treated units (in time) and the real start for each donor in turn
/// (in space), each fitted by the analysis's own synthetic control.
///
/// # Errors
/// The analysis's bad input, a pre-period too short for any wait, and the plan's errors.
pub fn plan_synthetic(s: &SyntheticPlanArgs) -> anyhow::Result<crate::verbs::Outcome> {
    let a = &s.analysis;
    if a.no_robustness {
        return Err(bad_input_msg(
            "--no-robustness: a plan runs no robustness checks of its own (each placebo fit is the synthetic control alone); leave the flag out",
        ));
    }
    let setup = crate::verbs::synthetic::setup(a)?;
    let panel = &setup.panel;
    let points = panel.axis.points();
    let start_at = panel.axis.first_at_or_after(setup.start);
    let end_at = setup.params.get().end.map_or(points.len(), |e| panel.axis.end_at_or_before(e));
    let post_len = end_at.saturating_sub(start_at);
    for t in &setup.treated {
        if !panel.units.contains(t) {
            return Err(bad_input_msg(format!(
                "--treated: unit '{}' is not in {}",
                aftercast_core::error::shown(t),
                setup.input.path
            )));
        }
    }
    let excluded = &setup.params.get().exclude;
    let donors: Vec<String> =
        panel.units.iter().filter(|u| !setup.treated.contains(u) && !excluded.contains(u)).cloned().collect();
    // a year of history (common practice for weekly and monthly data), at most half the
    // pre-period, at least 10 periods
    let per_year = panel.axis.frequency().per_year().map_or(10, |p| p.round() as usize);
    let min_train = s.time.min_train.unwrap_or_else(|| per_year.min(start_at / 2).max(10));
    let freq = panel.axis.frequency();
    // with a real post-period the default waits stop at its length, so every untouched unit
    // can be a placebo at the real start too (the placebos in space of the analysis itself)
    let asked: Vec<usize> = if s.time.waits.is_empty() && post_len > 0 {
        let mut w: Vec<usize> = crate::verbs::plan::default_waits(freq).into_iter().filter(|w| *w < post_len).collect();
        w.push(post_len);
        w
    } else {
        s.time.waits.clone()
    };
    let (waits, mut notes) = waits(&asked, freq, post_len, start_at.saturating_sub(min_train), "plan synthetic")
        .map(|(w, n)| (w, n.into_iter().collect::<Vec<_>>()))?;
    let spec = spec_of(&s.plan, &a.common, waits, min_train, wait_unit(freq));
    let h = spec.horizon();
    let origins = backtest::placebo_origins(start_at, min_train, h, spec.placebos);
    let mut jobs: Vec<PlaceboJob> =
        origins.iter().map(|&o| PlaceboJob { origin: o, time: Some(points[o]), label: None }).collect();
    if post_len >= h {
        jobs.extend(donors.iter().map(|d| PlaceboJob {
            origin: start_at,
            time: Some(points[start_at]),
            label: Some(d.clone()),
        }));
    } else {
        notes.push(format!(
            "no placebo units: the real post-period ({post_len} periods) is shorter than the longest wait ({h}), so only placebo dates are used and the rates rest on fewer runs: give --waits of at most {post_len} to add each untouched unit at the real start"
        ));
    }
    let treated = &setup.treated;
    let paths = |i: usize, _draws: usize, seed: u64| -> Result<PlaceboWindow, backtest::ModelError> {
        let job = &jobs[i];
        let o = job.origin;
        let (target, exclude): (Vec<String>, Vec<String>) = match &job.label {
            Some(d) => (vec![d.clone()], treated.clone()),
            None => (treated.clone(), Vec::new()),
        };
        let params = setup.params.for_placebo(points[o + h - 1], &exclude, seed);
        let fit = params.fit(panel, &target, points[o])?;
        let observed = fit.post_observed().to_vec();
        if fit.draws.counterfactual.is_empty() {
            return Err(format!("the synthetic control gave no counterfactual draws ({})", fit.draws.source).into());
        }
        Ok(PlaceboWindow { observed, paths: fit.draws.counterfactual })
    };
    let watch = Watch::new()?;
    let model = format!("synthetic control ({})", a.method.name());
    let control = watch.control(s.time.partial.as_deref());
    let report = {
        let _stage = aftercast_core::progress::stage(format!("{} placebo runs", jobs.len()), None);
        backtest::run_jobs(&model, &a.outcome, &jobs, &paths, &spec, &control).map_err(classify)?
    };
    let in_space = report.origins.iter().filter(|o| o.job.label.is_some()).count();
    let headline = format!(
        "plan for '{}' of {} from {}: {} placebo dates and {in_space} placebo units{}",
        a.outcome,
        treated.join(", "),
        a.start,
        report.origins_completed - in_space,
        if report.interrupted { " (interrupted)" } else { "" },
    );
    placebo_outcome(&report, notes, &a.common, vec![setup.input.clone()], headline, s.time.partial.as_deref())
}

/// Typed diagnostics of a unit-table plan.
#[derive(Debug, Clone, serde::Serialize)]
pub struct SizeDiagnostics {
    /// What the effect summaries describe.
    pub effect_is: String,
    /// The treated units' level without the change (what lifts are fractions of).
    pub treated_level: f64,
    /// Residual sd of the outcome model.
    pub outcome_sd: f64,
    /// The table's own number of units.
    pub table_units: usize,
    /// Simulated data sets that failed, per size.
    pub failures: Vec<(usize, String)>,
}

/// Plasmode planning of a unit table: how many units (at the table's share treated) a given
/// lift needs.
///
/// # Errors
/// The analysis's bad input and the plan's errors.
pub fn plan_match(m: &MatchPlanArgs) -> anyhow::Result<crate::verbs::Outcome> {
    let a = &m.analysis;
    let (units, params) = crate::verbs::match_::setup(a)?;
    let n = units.len();
    if let Some(s) = m.sizes.iter().find(|s| **s < 4) {
        return Err(bad_input_msg(format!("--sizes: {s} units are too few to analyse; give sizes of 4 units or more")));
    }
    let mut sizes = if m.sizes.is_empty() { vec![n / 4, n / 2, n, 2 * n] } else { m.sizes.clone() };
    sizes.retain(|s| *s >= 4);
    sizes.sort_unstable();
    sizes.dedup();
    if sizes.is_empty() {
        return Err(bad_input_msg("--sizes: plan for at least one size of 4 units or more"));
    }
    let covariates = params.covariates.clone();
    let estimator = aftercast_calibrate::adapters::matching::MatchEstimator { params };
    let inf = a.common.inference();
    let run_inf = aftercast_core::Inference { draws: usize::try_from(m.run_draws).unwrap_or(200), ..inf };
    let watch = Watch::new()?;
    let control = watch.control(None);
    let _stage = aftercast_core::progress::stage(
        format!("{} simulated data sets at {} sizes", m.plan.placebos, sizes.len()),
        None,
    );
    let question = aftercast_calibrate::plasmode::SizeQuestion { sizes: sizes.clone(), runs: m.plan.placebos };
    let plan = aftercast_calibrate::plasmode::plan_sizes(
        &units,
        &a.outcome,
        &covariates,
        &estimator,
        &question,
        &run_inf,
        &control,
    )
    .map_err(classify)?;
    // false positives are judged at the table's own size when it is planned, else the largest
    let q = PlanQuestion {
        shown: plan.thresholds.waits.clone(),
        lifts: m.plan.lifts.clone(),
        level: inf.level,
        target: m.plan.power,
        judged_wait: if sizes.contains(&n) { n } else { *sizes.last().unwrap_or(&n) },
        wait_unit: "units".into(),
    };
    let planning = planning(&plan.thresholds, &q);
    // the draws: each simulated data set's placebo estimate at the judged size, in outcome units
    let j = plan.thresholds.waits.iter().position(|w| *w == q.judged_wait).unwrap_or(0);
    let mids: Vec<f64> = plan
        .thresholds
        .runs
        .iter()
        .map(|r| r[j])
        .filter(|x| !(x.0.is_nan() || x.1.is_nan()))
        .map(|(up, down)| plan.base * (down - up) / 2.0)
        .collect();
    let mut sorted = mids.clone();
    sorted.sort_by(f64::total_cmp);
    let point = if sorted.is_empty() { f64::NAN } else { aftercast_resample::summary::quantile_sorted(&sorted, 0.5) };
    let mut est = Estimate::new(
        "plan",
        &format!("plasmode ({})", a.method.name()),
        "placebo effect of simulated data sets with no effect (midpoint of each interval)",
        Point::Scalar { effect: point, baseline: Some(plan.base) },
        EffectDraws::Scalar { effect: mids.clone(), baseline: Some(vec![plan.base; mids.len()]) },
        Scope { per: Per::Unit, units: units.n_treated() },
        SizeDiagnostics {
            effect_is: format!(
                "placebo estimates of {} over simulated data sets of {} units",
                a.method.name(),
                q.judged_wait
            ),
            treated_level: plan.base,
            outcome_sd: plan.sigma,
            table_units: n,
            failures: plan.failures.clone(),
        },
    );
    est.sections.planning = Some(planning.clone());
    for w in aftercast_calibrate::plan::warnings(&planning) {
        est.warn(w);
    }
    if let Some((size, msg)) = plan.failures.first() {
        est.warn(format!(
            "{} simulated data sets failed and are left out of their size's numbers (first at {size} units: {msg}); many failures at a size mean the method cannot run there and that size's numbers are unreliable: leave it out of --sizes, or simplify the propensity model (fewer --squares, --interact or --terms)",
            plan.failures.len()
        ));
    }
    if plan.interrupted {
        est.warn("interrupted: the numbers use the simulated data sets that finished, so they are rougher than a full plan's: rerun to the end for the full set".to_string());
    }
    est.assumptions = vec![
        "Outcomes follow a linear model of the covariates with normal noise, fitted on the untreated units: a stand-in for the real outcomes.".into(),
        "A change adds the same amount to every treated unit's outcome.".into(),
        "Treatment depends on the covariates only (no hidden confounding), as in the simulated data by construction; the real data can be worse.".into(),
        "A randomized test with a holdout is stronger evidence than any plan of an observational analysis, where one is possible.".into(),
    ];
    let headline = format!(
        "plan for '{}' of '{}' by {}: {} simulated data sets at {} sizes",
        a.outcome,
        a.treatment,
        a.method.name(),
        m.plan.placebos,
        sizes.len()
    );
    let mut out = crate::verbs::Outcome::new(est, &inf, vec![units.input.clone()], headline)?;
    out.tables.push(plan_table(&planning));
    if plan.interrupted {
        out.interrupted = Some("the plan was stopped; the outputs cover the simulated data sets that finished".into());
    }
    Ok(out)
}
