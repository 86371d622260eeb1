//! The Kalman filter with exact diffuse initialisation for a univariate observation, in the
//! augmented form with a collapse (de Jong 1991; Durbin & Koopman 2012, section 5.7), and its
//! score by forward differentiation of the same recursion. Missing observations (`NaN`) skip the
//! update step.
//!
//! **Augmented filter.** The initial state is `a[1] = A[1] delta + N(0, P_star[1])`, where
//! `delta` holds the `d` diffuse states (infinite prior variance) and `A[1]` selects them. The
//! filter runs the ordinary recursion on `(a_star, P_star)` and carries `A` (`m x d`) beside it:
//! with `v_star = y - Z a_star`, `V = -Z A`, `F = Z P_star Z' + H`, `K = P_star Z' / F`,
//! `a_star += K v_star`, `A += K V`, `P_star -= K F K'`, and it accumulates
//! `S = sum V'V / F`, `s = sum V' v_star / F`, `q = sum v_star^2 / F`. The diffuse
//! log-likelihood is
//! `-(n log 2pi + sum log F + q - s' S^-1 s + log|S|) / 2`, which equals Durbin & Koopman's
//! exact diffuse log-likelihood (2012, eq. 7.3, where diffuse observations contribute
//! `-(log 2pi + log F_inf) / 2`; the tests check both against statsmodels and the Nile values).
//!
//! **Collapse.** Once `S` is well conditioned (every diagonal pivot of the Cholesky factor of
//! `S` scaled to a unit diagonal above [`COLLAPSE_PIVOT`]), the filter collapses to an ordinary
//! one: `delta_hat = -S^-1 s`, `a = a_star + A delta_hat`, `P = P_star + A S^-1 A'`. The value of
//! the likelihood does not depend on when this happens, but its round-off does: collapsing while
//! `S` is poorly conditioned puts large terms into `P` that later cancel, which leaves the value
//! good to about 1e-10 but makes its derivative noisy (seen on the 18-state benchmark model at a
//! pivot bar of 1e-4: a score 3% off a converged central difference; at 1e-2 they agree to 1e-7).
//! Collapsing late only costs time, so the bar is strict. No quantity here is a difference of two large numbers (`P_inf` never exists),
//! which is why this form resolves where the `P_inf` / `P_star` recursion loses precision (a
//! yearly trigonometric season beside a trend, controls and event indicators). If `S` never
//! passes the bar, the filter collapses at the end when `S` has full rank
//! ([`RANK_PIVOT`]); otherwise the diffuse period did not end (`resolved = false`).
//!
//! **Score.** Every quantity above is differentiated forward, one direction per parameter, from
//! the derivatives of the system matrices ([`SystemDerivative`]): `dH`, `dQ`, `dT` and the
//! derivative of the stationary part of the initial covariance. The result is the exact
//! gradient of the same floating-point function (checked against central differences).

// Dense small-matrix recursions read best with explicit indices (several arrays indexed by the
// same state or diffuse direction in one expression).
#![allow(clippy::needless_range_loop)]

use super::model::System;

/// A pivot (squared diagonal of the Cholesky factor of `S` scaled to a unit diagonal: the share
/// of a diffuse direction not explained by the others) above which the filter collapses.
pub const COLLAPSE_PIVOT: f64 = 1e-2;

/// The same pivot above which `S` counts as having full rank: the diffuse period has ended.
pub const RANK_PIVOT: f64 = 1e-11;

/// Derivative of the system matrices in one parameter direction.
#[derive(Debug, Clone, Default)]
pub struct SystemDerivative {
    /// `dH`.
    pub dh: f64,
    /// Nonzero entries of `d diag(Q)` as `(state, value)`.
    pub dq: Vec<(usize, f64)>,
    /// Nonzero entries of `dT` as `(row, column, value)`.
    pub dt: Vec<(usize, usize, f64)>,
    /// Nonzero entries of `d P_star[1]` as `(row, column, value)` (stationary states).
    pub dp0: Vec<(usize, usize, f64)>,
}

