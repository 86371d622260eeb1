//! Choosing the charts of one [`AnalysisResult`]: which views its fields (and the extras a verb
//! hands over) support, under stable file names.

use super::theme::ValueFormat;
use super::{
    Chart, EstimateBar, PosteriorSource, SeriesNames, balance_chart, counterfactual_chart, effect_chart,
    estimates_chart, mde_chart, placebo_gap_chart, posterior_chart, power_chart, propensity_chart, rosenbaum_chart,
    running_total_chart, weights_chart, x_values,
};
use crate::ReportError;
use aftercast_core::result::{AnalysisResult, RopeUnits};
use serde_json::Value;
use std::path::{Path, PathBuf};

/// One point of a backtest power grid.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PowerPoint {
    /// Number of post-periods.
    pub post_length: f64,
    /// True effect size injected (in the unit of the ROPE: fraction for percent).
    pub effect: f64,
    /// Share of backtests that detected it.
    pub power: f64,
}

/// Minimum detectable effect for one post-period length.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct MdePoint {
    /// Number of post-periods.
    pub post_length: f64,
    /// Minimum detectable effect.
    pub mde: f64,
}

/// Data a verb can hand over beside the JSON result, for charts that need more than it stores.
/// Every field is optional; when a field is empty the picker also looks for the documented
/// keys in `result.extra` and `result.diagnostics` (see docs/report.md).
#[derive(Debug, Clone, Default)]
pub struct ChartExtras {
    /// Draws of the average effect (outcome units) for the posterior chart.
    pub average_draws: Option<Vec<f64>>,
    /// Draws of the relative effect (fractions) for the posterior chart under a percent ROPE.
    pub relative_draws: Option<Vec<f64>>,
    /// Placebo gap paths (unit, gap per period of `result.path`), synthetic control.
    pub placebo_gaps: Vec<(String, Vec<f64>)>,
    /// Backtest power grid.
    pub power: Vec<PowerPoint>,
    /// Backtest minimum detectable effect per post-period length.
    pub mde: Vec<MdePoint>,
}

fn lookup<'a>(r: &'a AnalysisResult, key: &str) -> Option<&'a Value> {
    r.extra.get(key).or_else(|| r.diagnostics.get(key))
}

fn f64s(v: &Value) -> Option<Vec<f64>> {
    v.as_array().map(|a| a.iter().map(|x| x.as_f64().unwrap_or(f64::NAN)).collect())
}

fn num(v: &Value, keys: &[&str]) -> f64 {
    keys.iter().find_map(|k| v.get(*k).and_then(Value::as_f64)).unwrap_or(f64::NAN)
}

/// Placebo gaps stored by the synthetic verb: `placebo_runs` (an array of runs, or an object
/// with `runs`) or `placebo.runs`; each run is `{unit, gap: [..], kept}` and runs with
/// `kept: false` are left out.
fn placebo_from_result(r: &AnalysisResult) -> Vec<(String, Vec<f64>)> {
    let runs = match lookup(r, "placebo_runs") {
        Some(Value::Object(o)) => o.get("runs"),
        Some(v) => Some(v),
        None => lookup(r, "placebo").and_then(|p| p.get("runs")),
    };
    let Some(Value::Array(runs)) = runs else { return Vec::new() };
    runs.iter()
        .filter(|run| run.get("kept").and_then(Value::as_bool).unwrap_or(true))
        .filter_map(|run| {
            let unit = run.get("unit").and_then(Value::as_str).unwrap_or("donor").to_string();
            run.get("gap").and_then(f64s).map(|g| (unit, g))
        })
        .collect()
}

/// A backtest table: `key` at the top of `extra`/`diagnostics`, or inside `backtest`.
fn backtest_table<'a>(r: &'a AnalysisResult, key: &str) -> Option<&'a Vec<Value>> {
    lookup(r, key).or_else(|| lookup(r, "backtest").and_then(|b| b.get(key))).and_then(Value::as_array)
}

/// Power rows; the flag tells whether effects are lifts (fractions of the counterfactual).
fn power_from_result(r: &AnalysisResult) -> (Vec<PowerPoint>, bool) {
    let Some(a) = backtest_table(r, "power") else { return (Vec::new(), false) };
    let lift = a.iter().any(|p| p.get("lift").is_some());
    let rows = a
        .iter()
        .map(|p| PowerPoint {
            post_length: num(p, &["post_length", "length"]),
            effect: num(p, &["effect", "effect_size", "lift"]),
            power: num(p, &["power"]),
        })
        .collect();
    (rows, lift)
}

