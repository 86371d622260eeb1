//! Fitting: from validated parameters and a panel to a [`Fitted`] synthetic control with
//! weights, paths, diagnostics, placebo runs and counterfactual draws.

use crate::data::{Prepared, prepare};
use crate::engine::{CoreFit, Engine};
use crate::error::{SynthError, SynthResult};
use crate::params::{Aggregation, Method, SynthParams, ValidParams};
use crate::predictors::raw_predictors;
use crate::sdid::{self, SdidFit};
use crate::simplex::SimplexSolution;
use aftercast_core::panel::Panel;
use aftercast_core::result::UnitWeight;
use aftercast_core::time::TimePoint;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Weights below this are reported as zero when counting donors in use.
pub const WEIGHT_ZERO: f64 = 1e-8;

/// The solver's certificate for one fit (serialisable summary of [`SimplexSolution`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SolverReport {
    /// Why it stopped (`optimal`, `iteration-limit`, `stalled`).
    pub stop: String,
    /// Active-set changes.
    pub iterations: usize,
    /// KKT residual (absolute, gradient units).
    pub kkt_residual: f64,
    /// KKT residual relative to the problem scale.
    pub kkt_relative: f64,
    /// Frank–Wolfe duality gap, an upper bound on the objective's distance to the optimum.
    pub duality_gap: f64,
}

impl From<&SimplexSolution> for SolverReport {
    fn from(s: &SimplexSolution) -> Self {
        Self {
            stop: serde_json::to_value(s.stop).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default(),
            iterations: s.iterations,
            kkt_residual: s.kkt_residual,
            kkt_relative: s.kkt_residual / s.kkt_scale,
            duality_gap: s.duality_gap,
        }
    }
}

/// One row of the predictor balance table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PredictorBalance {
    /// Predictor.
    pub predictor: String,
    /// Treated unit's value.
    pub treated: f64,
    /// Synthetic control's value (weighted donors, plus the level shift for outcome predictors
    /// of the `intercept` method).
    pub synthetic: f64,
    /// Plain mean over donors.
    pub donor_mean: f64,
    /// Importance weight V (predictors method only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub v: Option<f64>,
}

/// The fit of one treated unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct UnitFit {
    /// The treated unit.
    pub unit: String,
    /// Weight of every donor (zeros included), in donor order.
    pub weights: Vec<UnitWeight>,
    /// Simplex weights before the ridge augmentation (ridge only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub simplex_weights: Option<Vec<UnitWeight>>,
    /// Level shift (intercept method; zero otherwise).
    pub intercept: f64,
    /// Observed outcome, all periods.
    pub observed: Vec<f64>,
    /// Synthetic outcome, all periods.
    pub synthetic: Vec<f64>,
    /// Observed minus synthetic, all periods.
    pub gap: Vec<f64>,
    /// Root mean squared gap over the pre-period.
    pub pre_rmspe: f64,
    /// Root mean squared gap over the post-period.
    pub post_rmspe: f64,
    /// post_rmspe / pre_rmspe.
    pub rmspe_ratio: f64,
    /// Pre-period R²: 1 − Σ gap² / Σ (y − ȳ)².
    pub r2_pre: f64,
    /// Donors with weight above 1e-8 in absolute value.
    pub nonzero_donors: usize,
    /// Share of pre-periods where the treated unit lies above every donor or below every donor.
    pub outside_range_share: f64,
    /// The treated unit lies outside the donors' convex hull by the crate's rule (see docs).
    pub outside_hull: bool,
    /// Solver certificate.
    pub solver: SolverReport,
    /// Ridge penalty (ridge only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ridge_lambda: Option<f64>,
    /// Predictor balance table.
    pub balance: Vec<PredictorBalance>,
    /// Pre-period outcome MSPE reached by the V search (predictors only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub v_objective: Option<f64>,
}