/// What the filter keeps per period (only when asked; the likelihood alone needs none).
#[derive(Debug, Clone, Default)]
pub struct FilterTrace {
    /// One-step-ahead forecast `Z[t] a[t]` of each observation (while the diffuse period lasts,
    /// the limit of the forecast as the prior variance of the diffuse states grows).
    pub forecast: Vec<f64>,
    /// Its variance `F[t]` (NaN where the forecast loads on a diffuse direction the data before
    /// `t` have not identified).
    pub forecast_var: Vec<f64>,
    /// Filtered state `a[t|t]`, one vector per period.
    pub filtered_state: Vec<Vec<f64>>,
    /// Predicted state `a[t]` (before seeing `y[t]`), one vector per period.
    pub predicted_state: Vec<Vec<f64>>,
    /// Whether period `t`'s forecast variance is unbounded (`F_inf > 0` in the exact recursion).
    pub diffuse: Vec<bool>,
}

/// Result of one pass of the filter.
#[derive(Debug, Clone)]
pub struct FilterOutput {
    /// Log-likelihood as in Durbin & Koopman (2012) eq. (7.3) (also what statsmodels reports
    /// with exact diffuse initialisation). With approximate diffuse initialisation, the first
    /// `burn` observations are left out instead.
    pub loglik: f64,
    /// Number of periods up to the one at which every diffuse state was identified (as
    /// statsmodels' `nobs_diffuse`).
    pub n_diffuse: usize,
    /// Number of observations that entered the likelihood.
    pub n_used: usize,
    /// Number of diffuse states `d`.
    pub n_diffuse_states: usize,
    /// Sum of squared standardised one-step errors, the diffuse part included as
    /// `q - s' S^-1 s`: scaling every variance by `c` scales it by `1 / c`, and the exact diffuse
    /// log-likelihood by `-((n_used - d) log c + rss / c - rss) / 2` (so the scale can be
    /// concentrated out; see `structural::fit`).
    pub rss: f64,
    /// Derivative of `rss` along each direction of the score (empty without one).
    pub rss_score: Vec<f64>,
    /// Whether the diffuse period ended.
    pub resolved: bool,
    /// Period after which the filter collapsed to the ordinary recursion.
    pub collapsed_at: Option<usize>,
    /// Predicted state after the last observation, `a[n]`.
    pub a_next: Vec<f64>,
    /// Its covariance `P[n]` (row-major; valid when `resolved`).
    pub p_next: Vec<f64>,
    /// Per-period trace, when requested.
    pub trace: Option<FilterTrace>,
}

const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// Run the filter over `y` (NaN = missing) with regressors `x[k][t]`.
pub fn filter(sys: &System, y: &[f64], x: &[Vec<f64>], keep_trace: bool) -> FilterOutput {
    run(sys, &[], y, x, keep_trace).0
}

/// The filter and the gradient of its log-likelihood along each of `derivs`.
pub fn filter_with_score(
    sys: &System,
    derivs: &[SystemDerivative],
    y: &[f64],
    x: &[Vec<f64>],
) -> (FilterOutput, Vec<f64>) {
    run(sys, derivs, y, x, false)
}

/// A small dense symmetric positive definite factorisation of `S` after scaling it to a unit
/// diagonal: `S = D^-1 L L' D^-1`.
struct Factor {
    d: usize,
    scale: Vec<f64>,
    l: Vec<f64>,
    min_pivot: f64,
}

impl Factor {
    /// Cholesky of `D S D` with `D = diag(S)^-1/2`; `None` when a diagonal entry of `S` is not
    /// positive or a pivot is not positive.
    fn new(s: &[f64], d: usize) -> Option<Factor> {
        let mut scale = vec![0.0; d];
        for i in 0..d {
            let v = s[i * d + i];
            if !(v > 0.0 && v.is_finite()) {
                return None;
            }
            scale[i] = 1.0 / v.sqrt();
        }
        let mut l = vec![0.0; d * d];
        let mut min_pivot = f64::INFINITY;
        for j in 0..d {
            let mut diag = s[j * d + j] * scale[j] * scale[j];
            for k in 0..j {
                diag -= l[j * d + k] * l[j * d + k];
            }
            min_pivot = min_pivot.min(diag);
            if diag <= 0.0 || !diag.is_finite() {
                return None;
            }
            let ljj = diag.sqrt();
            l[j * d + j] = ljj;
            for i in j + 1..d {
                let mut v = s[i * d + j] * scale[i] * scale[j];
                for k in 0..j {
                    v -= l[i * d + k] * l[j * d + k];
                }
                l[i * d + j] = v / ljj;
            }
        }
        Some(Factor { d, scale, l, min_pivot })
    }

