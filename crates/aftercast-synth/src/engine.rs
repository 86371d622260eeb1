//! The per-unit fits of the weighting methods (`weights`, `intercept`, `ridge`, `predictors`).
//! One [`Engine`] is built per analysis; it holds what every (placebo) fit shares, such as the
//! Gram matrix of all units' pre-period outcomes, so that placebo runs cost one QP each.

use crate::data::Prepared;
use crate::error::{SynthError, SynthResult};
use crate::params::{Method, SynthParams};
use crate::predictors::PredictorSet;
use crate::simplex::{self, SimplexSolution};
use nalgebra::{DMatrix, DVector};

/// One fitted target unit (treated, or a donor in a placebo run).
#[derive(Debug, Clone)]
pub(crate) struct CoreFit {
    /// Donor weights, aligned with the donor list passed in (may be negative for `ridge`).
    pub weights: Vec<f64>,
    /// The simplex (non-negative) weights before augmentation (equal to `weights` unless ridge).
    pub simplex_weights: Vec<f64>,
    /// Level shift added to the weighted donors.
    pub intercept: f64,
    /// Synthetic path over all periods in use.
    pub synthetic: Vec<f64>,
    /// Solver certificate of the simplex QP.
    pub solver: SimplexSolution,
    /// Ridge penalty (ridge only).
    pub ridge_lambda: Option<f64>,
    /// Predictor importance weights V (predictors only).
    pub v: Option<Vec<f64>>,
    /// Pre-period outcome MSPE the V search reached (predictors only).
    pub v_objective: Option<f64>,
}

pub(crate) struct Engine<'a> {
    pub prep: &'a Prepared,
    pub params: &'a SynthParams,
    /// Gram matrix of pre-period outcomes of all units (demeaned for `intercept`).
    gram: DMatrix<f64>,
    /// Pre-period means of every unit.
    pre_means: Vec<f64>,
    /// Predictors (predictors method).
    pub predictors: Option<PredictorSet>,
}

impl<'a> Engine<'a> {
    pub fn new(prep: &'a Prepared, params: &'a SynthParams) -> SynthResult<Self> {
        let n = prep.units.len();
        let t0 = prep.t0;
        let pre_means: Vec<f64> = prep.y.iter().map(|r| r[..t0].iter().sum::<f64>() / t0 as f64).collect();
        let demean = params.method == Method::Intercept;
        let mut m = DMatrix::<f64>::zeros(t0, n);
        for u in 0..n {
            let c = if demean { pre_means[u] } else { 0.0 };
            for t in 0..t0 {
                let v = prep.y[u][t];
                m[(t, u)] = if v.is_finite() { v - c } else { 0.0 };
            }
        }
        let gram = m.tr_mul(&m);
        let predictors = match params.method {
            Method::Predictors => Some(PredictorSet::build(prep, params)?),
            _ => None,
        };
        Ok(Self { prep, params, gram, pre_means, predictors })
    }

    /// Fit `target` from `donors` (positions into the panel).
    pub fn fit(&self, target: usize, donors: &[usize]) -> SynthResult<CoreFit> {
        match self.params.method {
            Method::Weights | Method::Intercept => self.fit_gram(target, donors),
            Method::Ridge => self.fit_ridge(target, donors),
            Method::Predictors => {
                let ps = self
                    .predictors
                    .as_ref()
                    .ok_or(SynthError::Numerical { stage: "predictors", detail: "predictor set missing".into() })?;
                ps.fit(self.prep, self.params, target, donors)
            }
            Method::Sdid => {
                Err(SynthError::Unsupported { method: "sdid", detail: "sdid is not a weighting fit".into() })
            }
        }
    }

    fn solve(&self, target: usize, donors: &[usize]) -> SynthResult<SimplexSolution> {
        let b: Vec<f64> = donors.iter().map(|&j| self.gram[(j, target)]).collect();
        let sol = simplex::solve_indexed(&self.gram, &b, donors, &self.params.solver)
            .ok_or(SynthError::TooFewDonors { found: donors.len(), needed: 1 })?;
        check_solver(&self.prep.units[target], &sol, self.params.solver.tolerance)?;
        Ok(sol)
    }