/// One placebo run: a donor treated as if it had been treated.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboRun {
    /// The donor.
    pub unit: String,
    /// Pre-period RMSPE.
    pub pre_rmspe: f64,
    /// Post-period RMSPE.
    pub post_rmspe: f64,
    /// Post/pre ratio.
    pub ratio: f64,
    /// Gap path, all periods (for charts).
    pub gap: Vec<f64>,
    /// Kept in the ranking (not excluded for poor pre-fit).
    pub kept: bool,
}

/// Placebo-in-space inference for one treated unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboRank {
    /// Treated unit.
    pub unit: String,
    /// Its post/pre RMSPE ratio.
    pub ratio: f64,
    /// Rank among the kept units (1 = largest ratio; ties counted against the treated unit).
    pub rank: usize,
    /// Units ranked (kept placebos + 1).
    pub units: usize,
    /// rank / units.
    pub p_value: f64,
    /// Placebos dropped by the pre-RMSPE exclusion.
    pub excluded: usize,
}

/// Placebo in space (Abadie, Diamond & Hainmueller 2010).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Placebo {
    /// Exclusion factor k, if used.
    pub exclude_factor: Option<f64>,
    /// One ranking per treated unit.
    pub ranks: Vec<PlaceboRank>,
    /// Joint p-value of the mean ratio of several treated units (permutation over sets of units).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub joint_p_value: Option<f64>,
    /// Every placebo run.
    pub runs: Vec<PlaceboRun>,
}

/// How the counterfactual draws were made (see docs/synthetic.md).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Draws {
    /// `placebo-scaled`, `sdid-placebo`, `sdid-jackknife` or `none`.
    pub source: String,
    /// Post-period counterfactual paths of the (aggregated) treated outcome, one per draw.
    pub counterfactual: Vec<Vec<f64>>,
}

/// A fitted synthetic control.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Fitted {
    /// The method.
    pub method: Method,
    /// Outcome name.
    pub outcome: String,
    /// Periods in use.
    pub times: Vec<TimePoint>,
    /// Index of the first post-period in `times`.
    pub first_post: usize,
    /// Donor units.
    pub donors: Vec<String>,
    /// One fit per treated unit (for `sdid`: the treated average as one pseudo-unit).
    pub units: Vec<UnitFit>,
    /// Aggregation weights of the treated units.
    pub unit_shares: Vec<f64>,
    /// Aggregated observed outcome, all periods.
    pub observed: Vec<f64>,
    /// Aggregated synthetic outcome, all periods.
    pub synthetic: Vec<f64>,
    /// Placebo in space.
    pub placebo: Option<Placebo>,
    /// Counterfactual draws for the shared summary.
    pub draws: Draws,
    /// SDID details.
    pub sdid: Option<SdidFit>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

impl Fitted {
    /// Post-period times.
    pub fn post_times(&self) -> &[TimePoint] {
        &self.times[self.first_post..]
    }

    /// Aggregated observed outcome over the post-period.
    pub fn post_observed(&self) -> &[f64] {
        &self.observed[self.first_post..]
    }

    /// Average post-period gap (observed − synthetic) of the aggregate.
    pub fn average_effect(&self) -> f64 {
        let p = self.first_post;
        let n = (self.times.len() - p) as f64;
        (p..self.times.len()).map(|t| self.observed[t] - self.synthetic[t]).sum::<f64>() / n
    }
}

