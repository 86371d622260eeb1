//! Inference and robustness beyond placebo in space: placebo in time, leave-one-out,
//! conformal inference (Chernozhukov, Wüthrich & Zhu 2021, JASA 116:1849-1864), and several
//! treated units with staggered starts aligned in event time.

use crate::error::{SynthError, SynthResult};
use crate::fit::{Fitted, WEIGHT_ZERO, rmspe};
use crate::params::{Method, ValidParams};
use crate::simplex;
use aftercast_core::panel::Panel;
use aftercast_core::time::TimePoint;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Placebo in time: the start moved back by `shift` periods, data after the real start dropped.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboInTime {
    /// The backdated start.
    pub fake_start: TimePoint,
    /// Periods between the fake and the real start.
    pub shift: usize,
    /// Average gap between the fake and the real start (should be near zero).
    pub average_gap: f64,
    /// Pre-RMSPE before the fake start.
    pub pre_rmspe: f64,
    /// RMSPE between the fake and the real start.
    pub post_rmspe: f64,
    /// Ratio of the two.
    pub ratio: f64,
    /// Placebo-in-space p-value of the fake start (if placebo runs are on).
    pub p_value: Option<f64>,
}

/// Backdate the start by `shift` periods (default: the number of post-periods, capped so that
/// at least the minimum number of pre-periods remains).
///
/// # Errors
/// As [`ValidParams::fit`]; [`SynthError::TooFewPrePeriods`] when the shift leaves too few.
pub fn placebo_in_time(
    params: &ValidParams,
    panel: &Panel,
    treated: &[String],
    start: TimePoint,
    shift: Option<usize>,
) -> SynthResult<PlaceboInTime> {
    let pts = panel.axis.points();
    let t0 = panel.axis.first_at_or_after(start);
    let t_end = params.0.end.map(|e| panel.axis.end_at_or_before(e)).unwrap_or(pts.len());
    let post = t_end.saturating_sub(t0);
    let min_pre = params.0.min_pre_periods;
    let s = shift.unwrap_or(post).min(t0.saturating_sub(min_pre));
    if s == 0 || t0 < 1 {
        return Err(SynthError::TooFewPrePeriods { start: start.to_string(), found: t0, needed: min_pre + 1 });
    }
    let mut p = params.0.clone();
    p.end = Some(pts[t0 - 1]);
    let fake = pts[t0 - s];
    let vp = p.check()?;
    let fit = vp.fit(panel, treated, fake)?;
    let u0 = fit.first_post;
    let gap: Vec<f64> = (0..fit.times.len()).map(|t| fit.observed[t] - fit.synthetic[t]).collect();
    let pre = rmspe(&gap[..u0]);
    let postr = rmspe(&gap[u0..]);
    Ok(PlaceboInTime {
        fake_start: fake,
        shift: s,
        average_gap: fit.average_effect(),
        pre_rmspe: pre,
        post_rmspe: postr,
        ratio: postr / pre,
        p_value: fit.placebo.as_ref().map(|pl| pl.ranks.first().map(|r| r.p_value).unwrap_or(f64::NAN)),
    })
}

/// Leave-one-out: every donor with non-zero weight dropped in turn.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LeaveOneOut {
    /// The full-pool average effect.
    pub full: f64,
    /// (dropped donor, average effect without it).
    pub runs: Vec<(String, f64)>,
    /// Smallest and largest average effect over the runs (and the full fit).
    pub range: (f64, f64),
}

/// Refit without each donor that carries weight; report the range of average effects.
///
/// # Errors
/// As [`ValidParams::fit`].
pub fn leave_one_out(
    params: &ValidParams,
    panel: &Panel,
    treated: &[String],
    start: TimePoint,
    fit: &Fitted,
) -> SynthResult<LeaveOneOut> {
    let mut p = params.0.clone();
    p.placebo = false;
    let full = fit.average_effect();
    let mut used: Vec<String> = Vec::new();
    for u in &fit.units {
        for w in &u.weights {
            if w.weight.abs() > WEIGHT_ZERO && !used.contains(&w.unit) {
                used.push(w.unit.clone());
            }
        }
    }
    let mut runs = Vec::with_capacity(used.len());
    for d in used {
        if fit.donors.len() <= p.min_donors {
            break;
        }
        let mut q = p.clone();
        q.exclude.push(d.clone());
        let f = q.check()?.fit(panel, treated, start)?;
        runs.push((d, f.average_effect()));
    }
    let lo = runs.iter().map(|r| r.1).fold(full, f64::min);
    let hi = runs.iter().map(|r| r.1).fold(full, f64::max);
    Ok(LeaveOneOut { full, runs, range: (lo, hi) })
}

