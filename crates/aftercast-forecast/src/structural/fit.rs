//! Maximum-likelihood estimation of the structural model's variances, the asymptotic
//! covariance of the estimates, and simulation of future paths.

use super::kalman::{FilterOutput, filter, filter_with_score};
use super::model::{Initialisation, StructuralParams, StructuralSpec, Trend};
use crate::error::{ForecastError, ForecastResult};
use crate::linalg::{cov_sqrt, sym_pinv};
use crate::optim::{OptimReport, minimise_with_gradient};
use aftercast_resample::rng::{Stream, child_seed, par_draws};
use rand::RngExt;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};

/// Log-variances are kept within `[ln(scale) - LOG_VAR_SPAN, ln(scale) + 8]`, where `scale` is
/// the variance of the differenced pre-period outcome; beyond that a quadratic penalty applies.
/// A variance at the lower edge is, in practice, zero (the component is deterministic).
pub const LOG_VAR_SPAN: f64 = 30.0;

/// A variance below this share of `scale` counts as zero: the component is treated as
/// deterministic, listed in `at_lower_edge`, and gets no parameter uncertainty (the
/// log-likelihood is flat in its log-variance, so the asymptotic normal says nothing).
pub const ZERO_VARIANCE_RATIO: f64 = 1e-6;

/// A variance below this share of `scale` whose log-variance has a curvature of `-loglik`
/// below [`FLAT_CURVATURE`] also counts as zero: the data cannot tell it from zero (a standard
/// error above about 3 on the log scale, a factor of 20 either way).
pub const SMALL_VARIANCE_RATIO: f64 = 1e-3;

/// See [`SMALL_VARIANCE_RATIO`].
pub const FLAT_CURVATURE: f64 = 0.1;

/// Prior variance of the approximate diffuse last resort (used only when the exact diffuse
/// likelihood is not finite at every starting point).
pub const APPROX_KAPPA: f64 = 1e6;

/// The optimiser stops when the norm of the gradient of the mean log-likelihood per observation
/// is below this (or when an iteration changes that mean by less than 1e-10, see
/// [`crate::optim`]). The last iterations only creep variances towards zero: on the 1,095-day
/// benchmark model the concentrated search stops after 12 iterations at a log-likelihood 0.009
/// below a search to 1e-6 (24 iterations), far below what moves an interval (a likelihood-ratio
/// interval needs 1.35).
pub const FIT_TOLERANCE: f64 = 1e-5;

/// Guard on parameter draws: a drawn log-variance departs at most this far from the MLE
/// (a factor of about 55 in the variance), and stays in the optimiser's box.
pub const MAX_LOG_VAR_DEVIATION: f64 = 4.0;

/// A fitted structural model.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StructuralFit {
    /// The model structure.
    pub spec: StructuralSpec,
    /// Optimiser vector at the maximum (log-variances, logit damping).
    pub theta: Vec<f64>,
    /// Natural-scale parameters at the maximum.
    pub params: StructuralParams,
    /// Maximised log-likelihood (Durbin & Koopman 2012 eq. 7.3 convention).
    pub loglik: f64,
    /// How the optimiser stopped.
    pub optim: OptimReport,
    /// Asymptotic covariance of `theta` (inverse of the numerical Hessian of `-loglik`;
    /// directions with non-positive curvature get zero variance).
    pub theta_cov: Vec<Vec<f64>>,
    /// Parameters whose variance is effectively zero (below [`ZERO_VARIANCE_RATIO`] x scale).
    pub at_lower_edge: Vec<String>,
    /// Number of observations that entered the likelihood.
    pub n_used: usize,
    /// Plain-language warnings (non-convergence, flat directions).
    pub warnings: Vec<String>,
    /// Choices made on the data (e.g. why an AR(1) component was added).
    #[serde(default)]
    pub notes: Vec<String>,
}