impl ValidParams {
    /// Fit the synthetic control of `treated` units (common start `start`) on `panel`.
    ///
    /// # Errors
    /// [`SynthError`] for unknown or duplicate treated units, too few donors or pre-periods,
    /// a constant treated series, non-finite values, or a solver that does not converge.
    ///
    /// # Examples
    /// ```
    /// use aftercast_core::panel::{LongPanelSpec, Panel};
    /// use aftercast_core::table::RawTable;
    /// use aftercast_core::time::TimePoint;
    /// use aftercast_synth::SynthParams;
    /// let mut csv = String::from("unit,year,y\n");
    /// for t in 0..12 {
    ///     let (a, b, c) = (10.0 + t as f64, 20.0 - 0.5 * t as f64, 15.0 + (t % 3) as f64);
    ///     let tr = 0.3 * a + 0.7 * b + if t >= 9 { 2.0 } else { 0.0 };
    ///     csv += &format!("A,{t},{a}\nB,{t},{b}\nC,{t},{c}\nT,{t},{tr}\n");
    /// }
    /// let table = RawTable::from_csv_bytes(std::path::Path::new("p.csv"), csv.as_bytes())?;
    /// let spec = LongPanelSpec { unit: "unit".into(), time: "year".into(), outcome: "y".into(), ..Default::default() };
    /// let panel = Panel::from_long(&table, &spec)?;
    /// let fit = SynthParams::new().check()?.fit(&panel, &["T".to_string()], TimePoint::Period(9))?;
    /// assert!((fit.units[0].weights[0].weight - 0.3).abs() < 1e-6);
    /// assert!((fit.average_effect() - 2.0).abs() < 1e-6);
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn fit(&self, panel: &Panel, treated: &[String], start: TimePoint) -> SynthResult<Fitted> {
        let p = &self.0;
        let prep = prepare(panel, treated, start, p)?;
        let shares = unit_shares(&p.aggregate, panel, treated, start)?;
        if p.method == Method::Sdid {
            return sdid::fit_sdid(&prep, p, &panel.name, shares);
        }
        let engine = Engine::new(&prep, p)?;
        let mut warnings = Vec::new();
        let mut units = Vec::with_capacity(prep.treated.len());
        let mut cores = Vec::with_capacity(prep.treated.len());
        for &u in &prep.treated {
            let core = engine.fit(u, &prep.donors)?;
            let fit = unit_fit(&prep, p, &engine, u, &core)?;
            if fit.outside_hull {
                warnings.push(format!(
                    "'{}' lies outside the donors' range or convex hull (pre-period R² {:.3}, outside the donors' range in {:.0}% of pre-periods): the synthetic control fits it poorly; consider --method intercept or ridge",
                    fit.unit,
                    fit.r2_pre,
                    100.0 * fit.outside_range_share
                ));
            }
            units.push(fit);
            cores.push(core);
        }
        let n_t = prep.n_periods();
        let observed: Vec<f64> =
            (0..n_t).map(|t| units.iter().zip(&shares).map(|(f, s)| s * f.observed[t]).sum()).collect();
        let synthetic: Vec<f64> =
            (0..n_t).map(|t| units.iter().zip(&shares).map(|(f, s)| s * f.synthetic[t]).sum()).collect();
        let placebo = if p.placebo { Some(run_placebos(&prep, p, &engine, &units)?) } else { None };
        let draws = match &placebo {
            Some(pl) => placebo_draws(&prep, &units, &shares, pl, &synthetic, &mut warnings),
            None => {
                warnings.push(
                    "placebo runs are off, so the counterfactual has no interval (a single draw) and the result shows no uncertainty at all: do not read it as exact, and turn placebo runs on for an interval"
                        .into(),
                );
                Draws { source: "none".into(), counterfactual: vec![synthetic[prep.t0..].to_vec()] }
            }
        };
        Ok(Fitted {
            method: p.method,
            outcome: panel.name.clone(),
            times: prep.times.clone(),
            first_post: prep.t0,
            donors: prep.donors.iter().map(|&d| prep.units[d].clone()).collect(),
            units,
            unit_shares: shares,
            observed,
            synthetic,
            placebo,
            draws,
            sdid: None,
            warnings,
        })
    }
}

