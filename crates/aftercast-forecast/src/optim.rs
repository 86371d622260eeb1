//! Minimisation with argmin: L-BFGS with a More-Thuente line search on a numerical
//! (central-difference) gradient or on one the caller supplies (an analytic score), and a
//! Nelder-Mead fallback when the line search fails.

use argmin::core::{CostFunction, Error as ArgminError, Executor, Gradient, State, TerminationReason};
use argmin::solver::linesearch::MoreThuenteLineSearch;
use argmin::solver::neldermead::NelderMead;
use argmin::solver::quasinewton::LBFGS;
use serde::{Deserialize, Serialize};

/// How the optimiser stopped.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OptimReport {
    /// Which solver produced the answer (`l-bfgs` or `nelder-mead`).
    pub solver: String,
    /// Iterations used.
    pub iterations: u64,
    /// Whether the solver reported convergence.
    pub converged: bool,
    /// argmin's termination text.
    pub reason: String,
    /// Objective at the answer.
    pub value: f64,
    /// Euclidean norm of the numerical gradient at the answer.
    pub gradient_norm: f64,
}

/// Outcome of a minimisation.
#[derive(Debug, Clone)]
pub struct OptimOutcome {
    /// The minimiser.
    pub x: Vec<f64>,
    /// The report.
    pub report: OptimReport,
}

/// Largest finite value returned for an objective that is not finite (keeps line searches sane).
pub const PENALTY: f64 = 1e100;

/// A gradient supplied by the caller.
pub type GradientFn<'a> = &'a (dyn Fn(&[f64]) -> Vec<f64> + Sync);

struct Problem<'a, F: Fn(&[f64]) -> f64> {
    f: &'a F,
    step: f64,
    grad: Option<GradientFn<'a>>,
}

impl<F: Fn(&[f64]) -> f64 + Sync> Problem<'_, F> {
    fn gradient_at(&self, x: &[f64]) -> Vec<f64> {
        match self.grad {
            Some(g) => {
                let v = g(x);
                if v.iter().all(|x| x.is_finite()) { v } else { vec![0.0; x.len()] }
            }
            None => numerical_gradient(&|z: &[f64]| self.eval(z), x, self.step),
        }
    }
}

impl<F: Fn(&[f64]) -> f64> Problem<'_, F> {
    fn eval(&self, x: &[f64]) -> f64 {
        let v = (self.f)(x);
        if v.is_finite() { v.min(PENALTY) } else { PENALTY }
    }
}

impl<F: Fn(&[f64]) -> f64> CostFunction for Problem<'_, F> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, p: &Self::Param) -> Result<f64, ArgminError> {
        Ok(self.eval(p))
    }
}

impl<F: Fn(&[f64]) -> f64 + Sync> Gradient for Problem<'_, F> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, p: &Self::Param) -> Result<Vec<f64>, ArgminError> {
        Ok(self.gradient_at(p))
    }
}

/// Central-difference gradient with step `h * max(1, |x_i|)`. The `2n` evaluations run in
/// parallel (rayon); each is a pure function of its point, so the result does not depend on
/// the number of threads.
pub fn numerical_gradient(f: &(dyn Fn(&[f64]) -> f64 + Sync), x: &[f64], h: f64) -> Vec<f64> {
    use rayon::prelude::*;
    // every optimiser step passes here: a run asked to stop unwinds (aftercast_core::stop)
    aftercast_core::stop::check();
    let evals: Vec<f64> = (0..2 * x.len())
        .into_par_iter()
        .map(|k| {
            let i = k / 2;
            let hi = h * x[i].abs().max(1.0);
            let mut xp = x.to_vec();
            xp[i] = if k % 2 == 0 { x[i] + hi } else { x[i] - hi };
            f(&xp)
        })
        .collect();
    (0..x.len()).map(|i| (evals[2 * i] - evals[2 * i + 1]) / (2.0 * h * x[i].abs().max(1.0))).collect()
}

