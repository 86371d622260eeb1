//! The Kalman filter with exact diffuse initialisation for a univariate observation
//! (Durbin & Koopman 2012, sections 5.2-5.3 and 7.2.2; Koopman & Durbin 2000 for the
//! univariate form). Missing observations (`NaN`) skip the update step.
//!
//! During the diffuse period the filter carries `P[t] = kappa P_inf[t] + P_star[t] + O(1/kappa)`
//! as the pair `(P_inf, P_star)`. With `F_inf = Z P_inf Z'`, `F_star = Z P_star Z' + H`,
//! `M_inf = P_inf Z'`, `M_star = P_star Z'`:
//! - if `F_inf > 0`: `a += M_inf v / F_inf`,
//!   `P_star += M_inf M_inf' F_star / F_inf^2 - (M_star M_inf' + M_inf M_star') / F_inf`,
//!   `P_inf -= M_inf M_inf' / F_inf`; the log-likelihood term is `-(log 2pi + log F_inf) / 2`;
//! - if `F_inf = 0`: the usual update with `M_star`, `F_star`.
//!
//! The diffuse period ends when `P_inf` is zero: after as many updates with `F_inf > 0` as
//! there are diffuse states (each lowers its rank by one), or when every entry is below
//! [`DIFFUSE_TOL`]. `F_inf` counts as zero below [`F_INF_REL_TOL`] times the sum of the
//! absolute terms of `Z P_inf Z'`.

use super::model::System;

/// Absolute tolerance under which entries of `P_inf` count as zero.
pub const DIFFUSE_TOL: f64 = 1e-9;

/// `F_inf` counts as zero below this share of the sum of absolute terms of `Z P_inf Z'` (its
/// round-off scale), so near-collinear but genuine diffuse directions are still resolved.
pub const F_INF_REL_TOL: f64 = 1e-10;

/// What the filter keeps per period (only when asked; the likelihood alone needs none).
#[derive(Debug, Clone, Default)]
pub struct FilterTrace {
    /// One-step-ahead forecast `Z[t] a[t]` of each observation.
    pub forecast: Vec<f64>,
    /// Its variance `F[t]` (`F_star` in the diffuse period; NaN where `F_inf > 0`).
    pub forecast_var: Vec<f64>,
    /// Filtered state `a[t|t]`, one vector per period.
    pub filtered_state: Vec<Vec<f64>>,
    /// Predicted state `a[t]` (before seeing `y[t]`), one vector per period.
    pub predicted_state: Vec<Vec<f64>>,
    /// Whether period `t` was in the diffuse period with `F_inf > 0`.
    pub diffuse: Vec<bool>,
}

/// Result of one pass of the filter.
#[derive(Debug, Clone)]
pub struct FilterOutput {
    /// Log-likelihood as in Durbin & Koopman (2012) eq. (7.3): diffuse-period observations with
    /// `F_inf > 0` contribute `-(log 2 pi + log F_inf) / 2` (this is also what statsmodels reports
    /// with exact diffuse initialisation). With approximate diffuse initialisation, the first
    /// `burn` observations are left out instead.
    pub loglik: f64,
    /// Log-likelihood over the non-diffuse observations only (the diffuse-period terms with
    /// `F_inf > 0` left out entirely).
    pub loglik_nondiffuse: f64,
    /// Number of observations with `F_inf > 0` (the diffuse period's informative observations).
    pub n_diffuse: usize,
    /// Number of observations that entered the likelihood.
    pub n_used: usize,
    /// Whether the diffuse period ended.
    pub resolved: bool,
    /// Predicted state after the last observation, `a[n]`.
    pub a_next: Vec<f64>,
    /// Its covariance `P[n]` (row-major; finite part only, valid when `resolved`).
    pub p_next: Vec<f64>,
    /// Per-period trace, when requested.
    pub trace: Option<FilterTrace>,
}

