//! Exact solver for a convex quadratic programme on the probability simplex:
//!
//! minimise `q(w) = ½ wᵀ H w − bᵀ w` subject to `w ≥ 0`, `Σ w = 1`,
//!
//! with `H` symmetric positive semi-definite. For simplex-constrained least squares
//! (`‖y − X w‖²`), `H = XᵀX` and `b = Xᵀy`, so `‖y − X w‖² = 2 q(w) + yᵀy`.
//!
//! The method is a primal active-set method in the manner of Lawson & Hanson's NNLS (1974,
//! *Solving Least Squares Problems*, ch. 23) with the equality constraint kept in every
//! subproblem: the support grows by the coordinate whose reduced gradient is most negative, the
//! equality-constrained QP on the support is solved exactly (a Cholesky factor of the support's
//! block of `H`), and a step back to the boundary drops coordinates that would turn negative.
//! It stops when the KKT conditions hold to a relative tolerance:
//! `g_j = μ` on the support and `g_j ≥ μ` off it, where `g = H w − b`.
//!
//! Two certificates are reported: the KKT residual `max(0, μ − min_j g_j)` together with the
//! spread of `g` on the support, and the Frank–Wolfe duality gap `gᵀw − min_j g_j`, an upper
//! bound on `q(w) − q(w*)` (Jaggi 2013, ICML, "Revisiting Frank-Wolfe").

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

/// Options of the simplex QP solver.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SimplexOptions {
    /// Relative KKT tolerance (scaled by the largest diagonal entry of `H` and `|b|`).
    pub tolerance: f64,
    /// Largest number of active-set changes.
    pub max_iterations: usize,
}

impl Default for SimplexOptions {
    fn default() -> Self {
        Self { tolerance: 1e-10, max_iterations: 10_000 }
    }
}

/// Why the solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The KKT conditions hold to the tolerance.
    Optimal,
    /// The iteration limit was reached.
    IterationLimit,
    /// No further descent direction could be taken (numerically degenerate support).
    Stalled,
}

/// The solution with its optimality certificates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SimplexSolution {
    /// Weights, one per candidate, non-negative and summing to one.
    pub weights: Vec<f64>,
    /// `q(w) = ½ wᵀHw − bᵀw`.
    pub objective: f64,
    /// KKT residual: largest violation of `g_j ≥ μ` off the support, or of `g_j = μ` on it,
    /// in absolute units of the gradient.
    pub kkt_residual: f64,
    /// The scale the relative tolerance was applied to.
    pub kkt_scale: f64,
    /// Frank–Wolfe duality gap `gᵀw − min_j g_j ≥ q(w) − q(w*)`.
    pub duality_gap: f64,
    /// Multiplier of the equality constraint (`μ`, the common gradient on the support).
    pub multiplier: f64,
    /// Active-set changes made.
    pub iterations: usize,
    /// Why it stopped.
    pub stop: StopReason,
}

impl SimplexSolution {
    /// Whether the KKT conditions hold to the tolerance.
    pub fn converged(&self) -> bool {
        self.stop == StopReason::Optimal
    }
}

