//! What the two-way fixed-effects coefficient averages.
//!
//! Two views, both of the static regression `Y ~ unit + period + adopted` on a balanced panel:
//! - its two-by-two comparisons and their weights (Goodman-Bacon 2021, Theorem 1): each wave
//!   against the never-adopted, each earlier wave against a later one before the later adopts,
//!   and each later wave against an earlier one that has already adopted. The last kind uses
//!   adopted units as the comparison: when effects change over time it subtracts their change
//!   and can reverse the sign. The weights are non-negative and sum to one.
//! - the weight each adopted unit-period's own effect gets (de Chaisemartin & D'Haultfoeuille
//!   2020): the residual of adoption on the unit and period effects, scaled to sum to one over
//!   the adopted unit-periods. Negative weights mean that, if effects differ, the coefficient
//!   can fall outside the range of every unit-period's own effect.

use crate::data::Rollout;
use crate::error::DidResult;
use crate::fit::adoption;
use crate::twoway::TwoWay;
use serde::{Deserialize, Serialize};

/// The kind of a two-by-two comparison.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PairKind {
    /// A wave against the never-adopted units.
    VersusNever,
    /// An earlier wave against a later one, before the later adopts.
    EarlyVersusLater,
    /// A later wave against an earlier one that has already adopted.
    LaterVersusAdopted,
}

/// One two-by-two comparison.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Pair {
    /// Its kind.
    pub kind: PairKind,
    /// The wave whose change is measured (its start).
    pub treated: String,
    /// The comparison (a wave's start, or "never adopted").
    pub comparison: String,
    /// The two-by-two difference in differences.
    pub estimate: f64,
    /// Its weight in the regression coefficient.
    pub weight: f64,
}

/// The weight of one wave-period in the coefficient.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CellWeight {
    /// The wave (its start).
    pub wave: String,
    /// The period.
    pub period: String,
    /// Sum of the weights of the wave's units at the period.
    pub weight: f64,
}

/// The decomposition of the static two-way coefficient.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Decomposition {
    /// The static two-way fixed-effects coefficient.
    pub coefficient: f64,
    /// The two-by-two comparisons.
    pub pairs: Vec<Pair>,
    /// Total weight on comparisons with already-adopted units.
    pub weight_on_adopted_comparisons: f64,
    /// Weights of the adopted wave-periods.
    pub cells: Vec<CellWeight>,
    /// Adopted wave-periods with a negative weight.
    pub negative_cells: usize,
    /// Sum of the negative weights.
    pub negative_weight: f64,
}

fn mean_over(data: &Rollout, units: &[usize], ts: std::ops::Range<usize>) -> f64 {
    let mut s = 0.0;
    let mut n = 0usize;
    for &u in units {
        for t in ts.clone() {
            s += data.y[u][t];
            n += 1;
        }
    }
    s / n as f64
}

/// Decompose the static two-way coefficient of a balanced rollout.
///
/// # Errors
/// A collinear design.
pub fn decompose(data: &Rollout) -> DidResult<Decomposition> {
    let n_units = data.n_units();
    let nt = data.n_times();
    let full = vec![vec![true; nt]; n_units];
    let ones = vec![1.0; n_units];
    let tw = TwoWay::new(&full, &ones)?;
    let d = adoption(data);
    let (beta, _) = tw.regress(&data.y, std::slice::from_ref(&d), &["adopted".to_string()])?;
    let dres = tw.residual(&d);
    let vd: f64 = dres.iter().flatten().map(|v| v * v).sum::<f64>() / (n_units * nt) as f64;
    let waves = data.waves();
    let never = data.never();
    let n = n_units as f64;
    let share = |k: usize| k as f64 / n;
    let dbar = |s: usize| (nt - s) as f64 / nt as f64;
    let label = |s: usize| data.times[s].to_string();
    let mut pairs = Vec::new();
    for (i, wk) in waves.iter().enumerate() {
        let (nk, dk) = (share(wk.units.len()), dbar(wk.start));
        if !never.is_empty() {
            let nu = share(never.len());
            let nku = nk / (nk + nu);
            let weight = (nk + nu).powi(2) * nku * (1.0 - nku) * dk * (1.0 - dk) / vd;
            let estimate = (mean_over(data, &wk.units, wk.start..nt) - mean_over(data, &wk.units, 0..wk.start))
                - (mean_over(data, &never, wk.start..nt) - mean_over(data, &never, 0..wk.start));
            pairs.push(Pair {
                kind: PairKind::VersusNever,
                treated: label(wk.start),
                comparison: "never adopted".into(),
                estimate,
                weight,
            });
        }
        for wl in &waves[i + 1..] {
            let (nl, dl) = (share(wl.units.len()), dbar(wl.start));
            let nkl = nk / (nk + nl);
            // earlier wave k treated, later wave l as comparison, periods before l adopts
            let w_early = ((nk + nl) * (1.0 - dl)).powi(2)
                * nkl
                * (1.0 - nkl)
                * ((dk - dl) / (1.0 - dl))
                * ((1.0 - dk) / (1.0 - dl))
                / vd;
            let e_early = (mean_over(data, &wk.units, wk.start..wl.start) - mean_over(data, &wk.units, 0..wk.start))
                - (mean_over(data, &wl.units, wk.start..wl.start) - mean_over(data, &wl.units, 0..wk.start));
            pairs.push(Pair {
                kind: PairKind::EarlyVersusLater,
                treated: label(wk.start),
                comparison: label(wl.start),
                estimate: e_early,
                weight: w_early,
            });
            // later wave l treated, earlier (already adopted) wave k as comparison
            let w_late = ((nk + nl) * dk).powi(2) * nkl * (1.0 - nkl) * (dl / dk) * ((dk - dl) / dk) / vd;
            let e_late = (mean_over(data, &wl.units, wl.start..nt) - mean_over(data, &wl.units, wk.start..wl.start))
                - (mean_over(data, &wk.units, wl.start..nt) - mean_over(data, &wk.units, wk.start..wl.start));
            pairs.push(Pair {
                kind: PairKind::LaterVersusAdopted,
                treated: label(wl.start),
                comparison: label(wk.start),
                estimate: e_late,
                weight: w_late,
            });
        }
    }
    let weight_on_adopted_comparisons =
        pairs.iter().filter(|p| p.kind == PairKind::LaterVersusAdopted).map(|p| p.weight).sum();
    let treated_sum: f64 = (0..n_units)
        .flat_map(|u| (0..nt).map(move |t| (u, t)))
        .filter(|&(u, t)| data.treated(u, t))
        .map(|(u, t)| dres[u][t])
        .sum();
    let mut cells = Vec::new();
    for wk in &waves {
        for (t, time) in data.times.iter().enumerate().skip(wk.start) {
            let weight = wk.units.iter().map(|&u| dres[u][t]).sum::<f64>() / treated_sum;
            cells.push(CellWeight { wave: label(wk.start), period: time.to_string(), weight });
        }
    }
    let negative_cells = cells.iter().filter(|c| c.weight < 0.0).count();
    let negative_weight = cells.iter().filter(|c| c.weight < 0.0).map(|c| c.weight).sum();
    Ok(Decomposition {
        coefficient: beta[0],
        pairs,
        weight_on_adopted_comparisons,
        cells,
        negative_cells,
        negative_weight,
    })
}