const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// Run the filter over `y` (NaN = missing) with regressors `x[k][t]`.
pub fn filter(sys: &System, y: &[f64], x: &[Vec<f64>], keep_trace: bool) -> FilterOutput {
    let m = sys.m;
    let mut a = vec![0.0; m];
    let mut pstar = sys.p_star0.clone();
    let mut pinf = sys.p_inf0.clone();
    let mut diffuse = pinf.iter().any(|v| *v != 0.0);
    // each update with F_inf > 0 lowers the rank of P_inf by one: after as many updates as
    // there are diffuse states, P_inf is zero in exact arithmetic
    let rank0 = (0..m).filter(|&i| pinf[i * m + i] != 0.0).count();
    let mut scratch = vec![0.0; m * m];
    let mut vscratch = vec![0.0; m];
    let mut m_inf = vec![0.0; m];
    let mut m_star = vec![0.0; m];
    let mut z: Vec<(usize, f64)> = Vec::with_capacity(m);
    let mut loglik = 0.0;
    let mut loglik_nd = 0.0;
    let mut n_diffuse = 0;
    let mut n_used = 0;
    let mut trace = keep_trace.then(|| FilterTrace {
        forecast: Vec::with_capacity(y.len()),
        forecast_var: Vec::with_capacity(y.len()),
        filtered_state: Vec::with_capacity(y.len()),
        predicted_state: Vec::with_capacity(y.len()),
        diffuse: Vec::with_capacity(y.len()),
    });
    for (t, &yt) in y.iter().enumerate() {
        sys.z_at(x, t, &mut z);
        let forecast: f64 = z.iter().map(|&(i, v)| v * a[i]).sum();
        // M_star = P_star Z'
        for (r, ms) in m_star.iter_mut().enumerate() {
            let row = &pstar[r * m..(r + 1) * m];
            *ms = z.iter().map(|&(i, v)| v * row[i]).sum();
        }
        let f_star: f64 = z.iter().map(|&(i, v)| v * m_star[i]).sum::<f64>() + sys.h;
        let mut f_inf = 0.0;
        if diffuse {
            for (r, mi) in m_inf.iter_mut().enumerate() {
                let row = &pinf[r * m..(r + 1) * m];
                *mi = z.iter().map(|&(i, v)| v * row[i]).sum();
            }
            f_inf = z.iter().map(|&(i, v)| v * m_inf[i]).sum();
            // round-off scale of F_inf: the sum of absolute terms of Z P_inf Z'
            let f_abs: f64 = z
                .iter()
                .map(|&(i, v)| v.abs() * z.iter().map(|&(j, w)| pinf[i * m + j].abs() * w.abs()).sum::<f64>())
                .sum();
            if f_inf <= F_INF_REL_TOL * f_abs {
                f_inf = 0.0;
            }
        }
        let mut was_diffuse_obs = false;
        if let Some(tr) = trace.as_mut() {
            tr.predicted_state.push(a.clone());
            tr.forecast.push(forecast);
        }
        if yt.is_finite() {
            let v = yt - forecast;
            if f_inf > 0.0 {
                was_diffuse_obs = true;
                let fi = 1.0 / f_inf;
                let c = f_star * fi * fi;
                for (ai, mi) in a.iter_mut().zip(&m_inf) {
                    *ai += mi * v * fi;
                }
                for r in 0..m {
                    let (mir, msr) = (m_inf[r], m_star[r]);
                    let ps = &mut pstar[r * m..(r + 1) * m];
                    for c2 in 0..m {
                        ps[c2] += mir * m_inf[c2] * c - (msr * m_inf[c2] + mir * m_star[c2]) * fi;
                    }
                    let pi = &mut pinf[r * m..(r + 1) * m];
                    for c2 in 0..m {
                        pi[c2] -= mir * m_inf[c2] * fi;
                    }
                }
                loglik -= 0.5 * (LN_2PI + f_inf.ln());
                n_diffuse += 1;
                n_used += 1;
            } else {
                let fi = 1.0 / f_star;
                for (ai, ms) in a.iter_mut().zip(&m_star) {
                    *ai += ms * v * fi;
                }
                for r in 0..m {
                    let msr = m_star[r] * fi;
                    let ps = &mut pstar[r * m..(r + 1) * m];
                    for c2 in 0..m {
                        ps[c2] -= msr * m_star[c2];
                    }
                }
                if t >= sys.burn {
                    let term = -0.5 * (LN_2PI + f_star.ln() + v * v * fi);
                    loglik += term;
                    loglik_nd += term;
                    n_used += 1;
                }
            }
        }
        if let Some(tr) = trace.as_mut() {
            tr.filtered_state.push(a.clone());
            tr.forecast_var.push(if was_diffuse_obs { f64::NAN } else { f_star });
            tr.diffuse.push(was_diffuse_obs);
        }
        // predict
        sys.transition_vec(&mut a, &mut vscratch);
        sys.transition_cov(&mut pstar, &mut scratch);
        for i in 0..m {
            pstar[i * m + i] += sys.q[i];
        }
        if diffuse {
            sys.transition_cov(&mut pinf, &mut scratch);
            if n_diffuse >= rank0 || pinf.iter().all(|v| v.abs() <= DIFFUSE_TOL) {
                diffuse = false;
                pinf.fill(0.0);
            }
        }
    }
    FilterOutput {
        loglik,
        loglik_nondiffuse: loglik_nd,
        n_diffuse,
        n_used,
        resolved: !diffuse,
        a_next: a,
        p_next: pstar,
        trace,
    }
}