    /// `S^-1 b`.
    fn solve(&self, b: &[f64]) -> Vec<f64> {
        let d = self.d;
        let mut z: Vec<f64> = (0..d).map(|i| b[i] * self.scale[i]).collect();
        for i in 0..d {
            let mut v = z[i];
            for k in 0..i {
                v -= self.l[i * d + k] * z[k];
            }
            z[i] = v / self.l[i * d + i];
        }
        for i in (0..d).rev() {
            let mut v = z[i];
            for k in i + 1..d {
                v -= self.l[k * d + i] * z[k];
            }
            z[i] = v / self.l[i * d + i];
        }
        for (zi, sc) in z.iter_mut().zip(&self.scale) {
            *zi *= sc;
        }
        z
    }

    /// `log |S|`.
    fn log_det(&self) -> f64 {
        (0..self.d).map(|i| 2.0 * self.l[i * self.d + i].ln() - 2.0 * self.scale[i].ln()).sum()
    }
}

/// The diffuse part while `S` may still be singular: `delta = -S^+ s`, the limit of the diffuse
/// states' estimate as their prior variance grows (Moore-Penrose inverse: the prior is
/// `kappa I` on the diffuse states), and the eigen-decomposition of `S` to tell whether a
/// forecast loads on a direction the data have not identified yet.
struct Limit {
    delta: Vec<f64>,
    /// `(eigenvalue, eigenvector)` of the identified directions.
    range: Vec<(f64, Vec<f64>)>,
    /// Eigenvectors of the directions not identified yet.
    null: Vec<Vec<f64>>,
}

impl Limit {
    fn new(s_mat: &[f64], s_vec: &[f64], d: usize) -> Limit {
        let m = nalgebra::DMatrix::from_row_slice(d, d, s_mat);
        let eig = nalgebra::SymmetricEigen::new(m);
        let top = eig.eigenvalues.iter().fold(0.0_f64, |a, b| a.max(b.abs()));
        let mut delta = vec![0.0; d];
        let (mut range, mut null) = (Vec::new(), Vec::new());
        for (k, &lam) in eig.eigenvalues.iter().enumerate() {
            let u: Vec<f64> = eig.eigenvectors.column(k).iter().copied().collect();
            if lam <= top * 1e-12 || lam <= 0.0 {
                null.push(u);
                continue;
            }
            let proj: f64 = u.iter().zip(s_vec).map(|(a, b)| a * b).sum::<f64>() / lam;
            for (di, ui) in delta.iter_mut().zip(&u) {
                *di -= ui * proj;
            }
            range.push((lam, u));
        }
        Limit { delta, range, null }
    }

    /// `V S^+ V'` when `V` lies in the identified directions (the forecast's variance is then
    /// finite: `F_inf = 0` in the exact recursion), `None` otherwise.
    fn quad(&self, v: &[f64]) -> Option<f64> {
        let norm2: f64 = v.iter().map(|x| x * x).sum();
        let off: f64 = self.null.iter().map(|u| u.iter().zip(v).map(|(a, b)| a * b).sum::<f64>().powi(2)).sum();
        if off > 1e-10 * norm2.max(f64::MIN_POSITIVE) {
            return None;
        }
        Some(self.range.iter().map(|(lam, u)| u.iter().zip(v).map(|(a, b)| a * b).sum::<f64>().powi(2) / lam).sum())
    }
}

/// Copy the upper triangle of a `d x d` row-major matrix into its lower triangle.
fn mirror_upper(s: &mut [f64], d: usize) {
    for i in 0..d {
        for j in 0..i {
            s[i * d + j] = s[j * d + i];
        }
    }
}

