//! Predictor-matching synthetic control (Abadie, Diamond & Hainmueller 2010, JASA 105:493-505;
//! Abadie & Gardeazabal 2003). Each unit is described by K predictors: covariates averaged
//! over the pre-period and pre-period outcome averages over equal blocks. Predictors are scaled
//! by their standard deviation across units. For a diagonal importance matrix V (non-negative,
//! summing to one) the weights solve min_w (x₁ − X₀w)ᵀ V (x₁ − X₀w) on the simplex; V itself is
//! chosen to minimise the pre-period outcome MSPE of the resulting weights (nested
//! optimisation: Nelder–Mead from argmin over V = softmax(θ), started from equal V; the best of
//! the search and of equal V is kept).

use crate::data::Prepared;
use crate::engine::{CoreFit, check_solver, weighted_path};
use crate::error::{SynthError, SynthResult};
use crate::params::SynthParams;
use crate::simplex::{self, SimplexSolution};
use argmin::core::{CostFunction, Executor, State};
use argmin::solver::neldermead::NelderMead;
use nalgebra::DMatrix;

/// The predictor matrix of all units.
#[derive(Debug, Clone)]
pub(crate) struct PredictorSet {
    /// Predictor names.
    pub names: Vec<String>,
    /// Raw values, K x units.
    pub raw: DMatrix<f64>,
    /// Scaled values (divided by the standard deviation across units), K x units.
    pub scaled: DMatrix<f64>,
}

/// Predictor names and raw values for the balance table of any method: covariates averaged
/// over the pre-period, then the pre-period outcome averaged over `blocks` equal blocks.
pub(crate) fn raw_predictors(
    prep: &Prepared,
    covariates: &[String],
    blocks: usize,
) -> SynthResult<(Vec<String>, DMatrix<f64>)> {
    let t0 = prep.t0;
    let n = prep.units.len();
    let mut names = Vec::new();
    let mut rows: Vec<Vec<f64>> = Vec::new();
    for c in covariates {
        let Some((_, m)) = prep.covariates.iter().find(|(nm, _)| nm == c) else {
            let available = prep.covariates.iter().map(|(n, _)| n.as_str()).collect::<Vec<_>>().join(", ");
            return Err(SynthError::UnknownPredictor { predictor: c.clone(), available });
        };
        names.push(format!("{c} (pre-period mean)"));
        rows.push((0..n).map(|u| m[u][..t0].iter().sum::<f64>() / t0 as f64).collect());
    }
    let blocks = blocks.min(t0).max(1);
    for b in 0..blocks {
        let lo = b * t0 / blocks;
        let hi = (b + 1) * t0 / blocks;
        let label = format!("outcome mean {}..{}", prep.times[lo], prep.times[hi - 1]);
        names.push(label);
        rows.push((0..n).map(|u| prep.y[u][lo..hi].iter().sum::<f64>() / (hi - lo) as f64).collect());
    }
    let k = rows.len();
    Ok((names, DMatrix::from_fn(k, n, |r, u| rows[r][u])))
}

impl PredictorSet {
    pub fn build(prep: &Prepared, params: &SynthParams) -> SynthResult<Self> {
        let (names, raw) = raw_predictors(prep, &params.predictors, params.predictor_outcome_blocks)?;
        let mut used: Vec<usize> = prep.treated.clone();
        used.extend(&prep.donors);
        let mut scaled = raw.clone();
        for r in 0..raw.nrows() {
            let vals: Vec<f64> = used.iter().map(|&u| raw[(r, u)]).collect();
            let m = vals.iter().sum::<f64>() / vals.len() as f64;
            let var = vals.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (vals.len() as f64 - 1.0).max(1.0);
            let sd = var.sqrt();
            if sd.is_nan() || sd <= 1e-12 * m.abs().max(1e-300) {
                return Err(SynthError::ConstantPredictor { predictor: names[r].clone(), value: m });
            }
            for u in 0..raw.ncols() {
                scaled[(r, u)] = raw[(r, u)] / sd;
            }
        }
        Ok(Self { names, raw, scaled })
    }

