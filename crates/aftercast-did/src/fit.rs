//! One fit of a rollout estimator with given unit weights (all ones for the point answer, a
//! Dirichlet draw for each Bayesian-bootstrap replicate).

use crate::data::Rollout;
use crate::error::{DidError, DidResult};
use crate::params::{Comparison, Method, Spec};
use crate::twoway::TwoWay;
use std::collections::BTreeMap;

/// What one fit says: the overall effect on the adopters, and its breakdowns.
#[derive(Debug, Clone, PartialEq)]
pub struct Fit {
    /// Average effect per adopted unit-period covered.
    pub overall: f64,
    /// Counterfactual mean over the same unit-periods (observed mean minus the effect).
    pub baseline: f64,
    /// Weight behind the overall effect (the unit weights summed over the covered
    /// unit-periods; with unit weights of one, their count).
    pub weight: f64,
    /// Effect by event time (periods since adoption; negative: before), with its weight.
    pub event: BTreeMap<i64, (f64, f64)>,
    /// Effect by wave (keyed by the index of its first adopted period): the mean over its
    /// covered periods, with the wave's weight.
    pub wave: BTreeMap<usize, (f64, f64)>,
    /// Effect by calendar period (index into the periods), over the waves adopted by then,
    /// with its weight.
    pub calendar: BTreeMap<usize, (f64, f64)>,
    /// Adopted unit-periods covered by the overall effect.
    pub covered: usize,
    /// Adopted unit-periods with no comparison left (left out of every average).
    pub uncovered: usize,
}

/// One group-time cell: a wave at one period.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cell {
    /// Wave index.
    pub wave: usize,
    /// Period index.
    pub t: usize,
    /// The effect of the cell.
    pub effect: f64,
    /// Observed weighted mean of the wave at `t`.
    pub level: f64,
    /// Weight of the wave (sum of its unit weights).
    pub weight: f64,
    /// Units in the wave.
    pub units: usize,
}

/// Fit `spec.method` with unit weights `w`.
///
/// # Errors
/// No comparison units, a disconnected or collinear design, or (with covariates) a
/// propensity model that cannot be fitted.
pub fn fit(data: &Rollout, spec: &Spec, w: &[f64]) -> DidResult<Fit> {
    match spec.method {
        Method::GroupTime => Ok(aggregate(data, &group_time_cells(data, spec.comparison, w)?, None)),
        Method::Imputation => imputation(data, spec, w),
        Method::Twfe => twfe(data, spec, w),
    }
}

fn wmean(idx: &[usize], w: &[f64], f: impl Fn(usize) -> f64) -> (f64, f64) {
    let (mut s, mut ws) = (0.0, 0.0);
    for &i in idx {
        s += w[i] * f(i);
        ws += w[i];
    }
    (if ws > 0.0 { s / ws } else { f64::NAN }, ws)
}

/// Group-time average effects with the universal base period (the period before each wave's
/// adoption), for every period but the base: `ATT(g, t) = E_w[Y_t − Y_{g−1} | wave g] −
/// E_w[Y_t − Y_{g−1} | comparison]`, doubly robust with the rollout's covariates.
///
/// # Errors
/// [`DidError::NoComparison`] when no wave has any comparison unit at any period.
pub fn group_time_cells(data: &Rollout, comparison: Comparison, w: &[f64]) -> DidResult<Vec<Cell>> {
    let waves = data.waves();
    let mut cells = Vec::new();
    for (g, wave) in waves.iter().enumerate() {
        let base = wave.start - 1;
        for t in 0..data.n_times() {
            if t == base {
                continue;
            }
            let horizon = t.max(base);
            let comp: Vec<usize> = (0..data.n_units())
                .filter(|&u| match (comparison, data.start[u]) {
                    (_, None) => true,
                    (Comparison::Never, Some(_)) => false,
                    (Comparison::NotYet, Some(s)) => s > horizon && s != wave.start,
                })
                .filter(|&u| w[u] > 0.0)
                .collect();
            if comp.is_empty() {
                continue;
            }
            let dy = |u: usize| data.y[u][t] - data.y[u][base];
            let effect = if data.covariates.is_empty() {
                wmean(&wave.units, w, dy).0 - wmean(&comp, w, dy).0
            } else {
                crate::robust::doubly_robust(data, &wave.units, &comp, w, &dy)?
            };
            let (level, weight) = wmean(&wave.units, w, |u| data.y[u][t]);
            cells.push(Cell { wave: g, t, effect, level, weight, units: wave.units.len() });
        }
    }
    if !cells.iter().any(|c| c.t >= waves[c.wave].start) {
        return Err(DidError::NoComparison {
            detail: match comparison {
                Comparison::Never => "no unit stays unadopted to compare with: --comparison never needs never-adopting units; use --comparison not-yet when the waves adopt at different dates".into(),
                Comparison::NotYet => "no wave has a unit left to compare with after it adopts: every unit adopts at the same period and none stays unadopted; keep some units back".into(),
            },
        });
    }
    Ok(cells)
}

