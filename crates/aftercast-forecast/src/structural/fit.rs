//! Maximum-likelihood estimation of the structural model's variances, the asymptotic
//! covariance of the estimates, and simulation of future paths.

use super::kalman::{FilterOutput, filter};
use super::model::{Initialisation, StructuralParams, StructuralSpec, Trend};
use crate::error::{ForecastError, ForecastResult};
use crate::linalg::{cov_sqrt, sym_pinv};
use crate::optim::{OptimReport, minimise, numerical_hessian};
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

/// Prior variance of the approximate diffuse fallback.
pub const APPROX_KAPPA: f64 = 1e6;

/// Largest accepted gap (log-likelihood units, plus 0.1% of its size) between the exact diffuse
/// likelihood without its diffuse terms and the approximate diffuse likelihood at the starting
/// values (Nile: 0.008; statsmodels reference models: below 0.1).
pub const EXACT_CHECK_TOL: f64 = 1.0;

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

/// Negative log-likelihood with a soft box on the optimiser vector.
fn objective(spec: &StructuralSpec, y: &[f64], x: &[Vec<f64>], theta: &[f64], lo: f64, hi: f64) -> f64 {
    let mut pen = 0.0;
    let n_var = spec.n_params() - usize::from(spec.trend == Trend::DampedTrend);
    let mut th = theta.to_vec();
    for (i, v) in th.iter_mut().enumerate() {
        let (l, h) = if i < n_var { (lo, hi) } else { (-8.0, 8.0) };
        if *v < l {
            pen += (l - *v).powi(2);
            *v = l;
        } else if *v > h {
            pen += (*v - h).powi(2);
            *v = h;
        }
    }
    let p = spec.params_from_theta(&th);
    let out = filter(&spec.system(&p), y, x, false);
    -out.loglik + pen * 10.0
}

/// Log-likelihood and filter output at given natural-scale parameters.
pub fn loglik_at(spec: &StructuralSpec, p: &StructuralParams, y: &[f64], x: &[Vec<f64>]) -> FilterOutput {
    filter(&spec.system(p), y, x, true)
}