/// MDE rows (`mde`, or the smallest detected `increase`, else `decrease`, as fractions).
fn mde_from_result(r: &AnalysisResult) -> (Vec<MdePoint>, bool) {
    let Some(a) = backtest_table(r, "mde") else { return (Vec::new(), false) };
    let lift = a.iter().any(|p| p.get("increase").is_some() || p.get("decrease").is_some());
    let rows = a
        .iter()
        .map(|p| MdePoint {
            post_length: num(p, &["post_length", "length"]),
            mde: num(p, &["mde", "increase", "decrease"]),
        })
        .collect();
    (rows, lift)
}

/// The charts of one result, named `<stem>-<view>`:
/// - series verbs (`path`): `counterfactual` (or `treated-vs-synthetic`), `effect`, `running-total`;
/// - synthetic: `placebo-gaps`, `weights`;
/// - match: `propensity`, `balance`, `rosenbaum`;
/// - compare: `versus-truth`;
/// - backtest: `power`, `mde`;
/// - every verb: `posterior` (of the quantity the verdict is judged on).
pub fn charts_for(r: &AnalysisResult, extras: &ChartExtras, stem: &str) -> Vec<Chart> {
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
        out.push(counterfactual_chart(&name(view), &x, kind, &observed, (&cf, &lo, &hi), change, names, r.level));
        // effect per period: the summary where stored (post), observed - counterfactual band otherwise (pre)
        let gap: Vec<f64> = observed.iter().zip(&cf).map(|(o, c)| o - c).collect();
        let eff = |f: fn(&aftercast_core::result::Summary) -> f64, fallback: &dyn Fn(usize) -> f64| -> Vec<f64> {
            path.iter().enumerate().map(|(i, p)| p.effect.as_ref().map_or_else(|| fallback(i), f)).collect()
        };
        let e_mid = eff(|s| s.median, &|i| gap[i]);
        let e_lo = eff(|s| s.lower, &|i| observed[i] - hi[i]);
        let e_hi = eff(|s| s.upper, &|i| observed[i] - lo[i]);
        out.push(effect_chart(&name("effect"), &x, kind, (&e_mid, &e_lo, &e_hi), change, r.level));
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
                (&pick(|s| s.median), &pick(|s| s.lower), &pick(|s| s.upper)),
                r.level,
            ));
        }
        if synthetic {
            let placebos =
                if extras.placebo_gaps.is_empty() { placebo_from_result(r) } else { extras.placebo_gaps.clone() };
            out.push(placebo_gap_chart(&name("placebo-gaps"), &x, kind, &gap, &placebos, change));
        }
    }
    if let Some(w) = r.weights.as_ref() {
        let pairs: Vec<(String, f64)> = w.iter().map(|u| (u.unit.clone(), u.weight)).collect();
        out.push(weights_chart(&name("weights"), &pairs, 20));
    }
    if let Some(b) = lookup(r, "propensity_bins") {
        let get = |k: &str| b.get(k).and_then(f64s).unwrap_or_default();
        let edges = get("edges");
        let (tb, cb, ta, ca) =
            (get("treated_before"), get("control_before"), get("treated_after"), get("control_after"));
        out.push(propensity_chart(&name("propensity"), &edges, (&tb, &cb), (&ta, &ca)));
    }
    if let Some(bal) = r.balance.as_ref() {
        let rows: Vec<(String, f64, f64)> =
            bal.iter().map(|b| (b.covariate.clone(), b.smd_before, b.smd_after)).collect();
        out.push(balance_chart(&name("balance"), &rows, 0.1));
    }
    if let Some(rb) = lookup(r, "rosenbaum")
        && let Some(Value::Array(grid)) = rb.get("grid")
    {
        let g: Vec<f64> = grid.iter().map(|p| num(p, &["gamma"])).collect();
        let p: Vec<f64> = grid.iter().map(|p| num(p, &["p_upper", "p_value"])).collect();
        let alpha = rb.get("alpha").and_then(Value::as_f64).unwrap_or(0.05);
        out.push(rosenbaum_chart(&name("rosenbaum"), &g, &p, alpha));
    }
    if let (Some(truth), Some(est)) = (r.truth.as_ref(), r.estimates.as_ref()) {
        let rows: Vec<EstimateBar> =
            est.iter().map(|e| EstimateBar { label: e.method.clone(), summary: e.summary }).collect();
        out.push(estimates_chart(&name("versus-truth"), &rows, Some(truth), r.level, "effect", ValueFormat::Number));
    }
    let rope_format = if r.rope.units == RopeUnits::Percent { ValueFormat::Percent } else { ValueFormat::Number };
    let as_format = |lift: bool| if lift { ValueFormat::Percent } else { rope_format };
    let (power, effect_format) = if extras.power.is_empty() {
        let (p, lift) = power_from_result(r);
        (p, as_format(lift))
    } else {
        (extras.power.clone(), rope_format)
    };
    if !power.is_empty() {
        let mut lengths: Vec<f64> = power.iter().map(|p| p.post_length).filter(|v| v.is_finite()).collect();
        lengths.sort_by(f64::total_cmp);
        lengths.dedup();
        let curves: Vec<(String, Vec<f64>, Vec<f64>)> = lengths
            .iter()
            .map(|len| {
                let mut pts: Vec<&PowerPoint> = power.iter().filter(|p| p.post_length == *len).collect();
                pts.sort_by(|a, b| a.effect.total_cmp(&b.effect));
                (
                    format!("{len} periods"),
                    pts.iter().map(|p| p.effect).collect(),
                    pts.iter().map(|p| p.power).collect(),
                )
            })
            .collect();
        out.push(power_chart(&name("power"), &curves, 0.8, effect_format));
    }
    let (mde, mde_format) = if extras.mde.is_empty() {
        let (m, lift) = mde_from_result(r);
        (m, as_format(lift))
    } else {
        (extras.mde.clone(), rope_format)
    };
    if !mde.is_empty() {
        let mut m = mde.clone();
        m.sort_by(|a, b| a.post_length.total_cmp(&b.post_length));
        let l: Vec<f64> = m.iter().map(|p| p.post_length).collect();
        let v: Vec<f64> = m.iter().map(|p| p.mde).collect();
        out.push(mde_chart(&name("mde"), &l, &v, mde_format));
    }
    out.push(posterior_for(r, extras, &name("posterior")));
    out
}