/// Conformal inference for one treated unit (Chernozhukov, Wüthrich & Zhu 2021).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Conformal {
    /// p-value of the sharp null of no effect in every post-period (on the grid k/T).
    pub p_value_zero: f64,
    /// Number of periods T (the p-value grid is k/T).
    pub periods: usize,
    /// Confidence set for a constant effect θ by test inversion: {θ : p(θ) > 1 − level}.
    pub interval: (f64, f64),
    /// Level of the set.
    pub level: f64,
    /// Whether the set reached the edge of the searched range (then it may be wider).
    pub open_ended: bool,
}

struct ConformalProblem {
    x: DMatrix<f64>,
    h: DMatrix<f64>,
    y: Vec<f64>,
    t0: usize,
    demean: bool,
}

impl ConformalProblem {
    /// p-value of H0: effect = θ in every post-period, q = 1 statistic, moving-block
    /// (cyclic shift) permutations.
    fn p_value(&self, theta: f64, opts: &simplex::SimplexOptions) -> SynthResult<f64> {
        let tn = self.y.len();
        let mut ya: Vec<f64> = self.y.clone();
        for v in &mut ya[self.t0..] {
            *v -= theta;
        }
        let mut yv = DVector::from_vec(ya.clone());
        if self.demean {
            let m = yv.mean();
            yv.add_scalar_mut(-m);
        }
        let b = self.x.tr_mul(&yv);
        let sol = simplex::solve(&self.h, b.as_slice(), opts)
            .ok_or(SynthError::Numerical { stage: "conformal", detail: "empty donor pool".into() })?;
        let fitted = &self.x * DVector::from_vec(sol.weights);
        let u: Vec<f64> = (0..tn).map(|t| yv[t] - fitted[t]).collect();
        let stat = |shift: usize| -> f64 { (self.t0..tn).map(|t| u[(t + shift) % tn].abs()).sum::<f64>() };
        let s0 = stat(0);
        let count = (0..tn).filter(|&j| stat(j) >= s0 * (1.0 - 1e-12)).count();
        Ok(count as f64 / tn as f64)
    }
}

/// Conformal p-value of no effect and confidence set of a constant effect.
/// Methods `weights` and `intercept` (the latter demeans every series over all periods).
///
/// # Errors
/// [`SynthError::Unsupported`] for other methods or several treated units; data errors as
/// [`ValidParams::fit`].
pub fn conformal(params: &ValidParams, panel: &Panel, treated: &str, start: TimePoint) -> SynthResult<Conformal> {
    let p = &params.0;
    if !matches!(p.method, Method::Weights | Method::Intercept) {
        return Err(SynthError::Unsupported {
            method: p.method.name(),
            detail: "conformal inference is implemented for weights and intercept".into(),
        });
    }
    let prep = crate::data::prepare(panel, &[treated.to_string()], start, p)?;
    let tn = prep.n_periods();
    let j = prep.donors.len();
    let demean = p.method == Method::Intercept;
    let mut x = DMatrix::from_fn(tn, j, |t, k| prep.y[prep.donors[k]][t]);
    if demean {
        for k in 0..j {
            let m = x.column(k).mean();
            x.column_mut(k).add_scalar_mut(-m);
        }
    }
    let h = x.tr_mul(&x);
    let cp = ConformalProblem { x, h, y: prep.y[prep.treated[0]].clone(), t0: prep.t0, demean };
    let alpha = 1.0 - p.inference.level;
    let p0 = cp.p_value(0.0, &p.solver)?;
    // Search range: the SC point estimate ± 8 times the larger of pre-RMSPE and post spread.
    let fit = params.fit_quiet(panel, treated, start)?;
    let u = &fit.units[0];
    let center = fit.average_effect();
    let width = 8.0 * (u.pre_rmspe + u.post_rmspe).max(1e-9);
    let n = 161;
    let grid: Vec<f64> = (0..n).map(|i| center - width + 2.0 * width * i as f64 / (n - 1) as f64).collect();
    let pv: Vec<f64> = grid.iter().map(|&th| cp.p_value(th, &p.solver)).collect::<SynthResult<_>>()?;
    let acc: Vec<usize> = (0..n).filter(|&i| pv[i] > alpha).collect();
    let (lo, hi, open) = match (acc.first(), acc.last()) {
        (Some(&a), Some(&b)) => {
            let refine = |inside: f64, outside: f64| -> SynthResult<f64> {
                let (mut i, mut o) = (inside, outside);
                for _ in 0..40 {
                    let m = 0.5 * (i + o);
                    if cp.p_value(m, &p.solver)? > alpha { i = m } else { o = m }
                }
                Ok(i)
            };
            let lo = if a > 0 { refine(grid[a], grid[a - 1])? } else { grid[a] };
            let hi = if b + 1 < n { refine(grid[b], grid[b + 1])? } else { grid[b] };
            (lo, hi, a == 0 || b + 1 == n)
        }
        _ => (f64::NAN, f64::NAN, false),
    };
    Ok(Conformal { p_value_zero: p0, periods: tn, interval: (lo, hi), level: p.inference.level, open_ended: open })
}