/// Scale of the variances: variance of the first differences of the observed values
/// (a positive fallback when the series is constant).
pub fn variance_scale(y: &[f64]) -> f64 {
    let obs: Vec<f64> = y.iter().copied().filter(|v| v.is_finite()).collect();
    let d: Vec<f64> = obs.windows(2).map(|w| w[1] - w[0]).collect();
    let var = |v: &[f64]| {
        if v.len() < 2 {
            return 0.0;
        }
        let m = v.iter().sum::<f64>() / v.len() as f64;
        v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64
    };
    let s = var(&d);
    if s > 0.0 && s.is_finite() {
        s
    } else {
        let s2 = var(&obs);
        if s2 > 0.0 && s2.is_finite() { s2 } else { 1.0 }
    }
}

/// The optimiser's box: log-variances within `[lo, hi]`, shape parameters within
/// [`StructuralSpec::shape_bounds`].
fn bounds(spec: &StructuralSpec, i: usize, lo: f64, hi: f64) -> (f64, f64) {
    if i < spec.n_variances() { (lo, hi) } else { spec.shape_bounds(i) }
}

/// The soft box of the optimisers: each value clamped into `bounds(i)`, with the quadratic
/// penalty of its distance outside and the penalty's gradient.
fn soft_box(values: &[f64], bounds: impl Fn(usize) -> (f64, f64)) -> (Vec<f64>, f64, Vec<f64>) {
    let mut pen = 0.0;
    let mut dpen = vec![0.0; values.len()];
    let mut out = values.to_vec();
    for (i, v) in out.iter_mut().enumerate() {
        let (l, h) = bounds(i);
        if *v < l {
            pen += (l - *v).powi(2);
            dpen[i] = -2.0 * (l - *v);
            *v = l;
        } else if *v > h {
            pen += (*v - h).powi(2);
            dpen[i] = 2.0 * (*v - h);
            *v = h;
        }
    }
    (out, pen, dpen)
}

/// Negative log-likelihood with a soft box on the optimiser vector, and its gradient (the
/// analytic score of the filter, plus the penalty's).
fn objective(spec: &StructuralSpec, y: &[f64], x: &[Vec<f64>], theta: &[f64], lo: f64, hi: f64) -> (f64, Vec<f64>) {
    let (th, pen, dpen) = soft_box(theta, |i| bounds(spec, i, lo, hi));
    let p = spec.params_from_theta(&th);
    let (loglik, score) = parallel_score(&spec.system(&p), &spec.system_derivatives(&th), y, x);
    let grad = score.iter().zip(&dpen).map(|(s, d)| -s + 10.0 * d).collect();
    (-loglik + pen * 10.0, grad)
}

/// One pass of the filter with its score.
struct Scored {
    loglik: f64,
    grad: Vec<f64>,
    rss: f64,
    rss_grad: Vec<f64>,
    n_used: usize,
    n_diffuse_states: usize,
}

/// The log-likelihood and its score, the directions split across the worker threads (each
/// share reruns the filter itself; the values do not depend on the split).
fn parallel_score(
    sys: &super::model::System,
    derivs: &[super::kalman::SystemDerivative],
    y: &[f64],
    x: &[Vec<f64>],
) -> (f64, Vec<f64>) {
    let sc = parallel_scored(sys, derivs, y, x);
    (sc.loglik, sc.grad)
}

fn parallel_scored(
    sys: &super::model::System,
    derivs: &[super::kalman::SystemDerivative],
    y: &[f64],
    x: &[Vec<f64>],
) -> Scored {
    use rayon::prelude::*;
    let parts = rayon::current_num_threads().clamp(1, derivs.len().max(1));
    let size = derivs.len().div_ceil(parts).max(1);
    let pieces: Vec<(FilterOutput, Vec<f64>)> = if parts <= 1 || derivs.len() <= 1 {
        vec![filter_with_score(sys, derivs, y, x)]
    } else {
        derivs.par_chunks(size).map(|chunk| filter_with_score(sys, chunk, y, x)).collect()
    };
    let first = &pieces[0].0;
    Scored {
        loglik: first.loglik,
        rss: first.rss,
        n_used: first.n_used,
        n_diffuse_states: first.n_diffuse_states,
        rss_grad: pieces.iter().flat_map(|p| p.0.rss_score.iter().copied()).collect(),
        grad: pieces.into_iter().flat_map(|p| p.1).collect(),
    }
}