/// Fit by maximum likelihood: L-BFGS on the log-variances (and logit damping) with a
/// central-difference score, from starting values that split the differenced variance.
///
/// # Errors
/// [`ForecastError::NotIdentified`] when the diffuse period does not end within `y`;
/// [`ForecastError::NonFiniteObjective`]; [`ForecastError::Optimiser`].
pub fn fit(spec: &StructuralSpec, y: &[f64], x: &[Vec<f64>], start: Option<&[f64]>) -> ForecastResult<StructuralFit> {
    let scale = variance_scale(y);
    let ls = scale.ln();
    let (lo, hi) = (ls - LOG_VAR_SPAN, ls + 8.0);
    let n_var = spec.n_params() - usize::from(spec.trend == Trend::DampedTrend);
    let theta0: Vec<f64> = match start {
        Some(s) => s.to_vec(),
        None => {
            let mut v = vec![ls - (n_var as f64).ln(); n_var];
            v[0] = ls - 1.0_f64.ln() - 0.7;
            for (i, t) in v.iter_mut().enumerate().skip(1) {
                // slope and seasonal disturbances start smaller than the level's
                if i >= 2 {
                    *t -= 2.0;
                }
            }
            if spec.trend == Trend::DampedTrend {
                v.push(2.0);
            }
            v
        }
    };
    let mut probe = filter(&spec.system(&spec.params_from_theta(&theta0)), y, x, false);
    let mut warnings = Vec::new();
    let mut spec_used = spec.clone();
    // Numerical check of the exact recursion: away from the diffuse observations its
    // likelihood must agree with the approximate diffuse one (prior variance 1e6, same number
    // of observations left out); a large gap means round-off in P_inf / P_star (seen with a
    // long trigonometric season beside a trend and controls).
    let mut gap = None;
    if probe.resolved && spec.init == Initialisation::ExactDiffuse && probe.n_diffuse > 0 {
        let mut approx = spec.clone();
        approx.init = Initialisation::ApproximateDiffuse { kappa: APPROX_KAPPA };
        let a = filter(&approx.system(&approx.params_from_theta(&theta0)), y, x, false);
        let d = (probe.loglik_nondiffuse - a.loglik).abs();
        if d > EXACT_CHECK_TOL * (1.0 + 1e-3 * a.loglik.abs()) {
            gap = Some(d);
        }
    }
    if let Some(d) = gap {
        spec_used.init = Initialisation::ApproximateDiffuse { kappa: APPROX_KAPPA };
        probe = filter(&spec_used.system(&spec_used.params_from_theta(&theta0)), y, x, false);
        warnings.push(format!(
            "structural model: the exact diffuse filter is numerically unreliable on this model (its log-likelihood differs by {d:.2} from the approximate diffuse one at the starting values); the approximate diffuse prior (variance {APPROX_KAPPA:e}) is used instead"
        ));
    } else if !probe.resolved && probe.n_used > spec.n_states() {
        // Many nearly collinear diffuse states (e.g. a long trigonometric season next to a
        // trend and many event indicators) can leave the exact diffuse recursion numerically
        // unresolved; fall back to the approximate diffuse prior, visibly.
        let resolved_states = probe.n_diffuse;
        spec_used.init = Initialisation::ApproximateDiffuse { kappa: APPROX_KAPPA };
        probe = filter(&spec_used.system(&spec_used.params_from_theta(&theta0)), y, x, false);
        warnings.push(format!(
            "structural model: the exact diffuse initialisation did not resolve numerically ({} of {} diffuse states); the approximate diffuse prior (variance {APPROX_KAPPA:e}, first {} observations left out of the likelihood) is used instead",
            resolved_states,
            spec.n_states(),
            spec_used.system(&spec_used.params_from_theta(&theta0)).burn
        ));
    }
    if !probe.resolved {
        return Err(ForecastError::NotIdentified { model: "structural", periods: y.len() });
    }
    let spec = &spec_used;
    if !probe.loglik.is_finite() {
        return Err(ForecastError::NonFiniteObjective {
            model: "structural",
            detail: format!("log-likelihood {}", probe.loglik),
        });
    }
    let n_used = probe.n_used.max(1) as f64;
    let f = |th: &[f64]| objective(spec, y, x, th, lo, hi) / n_used;
    let out =
        minimise(&f, &theta0, 200, 1e-6).map_err(|detail| ForecastError::Optimiser { model: "structural", detail })?;
    let mut theta = out.x;
    for (i, v) in theta.iter_mut().enumerate() {
        let (l, h) = if i < n_var { (lo, hi) } else { (-8.0, 8.0) };
        *v = v.clamp(l, h);
    }
    if !out.report.converged {
        warnings.push(format!(
            "structural model: the optimiser ({}) did not report convergence ({}; gradient norm {:.2e}); the variances may not be at the maximum",
            out.report.solver, out.report.reason, out.report.gradient_norm
        ));
    }
    let names = spec.param_names();
    let at_lower_edge: Vec<String> = (0..n_var).filter(|&i| theta[i] <= lo + 1.0).map(|i| names[i].clone()).collect();
    // asymptotic covariance: inverse Hessian of -loglik over the parameters not at an edge
    let free: Vec<usize> = (0..theta.len()).filter(|&i| !(i < n_var && theta[i] <= lo + 1.0)).collect();
    let mut theta_cov = vec![vec![0.0; theta.len()]; theta.len()];
    if !free.is_empty() {
        let g = |sub: &[f64]| {
            let mut th = theta.clone();
            for (k, &i) in free.iter().enumerate() {
                th[i] = sub[k];
            }
            objective(spec, y, x, &th, lo, hi)
        };
        let sub0: Vec<f64> = free.iter().map(|&i| theta[i]).collect();
        let hess = numerical_hessian(&g, &sub0, 1e-3);
        let (inv, dropped) = sym_pinv(&hess, 1e-6);
        if dropped > 0 {
            warnings.push(format!(
                "structural model: the likelihood is flat in {dropped} direction(s) at the maximum; parameter uncertainty is not propagated along them"
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
    })
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
    let n_var = spec.n_params() - usize::from(spec.trend == Trend::DampedTrend);
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
                    if r < n_var { v.clamp(lo, hi) } else { v }
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
