//! Exact least squares with unit and period effects on any set of observed unit-periods, with
//! unit weights: `v[i][t] ≈ α_i + λ_t` over the cells of a mask.
//!
//! Unit effects are eliminated in closed form (a unit's effect is its weighted mean of
//! `v − λ`), which leaves a `T × T` system for the period effects: `M λ = b` with
//! `M = Σ_i ω_i (diag(m_i) − m_i m_iᵀ / |m_i|)` and `b_t = Σ_i ω_i m_it (v_it − v̄_i)`.
//! Units with the same mask share one term, so `M` costs one outer product per distinct
//! mask (in a rollout: one per wave, plus the never-adopted). `M` is singular along the
//! constant; the first identified period's effect is fixed at zero and the rest solved by
//! Cholesky. Regressors beyond the two sets of effects are partialled out the same way
//! (Frisch-Waugh-Lovell), so the coefficients equal those of the regression with unit and
//! period dummies exactly, not by iteration.

use crate::error::{DidError, DidResult};
use nalgebra::{DMatrix, DVector};

/// The two-way projector of one mask and one set of unit weights.
#[derive(Debug, Clone)]
pub struct TwoWay {
    mask: Vec<Vec<bool>>,
    weight: Vec<f64>,
    /// Periods with at least one observed cell of a weighted unit.
    identified: Vec<bool>,
    /// Periods whose effect is solved (identified, except the anchor).
    free: Vec<usize>,
    chol: Option<nalgebra::Cholesky<f64, nalgebra::Dyn>>,
    /// Every cell observed: the effects have a closed form (weighted column means of the
    /// unit-demeaned values), no system to solve.
    balanced: bool,
}

/// Unit and period effects (`NaN` where not identified).
#[derive(Debug, Clone, PartialEq)]
pub struct Effects {
    /// Unit effects.
    pub alpha: Vec<f64>,
    /// Period effects (the first identified period's is zero).
    pub lambda: Vec<f64>,
}

impl Effects {
    /// The fitted value of a cell.
    pub fn fitted(&self, i: usize, t: usize) -> f64 {
        self.alpha[i] + self.lambda[t]
    }
}

impl TwoWay {
    /// Build the projector for the cells where `mask[i][t]` is true, each unit weighted by
    /// `weight[i]` (zero leaves a unit out).
    ///
    /// # Errors
    /// [`DidError::NotConnected`] when the observed cells split into parts with no unit or
    /// period in common; [`DidError::NoComparison`] when no cell is observed.
    pub fn new(mask: &[Vec<bool>], weight: &[f64]) -> DidResult<TwoWay> {
        let n = mask.len();
        let nt = mask.first().map_or(0, Vec::len);
        let mut identified = vec![false; nt];
        // ordered by mask, so that the sums below run in one order in every process (a hash
        // map's order changes from run to run and with it the last bits of the solution)
        let mut patterns: std::collections::BTreeMap<&[bool], f64> = std::collections::BTreeMap::new();
        for i in 0..n {
            if weight[i] > 0.0 && mask[i].iter().any(|&m| m) {
                *patterns.entry(mask[i].as_slice()).or_insert(0.0) += weight[i];
                for t in 0..nt {
                    identified[t] |= mask[i][t];
                }
            }
        }
        let Some(anchor) = identified.iter().position(|&b| b) else {
            return Err(DidError::NoComparison {
                detail: "no unit-period is left to fit unit and period effects on".into(),
            });
        };
        check_connected(mask, weight, &identified)?;
        let free: Vec<usize> = (0..nt).filter(|&t| identified[t] && t != anchor).collect();
        let pos: Vec<Option<usize>> = {
            let mut p = vec![None; nt];
            for (k, &t) in free.iter().enumerate() {
                p[t] = Some(k);
            }
            p
        };
        let k = free.len();
        let mut m = DMatrix::<f64>::zeros(k, k);
        for (pat, w) in &patterns {
            let size = pat.iter().filter(|&&b| b).count() as f64;
            let idx: Vec<usize> = (0..nt).filter(|&t| pat[t]).filter_map(|t| pos[t]).collect();
            for &a in &idx {
                m[(a, a)] += w;
                for &b in &idx {
                    m[(a, b)] -= w / size;
                }
            }
        }
        let chol = if k == 0 {
            None
        } else {
            Some(m.cholesky().ok_or_else(|| DidError::Numerical {
                detail: "the period effects cannot be solved (singular system); check that periods share units".into(),
            })?)
        };
        let balanced = mask.iter().all(|r| r.iter().all(|&m| m)) && weight.iter().all(|&w| w > 0.0);
        Ok(TwoWay { mask: mask.to_vec(), weight: weight.to_vec(), identified, free, chol, balanced })
    }

