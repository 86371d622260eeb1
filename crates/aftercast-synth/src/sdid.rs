//! Synthetic difference-in-differences (Arkhangelsky, Athey, Hirshberg, Imbens & Wager 2021,
//! AER 111(12):4088-4118), block design: N₁ treated units share one start.
//!
//! - Noise level σ̂: standard deviation of the first differences of the control units'
//!   pre-period outcomes; regularisation ζ = (N₁ T₁)^{1/4} σ̂ (their eq. 2.2).
//! - Unit weights: (ω₀, ω) = argmin Σ_{t ≤ T₀} (ω₀ + Σ_j ω_j Y_jt − Ȳ_tr,t)² + ζ² T₀ ‖ω‖²,
//!   ω on the simplex (the free intercept ω₀ is removed by demeaning over pre-periods).
//! - Time weights: (λ₀, λ) = argmin Σ_j (λ₀ + Σ_{t ≤ T₀} λ_t Y_jt − Ȳ_j,post)² + ζ_λ² N₀ ‖λ‖²,
//!   λ on the simplex, ζ_λ = 10⁻⁶ σ̂ (as in the authors' implementation notes).
//! - Estimate: the weighted two-way fixed-effects coefficient, which for the block design is
//!   τ = (Ȳ_tr,post − λᵀȲ_tr,pre) − Σ_j ω_j (Ȳ_j,post − λᵀY_j,pre); per post-period t the same
//!   with Ȳ_·,post replaced by period t (their average is τ).
//! - Variance: placebo (their Algorithm 4) for one treated unit: N₁ controls drawn at random
//!   play the treated, weights re-estimated with the same ζ; jackknife over units with the
//!   weights held fixed (Algorithm 3) when there are several treated units.

use crate::data::Prepared;
use crate::engine::check_solver;
use crate::error::{SynthError, SynthResult};
use crate::fit::{Draws, Fitted, SolverReport, UnitFit, WEIGHT_ZERO, rmspe};
use crate::params::{Method, SynthParams};
use crate::simplex::{self, SimplexSolution};
use aftercast_core::result::UnitWeight;
use aftercast_core::time::TimePoint;
use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

/// Details of an SDID fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SdidFit {
    /// Average treatment effect on the treated over the post-period.
    pub tau: f64,
    /// Per post-period effects.
    pub tau_path: Vec<f64>,
    /// Standard error (placebo or jackknife).
    pub se: f64,
    /// `placebo` or `jackknife`.
    pub variance_method: String,
    /// Replications used for the variance.
    pub replications: usize,
    /// Unit weights ω of the controls.
    pub unit_weights: Vec<UnitWeight>,
    /// Time weights λ of the pre-periods.
    pub time_weights: Vec<(TimePoint, f64)>,
    /// Noise level σ̂.
    pub sigma: f64,
    /// Unit-weight regularisation ζ.
    pub zeta: f64,
    /// Unit-weight solver certificate.
    pub unit_solver: SolverReport,
    /// Time-weight solver certificate.
    pub time_solver: SolverReport,
}

pub(crate) struct Core {
    pub tau: f64,
    pub tau_path: Vec<f64>,
    pub omega: Vec<f64>,
    pub lambda: Vec<f64>,
    pub unit_sol: SimplexSolution,
    pub time_sol: SimplexSolution,
    pub synthetic: Vec<f64>,
    pub treated_avg: Vec<f64>,
}

