//! The one summary path: an [`Estimate`] plus the [`Inference`] options become the result
//! document, the kept draws and the report's figure data. The ROPE's units are applied here
//! ([`judge`]) and nowhere else; relative effects are computed per draw (effect divided by
//! that draw's counterfactual), never by dividing two summaries.
//!
//! Point answers (`estimate` in every summary) are computed from the estimator's own point
//! ([`Point`]) by the same formulas as each draw: for a series, observed minus the point
//! counterfactual path; for a unit-level estimand, the point effect.

use crate::summary::{quantile_sorted, summarize, verdict};
use aftercast_core::estimate::{BreakdownInput, Estimate, Figures, Inference, KeptDraws, Per, Point, TotalRule};
use aftercast_core::result::{
    AnalysisResult, Breakdown, BreakdownRow, EffectBlock, EffectDraws, IntervalKind, Judged, JudgedOn, PathPoint, Rope,
    RopeUnits, Summary, TOOL_VERSION, Verdict,
};
use aftercast_core::table::InputInfo;
use aftercast_core::time::TimePoint;
use serde::Serialize;

/// Errors of the summary path.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum FinishError {
    /// The diagnostics could not be turned into the result document.
    #[error("cannot write the diagnostics of {verb} ({method}) into the result: {source}")]
    Diagnostics {
        /// Verb.
        verb: String,
        /// Method.
        method: String,
        /// The cause.
        #[source]
        source: serde_json::Error,
    },
    /// The diagnostics did not serialise to a JSON object.
    #[error("the diagnostics of {verb} ({method}) are not a JSON object")]
    NotAnObject {
        /// Verb.
        verb: String,
        /// Method.
        method: String,
    },
    /// The point answer does not match the draws (a bug in an estimator).
    #[error("the point answer of {verb} ({method}) does not match its draws: {detail}")]
    Mismatch {
        /// Verb.
        verb: String,
        /// Method.
        method: String,
        /// What differs.
        detail: String,
    },
}

/// The summarised estimate: what the terminal, result.json, the draws file and the report use.
#[derive(Debug, Clone)]
pub struct Finished {
    /// The result document.
    pub result: AnalysisResult,
    /// Per-draw values of the summarised quantities.
    pub draws: KeptDraws,
    /// Typed figure data.
    pub figures: Figures,
}

/// The verdict of an effect block under a ROPE, and what it was judged on: the HDI of the
/// relative effect for a ROPE in percent, the HDI of the average effect for a ROPE in outcome
/// units. A percent ROPE on a block without a relative effect is judged against zero alone
/// (gain, loss or inconclusive).
pub fn judge(block: &EffectBlock, rope: &Rope) -> (Verdict, JudgedOn) {
    let on = |quantity| JudgedOn { quantity, interval: IntervalKind::Hdi };
    match (rope.units, &block.relative) {
        (RopeUnits::Percent, Some(r)) => (verdict(r.judged_interval(), (rope.low, rope.high)), on(Judged::Relative)),
        (RopeUnits::Percent, None) => (verdict(block.average.judged_interval(), (0.0, 0.0)), on(Judged::Sign)),
        (RopeUnits::Outcome, _) => {
            (verdict(block.average.judged_interval(), (rope.low, rope.high)), on(Judged::Average))
        }
    }
}

/// Effects of a unit-level estimand from its draws: average (per unit), cumulative (times
/// `units`, when given: the total over the treated units), relative (per draw against
/// `baseline`). `point` and `point_baseline` give each summary's `estimate`.
pub fn scalar_block(
    point: f64,
    point_baseline: Option<f64>,
    effect: &[f64],
    baseline: Option<&[f64]>,
    units: Option<usize>,
    inf: &Inference,
) -> (EffectBlock, KeptDraws) {
    let average = summarize(effect, inf.level, inf.threshold).with_estimate(point);
    let cum_draws: Vec<f64> = units.map(|n| effect.iter().map(|e| e * n as f64).collect()).unwrap_or_default();
    let cumulative = units.map(|n| summarize(&cum_draws, inf.level, None).with_estimate(point * n as f64));
    let rel_draws: Vec<f64> = baseline.map(|b| effect.iter().zip(b).map(|(e, b)| e / b).collect()).unwrap_or_default();
    let relative = baseline.map(|_| {
        let p = point_baseline.map_or(f64::NAN, |b| point / b);
        summarize(&rel_draws, inf.level, None).with_estimate(p)
    });
    let kept = KeptDraws { average: effect.to_vec(), cumulative: cum_draws, relative: rel_draws, total: Vec::new() };
    (EffectBlock { average, cumulative, relative, total: None }, kept)
}