    /// Unit and period effects of `v` over the mask.
    pub fn fit(&self, v: &[Vec<f64>]) -> Effects {
        let n = self.mask.len();
        let nt = self.identified.len();
        let means: Vec<f64> = (0..n).map(|i| self.unit_mean(i, |t| v[i][t])).collect();
        let mut b = DVector::<f64>::zeros(self.free.len());
        let mut pos = vec![None; nt];
        for (k, &t) in self.free.iter().enumerate() {
            pos[t] = Some(k);
        }
        for i in 0..n {
            if !means[i].is_finite() {
                continue;
            }
            for t in 0..nt {
                if self.mask[i][t]
                    && let Some(k) = pos[t]
                {
                    b[k] += self.weight[i] * (v[i][t] - means[i]);
                }
            }
        }
        let mut lambda: Vec<f64> = self.identified.iter().map(|&id| if id { 0.0 } else { f64::NAN }).collect();
        if let Some(ch) = &self.chol {
            let sol = ch.solve(&b);
            for (k, &t) in self.free.iter().enumerate() {
                lambda[t] = sol[k];
            }
        }
        let alpha = (0..n).map(|i| self.unit_mean(i, |t| v[i][t] - lambda[t])).collect();
        Effects { alpha, lambda }
    }

    /// Residuals `v − α − λ` over the mask (`NaN` elsewhere).
    pub fn residual(&self, v: &[Vec<f64>]) -> Vec<Vec<f64>> {
        if self.balanced {
            // balanced with unit weights: λ_t = Σ ω_i (v_it − v̄_i) / Σ ω up to a constant, and
            // the residual is v_it − v̄_i − λ_t + mean λ (same least squares, no solve)
            let nt = self.identified.len();
            let total: f64 = self.weight.iter().sum();
            let means: Vec<f64> = v.iter().map(|r| r.iter().sum::<f64>() / nt as f64).collect();
            let mut lambda = vec![0.0; nt];
            for (i, r) in v.iter().enumerate() {
                let w = self.weight[i] / total;
                for (l, x) in lambda.iter_mut().zip(r) {
                    *l += w * (x - means[i]);
                }
            }
            let lbar = lambda.iter().sum::<f64>() / nt as f64;
            return v
                .iter()
                .enumerate()
                .map(|(i, r)| r.iter().zip(&lambda).map(|(x, l)| x - means[i] - l + lbar).collect())
                .collect();
        }
        let e = self.fit(v);
        (0..self.mask.len())
            .map(|i| {
                (0..self.identified.len())
                    .map(|t| if self.mask[i][t] { v[i][t] - e.fitted(i, t) } else { f64::NAN })
                    .collect()
            })
            .collect()
    }

    /// Mean of `f(t)` over unit `i`'s observed periods (`NaN` for a unit with none or no weight).
    fn unit_mean(&self, i: usize, f: impl Fn(usize) -> f64) -> f64 {
        if self.weight[i] <= 0.0 {
            return f64::NAN;
        }
        let (mut s, mut c) = (0.0, 0usize);
        for t in 0..self.identified.len() {
            if self.mask[i][t] {
                s += f(t);
                c += 1;
            }
        }
        if c == 0 { f64::NAN } else { s / c as f64 }
    }