/// Solve the QP over the candidates `idx` (positions into `h`), with linear term `b[k]` for
/// candidate `idx[k]`. `h` is not copied: placebo runs share one Gram matrix.
///
/// Returns `None` only when `idx` is empty or `b` has the wrong length.
pub fn solve_indexed(h: &DMatrix<f64>, b: &[f64], idx: &[usize], opts: &SimplexOptions) -> Option<SimplexSolution> {
    let n = idx.len();
    if n == 0 || b.len() != n {
        return None;
    }
    let hh = |a: usize, c: usize| h[(idx[a], idx[c])];
    let mut scale = 0.0_f64;
    for (k, bk) in b.iter().enumerate() {
        scale = scale.max(hh(k, k).abs()).max(bk.abs());
    }
    if scale == 0.0 || !scale.is_finite() {
        scale = 1.0;
    }
    let tol = opts.tolerance * scale;
    // A tiny ridge keeps affinely dependent supports solvable; as it goes to zero the solution
    // tends to the minimum-norm minimiser, and its size (1e-13 of the problem scale) is far
    // below the tolerances reported.
    let ridge = 1e-13 * scale;
    // Start at the best vertex.
    let mut best = 0;
    let mut best_val = f64::INFINITY;
    for (k, bk) in b.iter().enumerate() {
        let v = 0.5 * hh(k, k) - bk;
        if v < best_val {
            best_val = v;
            best = k;
        }
    }
    let mut w = vec![0.0; n];
    w[best] = 1.0;
    let mut fac = Factor::default();
    fac.push(&hh, best, ridge);
    let mut in_support = vec![false; n];
    in_support[best] = true;
    let mut iterations = 0usize;
    let mut stop = StopReason::IterationLimit;
    let mut g = vec![0.0; n];
    let mut banned: Option<usize> = None;
    while iterations < opts.max_iterations {
        gradient(&hh, b, &w, &fac.support, &mut g);
        let mu: f64 = fac.support.iter().map(|&k| w[k] * g[k]).sum();
        let mut jstar = None;
        let mut gmin = f64::INFINITY;
        for k in 0..n {
            if !in_support[k] && Some(k) != banned && g[k] < gmin {
                gmin = g[k];
                jstar = Some(k);
            }
        }
        let Some(j) = jstar.filter(|_| mu - gmin > tol) else {
            stop = StopReason::Optimal;
            break;
        };
        fac.push(&hh, j, ridge);
        in_support[j] = true;
        iterations += 1;
        // Inner loop: equality-constrained QP on the support, step back while infeasible.
        let mut progressed = false;
        loop {
            let Some(z) = fac.solve_constrained(b) else {
                stop = StopReason::Stalled;
                break;
            };
            let mut alpha = 1.0_f64;
            let mut blocking = None;
            for (p, &k) in fac.support.iter().enumerate() {
                if z[p] <= 0.0 {
                    let denom = w[k] - z[p];
                    let a = if denom > 0.0 { w[k] / denom } else { 0.0 };
                    if a < alpha {
                        alpha = a;
                        blocking = Some(p);
                    }
                }
            }
            let Some(bp) = blocking else {
                for (p, &k) in fac.support.iter().enumerate() {
                    w[k] = z[p];
                }
                progressed = true;
                break;
            };
            let kb = fac.support[bp];
            if kb == j && !progressed && alpha == 0.0 {
                // The entering coordinate cannot move: numerically degenerate. Ban it for one
                // round and try the next most violating coordinate.
                in_support[kb] = false;
                w[kb] = 0.0;
                let keep: Vec<usize> = fac.support.iter().copied().filter(|&k| k != kb).collect();
                fac.rebuild(&hh, &keep, ridge);
                banned = Some(kb);
                break;
            }
            for (p, &k) in fac.support.iter().enumerate() {
                w[k] += alpha * (z[p] - w[k]);
            }
            progressed |= alpha > 0.0;
            let mut keep = Vec::with_capacity(fac.support.len());
            for (p, &k) in fac.support.iter().enumerate() {
                if p == bp || w[k] <= 0.0 {
                    w[k] = 0.0;
                    in_support[k] = false;
                } else {
                    keep.push(k);
                }
            }
            fac.rebuild(&hh, &keep, ridge);
            iterations += 1;
            if fac.support.is_empty() || iterations >= opts.max_iterations {
                break;
            }
        }
        if stop == StopReason::Stalled || fac.support.is_empty() {
            stop = StopReason::Stalled;
            break;
        }
        if progressed {
            banned = None;
        } else if banned.is_none() {
            stop = StopReason::Stalled;
            break;
        }
    }
    if fac.support.is_empty() {
        // Cannot happen for a feasible start; fall back to the best vertex.
        w = vec![0.0; n];
        w[best] = 1.0;
        fac.rebuild(&hh, &[best], ridge);
    }
    // Renormalise against rounding and compute the certificates.
    let total: f64 = w.iter().sum();
    for v in &mut w {
        *v /= total;
    }
    let support: Vec<usize> = (0..n).filter(|&k| w[k] > 0.0).collect();
    gradient(&hh, b, &w, &support, &mut g);
    let mu: f64 = support.iter().map(|&k| w[k] * g[k]).sum();
    let gmin = g.iter().copied().fold(f64::INFINITY, f64::min);
    let spread = support.iter().map(|&k| (g[k] - mu).abs()).fold(0.0, f64::max);
    let kkt = (mu - gmin).max(0.0).max(spread);
    let mut objective = 0.0;
    for &a in &support {
        let mut s = 0.0;
        for &c in &support {
            s += hh(a, c) * w[c];
        }
        objective += w[a] * (0.5 * s - b[a]);
    }
    stop = if kkt <= tol {
        StopReason::Optimal
    } else if stop == StopReason::Optimal {
        StopReason::Stalled
    } else {
        stop
    };
    Some(SimplexSolution {
        weights: w,
        objective,
        kkt_residual: kkt,
        kkt_scale: scale,
        duality_gap: (mu - gmin).max(0.0),
        multiplier: mu,
        iterations,
        stop,
    })
}

