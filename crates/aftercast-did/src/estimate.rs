//! From fits to the one estimate: the point fit, a unit-level Bayesian bootstrap (each replicate
//! reweights whole units with Dirichlet weights, so a unit's periods move together), the
//! breakdowns by event time, wave and calendar period, fake adoption dates, and segments.

use crate::data::Rollout;
use crate::decompose::{Decomposition, decompose};
use crate::error::{DidError, DidResult};
use crate::fit::{Fit, fit, lead_count};
use crate::params::{Method, Spec};
use aftercast_core::Inference;
use aftercast_core::estimate::{BreakdownInput, Estimate, JointQuestion, PartInput, Per, Point, Scope};
use aftercast_core::result::EffectDraws;
use aftercast_resample::bayes::dirichlet_weights;
use aftercast_resample::rng::{child_seed, par_draws};
use serde::Serialize;
use std::collections::BTreeMap;

/// The point fit and the bootstrap fits of one rollout (a failed replicate is `None`).
#[derive(Debug, Clone)]
pub struct Replicates {
    /// The fit with every unit weighted one.
    pub point: Fit,
    /// One fit per replicate.
    pub draws: Vec<Option<Fit>>,
}

impl Replicates {
    /// Replicates whose fit failed.
    pub fn failed(&self) -> usize {
        self.draws.iter().filter(|d| d.is_none()).count()
    }
}

/// Fit the point answer and `draws` bootstrap replicates (replicate `i` uses stream `i` of
/// `seed`, so results do not depend on the number of threads).
///
/// # Errors
/// The point fit's errors.
pub fn replicate(data: &Rollout, spec: &Spec, draws: usize, seed: u64) -> DidResult<Replicates> {
    let n = data.n_units();
    // the two-way regressors do not change between replicates: built once
    let design = (spec.method == Method::Twfe).then(|| crate::fit::TwfeDesign::new(data));
    let one = |w: &[f64]| match &design {
        Some(d) => crate::fit::twfe_with(data, spec, w, d),
        None => fit(data, spec, w),
    };
    let point = one(&vec![1.0; n])?;
    let draws = par_draws(seed, draws, |_, s| {
        let w: Vec<f64> = dirichlet_weights(n, s).into_iter().map(|v| v * n as f64).collect();
        one(&w).ok()
    });
    Ok(Replicates { point, draws })
}

fn combine_map<K: Ord + Copy>(maps: &[&BTreeMap<K, (f64, f64)>]) -> BTreeMap<K, (f64, f64)> {
    let mut acc: BTreeMap<K, (f64, f64)> = BTreeMap::new();
    for m in maps {
        for (k, (e, w)) in m.iter() {
            let a = acc.entry(*k).or_insert((0.0, 0.0));
            a.0 += e * w;
            a.1 += w;
        }
    }
    acc.into_iter().map(|(k, (s, w))| (k, (s / w, w))).collect()
}

/// Pool fits of disjoint sets of units: every quantity is the weight-weighted mean of the
/// parts (each part's weight is its covered adopted unit-periods, reweighted in a replicate).
pub fn combine_fits(parts: &[&Fit]) -> Fit {
    let w: f64 = parts.iter().map(|f| f.weight).sum();
    Fit {
        overall: parts.iter().map(|f| f.weight * f.overall).sum::<f64>() / w,
        baseline: parts.iter().map(|f| f.weight * f.baseline).sum::<f64>() / w,
        weight: w,
        event: combine_map(&parts.iter().map(|f| &f.event).collect::<Vec<_>>()),
        wave: combine_map(&parts.iter().map(|f| &f.wave).collect::<Vec<_>>()),
        calendar: combine_map(&parts.iter().map(|f| &f.calendar).collect::<Vec<_>>()),
        covered: parts.iter().map(|f| f.covered).sum(),
        uncovered: parts.iter().map(|f| f.uncovered).sum(),
    }
}