/// Minimise `f` from `x0` with L-BFGS (memory 7) on a central-difference gradient; if the
/// line search fails, continue with Nelder-Mead from the best point found. Never silent: the
/// report says which solver answered and whether it converged.
///
/// # Errors
/// Returns argmin's error text when both solvers fail outright.
pub fn minimise(
    f: &(dyn Fn(&[f64]) -> f64 + Sync),
    x0: &[f64],
    max_iters: u64,
    tol_grad: f64,
) -> Result<OptimOutcome, String> {
    minimise_with_gradient(f, None, x0, max_iters, tol_grad)
}

/// As [`minimise`], with the gradient given by `grad` (an analytic score) when present.
///
/// # Errors
/// Returns argmin's error text when both solvers fail outright.
pub fn minimise_with_gradient(
    f: &(dyn Fn(&[f64]) -> f64 + Sync),
    grad: Option<GradientFn<'_>>,
    x0: &[f64],
    max_iters: u64,
    tol_grad: f64,
) -> Result<OptimOutcome, String> {
    let problem = Problem { f: &f, step: 1e-5, grad };
    let ls = MoreThuenteLineSearch::new();
    let lbfgs = LBFGS::new(ls, 7)
        .with_tolerance_grad(tol_grad)
        .and_then(|s| s.with_tolerance_cost(1e-10))
        .map_err(|e| e.to_string())?;
    let run = Executor::new(problem, lbfgs).configure(|s| s.param(x0.to_vec()).max_iters(max_iters)).run();
    let problem = Problem { f: &f, step: 1e-5, grad };
    match run {
        Ok(res) => {
            let st = res.state();
            let x = st.get_best_param().cloned().unwrap_or_else(|| x0.to_vec());
            let reason = st.get_termination_reason().cloned().unwrap_or(TerminationReason::SolverConverged);
            let converged = matches!(reason, TerminationReason::SolverConverged | TerminationReason::TargetCostReached);
            let g = problem.gradient_at(&x);
            let report = OptimReport {
                solver: "l-bfgs".into(),
                iterations: st.get_iter(),
                converged,
                reason: reason.text().to_string(),
                value: problem.eval(&x),
                gradient_norm: g.iter().map(|v| v * v).sum::<f64>().sqrt(),
            };
            if converged {
                return Ok(OptimOutcome { x, report });
            }
            nelder_mead(&problem, &x, max_iters, Some(report))
        }
        Err(_) => nelder_mead(&problem, x0, max_iters, None),
    }
}

fn nelder_mead<F: Fn(&[f64]) -> f64 + Sync>(
    problem: &Problem<'_, F>,
    start: &[f64],
    max_iters: u64,
    previous: Option<OptimReport>,
) -> Result<OptimOutcome, String> {
    let n = start.len();
    let mut simplex = vec![start.to_vec()];
    for i in 0..n {
        let mut p = start.to_vec();
        p[i] += 0.5;
        simplex.push(p);
    }
    let nm = NelderMead::new(simplex).with_sd_tolerance(1e-9).map_err(|e| e.to_string())?;
    let inner = Problem { f: problem.f, step: problem.step, grad: problem.grad };
    let res = Executor::new(inner, nm).configure(|s| s.max_iters(max_iters * 20)).run().map_err(|e| format!("{e}"))?;
    let st = res.state();
    let x = st.get_best_param().cloned().unwrap_or_else(|| start.to_vec());
    let reason = st.get_termination_reason().cloned().unwrap_or(TerminationReason::SolverConverged);
    let converged = matches!(reason, TerminationReason::SolverConverged);
    let g = problem.gradient_at(&x);
    let value = problem.eval(&x);
    if let Some(prev) = previous
        && prev.value < value
    {
        return Ok(OptimOutcome { x: start.to_vec(), report: prev });
    }
    Ok(OptimOutcome {
        x,
        report: OptimReport {
            solver: "nelder-mead".into(),
            iterations: st.get_iter(),
            converged,
            reason: reason.text().to_string(),
            value,
            gradient_norm: g.iter().map(|v| v * v).sum::<f64>().sqrt(),
        },
    })
}