/// Solve the QP with a dense `H` over all its columns.
pub fn solve(h: &DMatrix<f64>, b: &[f64], opts: &SimplexOptions) -> Option<SimplexSolution> {
    let idx: Vec<usize> = (0..h.ncols()).collect();
    solve_indexed(h, b, &idx, opts)
}

fn gradient(hh: &impl Fn(usize, usize) -> f64, b: &[f64], w: &[f64], support: &[usize], g: &mut [f64]) {
    for (k, gk) in g.iter_mut().enumerate() {
        let mut s = -b[k];
        for &c in support {
            s += hh(k, c) * w[c];
        }
        *gk = s;
    }
}

/// Cholesky factor L (row-wise lower triangle) of H_PP + ridge·I for the support P, grown by
/// one row per added coordinate (O(m²)) and rebuilt when coordinates leave.
#[derive(Default)]
struct Factor {
    support: Vec<usize>,
    rows: Vec<Vec<f64>>,
}

impl Factor {
    fn push(&mut self, hh: &impl Fn(usize, usize) -> f64, k: usize, ridge: f64) {
        let m = self.support.len();
        let mut l = vec![0.0; m + 1];
        for i in 0..m {
            let row = &self.rows[i];
            let s = hh(self.support[i], k) - row[..i].iter().zip(&l[..i]).map(|(a, c)| a * c).sum::<f64>();
            l[i] = s / row[i];
        }
        let d2 = hh(k, k) + ridge - l[..m].iter().map(|v| v * v).sum::<f64>();
        // A numerically dependent column gets the ridge as its pivot.
        l[m] = d2.max(ridge).max(f64::MIN_POSITIVE).sqrt();
        self.rows.push(l);
        self.support.push(k);
    }

    fn rebuild(&mut self, hh: &impl Fn(usize, usize) -> f64, support: &[usize], ridge: f64) {
        self.support.clear();
        self.rows.clear();
        for &k in support {
            self.push(hh, k, ridge);
        }
    }

    /// Solve L Lᵀ x = r.
    fn solve(&self, r: &[f64]) -> Vec<f64> {
        let m = self.support.len();
        let mut y = vec![0.0; m];
        for i in 0..m {
            let row = &self.rows[i];
            let s = r[i] - row[..i].iter().zip(&y[..i]).map(|(a, c)| a * c).sum::<f64>();
            y[i] = s / row[i];
        }
        for i in (0..m).rev() {
            let s = y[i] - (i + 1..m).map(|q| self.rows[q][i] * y[q]).sum::<f64>();
            y[i] = s / self.rows[i][i];
        }
        y
    }

    /// Minimise ½ zᵀ H_PP z − b_Pᵀ z subject to Σ z = 1 (no sign constraint).
    fn solve_constrained(&self, b: &[f64]) -> Option<Vec<f64>> {
        let bp: Vec<f64> = self.support.iter().map(|&k| b[k]).collect();
        let x = self.solve(&bp);
        let y = self.solve(&vec![1.0; self.support.len()]);
        let sy: f64 = y.iter().sum();
        if sy.abs() < f64::MIN_POSITIVE || !sy.is_finite() {
            return None;
        }
        let nu = (x.iter().sum::<f64>() - 1.0) / sy;
        let z: Vec<f64> = x.iter().zip(&y).map(|(a, c)| a - nu * c).collect();
        z.iter().all(|v| v.is_finite()).then_some(z)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vertex_solution_when_one_donor_dominates() {
        // Treated equals donor 1 exactly.
        let x = DMatrix::from_row_slice(3, 3, &[1.0, 2.0, 0.0, 2.0, 1.0, 1.0, 3.0, 5.0, 2.0]);
        let y = x.column(1).clone_owned();
        let h = x.transpose() * &x;
        let b = x.transpose() * &y;
        let s = solve(&h, b.as_slice(), &SimplexOptions::default()).unwrap();
        assert!(s.converged());
        assert!((s.weights[1] - 1.0).abs() < 1e-12, "{:?}", s.weights);
    }
}