/// Pool the replicates of disjoint sets of units, draw by draw.
pub fn combine(parts: &[&Replicates]) -> Replicates {
    let point = combine_fits(&parts.iter().map(|r| &r.point).collect::<Vec<_>>());
    let n = parts.iter().map(|r| r.draws.len()).min().unwrap_or(0);
    let draws = (0..n)
        .map(|d| {
            let fits: Option<Vec<&Fit>> = parts.iter().map(|r| r.draws[d].as_ref()).collect();
            fits.map(|f| combine_fits(&f))
        })
        .collect();
    Replicates { point, draws }
}

/// One wave of the diagnostics.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WaveInfo {
    /// Its first adopted period.
    pub start: String,
    /// Units in the wave.
    pub units: usize,
    /// Periods from adoption to the end of the data.
    pub periods_after: usize,
}

/// One segment of the diagnostics.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SegmentInfo {
    /// The segment's value.
    pub segment: String,
    /// Units in it.
    pub units: usize,
    /// Adopting units in it.
    pub adopters: usize,
    /// Why it was left out, if it was.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub left_out: Option<String>,
}

/// The typed diagnostics of a rollout.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RolloutDiagnostics {
    /// The estimator.
    pub method: String,
    /// Comparison units of group-time effects.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub comparison: Option<String>,
    /// Units analysed.
    pub units: usize,
    /// Periods.
    pub periods: usize,
    /// Units that never adopt inside the data.
    pub never_adopted: usize,
    /// The waves.
    pub waves: Vec<WaveInfo>,
    /// Adopted unit-periods the overall effect covers.
    pub covered_unit_periods: usize,
    /// Adopted unit-periods with no comparison left (left out).
    pub uncovered_unit_periods: usize,
    /// Pre-period covariates of the doubly robust group-time effects.
    pub covariates: Vec<String>,
    /// Bootstrap replicates whose fit failed (left out of the intervals).
    pub failed_draws: usize,
    /// Units left out because they had adopted by the first period.
    pub left_out_units: Vec<String>,
    /// The static two-way coefficient and what it averages.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub twfe_decomposition: Option<Decomposition>,
    /// The segment column, when the effect is broken down by one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub by: Option<String>,
    /// Segments, when the effect is broken down by one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub segments: Option<Vec<SegmentInfo>>,
}

fn rows<K: Ord + Copy>(
    reps: &Replicates,
    pick: impl Fn(&Fit) -> &BTreeMap<K, (f64, f64)>,
    label: impl Fn(K) -> String,
    key: impl Fn(K) -> Option<f64>,
    units: impl Fn(K) -> usize,
    keep: impl Fn(K) -> bool,
) -> Vec<PartInput> {
    pick(&reps.point)
        .iter()
        .filter(|(k, _)| keep(**k))
        .map(|(k, (p, _))| PartInput {
            label: label(*k),
            key: key(*k),
            point: *p,
            draws: reps
                .draws
                .iter()
                .map(|d| d.as_ref().and_then(|f| pick(f).get(k)).map_or(f64::NAN, |v| v.0))
                .collect(),
            units: units(*k),
            note: None,
        })
        .collect()
}