/// Box of the concentrated optimiser's variance ratios (log scale): as wide as the box of the
/// log-variances, and within what `P -= M M' / F` can carry in double precision.
const LOG_RATIO_BOX: f64 = LOG_VAR_SPAN;

/// The optimiser's vector with the irregular variance at 1 and the other variances given as
/// log-ratios to it (`ratios`: the vector without its first entry).
fn from_ratios(ratios: &[f64]) -> Vec<f64> {
    let mut th = Vec::with_capacity(ratios.len() + 1);
    th.push(0.0);
    th.extend_from_slice(ratios);
    th
}

/// Negative concentrated log-likelihood over the log-ratios of the variances to the irregular
/// variance (and the shape parameters), with its gradient, and the concentrated scale.
///
/// Scaling every variance by `c` leaves the filter's gains and innovations unchanged and scales
/// every innovation variance by `c` (the exact diffuse part included, see
/// [`FilterOutput::rss`]), so the log-likelihood at scale `c` is
/// `l(1) - ((n - d) log c + rss (1/c - 1)) / 2`, maximised at `c = rss / (n - d)`; at that `c`
/// the derivative along any other parameter is `dl(1) - (1/c - 1) drss / 2` (the scale's own
/// derivative is zero there).
fn concentrated(spec: &StructuralSpec, y: &[f64], x: &[Vec<f64>], ratios: &[f64]) -> (f64, Vec<f64>, f64) {
    let n_var = spec.n_variances();
    let (r, pen, dpen) =
        soft_box(ratios, |j| if j + 1 < n_var { (-LOG_RATIO_BOX, LOG_RATIO_BOX) } else { spec.shape_bounds(j + 1) });
    let th = from_ratios(&r);
    let p = spec.params_from_theta(&th);
    let derivs = spec.system_derivatives(&th);
    let sc = parallel_scored(&spec.system(&p), &derivs[1..], y, x);
    let dof = sc.n_used as f64 - sc.n_diffuse_states as f64;
    if !(sc.rss > 0.0 && sc.rss.is_finite() && dof > 0.0 && sc.loglik.is_finite()) {
        return (f64::INFINITY, vec![0.0; ratios.len()], f64::NAN);
    }
    let c = sc.rss / dof;
    let ll = sc.loglik - 0.5 * (dof * c.ln() + sc.rss * (1.0 / c - 1.0));
    let grad = sc
        .grad
        .iter()
        .zip(&sc.rss_grad)
        .zip(&dpen)
        .map(|((g, dr), dp)| -(g - 0.5 * (1.0 / c - 1.0) * dr) + 10.0 * dp)
        .collect();
    (-ll + 10.0 * pen, grad, c)
}

/// L-BFGS on the concentrated log-likelihood (one dimension and one score direction fewer than
/// the full problem, and no scale to learn), from `theta0`; returns the full optimiser vector.
fn maximise_concentrated(
    spec: &StructuralSpec,
    y: &[f64],
    x: &[Vec<f64>],
    theta0: &[f64],
    n_used: f64,
) -> Result<(Vec<f64>, OptimReport), String> {
    let n_var = spec.n_variances();
    let r0: Vec<f64> = (1..theta0.len()).map(|i| if i < n_var { theta0[i] - theta0[0] } else { theta0[i] }).collect();
    let memo = Memo::new();
    let both = |r: &[f64]| {
        memo.eval(r, |r| {
            let (v, g, _) = concentrated(spec, y, x, r);
            (v / n_used, g.into_iter().map(|v| v / n_used).collect())
        })
    };
    let f = |r: &[f64]| both(r).0;
    let g = |r: &[f64]| both(r).1;
    let out = minimise_with_gradient(&f, Some(&g), &r0, 300, FIT_TOLERANCE)?;
    let (_, _, c) = concentrated(spec, y, x, &out.x);
    if !c.is_finite() {
        return Err("the concentrated scale is not finite".into());
    }
    let lc = c.ln();
    let mut theta = vec![lc];
    theta.extend(out.x.iter().enumerate().map(|(j, v)| if j + 1 < n_var { v + lc } else { *v }));
    Ok((theta, out.report))
}