/// Aggregate cells: overall (cells weighted by their wave's weight), by event time (same
/// weights), by wave (mean over its periods), by calendar period (wave weights). `leads`
/// overrides the event times before adoption (estimators that estimate them separately).
pub fn aggregate(data: &Rollout, cells: &[Cell], leads: Option<BTreeMap<i64, (f64, f64)>>) -> Fit {
    let waves = data.waves();
    let post: Vec<&Cell> = cells.iter().filter(|c| c.t >= waves[c.wave].start).collect();
    let sum_w: f64 = post.iter().map(|c| c.weight).sum();
    let overall = post.iter().map(|c| c.weight * c.effect).sum::<f64>() / sum_w;
    let baseline = post.iter().map(|c| c.weight * (c.level - c.effect)).sum::<f64>() / sum_w;
    let mut ev: BTreeMap<i64, (f64, f64)> = BTreeMap::new();
    let mut wv: BTreeMap<usize, (f64, f64, f64)> = BTreeMap::new();
    let mut cal: BTreeMap<usize, (f64, f64)> = BTreeMap::new();
    for c in cells {
        let k = c.t as i64 - waves[c.wave].start as i64;
        if k >= 0 || leads.is_none() {
            let e = ev.entry(k).or_insert((0.0, 0.0));
            e.0 += c.weight * c.effect;
            e.1 += c.weight;
        }
        if k >= 0 {
            let e = wv.entry(waves[c.wave].start).or_insert((0.0, 0.0, 0.0));
            e.0 += c.effect;
            e.1 += 1.0;
            e.2 = c.weight;
            let e = cal.entry(c.t).or_insert((0.0, 0.0));
            e.0 += c.weight * c.effect;
            e.1 += c.weight;
        }
    }
    let ratio = |(s, w): (f64, f64)| (s / w, w);
    let mut event: BTreeMap<i64, (f64, f64)> = ev.into_iter().map(|(k, v)| (k, ratio(v))).collect();
    if let Some(l) = leads {
        event.extend(l);
    }
    let covered: usize = post.iter().map(|c| c.units).sum();
    let all_post: usize = waves.iter().map(|w| w.units.len() * (data.n_times() - w.start)).sum();
    Fit {
        overall,
        baseline,
        weight: sum_w,
        event,
        wave: wv.into_iter().map(|(k, (s, n, w))| (k, (s / n, w))).collect(),
        calendar: cal.into_iter().map(|(k, v)| (k, ratio(v))).collect(),
        covered,
        uncovered: all_post.saturating_sub(covered),
    }
}

/// The mask of untreated unit-periods.
pub fn untreated_mask(data: &Rollout) -> Vec<Vec<bool>> {
    (0..data.n_units()).map(|u| (0..data.n_times()).map(|t| !data.treated(u, t)).collect()).collect()
}

/// Event-time indicator matrices for the adopters: one per `k` in `ks`.
fn event_dummies(data: &Rollout, ks: &[i64]) -> Vec<Vec<Vec<f64>>> {
    ks.iter()
        .map(|&k| {
            (0..data.n_units())
                .map(|u| {
                    (0..data.n_times())
                        .map(|t| match data.start[u] {
                            Some(s) if t as i64 - s as i64 == k => 1.0,
                            _ => 0.0,
                        })
                        .collect()
                })
                .collect()
        })
        .collect()
}

/// The leads the data supports: at most `wanted`, and fewer than the earliest wave's periods
/// before adoption (so every wave keeps a reference period).
pub fn lead_count(data: &Rollout, wanted: usize) -> usize {
    let earliest = data.waves().first().map_or(0, |w| w.start);
    wanted.min(earliest.saturating_sub(1))
}

/// The imputation estimator: unit and period effects fitted on the untreated unit-periods,
/// the untreated outcome of every adopted unit-period imputed from them, the effect of a cell
/// the mean of observed minus imputed. Leads come from the same regression on the untreated
/// unit-periods with event-time indicators for the last `leads` periods before adoption.
///
/// # Errors
/// A disconnected design; periods after every unit adopted are left uncovered.
pub fn imputation(data: &Rollout, spec: &Spec, w: &[f64]) -> DidResult<Fit> {
    let mask = untreated_mask(data);
    let tw = TwoWay::new(&mask, w)?;
    let fe = tw.fit(&data.y);
    let waves = data.waves();
    let mut cells = Vec::new();
    for (g, wave) in waves.iter().enumerate() {
        for t in wave.start..data.n_times() {
            if !fe.lambda[t].is_finite() {
                continue;
            }
            let (effect, weight) = wmean(&wave.units, w, |u| data.y[u][t] - fe.fitted(u, t));
            let (level, _) = wmean(&wave.units, w, |u| data.y[u][t]);
            cells.push(Cell { wave: g, t, effect, level, weight, units: wave.units.len() });
        }
    }
    if cells.is_empty() {
        return Err(DidError::NoComparison {
            detail: "no period after adoption has an unadopted unit to learn the period effect from".into(),
        });
    }
    let nl = lead_count(data, spec.leads);
    let ks: Vec<i64> = (1..=nl as i64).map(|k| -k).collect();
    let names: Vec<String> = ks.iter().map(|k| format!("event time {k}")).collect();
    let leads = if ks.is_empty() {
        BTreeMap::new()
    } else {
        let (beta, _) = tw.regress(&data.y, &event_dummies(data, &ks), &names)?;
        ks.iter().map(|&k| (k, lead_weight(data, k, w))).zip(beta).map(|((k, wt), b)| (k, (b, wt))).collect()
    };
    Ok(aggregate(data, &cells, Some(leads)))
}