/// `dst[i] = sum_j T[i][j] src[j]` for rows of `ncol` entries (`src`, `dst`: `m x ncol`).
fn t_times(sys: &System, src: &[f64], dst: &mut [f64], ncol: usize) {
    for (i, row) in sys.rows.iter().enumerate() {
        let out = &mut dst[i * ncol..(i + 1) * ncol];
        out.fill(0.0);
        for &(j, v) in row {
            for (o, s) in out.iter_mut().zip(&src[j * ncol..(j + 1) * ncol]) {
                *o += v * s;
            }
        }
    }
}

/// `out[r] = sum_i Z[i] p[r][i]` (`p`: `rows x ncol`, row-major).
fn times_z(p: &[f64], ncol: usize, z: &[(usize, f64)], out: &mut [f64]) {
    for (r, o) in out.iter_mut().enumerate() {
        let row = &p[r * ncol..(r + 1) * ncol];
        *o = z.iter().map(|&(i, v)| v * row[i]).sum();
    }
}

/// `sum_i Z[i] a[i]`.
fn z_dot(z: &[(usize, f64)], a: &[f64]) -> f64 {
    z.iter().map(|&(i, v)| v * a[i]).sum()
}

/// `out[j] = -sum_i Z[i] A[i][j]` (`A`: `m x d`).
fn minus_z_a(z: &[(usize, f64)], a: &[f64], d: usize, out: &mut [f64]) {
    out.fill(0.0);
    for &(i, v) in z {
        for (o, x) in out.iter_mut().zip(&a[i * d..(i + 1) * d]) {
            *o -= v * x;
        }
    }
}

/// Per-direction derivative state.
struct Deriv {
    da: Vec<f64>,
    dp: Vec<f64>,
    daa: Vec<f64>,
    ds_mat: Vec<f64>,
    ds_vec: Vec<f64>,
    dq_sum: f64,
    dlogf: f64,
    drss: f64,
    dll: f64,
    dm: Vec<f64>,
    dv_row: Vec<f64>,
}