/// Per-path sums of a series: (sum of effects, sum of counterfactual) over observed periods.
fn path_sums(observed: &[f64], path: &[f64]) -> (f64, f64) {
    observed.iter().zip(path).filter(|(y, _)| y.is_finite()).fold((0.0, 0.0), |(e, c), (y, p)| (e + y - p, c + p))
}

struct SeriesOut {
    block: EffectBlock,
    kept: KeptDraws,
    path: Vec<PathPoint>,
    nonfinite_relative: usize,
}

fn series_block(
    times: &[TimePoint],
    observed: &[f64],
    counterfactual: &[Vec<f64>],
    point_path: &[f64],
    total: Option<TotalRule>,
    inf: &Inference,
) -> SeriesOut {
    let t_len = observed.len();
    let d = counterfactual.len();
    let n_obs = observed.iter().filter(|v| v.is_finite()).count().max(1) as f64;
    let mut kept = KeptDraws {
        average: Vec::with_capacity(d),
        cumulative: Vec::with_capacity(d),
        relative: Vec::with_capacity(d),
        total: Vec::new(),
    };
    let mut per_t: Vec<Vec<f64>> = vec![Vec::with_capacity(d); t_len];
    let mut cum_t: Vec<Vec<f64>> = vec![Vec::with_capacity(d); t_len];
    for path in counterfactual {
        let mut running = 0.0;
        for t in 0..t_len {
            if observed[t].is_finite() {
                let e = observed[t] - path[t];
                running += e;
                per_t[t].push(e);
            }
            cum_t[t].push(running);
        }
        let (s_eff, s_cf) = path_sums(observed, path);
        kept.average.push(s_eff / n_obs);
        kept.cumulative.push(s_eff);
        kept.relative.push(s_eff / s_cf);
    }
    let (p_eff, p_cf) = path_sums(observed, point_path);
    let nonfinite_relative = kept.relative.iter().filter(|v| !v.is_finite()).count();
    let average = summarize(&kept.average, inf.level, inf.threshold).with_estimate(p_eff / n_obs);
    let cumulative = summarize(&kept.cumulative, inf.level, None).with_estimate(p_eff);
    let relative = summarize(&kept.relative, inf.level, None).with_estimate(p_eff / p_cf);
    let total = total.map(|rule| {
        kept.total = kept.cumulative.iter().map(|c| rule.point + rule.units as f64 * (c - p_eff)).collect();
        summarize(&kept.total, inf.level, None).with_estimate(rule.point)
    });
    let tail = (1.0 - inf.level) / 2.0;
    let mut running_point = 0.0;
    let path = (0..t_len)
        .map(|t| {
            let mut cf: Vec<f64> = counterfactual.iter().map(|p| p[t]).filter(|v| v.is_finite()).collect();
            cf.sort_by(f64::total_cmp);
            let point_eff = observed[t] - point_path[t];
            if observed[t].is_finite() {
                running_point += point_eff;
            }
            PathPoint {
                time: times[t],
                observed: observed[t].is_finite().then_some(observed[t]),
                counterfactual: point_path[t],
                lower: quantile_sorted(&cf, tail),
                upper: quantile_sorted(&cf, 1.0 - tail),
                post: true,
                effect: (!per_t[t].is_empty()).then(|| summarize(&per_t[t], inf.level, None).with_estimate(point_eff)),
                cumulative: Some(summarize(&cum_t[t], inf.level, None).with_estimate(running_point)),
            }
        })
        .collect();
    SeriesOut {
        block: EffectBlock { average, cumulative: Some(cumulative), relative: Some(relative), total },
        kept,
        path,
        nonfinite_relative,
    }
}