/// The breakdowns of one set of replicates: event time (leads tested jointly), wave and
/// calendar period.
fn breakdowns(data: &Rollout, spec: &Spec, reps: &Replicates) -> Vec<BreakdownInput> {
    let nl = match spec.method {
        Method::Twfe => spec.leads,
        _ => lead_count(data, spec.leads),
    } as i64;
    let waves = data.waves();
    let units_at = |k: i64| {
        waves.iter().filter(|w| (0..data.n_times() as i64).contains(&(w.start as i64 + k))).map(|w| w.units.len()).sum()
    };
    let mut ev = rows(reps, |f| &f.event, |k| k.to_string(), |k| Some(k as f64), units_at, |k| k >= -nl);
    if spec.method == Method::GroupTime && nl >= 1 {
        // the universal base period: zero by construction
        let pos = ev.iter().position(|r| r.key.is_some_and(|k| k >= 0.0)).unwrap_or(ev.len());
        ev.insert(
            pos,
            PartInput {
                label: "-1".into(),
                key: Some(-1.0),
                point: 0.0,
                draws: vec![0.0; reps.draws.len()],
                units: units_at(-1),
                note: Some("reference period".into()),
            },
        );
    }
    for r in &mut ev {
        if r.key == Some(-1.0) && spec.method != Method::Imputation {
            r.note = Some("reference period".into());
        }
    }
    let leads: Vec<usize> = ev
        .iter()
        .enumerate()
        .filter(|(_, r)| r.key.is_some_and(|k| k < 0.0) && r.note.is_none())
        .map(|(i, _)| i)
        .collect();
    let mut out = vec![BreakdownInput {
        clusters: Some(data.n_units()),
        by: "event-time".into(),
        title: "Effect by periods since adoption".into(),
        joint: (!leads.is_empty()).then_some((JointQuestion::AllZero, leads)),
        rows: ev,
    }];
    let wave_units = |s: usize| waves.iter().find(|w| w.start == s).map_or(0, |w| w.units.len());
    let wv = rows(reps, |f| &f.wave, |s| data.times[s].to_string(), |_| None, wave_units, |_| true);
    if !wv.is_empty() {
        let all: Vec<usize> = (0..wv.len()).collect();
        out.push(BreakdownInput {
            clusters: Some(data.n_units()),
            by: "wave".into(),
            title: "Effect by wave (first adopted period)".into(),
            joint: (wv.len() >= 2).then_some((JointQuestion::AllEqual, all)),
            rows: wv,
        });
    }
    let adopted_by = |t: usize| waves.iter().filter(|w| w.start <= t).map(|w| w.units.len()).sum();
    let cal = rows(reps, |f| &f.calendar, |t| data.times[t].to_string(), |t| Some(t as f64), adopted_by, |_| true);
    if !cal.is_empty() {
        out.push(BreakdownInput {
            clusters: Some(data.n_units()),
            by: "calendar".into(),
            title: "Effect by calendar period".into(),
            joint: None,
            rows: cal,
        });
    }
    out
}

/// Fake adoption dates: every wave moved `d` periods earlier, the data cut before the first
/// real adoption (waves whose fake date falls after the cut count as not adopted). Nothing
/// happened there, so the estimates should be near zero.
fn placebo_dates(data: &Rollout, spec: &Spec, inf: &Inference) -> (Option<BreakdownInput>, Vec<String>) {
    let mut warnings = Vec::new();
    let first = data.waves().first().map_or(0, |w| w.start);
    let d_max = first.saturating_sub(2);
    if spec.placebo_shifts == 0 {
        return (None, warnings);
    }
    if d_max == 0 {
        warnings
            .push("too few periods before the first wave for fake adoption dates; the placebo check is skipped".into());
        return (None, warnings);
    }
    let n = spec.placebo_shifts;
    let mut shifts: Vec<usize> = (1..=n).map(|j| (d_max * j).div_ceil(n).max(1)).collect();
    shifts.dedup();
    let sub = Spec { placebo_shifts: 0, ..spec.clone() };
    let mut rows_out = Vec::new();
    for d in shifts {
        let starts: Vec<Option<usize>> = data.start.iter().map(|s| s.map(|s| s - d)).collect();
        let fake = data.with_starts(starts, first);
        let label = format!("{d} period{} earlier", if d == 1 { "" } else { "s" });
        match replicate(&fake, &sub, inf.draws, child_seed(inf.seed, &format!("placebo-date-{d}"))) {
            Ok(r) => rows_out.push(PartInput {
                label,
                key: Some(d as f64),
                point: r.point.overall,
                draws: r.draws.iter().map(|f| f.as_ref().map_or(f64::NAN, |f| f.overall)).collect(),
                units: fake.start.iter().filter(|s| s.is_some()).count(),
                note: None,
            }),
            Err(e) => warnings.push(format!("fake adoption {d} periods earlier could not be estimated: {e}")),
        }
    }
    let b = (!rows_out.is_empty()).then(|| BreakdownInput {
        clusters: Some(data.n_units()),
        by: "placebo-date".into(),
        title: "Fake adoption dates before the real rollout (should be near zero)".into(),
        joint: Some((JointQuestion::AllZero, (0..rows_out.len()).collect())),
        rows: rows_out,
    });
    (b, warnings)
}