fn run(
    sys: &System,
    derivs: &[SystemDerivative],
    y: &[f64],
    x: &[Vec<f64>],
    keep_trace: bool,
) -> (FilterOutput, Vec<f64>) {
    let m = sys.m;
    // diffuse states: the nonzero diagonal of P_inf (a selection)
    let sel: Vec<usize> = (0..m).filter(|&i| sys.p_inf0[i * m + i] != 0.0).collect();
    let d = sel.len();
    let mut a = vec![0.0; m];
    let mut p = sys.p_star0.clone();
    let mut aa = vec![0.0; m * d];
    for (j, &i) in sel.iter().enumerate() {
        aa[i * d + j] = 1.0;
    }
    let mut augmented = d > 0;
    let mut s_mat = vec![0.0; d * d];
    let mut s_vec = vec![0.0; d];
    let (mut q_sum, mut logf_sum, mut n_aug) = (0.0, 0.0, 0usize);
    let mut dv = vec![0.0; d];
    let mut mvec = vec![0.0; m];
    let mut scratch = vec![0.0; m * m];
    let mut scratch2 = vec![0.0; m * m];
    let mut ascratch = vec![0.0; m * d];
    let mut vscratch = vec![0.0; m];
    let mut z: Vec<(usize, f64)> = Vec::with_capacity(m);
    let mut ds: Vec<Deriv> = derivs
        .iter()
        .map(|g| {
            let mut dp = vec![0.0; m * m];
            for &(r, c, v) in &g.dp0 {
                dp[r * m + c] += v;
            }
            Deriv {
                da: vec![0.0; m],
                dp,
                daa: vec![0.0; m * d],
                ds_mat: vec![0.0; d * d],
                ds_vec: vec![0.0; d],
                dq_sum: 0.0,
                dlogf: 0.0,
                drss: 0.0,
                dll: 0.0,
                dm: vec![0.0; m],
                dv_row: vec![0.0; d],
            }
        })
        .collect();
    let mut loglik = 0.0;
    let mut rss = 0.0;
    let mut n_used = 0;
    let mut n_diffuse = 0;
    let mut full_rank = d == 0;
    let mut collapsed_at = None;
    let mut trace = keep_trace.then(|| FilterTrace {
        forecast: Vec::with_capacity(y.len()),
        forecast_var: Vec::with_capacity(y.len()),
        filtered_state: Vec::with_capacity(y.len()),
        predicted_state: Vec::with_capacity(y.len()),
        diffuse: Vec::with_capacity(y.len()),
    });
    // the collapse: fold the diffuse part into (a, P) and its terms into the likelihood
    let collapse = |a: &mut Vec<f64>,
                    p: &mut Vec<f64>,
                    aa: &[f64],
                    s_vec: &[f64],
                    fac: &Factor,
                    ds: &mut [Deriv],
                    base: f64|
     -> (f64, f64) {
        let delta: Vec<f64> = fac.solve(s_vec).into_iter().map(|v| -v).collect();
        let sd: f64 = s_vec.iter().zip(&delta).map(|(a, b)| a * b).sum(); // = -s' S^-1 s
        let ll = base - 0.5 * (sd + fac.log_det());
        // W = A S^-1 (m x d), row by row
        let w: Vec<Vec<f64>> = (0..m).map(|i| fac.solve(&aa[i * d..(i + 1) * d])).collect();
        // S^-1 columns, for the traces of derivatives
        let sinv: Vec<Vec<f64>> = (0..d)
            .map(|j| {
                let mut e = vec![0.0; d];
                e[j] = 1.0;
                fac.solve(&e)
            })
            .collect();
        for g in ds.iter_mut() {
            // d(s'S^-1 s) = -2 delta' ds - delta' dS delta ; d log|S| = tr(S^-1 dS)
            let dsd: f64 = delta.iter().zip(&g.ds_vec).map(|(a, b)| a * b).sum();
            let mut quad = 0.0;
            let mut tr = 0.0;
            for i in 0..d {
                for j in 0..d {
                    quad += delta[i] * g.ds_mat[i * d + j] * delta[j];
                    tr += sinv[j][i] * g.ds_mat[i * d + j];
                }
            }
            let d_ssinv = -2.0 * dsd - quad;
            g.dll += -0.5 * (g.dlogf + g.dq_sum - d_ssinv + tr);
            g.drss += g.dq_sum - d_ssinv;
            // d delta = -S^-1 (ds + dS delta)
            let rhs: Vec<f64> =
                (0..d).map(|i| g.ds_vec[i] + (0..d).map(|j| g.ds_mat[i * d + j] * delta[j]).sum::<f64>()).collect();
            let ddelta: Vec<f64> = fac.solve(&rhs).into_iter().map(|v| -v).collect();
            for i in 0..m {
                let row = &aa[i * d..(i + 1) * d];
                let drow = &g.daa[i * d..(i + 1) * d];
                g.da[i] += (0..d).map(|j| drow[j] * delta[j] + row[j] * ddelta[j]).sum::<f64>();
            }
            // dP += dA W' + W dA' - W dS W'
            for i in 0..m {
                let wdsi: Vec<f64> = (0..d).map(|k| (0..d).map(|j| w[i][j] * g.ds_mat[j * d + k]).sum()).collect();
                for c in 0..m {
                    let mut v = 0.0;
                    for j in 0..d {
                        v += g.daa[i * d + j] * w[c][j] + w[i][j] * g.daa[c * d + j] - wdsi[j] * w[c][j];
                    }
                    g.dp[i * m + c] += v;
                }
            }
        }
        for i in 0..m {
            a[i] += (0..d).map(|j| aa[i * d + j] * delta[j]).sum::<f64>();
            for c in 0..m {
                p[i * m + c] += (0..d).map(|j| w[i][j] * aa[c * d + j]).sum::<f64>();
            }
        }
        (ll, -sd)
    };
    for (t, &yt) in y.iter().enumerate() {
        sys.z_at(x, t, &mut z);
        // M = P Z', F = Z M + H
        times_z(&p, m, &z, &mut mvec);
        let f = z_dot(&z, &mvec) + sys.h;
        let v = yt - z_dot(&z, &a);
        if augmented {
            minus_z_a(&z, &aa, d, &mut dv);
        }
        if let Some(tr) = trace.as_mut() {
            if augmented {
                mirror_upper(&mut s_mat, d);
                let lim = Limit::new(&s_mat, &s_vec, d);
                let pred: Vec<f64> =
                    (0..m).map(|i| a[i] + (0..d).map(|j| aa[i * d + j] * lim.delta[j]).sum::<f64>()).collect();
                tr.forecast.push(z_dot(&z, &pred));
                tr.predicted_state.push(pred);
                let q = lim.quad(&dv);
                tr.forecast_var.push(q.map_or(f64::NAN, |q| f + q));
                tr.diffuse.push(q.is_none());
            } else {
                tr.predicted_state.push(a.clone());
                tr.forecast.push(z_dot(&z, &a));
                tr.forecast_var.push(f);
                tr.diffuse.push(false);
            }
        }
        if yt.is_finite() {
            let fi = 1.0 / f;
            // derivatives of M, F, v and V first (they use the state before the update)
            for (g, gd) in ds.iter_mut().zip(derivs) {
                times_z(&g.dp, m, &z, &mut g.dm);
                let df = z_dot(&z, &g.dm) + gd.dh;
                let dvv = -z_dot(&z, &g.da);
                if augmented {
                    minus_z_a(&z, &g.daa, d, &mut g.dv_row);
                    g.dlogf += df * fi;
                    g.dq_sum += 2.0 * v * dvv * fi - v * v * df * fi * fi;
                    let c2 = df * fi * fi;
                    for i in 0..d {
                        g.ds_vec[i] += (g.dv_row[i] * v + dv[i] * dvv) * fi - dv[i] * v * c2;
                        // upper triangle only (mirrored where it is used)
                        let (a1, b1, e1) = (g.dv_row[i] * fi, dv[i] * fi, dv[i] * c2);
                        let row = &mut g.ds_mat[i * d + i..(i + 1) * d];
                        for ((r, x), y) in row.iter_mut().zip(&dv[i..]).zip(&g.dv_row[i..]) {
                            *r += a1 * x + b1 * y - e1 * x;
                        }
                    }
                    for i in 0..m {
                        let (a1, b1, e1) = (g.dm[i] * fi, mvec[i] * fi, mvec[i] * c2);
                        let row = &mut g.daa[i * d..(i + 1) * d];
                        for ((r, x), y) in row.iter_mut().zip(&dv).zip(&g.dv_row) {
                            *r += a1 * x + b1 * y - e1 * x;
                        }
                    }
                } else if t >= sys.burn {
                    g.dll += -0.5 * (df * fi + 2.0 * v * dvv * fi - v * v * df * fi * fi);
                    g.drss += 2.0 * v * dvv * fi - v * v * df * fi * fi;
                }
                for i in 0..m {
                    g.da[i] += (g.dm[i] * v + mvec[i] * dvv) * fi - mvec[i] * v * df * fi * fi;
                }
                let c2 = df * fi * fi;
                for r in 0..m {
                    let (a1, b1, e1) = (g.dm[r] * fi, mvec[r] * fi, mvec[r] * c2);
                    let row = &mut g.dp[r * m..(r + 1) * m];
                    for ((pc, x), y) in row.iter_mut().zip(&mvec).zip(&g.dm) {
                        *pc -= a1 * x + b1 * y - e1 * x;
                    }
                }
            }
            if augmented {
                logf_sum += f.ln();
                q_sum += v * v * fi;
                for i in 0..d {
                    let b1 = dv[i] * fi;
                    s_vec[i] += b1 * v;
                    for (r, x) in s_mat[i * d + i..(i + 1) * d].iter_mut().zip(&dv[i..]) {
                        *r += b1 * x;
                    }
                }
                for i in 0..m {
                    let k = mvec[i] * fi;
                    let row = &mut aa[i * d..(i + 1) * d];
                    for (r, vj) in row.iter_mut().zip(&dv) {
                        *r += k * vj;
                    }
                }
                n_aug += 1;
                n_used += 1;
            } else if t >= sys.burn {
                loglik -= 0.5 * (LN_2PI + f.ln() + v * v * fi);
                rss += v * v * fi;
                n_used += 1;
            }
            for (ai, mi) in a.iter_mut().zip(&mvec) {
                *ai += mi * v * fi;
            }
            for r in 0..m {
                let mr = mvec[r] * fi;
                for (pc, mc) in p[r * m..(r + 1) * m].iter_mut().zip(&mvec) {
                    *pc -= mr * mc;
                }
            }
        }
        if augmented && !full_rank {
            n_diffuse = t + 1;
        }
        let mut do_collapse = None;
        let last = t + 1 == y.len();
        // the check costs d^3 / 6: every observation until S has full rank (so `n_diffuse` is
        // exact) and while tracing, then every 4th, and at the end
        let check = last || keep_trace || !full_rank || n_aug % 4 == 0;
        if augmented && n_aug >= d && check {
            mirror_upper(&mut s_mat, d);
            if let Some(fac) = Factor::new(&s_mat, d) {
                full_rank = full_rank || fac.min_pivot > RANK_PIVOT;
                if fac.min_pivot > COLLAPSE_PIVOT || (last && full_rank) {
                    do_collapse = Some(fac);
                }
            }
        }
        if let Some(fac) = do_collapse {
            for g in ds.iter_mut() {
                mirror_upper(&mut g.ds_mat, d);
            }
            let base = -0.5 * (n_aug as f64 * LN_2PI + logf_sum + q_sum);
            let (ll, ssinv) = collapse(&mut a, &mut p, &aa, &s_vec, &fac, &mut ds, base);
            loglik += ll;
            rss += q_sum - ssinv;
            augmented = false;
            collapsed_at = Some(t + 1);
        }
        if let Some(tr) = trace.as_mut() {
            if augmented {
                mirror_upper(&mut s_mat, d);
                let delta = Limit::new(&s_mat, &s_vec, d).delta;
                tr.filtered_state
                    .push((0..m).map(|i| a[i] + (0..d).map(|j| aa[i * d + j] * delta[j]).sum::<f64>()).collect());
            } else {
                tr.filtered_state.push(a.clone());
            }
        }
        // predict: derivatives first (they need the state before the transition)
        for (g, gd) in ds.iter_mut().zip(derivs) {
            // da <- T da + dT a
            t_times(sys, &g.da, &mut vscratch, 1);
            for &(r, c, v) in &gd.dt {
                vscratch[r] += v * a[c];
            }
            g.da.copy_from_slice(&vscratch);
            if augmented {
                t_times(sys, &g.daa, &mut ascratch, d);
                for &(r, c, v) in &gd.dt {
                    for j in 0..d {
                        ascratch[r * d + j] += v * aa[c * d + j];
                    }
                }
                g.daa.copy_from_slice(&ascratch);
            }
        }
        sys.transition_vec(&mut a, &mut vscratch);
        if augmented {
            t_times(sys, &aa, &mut ascratch, d);
            aa.copy_from_slice(&ascratch);
        }
        // P <- T P T' + Q; afterwards scratch holds T P_old
        sys.transition_cov(&mut p, &mut scratch);
        for (g, gd) in ds.iter_mut().zip(derivs) {
            sys.transition_cov(&mut g.dp, &mut scratch2);
            if !gd.dt.is_empty() {
                // G = dT P_old T' = dT (T P_old)' ; add G + G'
                let mut gm = vec![0.0; m * m];
                for &(r, c, v) in &gd.dt {
                    for col in 0..m {
                        gm[r * m + col] += v * scratch[col * m + c];
                    }
                }
                for r in 0..m {
                    for c in 0..m {
                        g.dp[r * m + c] += gm[r * m + c] + gm[c * m + r];
                    }
                }
            }
            for &(i, v) in &gd.dq {
                g.dp[i * m + i] += v;
            }
        }
        for i in 0..m {
            p[i * m + i] += sys.q[i];
        }
    }
    let resolved = !augmented;
    let grad = ds.iter().map(|g| g.dll).collect();
    let out = FilterOutput {
        loglik: if resolved { loglik } else { f64::NAN },
        n_diffuse: if d == 0 { 0 } else { n_diffuse },
        n_used,
        n_diffuse_states: d,
        rss: if resolved { rss } else { f64::NAN },
        rss_score: ds.iter().map(|g| g.drss).collect(),
        resolved,
        collapsed_at,
        a_next: a,
        p_next: p,
        trace,
    };
    (out, grad)
}