/// A point of the optimiser's vector with the objective and gradient there.
type Evaluated = (Vec<f64>, f64, Vec<f64>);

/// The last point's value and gradient: the optimiser asks for both at one point separately,
/// and one pass of the filter gives both.
struct Memo(std::sync::Mutex<Option<Evaluated>>);

impl Memo {
    fn new() -> Memo {
        Memo(std::sync::Mutex::new(None))
    }

    fn eval(&self, at: &[f64], compute: impl Fn(&[f64]) -> (f64, Vec<f64>)) -> (f64, Vec<f64>) {
        if let Ok(guard) = self.0.lock()
            && let Some((x, v, g)) = guard.as_ref()
            && x.as_slice() == at
        {
            return (*v, g.clone());
        }
        let (v, g) = compute(at);
        if let Ok(mut guard) = self.0.lock() {
            *guard = Some((at.to_vec(), v, g.clone()));
        }
        (v, g)
    }
}

/// Log-likelihood and filter output at given natural-scale parameters.
pub fn loglik_at(spec: &StructuralSpec, p: &StructuralParams, y: &[f64], x: &[Vec<f64>]) -> FilterOutput {
    filter(&spec.system(p), y, x, true)
}

/// Log-likelihood and its gradient with respect to the optimiser's vector (log-variances, logit
/// damping, `atanh` AR coefficient), without the optimiser's box.
pub fn score_at(spec: &StructuralSpec, theta: &[f64], y: &[f64], x: &[Vec<f64>]) -> (f64, Vec<f64>) {
    let p = spec.params_from_theta(theta);
    let (out, g) = filter_with_score(&spec.system(&p), &spec.system_derivatives(theta), y, x);
    (out.loglik, g)
}

/// Candidate starting points: the variance of the differenced series split among the
/// components in a few proportions (irregular-led, level-led, even). The best of them by
/// likelihood starts the optimiser.
fn starting_points(spec: &StructuralSpec, ls: f64) -> Vec<Vec<f64>> {
    let n_var = spec.n_variances();
    let mut out = Vec::new();
    for (irr, lev, rest) in [(-0.7, -2.0, -4.5), (-2.5, -0.7, -4.5), (-1.0, -1.0, -2.5), (-0.3, -5.0, -7.0)] {
        let mut v = vec![ls + rest; n_var];
        v[0] = ls + irr;
        v[1] = ls + lev;
        if spec.ar {
            v[n_var - 1 - usize::from(!spec.control_scales.is_empty())] = ls + irr - 0.7;
        }
        if spec.trend == Trend::DampedTrend {
            v.push(2.0);
        }
        if spec.ar {
            v.push(0.5_f64.atanh());
        }
        out.push(v);
    }
    out
}