    fn fit_gram(&self, target: usize, donors: &[usize]) -> SynthResult<CoreFit> {
        let sol = self.solve(target, donors)?;
        let w = sol.weights.clone();
        let intercept = if self.params.method == Method::Intercept {
            self.pre_means[target] - donors.iter().zip(&w).map(|(&j, wj)| wj * self.pre_means[j]).sum::<f64>()
        } else {
            0.0
        };
        let synthetic = weighted_path(self.prep, donors, &w, intercept);
        Ok(CoreFit {
            simplex_weights: w.clone(),
            weights: w,
            intercept,
            synthetic,
            solver: sol,
            ridge_lambda: None,
            v: None,
            v_objective: None,
        })
    }

    fn fit_ridge(&self, target: usize, donors: &[usize]) -> SynthResult<CoreFit> {
        let sol = self.solve(target, donors)?;
        let t0 = self.prep.t0;
        let lambda = match self.params.ridge_lambda {
            Some(l) => l,
            None => self.ridge_cv(target, donors)?,
        };
        let gamma = augment(self.prep, target, donors, &sol.weights, t0, lambda)?;
        let synthetic = weighted_path(self.prep, donors, &gamma, 0.0);
        Ok(CoreFit {
            weights: gamma,
            simplex_weights: sol.weights.clone(),
            intercept: 0.0,
            synthetic,
            solver: sol,
            ridge_lambda: Some(lambda),
            v: None,
            v_objective: None,
        })
    }

    /// Rolling-origin cross-validation over the last pre-periods: for each hold-out period s,
    /// weights and ridge are fitted on periods before s and the target's outcome at s is
    /// predicted; the penalty with the smallest mean squared prediction error wins.
    fn ridge_cv(&self, target: usize, donors: &[usize]) -> SynthResult<f64> {
        let t0 = self.prep.t0;
        let folds = self.params.cv_folds.unwrap_or((t0 / 3).clamp(1, 5)).min(t0.saturating_sub(2));
        if folds == 0 {
            return Err(SynthError::TooFewPrePeriods { start: self.prep.times[t0].to_string(), found: t0, needed: 3 });
        }
        let smax2 = centered_top_eigen(self.prep, donors, t0);
        let grid: Vec<f64> = (-12..=4).map(|k| smax2 * 10f64.powf(f64::from(k) / 2.0)).collect();
        let mut sse = vec![0.0; grid.len()];
        for s in (t0 - folds)..t0 {
            let sub = simplex_on_prefix(self.prep, target, donors, s, self.params)?;
            for (g, &lam) in grid.iter().enumerate() {
                let gamma = augment(self.prep, target, donors, &sub, s, lam)?;
                let pred: f64 = donors.iter().zip(&gamma).map(|(&j, w)| w * self.prep.y[j][s]).sum();
                sse[g] += (self.prep.y[target][s] - pred).powi(2);
            }
        }
        let best = sse.iter().enumerate().min_by(|a, b| a.1.total_cmp(b.1)).map(|(i, _)| i).unwrap_or(0);
        Ok(grid[best])
    }
}

/// How far above its tolerance a solver may stop and still be used: the weights are then
/// optimal to about 1e-6 of the problem's scale, far inside what the placebo intervals can
/// resolve. The fit records the stop (and the estimate warns); beyond this the fit is unusable.
pub(crate) const USABLE_KKT_RELATIVE: f64 = 1e-6;