/// σ̂: sd of first differences of controls over the pre-period.
pub(crate) fn noise_level(y: &[Vec<f64>], controls: &[usize], t0: usize) -> f64 {
    let mut d = Vec::with_capacity(controls.len() * t0);
    for &j in controls {
        for t in 1..t0 {
            d.push(y[j][t] - y[j][t - 1]);
        }
    }
    let n = d.len() as f64;
    if n < 2.0 {
        return 0.0;
    }
    let m = d.iter().sum::<f64>() / n;
    (d.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
}

/// One SDID estimate with weights re-estimated, straight from the definitions (the reference
/// the cached version is tested against).
#[cfg(test)]
#[allow(clippy::too_many_arguments)]
pub(crate) fn estimate(
    y: &[Vec<f64>],
    controls: &[usize],
    treated: &[usize],
    shares: &[f64],
    t0: usize,
    zeta: f64,
    sigma: f64,
    p: &SynthParams,
) -> Option<Core> {
    let nt = y[controls[0]].len();
    let t1 = nt - t0;
    let n0 = controls.len();
    let tr: Vec<f64> = (0..nt).map(|t| treated.iter().zip(shares).map(|(&u, s)| s * y[u][t]).sum()).collect();
    // Unit weights.
    let mut a = DMatrix::<f64>::zeros(t0, n0);
    for (k, &j) in controls.iter().enumerate() {
        let m = y[j][..t0].iter().sum::<f64>() / t0 as f64;
        for t in 0..t0 {
            a[(t, k)] = y[j][t] - m;
        }
    }
    let mtr = tr[..t0].iter().sum::<f64>() / t0 as f64;
    let av = nalgebra::DVector::from_fn(t0, |t, _| tr[t] - mtr);
    let mut h = a.tr_mul(&a);
    for k in 0..n0 {
        h[(k, k)] += zeta * zeta * t0 as f64;
    }
    let b = a.tr_mul(&av);
    let unit_sol = simplex::solve(&h, b.as_slice(), &p.solver)?;
    // Time weights.
    let zl = 1e-6 * sigma;
    let mut bm = DMatrix::<f64>::zeros(n0, t0);
    for t in 0..t0 {
        let m = controls.iter().map(|&j| y[j][t]).sum::<f64>() / n0 as f64;
        for (k, &j) in controls.iter().enumerate() {
            bm[(k, t)] = y[j][t] - m;
        }
    }
    let post_means: Vec<f64> = controls.iter().map(|&j| y[j][t0..].iter().sum::<f64>() / t1 as f64).collect();
    let pm = post_means.iter().sum::<f64>() / n0 as f64;
    let c = nalgebra::DVector::from_fn(n0, |k, _| post_means[k] - pm);
    let mut ht = bm.tr_mul(&bm);
    for t in 0..t0 {
        ht[(t, t)] += zl * zl * n0 as f64;
    }
    let bt = bm.tr_mul(&c);
    let time_sol = simplex::solve(&ht, bt.as_slice(), &p.solver)?;
    Some(assemble(y, controls, &tr, t0, unit_sol, time_sol))
}

/// Quantities shared by the main SDID fit and every placebo replication, so that each
/// replication costs two QPs: the pre-period Gram matrix of all units demeaned over time (plus
/// the unit-weight ridge on its diagonal), and for the time weights the second moments of the
/// original controls' pre-period vectors, shifted by their per-period mean (which leaves the
/// cross-unit centring unchanged and avoids cancellation).
pub(crate) struct Cache {
    h_units: DMatrix<f64>,
    controls: Vec<usize>,
    /// Shifted pre-period vectors (all units; only controls are used).
    pre: Vec<Vec<f64>>,
    /// Post-period means (shifted by the controls' mean of post means).
    post: Vec<f64>,
    s_full: DMatrix<f64>,
    q_full: Vec<f64>,
    sum_pre: Vec<f64>,
    sum_post: f64,
    t0: usize,
    zl2: f64,
}

impl Cache {
    pub fn new(y: &[Vec<f64>], controls: &[usize], t0: usize, zeta: f64, sigma: f64) -> Self {
        let n = y.len();
        let nt = y[controls[0]].len();
        let t1 = nt - t0;
        let mut a = DMatrix::<f64>::zeros(t0, n);
        for (u, row) in y.iter().enumerate() {
            let m = row[..t0].iter().sum::<f64>() / t0 as f64;
            for t in 0..t0 {
                a[(t, u)] = if row[t].is_finite() { row[t] - m } else { 0.0 };
            }
        }
        let mut h_units = a.tr_mul(&a);
        for u in 0..n {
            h_units[(u, u)] += zeta * zeta * t0 as f64;
        }
        let nc = controls.len() as f64;
        let shift: Vec<f64> = (0..t0).map(|t| controls.iter().map(|&j| y[j][t]).sum::<f64>() / nc).collect();
        let raw_post: Vec<f64> = y.iter().map(|r| r[t0..].iter().sum::<f64>() / t1 as f64).collect();
        let post_shift = controls.iter().map(|&j| raw_post[j]).sum::<f64>() / nc;
        let pre: Vec<Vec<f64>> = y.iter().map(|r| (0..t0).map(|t| r[t] - shift[t]).collect()).collect();
        let post: Vec<f64> = raw_post.iter().map(|v| v - post_shift).collect();
        let mut s_full = DMatrix::<f64>::zeros(t0, t0);
        let mut q_full = vec![0.0; t0];
        let mut sum_pre = vec![0.0; t0];
        let mut sum_post = 0.0;
        for &j in controls {
            let v = nalgebra::DVector::from_column_slice(&pre[j]);
            s_full.ger(1.0, &v, &v, 1.0);
            for t in 0..t0 {
                q_full[t] += pre[j][t] * post[j];
                sum_pre[t] += pre[j][t];
            }
            sum_post += post[j];
        }
        let zl = 1e-6 * sigma;
        Self { h_units, controls: controls.to_vec(), pre, post, s_full, q_full, sum_pre, sum_post, t0, zl2: zl * zl }
    }

    /// SDID estimate with `controls` (a subset of the cached controls) and `treated`.
    pub fn estimate(
        &self,
        y: &[Vec<f64>],
        controls: &[usize],
        treated: &[usize],
        shares: &[f64],
        p: &SynthParams,
    ) -> Option<Core> {
        let t0 = self.t0;
        let nt = y[controls[0]].len();
        let tr: Vec<f64> = (0..nt).map(|t| treated.iter().zip(shares).map(|(&u, s)| s * y[u][t]).sum()).collect();
        let b: Vec<f64> = controls
            .iter()
            .map(|&j| treated.iter().zip(shares).map(|(&u, s)| s * self.h_units[(j, u)]).sum())
            .collect();
        let unit_sol = simplex::solve_indexed(&self.h_units, &b, controls, &p.solver)?;
        let mut s = self.s_full.clone();
        let mut q = self.q_full.clone();
        let mut sp = self.sum_pre.clone();
        let mut spost = self.sum_post;
        for &j in &self.controls {
            if !controls.contains(&j) {
                let v = nalgebra::DVector::from_column_slice(&self.pre[j]);
                s.ger(-1.0, &v, &v, 1.0);
                for t in 0..t0 {
                    q[t] -= self.pre[j][t] * self.post[j];
                    sp[t] -= self.pre[j][t];
                }
                spost -= self.post[j];
            }
        }
        let n0 = controls.len() as f64;
        let m: Vec<f64> = sp.iter().map(|v| v / n0).collect();
        let pbar = spost / n0;
        let mut ht = s;
        for r in 0..t0 {
            for c in 0..t0 {
                ht[(r, c)] -= n0 * m[r] * m[c];
            }
            ht[(r, r)] += self.zl2 * n0;
        }
        let bt: Vec<f64> = (0..t0).map(|t| q[t] - n0 * m[t] * pbar).collect();
        let time_sol = simplex::solve(&ht, &bt, &p.solver)?;
        Some(assemble(y, controls, &tr, t0, unit_sol, time_sol))
    }
}

fn assemble(
    y: &[Vec<f64>],
    controls: &[usize],
    tr: &[f64],
    t0: usize,
    unit_sol: SimplexSolution,
    time_sol: SimplexSolution,
) -> Core {
    let omega = unit_sol.weights.clone();
    let lambda = time_sol.weights.clone();
    let (tau_path, synthetic) = paths(y, controls, tr, t0, &omega, &lambda);
    let tau = tau_path.iter().sum::<f64>() / tau_path.len() as f64;
    Core { tau, tau_path, omega, lambda, unit_sol, time_sol, synthetic, treated_avg: tr.to_vec() }
}

/// Per-period effects and the synthetic path ω'Y_t + (λ'Ȳ_tr,pre − ω'Y_pre λ).
fn paths(
    y: &[Vec<f64>],
    controls: &[usize],
    tr: &[f64],
    t0: usize,
    omega: &[f64],
    lambda: &[f64],
) -> (Vec<f64>, Vec<f64>) {
    let nt = tr.len();
    let tr_pre: f64 = (0..t0).map(|t| lambda[t] * tr[t]).sum();
    let co_pre: f64 =
        controls.iter().zip(omega).map(|(&j, w)| w * (0..t0).map(|t| lambda[t] * y[j][t]).sum::<f64>()).sum();
    let synthetic: Vec<f64> =
        (0..nt).map(|t| controls.iter().zip(omega).map(|(&j, w)| w * y[j][t]).sum::<f64>() + tr_pre - co_pre).collect();
    let tau_path = (t0..nt).map(|t| tr[t] - synthetic[t]).collect();
    (tau_path, synthetic)
}

pub(crate) fn fit_sdid(prep: &Prepared, p: &SynthParams, outcome: &str, shares: Vec<f64>) -> SynthResult<Fitted> {
    let t0 = prep.t0;
    let nt = prep.n_periods();
    let controls = &prep.donors;
    let n1 = prep.treated.len();
    let sigma = noise_level(&prep.y, controls, t0);
    let t1 = nt - t0;
    let zeta = ((n1 * t1) as f64).powf(0.25) * sigma;
    let cache = Cache::new(&prep.y, controls, t0, zeta, sigma);
    let core = cache
        .estimate(&prep.y, controls, &prep.treated, &shares, p)
        .ok_or(SynthError::TooFewDonors { found: controls.len(), needed: 2 })?;
    let label = if n1 == 1 { prep.units[prep.treated[0]].clone() } else { format!("average of {n1} treated units") };
    check_solver(&label, &core.unit_sol, p.solver.tolerance)?;
    check_solver(&label, &core.time_sol, p.solver.tolerance)?;
    let mut warnings = Vec::new();
    // Variance.
    let (variance_method, reps, dev_paths): (&str, usize, Vec<Vec<f64>>) = if n1 == 1 {
        if controls.len() < 3 {
            return Err(SynthError::TooFewDonors { found: controls.len(), needed: 3 });
        }
        let base = aftercast_resample::rng::child_seed(p.inference.seed, "sdid-placebo");
        let reps = p.sdid_placebo_reps;
        let res: Vec<Option<Vec<f64>>> = aftercast_resample::rng::par_draws(base, reps, |_, s| {
            use rand::RngExt;
            let mut pool = controls.clone();
            for i in 0..n1 {
                let j = s.random_range(i..pool.len());
                pool.swap(i, j);
            }
            let (pt, pc) = pool.split_at(n1);
            let eq = vec![1.0 / n1 as f64; n1];
            cache.estimate(&prep.y, pc, pt, &eq, p).map(|c| c.tau_path)
        });
        let ok: Vec<Vec<f64>> = res.into_iter().flatten().collect();
        ("placebo", ok.len(), ok)
    } else {
        // Jackknife over all units with the weights fixed; pseudo-deviations scaled by sqrt(N-1)
        // so that their spread reproduces the jackknife variance.
        let mut paths_i = Vec::new();
        for drop in 0..(controls.len() + n1) {
            let (c2, w2, t2, s2): (Vec<usize>, Vec<f64>, Vec<usize>, Vec<f64>) = if drop < controls.len() {
                let mut c = controls.clone();
                let mut w = core.omega.clone();
                c.remove(drop);
                w.remove(drop);
                let sw: f64 = w.iter().sum();
                if sw <= 0.0 {
                    continue;
                }
                (c, w.iter().map(|v| v / sw).collect(), prep.treated.clone(), shares.clone())
            } else {
                let k = drop - controls.len();
                let mut t = prep.treated.clone();
                let mut s = shares.clone();
                t.remove(k);
                s.remove(k);
                let ss: f64 = s.iter().sum();
                (controls.clone(), core.omega.clone(), t, s.iter().map(|v| v / ss).collect())
            };
            let tr: Vec<f64> = (0..nt).map(|t| t2.iter().zip(&s2).map(|(&u, s)| s * prep.y[u][t]).sum()).collect();
            let (tp, _) = paths(&prep.y, &c2, &tr, t0, &w2, &core.lambda);
            paths_i.push(tp);
        }
        let n = paths_i.len() as f64;
        let mean: Vec<f64> = (0..t1).map(|k| paths_i.iter().map(|q| q[k]).sum::<f64>() / n).collect();
        let devs = paths_i
            .iter()
            .map(|q| (0..t1).map(|k| (n - 1.0).sqrt() * (q[k] - mean[k]) + core.tau_path[k]).collect())
            .collect();
        ("jackknife", paths_i.len(), devs)
    };
    // Placebo taus are centred at their mean and added to the estimate; jackknife paths are
    // already centred on the estimate.
    let effect_draws: Vec<Vec<f64>> = if variance_method == "placebo" {
        let n = dev_paths.len().max(1) as f64;
        let mean: Vec<f64> = (0..t1).map(|k| dev_paths.iter().map(|q| q[k]).sum::<f64>() / n).collect();
        dev_paths.iter().map(|q| (0..t1).map(|k| core.tau_path[k] + q[k] - mean[k]).collect()).collect()
    } else {
        dev_paths
    };
    let avg: Vec<f64> = effect_draws.iter().map(|q| q.iter().sum::<f64>() / t1 as f64).collect();
    let se = if avg.len() > 1 {
        let m = avg.iter().sum::<f64>() / avg.len() as f64;
        (avg.iter().map(|v| (v - m).powi(2)).sum::<f64>() / avg.len() as f64).sqrt()
    } else {
        f64::NAN
    };
    if reps < 20 {
        warnings.push(format!(
            "the SDID {variance_method} variance rests on only {reps} replications, so the interval's width is itself uncertain: treat it as rough, and add untreated units to the panel (or name fewer in --exclude) to firm it up"
        ));
    }
    let counterfactual: Vec<Vec<f64>> =
        effect_draws.iter().map(|e| (0..t1).map(|k| core.treated_avg[t0 + k] - e[k]).collect()).collect();
    let unit_weights: Vec<UnitWeight> = controls
        .iter()
        .zip(&core.omega)
        .map(|(&j, &w)| UnitWeight { unit: prep.units[j].clone(), weight: w })
        .collect();
    let gap: Vec<f64> = core.treated_avg.iter().zip(&core.synthetic).map(|(a, b)| a - b).collect();
    let pre_rmspe = rmspe(&gap[..t0]);
    let post_rmspe = rmspe(&gap[t0..]);
    let ybar = core.treated_avg[..t0].iter().sum::<f64>() / t0 as f64;
    let sst: f64 = core.treated_avg[..t0].iter().map(|v| (v - ybar).powi(2)).sum();
    let r2 = 1.0 - gap[..t0].iter().map(|g| g * g).sum::<f64>() / sst;
    let unit = UnitFit {
        unit: label,
        weights: unit_weights.clone(),
        simplex_weights: None,
        intercept: core.synthetic[0] - controls.iter().zip(&core.omega).map(|(&j, w)| w * prep.y[j][0]).sum::<f64>(),
        observed: core.treated_avg.clone(),
        synthetic: core.synthetic.clone(),
        gap,
        pre_rmspe,
        post_rmspe,
        rmspe_ratio: post_rmspe / pre_rmspe,
        r2_pre: r2,
        nonzero_donors: core.omega.iter().filter(|w| **w > WEIGHT_ZERO).count(),
        outside_range_share: 0.0,
        outside_hull: false,
        solver: SolverReport::from(&core.unit_sol),
        ridge_lambda: None,
        balance: Vec::new(),
        v_objective: None,
    };
    let sd = SdidFit {
        tau: core.tau,
        tau_path: core.tau_path.clone(),
        se,
        variance_method: variance_method.into(),
        replications: reps,
        unit_weights,
        time_weights: prep.times[..t0].iter().copied().zip(core.lambda.iter().copied()).collect(),
        sigma,
        zeta,
        unit_solver: SolverReport::from(&core.unit_sol),
        time_solver: SolverReport::from(&core.time_sol),
    };
    Ok(Fitted {
        method: Method::Sdid,
        outcome: outcome.to_string(),
        times: prep.times.clone(),
        first_post: t0,
        donors: controls.iter().map(|&d| prep.units[d].clone()).collect(),
        units: vec![unit],
        unit_shares: shares,
        observed: core.treated_avg.clone(),
        synthetic: core.synthetic.clone(),
        placebo: None,
        draws: Draws { source: format!("sdid-{variance_method}"), counterfactual },
        sdid: Some(sd),
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cached_estimate_equals_direct_estimate() {
        let mut state = 5u64;
        let mut u = move || {
            state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let (n, nt, t0) = (12, 16, 12);
        let y: Vec<Vec<f64>> =
            (0..n).map(|i| (0..nt).map(|t| 1000.0 + 10.0 * i as f64 + t as f64 + 3.0 * u()).collect()).collect();
        let p = SynthParams::default();
        let controls: Vec<usize> = (0..10).collect();
        let sigma = noise_level(&y, &controls, t0);
        let zeta = 2.0 * sigma;
        let cache = Cache::new(&y, &controls, t0, zeta, sigma);
        for (ctrl, tr) in
            [(controls.clone(), vec![11usize]), ((0..10).filter(|&j| j != 4).collect::<Vec<_>>(), vec![4usize])]
        {
            let a = estimate(&y, &ctrl, &tr, &[1.0], t0, zeta, sigma, &p).unwrap();
            let b = cache.estimate(&y, &ctrl, &tr, &[1.0], &p).unwrap();
            assert!((a.tau - b.tau).abs() < 1e-7, "{} vs {}", a.tau, b.tau);
            for (x, z) in a.omega.iter().zip(&b.omega) {
                assert!((x - z).abs() < 1e-7);
            }
            for (x, z) in a.lambda.iter().zip(&b.lambda) {
                assert!((x - z).abs() < 1e-6);
            }
        }
    }
}
