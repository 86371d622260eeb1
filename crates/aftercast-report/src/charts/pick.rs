//! Choosing the charts of one [`AnalysisResult`]: which views its fields, its kept draws and its
//! typed figure data support, under stable file names.

use super::theme::ValueFormat;
use super::{
    Chart, EstimateBar, PosteriorSource, SeriesNames, balance_chart, breakdown_chart, counterfactual_chart,
    effect_chart, estimates_chart, event_time_chart, mde_chart, placebo_gap_chart, posterior_chart, power_chart,
    propensity_chart, rosenbaum_chart, running_total_chart, weights_chart, x_values,
};
use crate::ReportError;
use aftercast_core::estimate::{Figures, KeptDraws};
use aftercast_core::result::{AnalysisResult, Judged};
use std::path::{Path, PathBuf};

/// Periods of context shown before the change: twice the post-period, at least 24, at most the
/// whole pre-period.
fn focus_start(path: &[aftercast_core::result::PathPoint]) -> usize {
    match path.iter().position(|p| p.post) {
        Some(k) => k.saturating_sub((2 * (path.len() - k)).max(24)),
        None => 0,
    }
}

/// Width of the charts after the first: two share a row of the report on a desktop.
pub const COMPACT_WIDTH: u32 = 640;

/// The charts of one result, named `<stem>-<view>`, the lead view first at full width and the
/// rest compact:
/// - series verbs (`path`): `counterfactual` (or `treated-vs-synthetic`) around the change
///   (the post-period and twice its length before it, the effect shaded), `running-total` (the
///   accumulated effect), then `effect` (the gap over the whole history, robust limits);
/// - synthetic: `placebo-gaps`, `weights`;
/// - match: `propensity`, `balance`, `rosenbaum`;
/// - compare: `versus-truth`;
/// - backtest: `power`, `mde`;
/// - rollout: `event-time` (the lead view), `wave`, `placebo-date`; any verb with segments:
///   `segment`;
/// - every verb: `posterior` (of the quantity the verdict is judged on).
pub fn charts_for(r: &AnalysisResult, draws: &KeptDraws, figures: &Figures, stem: &str) -> Vec<Chart> {
    let name = |view: &str| if stem.is_empty() { view.to_string() } else { format!("{stem}-{view}") };
    let synthetic = r.verb == "synthetic";
    let mut out = Vec::new();
    if let Some(path) = r.path.as_ref() {
        let times: Vec<_> = path.iter().map(|p| p.time).collect();
        let (x, kind) = x_values(&times);
        let change = path.iter().position(|p| p.post).map(|i| x[i]);
        let observed: Vec<f64> = path.iter().map(|p| p.observed.unwrap_or(f64::NAN)).collect();
        let cf: Vec<f64> = path.iter().map(|p| p.counterfactual).collect();
        let lo: Vec<f64> = path.iter().map(|p| p.lower).collect();
        let hi: Vec<f64> = path.iter().map(|p| p.upper).collect();
        let names = if synthetic {
            SeriesNames { observed: "treated", counterfactual: "synthetic control" }
        } else {
            SeriesNames::default()
        };
        let view = if synthetic { "treated-vs-synthetic" } else { "counterfactual" };
        let f = focus_start(path);
        out.push(counterfactual_chart(
            &name(view),
            &x[f..],
            kind,
            &observed[f..],
            (&cf[f..], &lo[f..], &hi[f..]),
            change,
            names,
            r.level,
        ));
        // effect per period: the summary where stored (post), observed - counterfactual band otherwise (pre)
        let gap: Vec<f64> = observed.iter().zip(&cf).map(|(o, c)| o - c).collect();
        let eff = |f: fn(&aftercast_core::result::Summary) -> f64, fallback: &dyn Fn(usize) -> f64| -> Vec<f64> {
            path.iter().enumerate().map(|(i, p)| p.effect.as_ref().map_or_else(|| fallback(i), f)).collect()
        };
        let e_mid = eff(|s| s.estimate, &|i| gap[i]);
        let e_lo = eff(|s| s.lower, &|i| observed[i] - hi[i]);
        let e_hi = eff(|s| s.upper, &|i| observed[i] - lo[i]);
        let effect = effect_chart(&name("effect"), &x, kind, (&e_mid, &e_lo, &e_hi), change, r.level);
        let post: Vec<usize> = (0..path.len()).filter(|&i| path[i].post && path[i].cumulative.is_some()).collect();
        if !post.is_empty() {
            let px: Vec<f64> = post.iter().map(|&i| x[i]).collect();
            let pick = |f: fn(&aftercast_core::result::Summary) -> f64| -> Vec<f64> {
                post.iter().map(|&i| path[i].cumulative.as_ref().map_or(f64::NAN, f)).collect()
            };
            out.push(running_total_chart(
                &name("running-total"),
                &px,
                kind,
                (&pick(|s| s.estimate), &pick(|s| s.lower), &pick(|s| s.upper)),
                r.level,
            ));
        }
        if let Some(c) = posterior_for(r, draws, &name("posterior")) {
            out.push(c);
        }
        out.push(effect);
        if synthetic && !figures.placebo_gaps.is_empty() {
            let placebos: Vec<(String, Vec<f64>)> = figures
                .placebo_gaps
                .iter()
                .map(|c| (c.name.clone(), c.values.get(f..).map_or_else(Vec::new, <[f64]>::to_vec)))
                .collect();
            out.push(placebo_gap_chart(&name("placebo-gaps"), &x[f..], kind, &gap[f..], &placebos, change));
        }
    }
    if let Some(w) = r.weights.as_ref() {
        let pairs: Vec<(String, f64)> = w.iter().map(|u| (u.unit.clone(), u.weight)).collect();
        out.push(weights_chart(&name("weights"), &pairs, 20));
    }
    if let Some(b) = &figures.propensity {
        out.push(propensity_chart(
            &name("propensity"),
            &b.edges,
            (&b.treated_before, &b.control_before),
            (&b.treated_after, &b.control_after),
        ));
    }
    if let Some(bal) = r.balance.as_ref() {
        let rows: Vec<(String, f64, f64)> =
            bal.iter().map(|b| (b.covariate.clone(), b.smd_before, b.smd_after)).collect();
        out.push(balance_chart(&name("balance"), &rows, 0.1));
    }
    if let Some(sc) = figures.sensitivity.as_ref().filter(|sc| !sc.gamma.is_empty()) {
        out.push(rosenbaum_chart(&name("rosenbaum"), &sc.gamma, &sc.p_upper, sc.alpha));
    }
    if let (Some(truth), Some(est)) = (r.truth.as_ref(), r.estimates.as_ref()) {
        let rows: Vec<EstimateBar> =
            est.iter().map(|e| EstimateBar { label: e.method.clone(), summary: e.summary }).collect();
        out.push(estimates_chart(&name("versus-truth"), &rows, Some(truth), r.level, "effect", ValueFormat::Number));
    }
    if let Some(p) = r.planning.as_ref() {
        let mut lifts: Vec<f64> = p.power.iter().map(|x| x.lift).filter(|v| v.is_finite()).collect();
        lifts.sort_by(f64::total_cmp);
        lifts.dedup();
        let curves: Vec<(String, Vec<f64>, Vec<f64>)> = lifts
            .iter()
            .map(|lift| {
                let mut pts: Vec<_> = p.power.iter().filter(|x| x.lift == *lift).collect();
                pts.sort_by_key(|x| x.wait);
                (
                    format!("{} change", aftercast_core::result::lift_text(*lift)),
                    pts.iter().map(|x| x.wait as f64).collect(),
                    pts.iter().map(|x| x.power).collect(),
                )
            })
            .collect();
        out.push(power_chart(&name("power"), &curves, p.target_power, &p.wait_unit));
        let mut m = p.mde.clone();
        m.sort_by_key(|x| x.wait);
        let l: Vec<f64> = m.iter().map(|x| x.wait as f64).collect();
        let v: Vec<f64> = m.iter().map(|x| x.mde.unwrap_or(f64::NAN)).collect();
        out.push(mde_chart(&name("mde"), &l, &v, p.target_power, &p.wait_unit));
    }
    for b in &r.breakdowns {
        let rows: Vec<&aftercast_core::result::BreakdownRow> = b.rows.iter().collect();
        match b.by.as_str() {
            "event-time" => {
                let k: Vec<f64> = rows.iter().map(|r| r.key.unwrap_or(f64::NAN)).collect();
                let pick = |f: fn(&aftercast_core::result::Summary) -> f64| -> Vec<f64> {
                    rows.iter().map(|r| f(&r.summary)).collect()
                };
                // the lead view of a rollout
                out.insert(
                    0,
                    event_time_chart(
                        &name("event-time"),
                        &k,
                        (&pick(|s| s.estimate), &pick(|s| s.hdi_lower), &pick(|s| s.hdi_upper)),
                        r.level,
                    ),
                );
            }
            "wave" | "segment" | "placebo-date" => {
                let bars: Vec<EstimateBar> =
                    rows.iter().map(|x| EstimateBar { label: x.label.clone(), summary: x.summary }).collect();
                let (title, caption) = match b.by.as_str() {
                    "wave" => (
                        "Effect by wave",
                        "Each wave's average effect over its periods after adoption, with its interval; waves are named by their first adopted period.",
                    ),
                    "segment" => (
                        "Effect by segment",
                        "Each segment's average effect with its interval, each fitted on its own units; the vertical rule marks no effect.",
                    ),
                    _ => (
                        "Fake adoption dates",
                        "Estimates with every wave moved earlier, on data before the real rollout: nothing happened there, so they should sit on zero.",
                    ),
                };
                out.push(breakdown_chart(&name(b.by.as_str()), title, caption, &bars, "average effect"));
            }
            _ => {}
        }
    }
    if r.path.is_none()
        && let Some(c) = posterior_for(r, draws, &name("posterior"))
    {
        // the distribution of the effect right after the lead view
        out.insert(out.len().min(1), c);
    }
    for c in out.iter_mut().skip(1) {
        let h = (f64::from(c.height) * 0.8).round().max(300.0) as u32;
        *c = c.clone().with_size(COMPACT_WIDTH, h);
    }
    out
}