fn wave_infos(data: &Rollout) -> Vec<WaveInfo> {
    data.waves()
        .iter()
        .map(|w| WaveInfo {
            start: data.times[w.start].to_string(),
            units: w.units.len(),
            periods_after: data.n_times() - w.start,
        })
        .collect()
}

/// The assumptions of a rollout estimate, in plain words.
pub fn assumptions(spec: &Spec, covariates: bool) -> Vec<String> {
    let given = if covariates { " among units with the same pre-period covariates" } else { "" };
    let comparison = match spec.method {
        Method::GroupTime => format!(
            "the {} units",
            match spec.comparison {
                crate::params::Comparison::Never => "never-adopting",
                crate::params::Comparison::NotYet => "not-yet-adopted",
            }
        ),
        Method::Imputation => "the units not yet adopted".to_string(),
        Method::Twfe => "every other unit, adopted or not".to_string(),
    };
    let mut a = vec![
        format!("Parallel trends: without the change, each wave's outcome would have moved like that of {comparison}{given}."),
        "No anticipation: units did not react before their own adoption period (the periods before adoption test this only partly).".into(),
        "The timing of adoption was not chosen because of what the outcome was about to do.".into(),
        "No spillovers: adopting units did not change the outcome of the units they are compared with.".into(),
    ];
    if spec.method == Method::Twfe {
        a.push("The two-way regression also assumes one effect for every wave and period; when effects differ or grow, it mixes them with weights that can be negative.".into());
    }
    a
}

/// A p-value in words: "p = 0.031", "p < 0.001".
fn p_text(p: f64) -> String {
    if p < 0.001 { "p < 0.001".into() } else { format!("p = {p:.3}") }
}

/// Everything beyond the fits that an estimate needs.
struct Parts {
    reps: Replicates,
    extra: Vec<BreakdownInput>,
    warnings: Vec<String>,
    segments: Option<(String, Vec<SegmentInfo>)>,
}