/// Turn an estimate into the result document, its kept draws and its figure data.
///
/// # Errors
/// [`FinishError`] when the diagnostics cannot be written as a JSON object or the point answer
/// does not fit the draws (both are bugs, not bad input).
pub fn finish<D: Serialize>(
    est: Estimate<D>,
    inf: &Inference,
    inputs: Vec<InputInfo>,
) -> Result<Finished, FinishError> {
    let mismatch =
        |detail: String| FinishError::Mismatch { verb: est.verb.clone(), method: est.method.clone(), detail };
    let mut warnings = est.warnings.clone();
    let (block, kept, path) = match (&est.draws, &est.point) {
        (EffectDraws::Path { times, observed, counterfactual }, Point::Path(point_path)) => {
            if point_path.len() != observed.len() || counterfactual.iter().any(|p| p.len() != observed.len()) {
                return Err(mismatch(format!(
                    "{} post-periods observed, point path of {}",
                    observed.len(),
                    point_path.len()
                )));
            }
            let out = series_block(times, observed, counterfactual, point_path, est.total, inf);
            if out.nonfinite_relative > 0 {
                warnings.push(format!(
                    "{} draws had a zero counterfactual sum; their relative effect is not a number and is left out, so the relative effect rests on the other draws: if that is many, read the effect in outcome units instead",
                    out.nonfinite_relative
                ));
            }
            let mut path = est.sections.pre_path.clone();
            path.extend(out.path);
            (out.block, out.kept, Some(path))
        }
        (EffectDraws::Scalar { effect, baseline }, Point::Scalar { effect: p, baseline: pb }) => {
            let units = match est.scope.per {
                Per::Unit => Some(est.scope.units),
                Per::UnitPeriod => Some(est.scope.units),
                Per::Period | Per::AllTreated | Per::Comparison => None,
            };
            let (block, kept) = scalar_block(*p, *pb, effect, baseline.as_deref(), units, inf);
            (block, kept, None)
        }
        _ => return Err(mismatch("series draws need a point path, scalar draws a scalar point".into())),
    };
    let (verdict, judged_on) = judge(&block, &inf.rope);
    if judged_on.quantity == Judged::Sign {
        warnings.push(
            "the ROPE is in percent, but this estimate has no counterfactual level to take a percentage of; \
             the verdict says only whether the interval excludes zero (give --rope in outcome units to judge size)"
                .into(),
        );
    }
    let diagnostics = match serde_json::to_value(&est.diagnostics) {
        Ok(serde_json::Value::Object(m)) => m,
        Ok(_) => return Err(FinishError::NotAnObject { verb: est.verb.clone(), method: est.method.clone() }),
        Err(source) => {
            return Err(FinishError::Diagnostics { verb: est.verb.clone(), method: est.method.clone(), source });
        }
    };
    let breakdowns = est.sections.breakdowns.iter().map(|b| breakdown(b, inf)).collect();
    let mut seen = std::collections::HashSet::new();
    warnings.retain(|w| seen.insert(w.clone()));
    let s = est.sections;
    let result = AnalysisResult {
        tool_version: TOOL_VERSION.to_string(),
        verb: est.verb,
        method: est.method,
        level: inf.level,
        seed: inf.seed,
        inputs,
        estimand: Some(est.estimand),
        outcome_unit: None,
        scope: est.scope,
        effect: block,
        verdict,
        judged_on,
        rope: inf.rope,
        threshold: inf.threshold,
        diagnostics,
        warnings,
        path,
        weights: s.weights,
        placebo: s.placebo,
        balance: s.balance,
        sample: s.sample,
        truth: s.truth,
        estimates: s.estimates,
        planning: s.planning,
        breakdowns,
        assumptions: est.assumptions,
    };
    Ok(Finished { result, draws: kept, figures: est.figures })
}

/// Summarise one breakdown: each row's draws at the run's level (estimate = the row's point),
/// and the joint question from the rows' draws.
fn breakdown(b: &BreakdownInput, inf: &Inference) -> Breakdown {
    let rows = b
        .rows
        .iter()
        .map(|r| BreakdownRow {
            label: r.label.clone(),
            key: r.key,
            units: r.units,
            summary: summarize(&r.draws, inf.level, None).with_estimate(r.point),
            note: r.note.clone(),
        })
        .collect();
    let test = b.joint.as_ref().and_then(|(q, idx)| {
        let labels: Vec<String> = idx.iter().map(|&i| b.rows[i].label.clone()).collect();
        let points: Vec<f64> = idx.iter().map(|&i| b.rows[i].point).collect();
        let draws: Vec<Vec<f64>> = idx.iter().map(|&i| b.rows[i].draws.clone()).collect();
        crate::joint::wald(*q, &labels, &points, &draws, b.clusters)
    });
    Breakdown { by: b.by.clone(), title: b.title.clone(), rows, test }
}