/// Shares of the treated units in the combined path: equal, given sizes, or each unit's
/// pre-period mean of a size column of the panel (periods before `start`, at least one).
pub(crate) fn unit_shares(
    agg: &Aggregation,
    panel: &Panel,
    treated: &[String],
    start: TimePoint,
) -> SynthResult<Vec<f64>> {
    let n = treated.len();
    match agg {
        Aggregation::Mean => Ok(vec![1.0 / n as f64; n]),
        Aggregation::BySize(col) => {
            let Some((_, m)) = panel.covariates.iter().find(|(name, _)| name == col) else {
                let cols: Vec<&str> = panel.covariates.iter().map(|(c, _)| c.as_str()).collect();
                return Err(SynthError::BadParameter {
                    name: "--size",
                    value: col.clone(),
                    detail: format!("no such column was read from the panel (read: {})", cols.join(", ")),
                });
            };
            let t0 = panel.axis.first_at_or_after(start).max(1);
            let mut sizes = Vec::with_capacity(n);
            for u in treated {
                let i = panel.unit_index(u, "unit")?;
                let pre = &m[i][..t0.min(m[i].len())];
                let size = pre.iter().sum::<f64>() / pre.len().max(1) as f64;
                if !(size.is_finite() && size > 0.0) {
                    return Err(SynthError::BadParameter {
                        name: "--size",
                        value: format!("{size} for unit '{u}'"),
                        detail: format!("the pre-period mean of '{col}' must be positive"),
                    });
                }
                sizes.push(size);
            }
            unit_shares(&Aggregation::Weighted(sizes), panel, treated, start)
        }
        Aggregation::Weighted(w) => {
            if w.len() != n {
                return Err(SynthError::BadParameter {
                    name: "aggregate",
                    value: format!("{} sizes", w.len()),
                    detail: format!("one size per treated unit is needed ({n})"),
                });
            }
            let s: f64 = w.iter().sum();
            Ok(w.iter().map(|v| v / s).collect())
        }
    }
}

pub(crate) fn rmspe(gap: &[f64]) -> f64 {
    (gap.iter().map(|g| g * g).sum::<f64>() / gap.len() as f64).sqrt()
}

fn unit_fit(prep: &Prepared, p: &SynthParams, engine: &Engine<'_>, u: usize, core: &CoreFit) -> SynthResult<UnitFit> {
    let t0 = prep.t0;
    let observed = prep.y[u].clone();
    let gap: Vec<f64> = observed.iter().zip(&core.synthetic).map(|(y, s)| y - s).collect();
    let pre_rmspe = rmspe(&gap[..t0]);
    let post_rmspe = rmspe(&gap[t0..]);
    let ybar = observed[..t0].iter().sum::<f64>() / t0 as f64;
    let sst: f64 = observed[..t0].iter().map(|y| (y - ybar).powi(2)).sum();
    let sse: f64 = gap[..t0].iter().map(|g| g * g).sum();
    let r2_pre = 1.0 - sse / sst;
    let outside = (0..t0)
        .filter(|&t| {
            let y = observed[t];
            prep.donors.iter().all(|&d| prep.y[d][t] < y) || prep.donors.iter().all(|&d| prep.y[d][t] > y)
        })
        .count();
    let outside_range_share = outside as f64 / t0 as f64;
    // Rule of the crate (common practice, not a published threshold): a poor pre-fit
    // (R² below 0.8) or the treated unit outside the donors' range in a quarter of the
    // pre-periods signals that no convex combination reproduces it.
    let outside_hull = (r2_pre < 0.8 || outside_range_share >= 0.25) && p.method != Method::Intercept;
    let nonzero = core.weights.iter().filter(|w| w.abs() > WEIGHT_ZERO).count();
    let names = |w: &[f64]| -> Vec<UnitWeight> {
        prep.donors.iter().zip(w).map(|(&d, &w)| UnitWeight { unit: prep.units[d].clone(), weight: w }).collect()
    };
    let balance = balance_table(prep, p, engine, u, core)?;
    Ok(UnitFit {
        unit: prep.units[u].clone(),
        weights: names(&core.weights),
        simplex_weights: (p.method == Method::Ridge).then(|| names(&core.simplex_weights)),
        intercept: core.intercept,
        observed,
        synthetic: core.synthetic.clone(),
        gap,
        pre_rmspe,
        post_rmspe,
        rmspe_ratio: post_rmspe / pre_rmspe,
        r2_pre,
        nonzero_donors: nonzero,
        outside_range_share,
        outside_hull,
        solver: SolverReport::from(&core.solver),
        ridge_lambda: core.ridge_lambda,
        balance,
        v_objective: core.v_objective,
    })
}