    /// Weights for a given V.
    fn inner(&self, target: usize, donors: &[usize], v: &[f64], params: &SynthParams) -> Option<SimplexSolution> {
        let k = self.scaled.nrows();
        let j = donors.len();
        let mut x0 = DMatrix::<f64>::zeros(k, j);
        for r in 0..k {
            let s = v[r].sqrt();
            for (c, &d) in donors.iter().enumerate() {
                x0[(r, c)] = s * self.scaled[(r, d)];
            }
        }
        let x1: nalgebra::DVector<f64> = nalgebra::DVector::from_fn(k, |r, _| v[r].sqrt() * self.scaled[(r, target)]);
        let h = x0.tr_mul(&x0);
        let b = x0.tr_mul(&x1);
        simplex::solve(&h, b.as_slice(), &params.solver)
    }

    pub fn fit(&self, prep: &Prepared, params: &SynthParams, target: usize, donors: &[usize]) -> SynthResult<CoreFit> {
        let k = self.scaled.nrows();
        let t0 = prep.t0;
        let mspe = |w: &[f64]| -> f64 {
            (0..t0)
                .map(|t| {
                    let s: f64 = donors.iter().zip(w).map(|(&d, wd)| wd * prep.y[d][t]).sum();
                    (prep.y[target][t] - s).powi(2)
                })
                .sum::<f64>()
                / t0 as f64
        };
        let equal = vec![1.0 / k as f64; k];
        let mut best_v = equal.clone();
        let mut best_sol = self
            .inner(target, donors, &equal, params)
            .ok_or(SynthError::TooFewDonors { found: donors.len(), needed: 1 })?;
        let mut best_cost = mspe(&best_sol.weights);
        if k > 1 {
            let problem = OuterProblem { set: self, target, donors, params, mspe: &mspe };
            let mut simplex_pts = vec![vec![0.0; k]];
            for i in 0..k {
                let mut p = vec![0.0; k];
                p[i] = 1.0;
                simplex_pts.push(p);
            }
            let solver = NelderMead::new(simplex_pts).with_sd_tolerance(1e-10).map_err(|e| SynthError::Numerical {
                stage: "predictor weights (Nelder-Mead set-up)",
                detail: e.to_string(),
            })?;
            let run = Executor::new(problem, solver).configure(|s| s.max_iters(200 * k as u64 + 200)).run();
            if let Some(theta) = run.as_ref().ok().and_then(|res| res.state().get_best_param()) {
                {
                    let v = softmax(theta);
                    if let Some(sol) = self.inner(target, donors, &v, params) {
                        let c = mspe(&sol.weights);
                        if c < best_cost {
                            best_cost = c;
                            best_v = v;
                            best_sol = sol;
                        }
                    }
                }
            }
        }
        check_solver(&prep.units[target], &best_sol, params.solver.tolerance)?;
        let w = best_sol.weights.clone();
        let synthetic = weighted_path(prep, donors, &w, 0.0);
        Ok(CoreFit {
            simplex_weights: w.clone(),
            weights: w,
            intercept: 0.0,
            synthetic,
            solver: best_sol,
            ridge_lambda: None,
            v: Some(best_v),
            v_objective: Some(best_cost),
        })
    }
}

fn softmax(theta: &[f64]) -> Vec<f64> {
    let m = theta.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let e: Vec<f64> = theta.iter().map(|t| (t - m).exp()).collect();
    let s: f64 = e.iter().sum();
    e.iter().map(|v| v / s).collect()
}

struct OuterProblem<'a, F: Fn(&[f64]) -> f64> {
    set: &'a PredictorSet,
    target: usize,
    donors: &'a [usize],
    params: &'a SynthParams,
    mspe: &'a F,
}

impl<F: Fn(&[f64]) -> f64> CostFunction for OuterProblem<'_, F> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, theta: &Self::Param) -> Result<f64, argmin::core::Error> {
        let v = softmax(theta);
        match self.set.inner(self.target, self.donors, &v, self.params) {
            Some(sol) => Ok((self.mspe)(&sol.weights)),
            None => Ok(f64::INFINITY),
        }
    }
}