/// The summary the verdict of a result was judged on (relative or average).
pub fn judged_summary(r: &AnalysisResult) -> &Summary {
    match (r.judged_on.quantity, &r.effect.relative) {
        (Judged::Relative, Some(rel)) => rel,
        _ => &r.effect.average,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use aftercast_core::estimate::Scope;

    #[derive(Serialize)]
    struct NoDiag {}

    fn inf(rope: Rope) -> Inference {
        Inference { rope, ..Inference::default() }
    }

    #[test]
    fn series_relative_is_per_draw_ratio_and_point_comes_from_point_path() {
        let times = [TimePoint::Period(1), TimePoint::Period(2)];
        let draws = EffectDraws::Path {
            times: times.to_vec(),
            observed: vec![110.0, 120.0],
            counterfactual: vec![vec![100.0, 100.0], vec![50.0, 150.0]],
        };
        let est =
            Estimate::new("forecast", "m", "e", Point::Path(vec![100.0, 110.0]), draws, Scope::series(), NoDiag {});
        let f = finish(est, &inf(Rope::default()), Vec::new()).expect("finish");
        // Draw 1: effects 10, 20 -> rel 30/200; draw 2: 60, -30 -> 30/200. Both 0.15.
        let r = f.result.effect.relative.expect("relative");
        assert!((r.mean - 0.15).abs() < 1e-12);
        // Point: effects 10, 10 -> average 10, total 20, relative 20/210.
        assert!((f.result.effect.average.estimate - 10.0).abs() < 1e-12);
        assert!((r.estimate - 20.0 / 210.0).abs() < 1e-12);
        assert_eq!(f.draws.relative.len(), 2);
        let path = f.result.path.expect("path");
        assert_eq!(path[1].counterfactual, 110.0);
    }

    #[test]
    fn total_over_treated_units_scales_deviations() {
        let times = [TimePoint::Period(1)];
        let draws = EffectDraws::Path {
            times: times.to_vec(),
            observed: vec![10.0],
            counterfactual: vec![vec![8.0], vec![6.0]],
        };
        let scope = Scope { per: Per::Period, units: 3 };
        let mut est = Estimate::new("synthetic", "m", "e", Point::Path(vec![7.0]), draws, scope, NoDiag {});
        est.total = Some(TotalRule { units: 3, point: 9.0 });
        let f = finish(est, &inf(Rope::default()), Vec::new()).expect("finish");
        // Per-unit cumulative draws 2 and 4, point 3: totals 9 + 3 * (2 - 3) = 6 and 9 + 3 = 12.
        assert_eq!(f.draws.total, vec![6.0, 12.0]);
        assert_eq!(f.result.effect.total.expect("total").estimate, 9.0);
    }

    #[test]
    fn rope_units_are_applied_once_here() {
        // Hand-computed: average draws all in [2, 3]; baseline 100 -> relative 2%-3%.
        let effect: Vec<f64> = (0..101).map(|i| 2.0 + i as f64 / 100.0).collect();
        let baseline = vec![100.0; 101];
        let block = scalar_block(2.5, Some(100.0), &effect, Some(&baseline), Some(10), &Inference::default()).0;
        // 1% ROPE on the relative effect: [2%, 3%] lies above +1% -> gain.
        assert_eq!(judge(&block, &"1%".parse().expect("rope")).0, Verdict::Gain);
        // 5% ROPE: the relative interval lies inside [-5%, 5%] -> negligible.
        assert_eq!(judge(&block, &"5%".parse().expect("rope")).0, Verdict::Negligible);
        // 2.5 outcome units: [2, 3] above zero, reaching into the ROPE -> gain-but-small.
        assert_eq!(judge(&block, &"2.5".parse().expect("rope")).0, Verdict::GainButSmall);
        // 1 outcome unit: wholly above -> gain (not judged as 0.01 in outcome units).
        assert_eq!(judge(&block, &"1".parse().expect("rope")).0, Verdict::Gain);
        // Without a relative effect a percent ROPE can only say the sign.
        let no_rel = EffectBlock { relative: None, ..block.clone() };
        let (v, on) = judge(&no_rel, &"50%".parse().expect("rope"));
        assert_eq!((v, on.quantity), (Verdict::Gain, Judged::Sign));
    }
}