fn balance_table(
    prep: &Prepared,
    p: &SynthParams,
    engine: &Engine<'_>,
    u: usize,
    core: &CoreFit,
) -> SynthResult<Vec<PredictorBalance>> {
    let (names, raw) = match &engine.predictors {
        Some(ps) => (ps.names.clone(), ps.raw.clone()),
        None => {
            let covs: Vec<String> = prep.covariates.iter().map(|(n, _)| n.clone()).collect();
            raw_predictors(prep, &covs, p.predictor_outcome_blocks)?
        }
    };
    let n_cov = names.iter().filter(|n| !n.starts_with("outcome mean")).count();
    let j = prep.donors.len() as f64;
    Ok(names
        .iter()
        .enumerate()
        .map(|(r, name)| {
            let shift = if r >= n_cov { core.intercept } else { 0.0 };
            PredictorBalance {
                predictor: name.clone(),
                treated: raw[(r, u)],
                synthetic: shift + prep.donors.iter().zip(&core.weights).map(|(&d, w)| w * raw[(r, d)]).sum::<f64>(),
                donor_mean: prep.donors.iter().map(|&d| raw[(r, d)]).sum::<f64>() / j,
                v: core.v.as_ref().map(|v| v[r]),
            }
        })
        .collect())
}

fn run_placebos(prep: &Prepared, p: &SynthParams, engine: &Engine<'_>, units: &[UnitFit]) -> SynthResult<Placebo> {
    let t0 = prep.t0;
    let results: Vec<SynthResult<(f64, f64, Vec<f64>)>> = prep
        .donors
        .par_iter()
        .map(|&d| {
            aftercast_core::stop::check();
            let pool: Vec<usize> = prep.donors.iter().copied().filter(|&x| x != d).collect();
            let core = engine.fit(d, &pool)?;
            let gap: Vec<f64> = prep.y[d].iter().zip(&core.synthetic).map(|(y, s)| y - s).collect();
            Ok((rmspe(&gap[..t0]), rmspe(&gap[t0..]), gap))
        })
        .collect();
    let mut runs = Vec::with_capacity(results.len());
    for (r, &d) in results.into_iter().zip(&prep.donors) {
        let (pre, post, gap) = r?;
        runs.push(PlaceboRun {
            unit: prep.units[d].clone(),
            pre_rmspe: pre,
            post_rmspe: post,
            ratio: post / pre,
            gap,
            kept: true,
        });
    }
    let mut ranks = Vec::with_capacity(units.len());
    for f in units {
        let keep = |r: &PlaceboRun| match p.placebo_exclude_factor {
            Some(k) => r.pre_rmspe <= k * f.pre_rmspe,
            None => true,
        };
        let kept: Vec<&PlaceboRun> = runs.iter().filter(|r| keep(r)).collect();
        let excluded = runs.len() - kept.len();
        let rank = 1 + kept.iter().filter(|r| r.ratio >= f.rmspe_ratio || r.ratio.is_nan()).count();
        let n = kept.len() + 1;
        ranks.push(PlaceboRank {
            unit: f.unit.clone(),
            ratio: f.rmspe_ratio,
            rank,
            units: n,
            p_value: rank as f64 / n as f64,
            excluded,
        });
    }
    if let (Some(k), 1) = (p.placebo_exclude_factor, units.len()) {
        let lim = k * units[0].pre_rmspe;
        for r in &mut runs {
            r.kept = r.pre_rmspe <= lim;
        }
    }
    let joint_p_value = (units.len() > 1).then(|| joint_permutation_p(units, &runs, p.inference.seed));
    Ok(Placebo { exclude_factor: p.placebo_exclude_factor, ranks, joint_p_value, runs })
}