    /// Weighted least squares of `y` on the regressors `xs` (each a units × periods matrix)
    /// with unit and period effects, over the mask. Returns the coefficients and the effects of
    /// `y − Σ β x`.
    ///
    /// # Errors
    /// [`DidError::Numerical`] naming the first regressor that is collinear with the effects or
    /// the other regressors.
    pub fn regress(&self, y: &[Vec<f64>], xs: &[Vec<Vec<f64>>], names: &[String]) -> DidResult<(Vec<f64>, Effects)> {
        let ry = self.residual(y);
        let p = xs.len();
        let mut xtx = DMatrix::<f64>::zeros(p, p);
        let mut xty = DVector::<f64>::zeros(p);
        // X̃'ΩX̃ = X'ΩX̃ and X̃'Ωỹ = X'Ωỹ (the effects are an Ω-orthogonal projection), so only
        // the nonzero entries of the raw regressors are visited (indicators stay cheap), and one
        // residual column is held at a time.
        let nonzero: Vec<Vec<(usize, usize, f64)>> = xs
            .iter()
            .map(|x| {
                let mut cells = Vec::new();
                for (i, row) in x.iter().enumerate() {
                    let w = self.weight[i];
                    if w <= 0.0 {
                        continue;
                    }
                    for (t, &v) in row.iter().enumerate() {
                        if v != 0.0 && self.mask[i][t] {
                            cells.push((i, t, w * v));
                        }
                    }
                }
                cells
            })
            .collect();
        for (a, cells) in nonzero.iter().enumerate() {
            xty[a] = cells.iter().map(|&(i, t, wx)| wx * ry[i][t]).sum();
        }
        for (b, x) in xs.iter().enumerate() {
            let rb = self.residual(x);
            for (a, cells) in nonzero.iter().enumerate() {
                xtx[(a, b)] = cells.iter().map(|&(i, t, wx)| wx * rb[i][t]).sum();
            }
        }
        let xtx = (&xtx + xtx.transpose()) * 0.5;
        // collinearity: a regressor with (almost) nothing left after the effects and the
        // regressors before it
        let beta: Vec<f64> = if p == 0 {
            Vec::new()
        } else {
            let scale = (0..p).map(|a| xtx[(a, a)]).fold(0.0_f64, f64::max).max(1e-300);
            let chol = xtx.clone().cholesky();
            let bad = match &chol {
                Some(c) => (0..p).find(|&a| c.l()[(a, a)].powi(2) < 1e-10 * scale.min(xtx[(a, a)].max(1e-300))),
                None => Some((0..p).find(|&a| xtx[(a, a)] < 1e-10 * scale).unwrap_or(0)),
            };
            if let Some(a) = bad {
                return Err(DidError::Numerical {
                    detail: format!(
                        "regressor '{}' is collinear with the unit and period effects or the other regressors",
                        names.get(a).cloned().unwrap_or_default()
                    ),
                });
            }
            chol.map(|c| c.solve(&xty).iter().copied().collect()).unwrap_or_default()
        };
        let adjusted: Vec<Vec<f64>> = (0..y.len())
            .map(|i| (0..y[i].len()).map(|t| y[i][t] - (0..p).map(|a| beta[a] * xs[a][i][t]).sum::<f64>()).collect())
            .collect();
        Ok((beta, self.fit(&adjusted)))
    }
}

/// Check that the weighted observed cells form one connected set of units and periods.
fn check_connected(mask: &[Vec<bool>], weight: &[f64], identified: &[bool]) -> DidResult<()> {
    let n = mask.len();
    let nt = identified.len();
    // union-find over n units and nt periods
    let mut parent: Vec<usize> = (0..n + nt).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    for i in 0..n {
        if weight[i] <= 0.0 {
            continue;
        }
        for (t, &m) in mask[i].iter().enumerate().take(nt) {
            if m {
                let (a, b) = (find(&mut parent, i), find(&mut parent, n + t));
                parent[a] = b;
            }
        }
    }
    let Some(first) = (0..nt).find(|&t| identified[t]) else { return Ok(()) };
    let root = find(&mut parent, n + first);
    for (t, &id) in identified.iter().enumerate() {
        if id && find(&mut parent, n + t) != root {
            return Err(DidError::NotConnected { detail: format!("period {t} is cut off from period {first}") });
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Analytic: on a balanced panel with unit weights 1 the effects are the row and column
    /// means (two-way ANOVA), and a value that is exactly additive is fitted exactly.
    #[test]
    fn additive_values_are_fitted_exactly_on_an_unbalanced_mask() {
        let a = [1.0, -2.0, 3.5, 0.25];
        let l = [0.0, 1.0, -1.0, 2.0, 5.0];
        let v: Vec<Vec<f64>> = a.iter().map(|ai| l.iter().map(|lt| ai + lt).collect()).collect();
        let mut mask = vec![vec![true; 5]; 4];
        mask[0][4] = false;
        mask[1][3] = false;
        mask[1][4] = false;
        mask[2][0] = false;
        let tw = TwoWay::new(&mask, &[1.0, 2.0, 0.5, 1.0]).unwrap();
        let r = tw.residual(&v);
        for i in 0..4 {
            for t in 0..5 {
                if mask[i][t] {
                    assert!(r[i][t].abs() < 1e-12);
                }
            }
        }
    }

    #[test]
    fn a_cut_off_period_is_reported() {
        let mask = vec![vec![true, true, false], vec![false, false, true]];
        assert!(matches!(TwoWay::new(&mask, &[1.0, 1.0]), Err(DidError::NotConnected { .. })));
    }
}