/// The event times of the two-way event study: every relative time of the adopters but −1
/// (the reference), and without never-adopted units also the earliest (a second reference,
/// needed for identification).
pub fn twfe_event_times(data: &Rollout) -> Vec<i64> {
    let mut ks: std::collections::BTreeSet<i64> = std::collections::BTreeSet::new();
    for s in data.start.iter().flatten() {
        for t in 0..data.n_times() {
            ks.insert(t as i64 - *s as i64);
        }
    }
    ks.remove(&-1);
    if data.never().is_empty()
        && let Some(&first) = ks.iter().next()
    {
        ks.remove(&first);
    }
    ks.into_iter().collect()
}

/// The unit weights of the adopters observed at event time `k`.
fn lead_weight(data: &Rollout, k: i64, w: &[f64]) -> f64 {
    (0..data.n_units())
        .filter(|&u| data.start[u].is_some_and(|s| (0..data.n_times() as i64).contains(&(s as i64 + k))))
        .map(|u| w[u])
        .sum()
}

/// The adoption indicator matrix.
pub fn adoption(data: &Rollout) -> Vec<Vec<f64>> {
    (0..data.n_units())
        .map(|u| (0..data.n_times()).map(|t| f64::from(u8::from(data.treated(u, t)))).collect())
        .collect()
}

/// The two-way fixed-effects baseline: the static coefficient of adoption as the overall
/// effect, the event-study coefficients as the event-time effects. No wave or calendar
/// breakdown (the regression does not give one).
///
/// # Errors
/// A collinear design.
pub fn twfe(data: &Rollout, spec: &Spec, w: &[f64]) -> DidResult<Fit> {
    twfe_with(data, spec, w, &TwfeDesign::new(data))
}

/// The regressors of the two-way regressions, built once per rollout (they do not depend on
/// the unit weights of a replicate).
#[derive(Debug, Clone)]
pub struct TwfeDesign {
    full: Vec<Vec<bool>>,
    adoption: Vec<Vec<f64>>,
    ks: Vec<i64>,
    names: Vec<String>,
    dummies: Vec<Vec<Vec<f64>>>,
}

impl TwfeDesign {
    /// The design of `data`.
    pub fn new(data: &Rollout) -> TwfeDesign {
        let ks = twfe_event_times(data);
        TwfeDesign {
            full: vec![vec![true; data.n_times()]; data.n_units()],
            adoption: adoption(data),
            names: ks.iter().map(|k| format!("event time {k}")).collect(),
            dummies: event_dummies(data, &ks),
            ks,
        }
    }
}

/// [`twfe`] with a prepared design.
///
/// # Errors
/// A collinear design.
pub fn twfe_with(data: &Rollout, spec: &Spec, w: &[f64], design: &TwfeDesign) -> DidResult<Fit> {
    let tw = TwoWay::new(&design.full, w)?;
    let (beta, _) = tw.regress(&data.y, std::slice::from_ref(&design.adoption), &["adopted".to_string()])?;
    let ks = &design.ks;
    let (bk, _) = tw.regress(&data.y, &design.dummies, &design.names)?;
    let nl = spec.leads as i64;
    let mut event: BTreeMap<i64, (f64, f64)> =
        ks.iter().copied().zip(bk).filter(|(k, _)| *k >= -nl).map(|(k, b)| (k, (b, lead_weight(data, k, w)))).collect();
    if nl >= 1 {
        event.insert(-1, (0.0, lead_weight(data, -1, w)));
    }
    let (mut sy, mut sw, mut n) = (0.0, 0.0, 0usize);
    for (u, wu) in w.iter().enumerate().take(data.n_units()) {
        for t in 0..data.n_times() {
            if data.treated(u, t) {
                sy += wu * data.y[u][t];
                sw += wu;
                n += 1;
            }
        }
    }
    Ok(Fit {
        overall: beta[0],
        baseline: sy / sw - beta[0],
        weight: sw,
        event,
        wave: BTreeMap::new(),
        calendar: BTreeMap::new(),
        covered: n,
        uncovered: 0,
    })
}