/// Fit by maximum likelihood: L-BFGS on the log-variances (and logit damping, `atanh` AR
/// coefficient) with the analytic score, from the best of a few starting points.
///
/// # Errors
/// [`ForecastError::NotIdentified`] when the diffuse period does not end within `y`;
/// [`ForecastError::NonFiniteObjective`]; [`ForecastError::Optimiser`].
pub fn fit(spec: &StructuralSpec, y: &[f64], x: &[Vec<f64>], start: Option<&[f64]>) -> ForecastResult<StructuralFit> {
    let scale = variance_scale(y);
    let ls = scale.ln();
    let (lo, hi) = (ls - LOG_VAR_SPAN, ls + 8.0);
    let n_var = spec.n_variances();
    let mut warnings = Vec::new();
    let mut spec_used = spec.clone();
    // a warm start (a nearby fit) joins the standard starting points; the best by likelihood wins
    let mut candidates = starting_points(spec, ls);
    if let Some(s) = start
        && s.len() == spec.n_params()
    {
        candidates.insert(0, s.to_vec());
    }
    let probe = filter(&spec.system(&spec.params_from_theta(&candidates[0])), y, x, false);
    if !probe.resolved {
        return Err(ForecastError::NotIdentified { model: "structural", periods: y.len() });
    }
    let value = |sp: &StructuralSpec, th: &[f64]| filter(&sp.system(&sp.params_from_theta(th)), y, x, false).loglik;
    let mut scored: Vec<(f64, Vec<f64>)> = candidates.iter().map(|c| (value(spec, c), c.clone())).collect();
    if scored.iter().all(|(l, _)| !l.is_finite()) && spec.init == Initialisation::ExactDiffuse {
        // last resort: a proper but wide prior on the initial state
        spec_used.init = Initialisation::ApproximateDiffuse { kappa: APPROX_KAPPA };
        scored = candidates.iter().map(|c| (value(&spec_used, c), c.clone())).collect();
        warnings.push(format!(
            "structural model: the exact treatment of the unknown starting state failed on this data, so a wide prior (variance {APPROX_KAPPA:e}) is used instead, which usually gives nearly the same counterfactual; the usual cause is a control or event that repeats another, which makes their coefficients unreliable: check --controls and --events for near-duplicates and drop one"
        ));
    }
    let spec = &spec_used;
    let Some((_, theta0)) = scored.into_iter().filter(|(l, _)| l.is_finite()).max_by(|a, b| a.0.total_cmp(&b.0)) else {
        return Err(ForecastError::NonFiniteObjective {
            model: "structural",
            detail: "the log-likelihood is not finite at any starting point".into(),
        });
    };
    let n_used = probe.n_used.max(1) as f64;
    // the exact diffuse likelihood has the scale in closed form: optimise without it; the full
    // problem is the fallback (and the only way under the approximate prior, whose fixed prior
    // variance does not scale)
    let concentrated_fit = (spec.init == Initialisation::ExactDiffuse)
        .then(|| maximise_concentrated(spec, y, x, &theta0, n_used).ok())
        .flatten()
        .map(|(mut th, report)| {
            for (i, v) in th.iter_mut().enumerate() {
                let (l, h) = bounds(spec, i, lo, hi);
                *v = v.clamp(l, h);
            }
            (th, report)
        })
        .filter(|(th, _)| value(spec, th).is_finite() && value(spec, th) >= value(spec, &theta0));
    let out = match concentrated_fit {
        Some((x, report)) => crate::optim::OptimOutcome { x, report },
        None => {
            let memo = Memo::new();
            let both = |th: &[f64]| {
                memo.eval(th, |th| {
                    let (v, g) = objective(spec, y, x, th, lo, hi);
                    (v / n_used, g.into_iter().map(|v| v / n_used).collect())
                })
            };
            let f = |th: &[f64]| both(th).0;
            let g = |th: &[f64]| both(th).1;
            minimise_with_gradient(&f, Some(&g), &theta0, 300, FIT_TOLERANCE)
                .map_err(|detail| ForecastError::Optimiser { model: "structural", detail })?
        }
    };
    let mut theta = out.x;
    for (i, v) in theta.iter_mut().enumerate() {
        let (l, h) = bounds(spec, i, lo, hi);
        *v = v.clamp(l, h);
    }
    if !out.report.converged {
        warnings.push(format!(
            "structural model: the search for the best-fitting variances stopped before it settled ({}; {} iterations), so the counterfactual and its interval may be off: simplify the model with --trend level, fewer --season components or --no-season",
            out.report.reason, out.report.iterations
        ));
    }
    let names = spec.param_names();
    let zero = ls + ZERO_VARIANCE_RATIO.ln();
    let mut at_lower_edge: Vec<String> = (0..n_var).filter(|&i| theta[i] <= zero).map(|i| names[i].clone()).collect();
    // asymptotic covariance: inverse Hessian of -loglik over the parameters not at an edge,
    // by central differences of the analytic score
    let free: Vec<usize> = (0..theta.len()).filter(|&i| !(i < n_var && theta[i] <= zero)).collect();
    let mut theta_cov = vec![vec![0.0; theta.len()]; theta.len()];
    if !free.is_empty() {
        let full_hess = score_hessian(spec, y, x, &theta, &free, lo, hi);
        // a small variance on which the likelihood is flat cannot be told from zero either
        let small = ls + SMALL_VARIANCE_RATIO.ln();
        let keep: Vec<usize> = (0..free.len())
            .filter(|&a| {
                let i = free[a];
                let flat_zero = i < n_var && theta[i] <= small && full_hess[a][a] < FLAT_CURVATURE;
                if flat_zero {
                    at_lower_edge.push(names[i].clone());
                }
                !flat_zero
            })
            .collect();
        let free: Vec<usize> = keep.iter().map(|&a| free[a]).collect();
        let hess: Vec<Vec<f64>> = keep.iter().map(|&a| keep.iter().map(|&b| full_hess[a][b]).collect()).collect();
        let (inv, dropped) = sym_pinv(&hess, 1e-6);
        if dropped > 0 {
            warnings.push(format!(
                "structural model: the data cannot tell apart {dropped} combination(s) of the variances; their uncertainty is left out of the interval, which may be too narrow: a simpler model (--trend level, fewer --season components or --no-season) avoids it"
            ));
        }
        for (a, &i) in free.iter().enumerate() {
            for (b, &j) in free.iter().enumerate() {
                theta_cov[i][j] = inv[a][b];
            }
        }
    }
    let params = spec.params_from_theta(&theta);
    let fo = filter(&spec.system(&params), y, x, false);
    Ok(StructuralFit {
        spec: spec.clone(),
        theta,
        params,
        loglik: fo.loglik,
        optim: out.report,
        theta_cov,
        at_lower_edge,
        n_used: fo.n_used,
        warnings,
        notes: Vec::new(),
    })
}