/// The distribution chart of the quantity the verdict is judged on (the relative effect under
/// a percent ROPE, the average effect otherwise), drawn from the kept draws; None when the
/// result kept no draws of it.
fn posterior_for(r: &AnalysisResult, draws: &KeptDraws, name: &str) -> Option<Chart> {
    let per = format!("average effect {}", r.scope.average_label());
    let rope = Some((r.rope.low, r.rope.high));
    // The threshold is in outcome units: it is marked on the chart of the average effect only.
    let (values, summary, rope, threshold, quantity, format) = match (r.judged_on.quantity, r.effect.relative.as_ref())
    {
        (Judged::Relative, Some(rel)) => {
            (&draws.relative, rel, rope, None, "relative effect".to_string(), ValueFormat::Percent)
        }
        (Judged::Average, _) => (&draws.average, &r.effect.average, rope, r.threshold, per, ValueFormat::Number),
        _ => (&draws.average, &r.effect.average, None, r.threshold, per, ValueFormat::Number),
    };
    if values.is_empty() {
        return None;
    }
    Some(posterior_chart(name, PosteriorSource::Draws(values), summary, r.level, rope, threshold, &quantity, format))
}

/// Write every chart of a result into `dir` as `<stem>-<view>.png` and `.svg` (atomically);
/// returns the paths written, PNG before SVG for each chart.
///
/// # Errors
/// [`ReportError::Write`] naming the file that could not be drawn or written.
pub fn write_all(
    result: &AnalysisResult,
    draws: &KeptDraws,
    figures: &Figures,
    dir: &Path,
    stem: &str,
) -> Result<Vec<PathBuf>, ReportError> {
    let mut paths = Vec::new();
    for c in charts_for(result, draws, figures, stem) {
        paths.extend(c.write(dir)?);
    }
    Ok(paths)
}