impl ValidParams {
    /// Fit without placebo runs (internal helper for robustness checks).
    fn fit_quiet(&self, panel: &Panel, treated: &str, start: TimePoint) -> SynthResult<Fitted> {
        let mut p = self.0.clone();
        p.placebo = false;
        ValidParams(p).fit(panel, &[treated.to_string()], start)
    }
}

/// Several treated units with their own starts, aligned in event time.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Staggered {
    /// One fit per treated unit (donors: units never treated).
    pub fits: Vec<Fitted>,
    /// Event times k (0 = first treated period) covered by every unit.
    pub event_time: Vec<i64>,
    /// Aggregated gap (observed − synthetic) per event time.
    pub gap: Vec<f64>,
    /// Average of the aggregated gap over event times k ≥ 0.
    pub average_effect: f64,
}

/// Fit each treated unit at its own start against the never-treated pool and average the gaps
/// in event time, over the event times every unit covers. Unit shares follow the parameters'
/// aggregation (mean, or one size per treated unit).
///
/// # Errors
/// As [`ValidParams::fit`]; [`SynthError::NoPostPeriod`] if the units share no event time.
pub fn fit_staggered(params: &ValidParams, panel: &Panel, treated: &[(String, TimePoint)]) -> SynthResult<Staggered> {
    if treated.is_empty() {
        return Err(SynthError::NoTreated);
    }
    let names: Vec<String> = treated.iter().map(|t| t.0.clone()).collect();
    // sizes are taken over the periods before the earliest start
    let first_start = treated.iter().map(|t| t.1).min().unwrap_or(treated[0].1);
    let shares = crate::fit::unit_shares(&params.0.aggregate, panel, &names, first_start)?;
    let mut fits = Vec::with_capacity(treated.len());
    for (name, start) in treated {
        let mut p = params.0.clone();
        p.aggregate = crate::params::Aggregation::Mean;
        for other in &names {
            if other != name && !p.exclude.contains(other) {
                p.exclude.push(other.clone());
            }
        }
        fits.push(p.check()?.fit(panel, std::slice::from_ref(name), *start)?);
    }
    let kmin = fits.iter().map(|f| -(f.first_post as i64)).max().unwrap_or(0);
    let kmax = fits.iter().map(|f| (f.times.len() - f.first_post) as i64 - 1).min().unwrap_or(-1);
    if kmax < 0 {
        return Err(SynthError::NoPostPeriod { start: treated[0].1.to_string(), last: String::new() });
    }
    let event_time: Vec<i64> = (kmin..=kmax).collect();
    let gap: Vec<f64> = event_time
        .iter()
        .map(|&k| {
            fits.iter()
                .zip(&shares)
                .map(|(f, s)| {
                    let t = (f.first_post as i64 + k) as usize;
                    s * (f.observed[t] - f.synthetic[t])
                })
                .sum()
        })
        .collect();
    let post: Vec<f64> = event_time.iter().zip(&gap).filter(|(k, _)| **k >= 0).map(|(_, g)| *g).collect();
    let average_effect = post.iter().sum::<f64>() / post.len() as f64;
    Ok(Staggered { fits, event_time, gap, average_effect })
}