/// Hessian of `-loglik` over the `free` entries of `theta`: forward differences (step 1e-4,
/// inward at an upper bound) of the analytic score, symmetrised; the `k + 1` evaluations run in
/// parallel. The O(h) error of a forward difference is about 1e-4 relative here, far inside what
/// a covariance needs.
fn score_hessian(
    spec: &StructuralSpec,
    y: &[f64],
    x: &[Vec<f64>],
    theta: &[f64],
    free: &[usize],
    lo: f64,
    hi: f64,
) -> Vec<Vec<f64>> {
    use rayon::prelude::*;
    const H: f64 = 1e-4;
    let k = free.len();
    // step inward at an upper bound, so no step lands in the box's penalty
    let steps: Vec<f64> = free.iter().map(|&i| if theta[i] + H > bounds(spec, i, lo, hi).1 { -H } else { H }).collect();
    let grads: Vec<Vec<f64>> = (0..=k)
        .into_par_iter()
        .map(|e| {
            let mut th = theta.to_vec();
            if e < k {
                th[free[e]] += steps[e];
            }
            objective(spec, y, x, &th, lo, hi).1
        })
        .collect();
    let g0 = &grads[k];
    let mut hess = vec![vec![0.0; k]; k];
    #[allow(clippy::needless_range_loop)] // symmetric fill: both hess[a][b] and hess[b][a]
    for a in 0..k {
        for b in 0..k {
            let gb = free[b];
            hess[a][b] = (grads[a][gb] - g0[gb]) / steps[a];
        }
    }
    #[allow(clippy::needless_range_loop)] // symmetric fill: both hess[a][b] and hess[b][a]
    for a in 0..k {
        for b in 0..a {
            let v = 0.5 * (hess[a][b] + hess[b][a]);
            hess[a][b] = v;
            hess[b][a] = v;
        }
    }
    hess
}

/// How counterfactual paths are drawn.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SimulationOptions {
    /// Number of path draws.
    pub draws: usize,
    /// Seed of the random streams.
    pub seed: u64,
    /// Draw parameters from the asymptotic normal of the MLE (log-variance scale).
    pub parameter_uncertainty: bool,
    /// Number of distinct parameter draws (each needs one pass of the filter); path `i` uses
    /// parameter draw `i mod parameter_sets`.
    pub parameter_sets: usize,
}

impl Default for SimulationOptions {
    fn default() -> Self {
        SimulationOptions { draws: 1000, seed: 1, parameter_uncertainty: true, parameter_sets: 100 }
    }
}