/// The posterior chart of the quantity the verdict is judged on: the relative effect under a
/// percent ROPE (when the result has one), the average effect otherwise.
fn posterior_for(r: &AnalysisResult, extras: &ChartExtras, name: &str) -> Chart {
    let per =
        if r.path.is_none() && r.estimand.is_some() { "average effect per unit" } else { "average effect per period" };
    match (r.rope.units, r.effect.relative.as_ref()) {
        (RopeUnits::Percent, Some(rel)) => {
            let src = extras.relative_draws.as_deref().map_or(PosteriorSource::SummaryOnly, PosteriorSource::Draws);
            posterior_chart(
                name,
                src,
                rel,
                r.level,
                Some((r.rope.low, r.rope.high)),
                "relative effect",
                ValueFormat::Percent,
            )
        }
        (RopeUnits::Percent, None) => {
            let src = extras.average_draws.as_deref().map_or(PosteriorSource::SummaryOnly, PosteriorSource::Draws);
            posterior_chart(name, src, &r.effect.average, r.level, None, per, ValueFormat::Number)
        }
        (RopeUnits::Outcome, _) => {
            let src = extras.average_draws.as_deref().map_or(PosteriorSource::SummaryOnly, PosteriorSource::Draws);
            posterior_chart(
                name,
                src,
                &r.effect.average,
                r.level,
                Some((r.rope.low, r.rope.high)),
                per,
                ValueFormat::Number,
            )
        }
    }
}

/// Write every chart of a result into `dir` as `<stem>-<view>.png` and `.svg` (atomically);
/// returns the paths written, PNG before SVG for each chart.
///
/// # Errors
/// [`ReportError::Write`] naming the file that could not be drawn or written.
pub fn write_all(
    result: &AnalysisResult,
    extras: &ChartExtras,
    dir: &Path,
    stem: &str,
) -> Result<Vec<PathBuf>, ReportError> {
    let mut paths = Vec::new();
    for c in charts_for(result, extras, stem) {
        paths.extend(c.write(dir)?);
    }
    Ok(paths)
}