fn assemble(data: &Rollout, spec: &Spec, inf: &Inference, parts: Parts) -> DidResult<Estimate<RolloutDiagnostics>> {
    let Parts { reps, extra, mut warnings, segments } = parts;
    let p = &reps.point;
    let effect: Vec<f64> = reps.draws.iter().map(|d| d.as_ref().map_or(f64::NAN, |f| f.overall)).collect();
    let baseline: Vec<f64> = reps.draws.iter().map(|d| d.as_ref().map_or(f64::NAN, |f| f.baseline)).collect();
    let decomposition = decompose(data).ok();
    let diagnostics = RolloutDiagnostics {
        method: spec.method.name().into(),
        comparison: (spec.method == Method::GroupTime).then(|| spec.comparison.name().to_string()),
        units: data.n_units(),
        periods: data.n_times(),
        never_adopted: data.never().len(),
        waves: wave_infos(data),
        covered_unit_periods: p.covered,
        uncovered_unit_periods: p.uncovered,
        covariates: data.covariates.iter().map(|(n, _)| n.clone()).collect(),
        failed_draws: reps.failed(),
        left_out_units: data.left_out.clone(),
        twfe_decomposition: decomposition.clone(),
        by: segments.as_ref().map(|(b, _)| b.clone()),
        segments: segments.as_ref().map(|(_, s)| s.clone()),
    };
    let estimand = "average effect on the adopters per adopted unit and period (ATT), over the unit-periods after adoption that have a comparison";
    let mut est = Estimate::new(
        "rollout",
        spec.method.name(),
        estimand,
        Point::Scalar { effect: p.overall, baseline: Some(p.baseline) },
        EffectDraws::Scalar { effect, baseline: Some(baseline) },
        Scope { per: Per::UnitPeriod, units: p.covered },
        diagnostics,
    );
    let mut bs = breakdowns(data, spec, &reps);
    bs.extend(extra);
    // warnings that follow from the breakdowns' own tests
    for b in &bs {
        let Some((q, idx)) = &b.joint else { continue };
        let labels: Vec<String> = idx.iter().map(|&i| b.rows[i].label.clone()).collect();
        let points: Vec<f64> = idx.iter().map(|&i| b.rows[i].point).collect();
        let draws: Vec<Vec<f64>> = idx.iter().map(|&i| b.rows[i].draws.clone()).collect();
        let Some(t) = aftercast_resample::joint::wald(*q, &labels, &points, &draws, b.clusters) else { continue };
        if t.p_value < 0.05 {
            match b.by.as_str() {
                "event-time" => warnings.push(format!(
                    "the periods before adoption already differ from zero (joint test {}): parallel trends is in doubt; look at the event-time chart, add pre-period covariates, or compare only with units that look alike",
                    p_text(t.p_value)
                )),
                "placebo-date" => warnings.push(format!(
                    "fake adoption dates before the real rollout show effects (joint test {}): the comparison units may drift apart from the adopters even without the change (with few units such a check fires by chance in about one run in ten), so the estimate may carry that drift",
                    p_text(t.p_value)
                )),
                _ => {}
            }
        }
    }
    est.sections.breakdowns = bs;
    if p.uncovered > 0 {
        warnings.push(format!(
            "{} adopted unit-periods come after every unit has adopted, so nothing is left to compare them with; they are left out of every average (the estimate covers {} unit-periods). Keep some units back longer to measure late effects",
            p.uncovered, p.covered
        ));
    }
    for w in data.waves() {
        if w.units.len() == 1 {
            warnings.push(format!(
                "wave {} has a single unit: the unit-level bootstrap cannot resample within it, so its interval understates the uncertainty of its effect",
                data.times[w.start]
            ));
        }
    }
    if data.n_units() < 30 {
        warnings.push(format!(
            "only {} units: intervals from resampling units run narrow with fewer than about 30 (common practice); read them as a lower bound on the uncertainty",
            data.n_units()
        ));
    }
    if !data.left_out.is_empty() {
        warnings.push(format!(
            "{} unit{} had adopted by the first period and {} left out (no period before adoption to compare): {}",
            data.left_out.len(),
            if data.left_out.len() == 1 { "" } else { "s" },
            if data.left_out.len() == 1 { "is" } else { "are" },
            data.left_out.join(", ")
        ));
    }
    if reps.failed() > 0 {
        warnings.push(format!(
            "{} of {} bootstrap replicates could not be fitted and are left out of the intervals; with many, use fewer covariates",
            reps.failed(),
            reps.draws.len()
        ));
    }
    let shown = lead_count(data, spec.leads);
    if spec.method != Method::Twfe && shown < spec.leads {
        warnings.push(format!(
            "{} period{} before adoption shown and tested, not the {} asked for: the first wave has only {} period{} before it, and each wave keeps one as its reference",
            shown,
            if shown == 1 { "" } else { "s" },
            spec.leads,
            shown + 1,
            if shown == 0 { "" } else { "s" }
        ));
    }
    if spec.method == Method::Twfe {
        warnings.push("the two-way fixed-effects regression is shown as a baseline: when effects differ by wave or grow with time since adoption it is biased (see its decomposition); prefer group-time or imputation".into());
    }
    if let Some(d) = &decomposition
        && spec.method == Method::Twfe
    {
        if d.weight_on_adopted_comparisons > 0.0 {
            warnings.push(format!(
                "{:.0}% of the two-way coefficient's weight is on comparisons of later waves with already-adopted ones (Goodman-Bacon decomposition in the diagnostics)",
                100.0 * d.weight_on_adopted_comparisons
            ));
        }
        if d.negative_cells > 0 {
            warnings.push(format!(
                "{} adopted wave-periods get a negative weight in the two-way coefficient (total {:.3})",
                d.negative_cells, d.negative_weight
            ));
        }
    }
    for w in warnings {
        est.warn(w);
    }
    est.assumptions = assumptions(spec, !data.covariates.is_empty());
    let _ = inf;
    Ok(est)
}

/// Estimate a rollout: point fit, bootstrap, breakdowns, fake adoption dates.
///
/// # Errors
/// No adopters or comparisons, a disconnected or collinear design.
pub fn estimate(data: &Rollout, spec: &Spec, inf: &Inference) -> DidResult<Estimate<RolloutDiagnostics>> {
    let reps = replicate(data, spec, inf.draws, inf.seed)?;
    let (placebo, warnings) = placebo_dates(data, spec, inf);
    assemble(data, spec, inf, Parts { reps, extra: placebo.into_iter().collect(), warnings, segments: None })
}