/// Several treated units: the statistic is the mean post/pre RMSPE ratio of the treated set;
/// under the sharp null of no effect and exchangeable units, the treated set is one random
/// set of its size among all units. 2,000 random sets (seeded) give the p-value
/// (1 + #{sets with mean ratio >= observed}) / 2,001. The placebo ratios come from fits on the
/// untreated pool, so this is an approximation of the full re-assignment test.
fn joint_permutation_p(units: &[UnitFit], runs: &[PlaceboRun], seed: u64) -> f64 {
    use rand::RngExt;
    let mut all: Vec<f64> = units.iter().map(|u| u.rmspe_ratio).collect();
    all.extend(runs.iter().map(|r| r.ratio));
    let n1 = units.len();
    let obs: f64 = all[..n1].iter().sum::<f64>() / n1 as f64;
    let reps = 2000usize;
    let base = aftercast_resample::rng::child_seed(seed, "synth-joint-placebo");
    let hits: usize = aftercast_resample::rng::par_draws(base, reps, |_, s| {
        let mut idx: Vec<usize> = (0..all.len()).collect();
        for i in 0..n1 {
            let j = s.random_range(i..idx.len());
            idx.swap(i, j);
        }
        let m = idx[..n1].iter().map(|&i| all[i]).sum::<f64>() / n1 as f64;
        usize::from(m >= obs)
    })
    .into_iter()
    .sum();
    (1 + hits) as f64 / (reps + 1) as f64
}

/// Counterfactual draws from the placebo runs: draw j adds placebo j's post-period gap,
/// rescaled by (treated pre-RMSPE / placebo pre-RMSPE) and centred over placebos, to the
/// synthetic path. For several treated units the rescaled gaps are aggregated with the unit
/// shares. Placebos with zero pre-RMSPE (an exact in-hull fit) cannot be rescaled and are left
/// out, as are placebos excluded by the pre-RMSPE rule.
fn placebo_draws(
    prep: &Prepared,
    units: &[UnitFit],
    shares: &[f64],
    pl: &Placebo,
    synthetic: &[f64],
    warnings: &mut Vec<String>,
) -> Draws {
    let t0 = prep.t0;
    let tp = prep.n_periods() - t0;
    let mut devs: Vec<Vec<f64>> = Vec::new();
    for r in &pl.runs {
        if r.pre_rmspe.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater)
            || !units.iter().all(|u| pl.exclude_factor.is_none_or(|k| r.pre_rmspe <= k * u.pre_rmspe))
        {
            continue;
        }
        let d: Vec<f64> = (0..tp)
            .map(|k| units.iter().zip(shares).map(|(u, s)| s * r.gap[t0 + k] * u.pre_rmspe / r.pre_rmspe).sum())
            .collect();
        devs.push(d);
    }
    if devs.is_empty() {
        warnings.push(
            "no placebo run could be used for the interval, so the counterfactual has no interval and the result shows no uncertainty at all: raise or drop --placebo-exclude, or add untreated units to the panel"
                .into(),
        );
        return Draws { source: "none".into(), counterfactual: vec![synthetic[t0..].to_vec()] };
    }
    let n = devs.len() as f64;
    let mean: Vec<f64> = (0..tp).map(|k| devs.iter().map(|d| d[k]).sum::<f64>() / n).collect();
    if devs.len() < 19 {
        warnings.push(format!(
            "only {} placebo runs shape the interval: its ends are coarse (at 90% they need about 20 or more), so treat them as rough: add untreated units to the panel, or raise or drop --placebo-exclude if it removed some",
            devs.len()
        ));
    }
    let med_pre = {
        let mut v: Vec<f64> = pl.runs.iter().map(|r| r.pre_rmspe).collect();
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    if units.iter().any(|u| u.pre_rmspe < 0.1 * med_pre) {
        warnings.push(
            "the treated unit's pre-period fit is far tighter than the placebos' (pre-RMSPE under a tenth of their median): intervals scaled by it may be too narrow, so treat the interval as a lower bound on the uncertainty and check the placebo-in-time and leave-one-out results".into(),
        );
    }
    let counterfactual = devs.iter().map(|d| (0..tp).map(|k| synthetic[t0 + k] + d[k] - mean[k]).collect()).collect();
    Draws { source: "placebo-scaled".into(), counterfactual }
}