/// Draw joint future paths of the observation. `y` is the fitting span (pre-period; later
/// values are not used), `x[k]` the regressors over the fitting span followed by `horizon`
/// future periods; `skip` leading future periods (a washout) are simulated but not returned.
/// Each path starts from a draw of the state after the fitting span (state uncertainty),
/// adds state and observation disturbances (future noise) and, when asked, uses a parameter
/// vector drawn from `N(theta_hat, theta_cov)` (parameter uncertainty).
///
/// # Errors
/// [`ForecastError::NotIdentified`] if the diffuse period does not end within `y`.
pub fn simulate(
    fit: &StructuralFit,
    y: &[f64],
    x: &[Vec<f64>],
    skip: usize,
    horizon: usize,
    opts: &SimulationOptions,
) -> ForecastResult<Vec<Vec<f64>>> {
    let n = y.len();
    let spec = &fit.spec;
    let n_sets = if opts.parameter_uncertainty { opts.parameter_sets.clamp(1, opts.draws.max(1)) } else { 1 };
    let cov_root = cov_sqrt(&fit.theta_cov);
    let ls = variance_scale(y).ln();
    let (lo, hi) = (ls - LOG_VAR_SPAN, ls + 8.0);
    let theta_seed = child_seed(opts.seed, "structural-parameters");
    // one filter pass per parameter set: start state distribution after the fitting span
    struct Start {
        sys: super::model::System,
        a: Vec<f64>,
        root: Vec<Vec<f64>>,
    }
    let starts: Vec<Option<Start>> = par_draws(theta_seed, n_sets, |i, rng: &mut Stream| {
        let theta: Vec<f64> = if i == 0 || !opts.parameter_uncertainty {
            fit.theta.clone()
        } else {
            let k = fit.theta.len();
            let zs: Vec<f64> = (0..k).map(|_| rng.sample(StandardNormal)).collect();
            (0..k)
                .map(|r| {
                    let dev = (0..k).map(|c| cov_root[r][c] * zs[c]).sum::<f64>();
                    let v = fit.theta[r] + dev.clamp(-MAX_LOG_VAR_DEVIATION, MAX_LOG_VAR_DEVIATION);
                    let (l, h) = bounds(spec, r, lo, hi);
                    v.clamp(l, h)
                })
                .collect()
        };
        let p = spec.params_from_theta(&theta);
        let sys = spec.system(&p);
        let out = filter(&sys, y, x, false);
        if !out.resolved {
            return None;
        }
        let m = sys.m;
        let pm: Vec<Vec<f64>> = (0..m).map(|r| out.p_next[r * m..(r + 1) * m].to_vec()).collect();
        Some(Start { root: cov_sqrt(&pm), a: out.a_next, sys })
    });
    if starts.iter().any(Option::is_none) {
        return Err(ForecastError::NotIdentified { model: "structural", periods: n });
    }
    let starts: Vec<Start> = starts.into_iter().flatten().collect();
    let paths = par_draws(opts.seed, opts.draws, |i, rng: &mut Stream| {
        let st = &starts[i % starts.len()];
        let m = st.sys.m;
        let zs: Vec<f64> = (0..m).map(|_| rng.sample(StandardNormal)).collect();
        let mut alpha: Vec<f64> =
            (0..m).map(|r| st.a[r] + (0..m).map(|c| st.root[r][c] * zs[c]).sum::<f64>()).collect();
        let mut scratch = vec![0.0; m];
        let mut z = Vec::with_capacity(m);
        let sd_h = st.sys.h.sqrt();
        let sd_q: Vec<f64> = st.sys.q.iter().map(|q| q.sqrt()).collect();
        let mut path = Vec::with_capacity(horizon);
        for h in 0..skip + horizon {
            let t = n + h;
            st.sys.z_at(x, t, &mut z);
            let eps: f64 = rng.sample(StandardNormal);
            let yt = z.iter().map(|&(j, v)| v * alpha[j]).sum::<f64>() + sd_h * eps;
            if h >= skip {
                path.push(yt);
            }
            st.sys.transition_vec(&mut alpha, &mut scratch);
            for (a, s) in alpha.iter_mut().zip(&sd_q) {
                if *s > 0.0 {
                    let e: f64 = rng.sample(StandardNormal);
                    *a += s * e;
                }
            }
        }
        path
    });
    Ok(paths)
}