/// Estimate a rollout by segment: each segment (a set of unit indices) is fitted on its own
/// units alone (its adopters compared with its own comparison units, as if the segment were
/// interacted with everything), with its own bootstrap stream; the overall estimate pools the
/// segments by their covered adopted unit-periods, draw by draw. A segment without adopters or
/// comparisons is left out with a warning.
///
/// # Errors
/// No segment can be estimated.
pub fn estimate_by(
    data: &Rollout,
    by: &str,
    segments: &[(String, Vec<usize>)],
    spec: &Spec,
    inf: &Inference,
) -> DidResult<Estimate<RolloutDiagnostics>> {
    let sub = Spec { placebo_shifts: 0, ..spec.clone() };
    let mut warnings = Vec::new();
    let mut infos = Vec::new();
    let mut fitted: Vec<(String, usize, Replicates)> = Vec::new();
    for (name, units) in segments {
        let part = data.subset(units);
        let adopters = part.start.iter().filter(|s| s.is_some()).count();
        let mut info = SegmentInfo { segment: name.clone(), units: units.len(), adopters, left_out: None };
        let why = if units.len() < 3 {
            Some(format!(
                "{} unit{}: too few to compare within the segment",
                units.len(),
                if units.len() == 1 { "" } else { "s" }
            ))
        } else if adopters < 2 {
            Some(format!("{adopters} adopting unit{}; at least 2 are needed", if adopters == 1 { "" } else { "s" }))
        } else {
            match replicate(&part, &sub, inf.draws, child_seed(inf.seed, &format!("segment-{name}"))) {
                Ok(r) => {
                    let draws: Vec<f64> = r.draws.iter().filter_map(|d| d.as_ref().map(|f| f.overall)).collect();
                    if aftercast_resample::segments::is_flat(&draws) {
                        Some("its interval cannot be estimated: a wave or its comparison holds a single unit, so resampling units leaves the estimate unchanged".to_string())
                    } else {
                        fitted.push((name.clone(), adopters, r));
                        None
                    }
                }
                Err(e) => Some(e.to_string()),
            }
        };
        if let Some(w) = &why {
            warnings.push(format!("segment '{name}' is left out: {w}"));
        } else if units.len() < 10 {
            warnings.push(format!(
                "segment '{name}' has only {} units ({adopters} adopting): its interval is wide and says little",
                units.len()
            ));
        }
        info.left_out = why;
        infos.push(info);
    }
    if fitted.is_empty() {
        return Err(DidError::NoComparison {
            detail: "no segment has both adopting units and units to compare them with".into(),
        });
    }
    let pooled = combine(&fitted.iter().map(|(_, _, r)| r).collect::<Vec<_>>());
    let rows: Vec<PartInput> = fitted
        .iter()
        .map(|(name, adopters, r)| PartInput {
            label: name.clone(),
            key: None,
            point: r.point.overall,
            draws: r.draws.iter().map(|d| d.as_ref().map_or(f64::NAN, |f| f.overall)).collect(),
            units: *adopters,
            note: None,
        })
        .collect();
    let all: Vec<usize> = (0..rows.len()).collect();
    let seg = BreakdownInput {
        clusters: Some(data.n_units()),
        by: "segment".into(),
        title: "Effect by segment (each fitted on its own units)".into(),
        joint: (rows.len() >= 2).then_some((JointQuestion::AllEqual, all)),
        rows,
    };
    let (placebo, more) = placebo_dates(data, spec, inf);
    warnings.extend(more);
    let mut extra = vec![seg];
    extra.extend(placebo);
    let mut est =
        assemble(data, spec, inf, Parts { reps: pooled, extra, warnings, segments: Some((by.to_string(), infos)) })?;
    est.assumptions.push(format!(
        "Each segment of '{by}' is estimated on its own units (its adopters against its own comparison units); the overall effect is their mean weighted by covered adopted unit-periods."
    ));
    Ok(est)
}