pub(crate) fn check_solver(unit: &str, sol: &SimplexSolution, tol: f64) -> SynthResult<()> {
    let relative = sol.kkt_residual / sol.kkt_scale;
    if sol.converged() || (relative.is_finite() && relative <= USABLE_KKT_RELATIVE.max(tol)) {
        Ok(())
    } else {
        Err(SynthError::NotConverged {
            unit: unit.to_string(),
            iterations: sol.iterations,
            kkt_residual: sol.kkt_residual,
            tolerance: tol * sol.kkt_scale,
        })
    }
}

/// `Σ_j w_j y_j(t) + c` over all periods in use.
pub(crate) fn weighted_path(prep: &Prepared, donors: &[usize], w: &[f64], c: f64) -> Vec<f64> {
    (0..prep.n_periods()).map(|t| c + donors.iter().zip(w).map(|(&j, wj)| wj * prep.y[j][t]).sum::<f64>()).collect()
}

/// Simplex weights of `target` on donors using periods `0..s` only.
pub(crate) fn simplex_on_prefix(
    prep: &Prepared,
    target: usize,
    donors: &[usize],
    s: usize,
    params: &SynthParams,
) -> SynthResult<Vec<f64>> {
    let j = donors.len();
    let x = DMatrix::from_fn(s, j, |t, k| prep.y[donors[k]][t]);
    let y = DVector::from_fn(s, |t, _| prep.y[target][t]);
    let h = x.tr_mul(&x);
    let b = x.tr_mul(&y);
    let sol =
        simplex::solve(&h, b.as_slice(), &params.solver).ok_or(SynthError::TooFewDonors { found: j, needed: 1 })?;
    check_solver(&prep.units[target], &sol, params.solver.tolerance)?;
    Ok(sol.weights)
}

/// Largest eigenvalue of Xcᵀ Xc, Xc the donors' pre-period outcomes centred over donors.
fn centered_top_eigen(prep: &Prepared, donors: &[usize], s: usize) -> f64 {
    let xc = centered_donors(prep, donors, s);
    let g = xc.transpose() * &xc;
    let e = g.symmetric_eigenvalues();
    let m = e.iter().copied().fold(0.0, f64::max);
    if m > 0.0 { m } else { 1.0 }
}

/// Donors x periods(0..s) matrix centred over donors (column means removed).
fn centered_donors(prep: &Prepared, donors: &[usize], s: usize) -> DMatrix<f64> {
    let j = donors.len();
    let mut xc = DMatrix::from_fn(j, s, |k, t| prep.y[donors[k]][t]);
    for t in 0..s {
        let m = xc.column(t).mean();
        for k in 0..j {
            xc[(k, t)] -= m;
        }
    }
    xc
}

/// Ridge-augmented weights (Ben-Michael, Feller & Rothstein 2021, eq. for ridge ASCM):
/// γ = w + Xc (XcᵀXc + λI)⁻¹ (x₁ − X₀ᵀw), with X₀ the donors' outcomes on periods 0..s and Xc
/// the same centred over donors. Σγ = 1 because the columns of Xc sum to zero.
pub(crate) fn augment(
    prep: &Prepared,
    target: usize,
    donors: &[usize],
    w: &[f64],
    s: usize,
    lambda: f64,
) -> SynthResult<Vec<f64>> {
    let j = donors.len();
    let xc = centered_donors(prep, donors, s);
    let mut resid = DVector::<f64>::zeros(s);
    for t in 0..s {
        resid[t] = prep.y[target][t] - donors.iter().zip(w).map(|(&d, wd)| wd * prep.y[d][t]).sum::<f64>();
    }
    let mut a = xc.tr_mul(&xc);
    let ridge = lambda.max(1e-12 * a.diagonal().max().max(1e-300));
    for t in 0..s {
        a[(t, t)] += ridge;
    }
    let chol = nalgebra::Cholesky::new(a).ok_or(SynthError::Numerical {
        stage: "ridge augmentation",
        detail: format!("XcᵀXc + {lambda:e} I is not positive definite"),
    })?;
    let z = chol.solve(&resid);
    let adj = &xc * z;
    Ok((0..j).map(|k| w[k] + adj[k]).collect())
}
