//! Observational estimators as the comparison sees them, and the two baselines this crate
//! owns: the raw difference (naive) and regression adjustment.
//!
//! Every estimator returns draws of the effect on the treated units of the observational
//! sample (treated arm of the experiment + pool controls). The baselines' uncertainty is a
//! Bayesian bootstrap: per replicate, every unit gets an Exp(1) weight (normalised within the
//! group where a group mean is taken), and the whole estimator is recomputed with those
//! weights (Rubin 1981).

use crate::error::{CalibrateError, CalibrateResult};
use aftercast_core::estimate::Inference;
use aftercast_core::units::UnitTable;
use aftercast_resample::bayes::{BayesBootstrap, exp1};
use aftercast_resample::rng::{child_seed, par_draws};
use nalgebra::{DMatrix, DVector};
use serde_json::{Map, Value};

/// What an observational estimator returns.
#[derive(Debug, Clone)]
pub struct MethodEstimate {
    /// Point estimate of the effect on the treated.
    pub point: f64,
    /// Draws of the effect (bootstrap or posterior draws).
    pub draws: Vec<f64>,
    /// Counterfactual mean of the treated per draw (for the relative effect), when defined.
    pub baseline: Option<Vec<f64>>,
    /// Estimand actually targeted ("ATT", "ATO", ...).
    pub estimand: String,
    /// Method-specific numbers for the table's `extra` fields.
    pub diagnostics: Map<String, Value>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

/// An observational estimator of the effect on the treated units of a unit table.
pub trait UnitEstimator: Send + Sync {
    /// Method name as shown in the table (e.g. `naive`, `regression`, `match:ipw`).
    fn name(&self) -> String;

    /// Estimate the effect on the treated of `sample` for `outcome`, adjusting for
    /// `covariates` (methods with their own covariate specification may ignore it).
    ///
    /// # Errors
    /// Whatever the method refuses; wrapped by the comparison with the method's name.
    fn estimate(
        &self,
        sample: &UnitTable,
        outcome: &str,
        covariates: &[String],
        opts: &Inference,
    ) -> CalibrateResult<MethodEstimate>;
}

pub(crate) fn outcome_of<'a>(units: &'a UnitTable, name: &str) -> CalibrateResult<&'a [f64]> {
    units.outcome(name).or_else(|| units.numeric(name)).ok_or_else(|| CalibrateError::MissingColumn {
        path: units.input.path.clone().into(),
        name: name.into(),
        what: "outcome",
    })
}

/// The raw difference of means, treated minus untreated, no adjustment at all.
#[derive(Debug, Clone, Copy, Default)]
pub struct Naive;

impl UnitEstimator for Naive {
    fn name(&self) -> String {
        "naive".into()
    }

    fn estimate(
        &self,
        s: &UnitTable,
        outcome: &str,
        _c: &[String],
        opts: &Inference,
    ) -> CalibrateResult<MethodEstimate> {
        let y = outcome_of(s, outcome)?;
        let (mut t, mut c) = (Vec::new(), Vec::new());
        for (v, &tr) in y.iter().zip(&s.treated) {
            if tr { t.push(*v) } else { c.push(*v) }
        }
        let path: std::path::PathBuf = s.input.path.clone().into();
        if t.is_empty() {
            return Err(CalibrateError::EmptyGroup { what: "treated arm", path });
        }
        if c.is_empty() {
            return Err(CalibrateError::EmptyGroup { what: "pool", path });
        }
        let point = t.iter().sum::<f64>() / t.len() as f64 - c.iter().sum::<f64>() / c.len() as f64;
        let d = BayesBootstrap::new(opts.draws, child_seed(opts.seed, "naive"))
            .two_groups(&t, &c)
            .map_err(|source| CalibrateError::Bootstrap { what: "naive difference".into(), source })?;
        Ok(MethodEstimate {
            point,
            draws: d.difference,
            baseline: Some(d.control_mean),
            estimand: "ATT".into(),
            diagnostics: Map::new(),
            warnings: Vec::new(),
        })
    }
}

/// Which regression-adjustment estimator.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum RegressionKind {
    /// Coefficient of the treatment indicator in the OLS of the outcome on
    /// `1 + treated + covariates` over all units (constant-effect model).
    #[default]
    Coefficient,
    /// Outcome model fitted by OLS on the untreated only, imputed for the treated:
    /// ATT = mean over treated of `y - x'b` (no constant-effect assumption).
    Imputation,
}

/// Regression adjustment by ordinary least squares on the covariates (linear terms).
#[derive(Debug, Clone, Copy, Default)]
pub struct Regression {
    /// Which estimator.
    pub kind: RegressionKind,
}

/// Standardised covariate columns (mean 0, sd 1 over all units); a constant column is an error.
fn standardised(s: &UnitTable, covariates: &[String]) -> CalibrateResult<Vec<Vec<f64>>> {
    let mut out = Vec::with_capacity(covariates.len());
    for name in covariates {
        let v = s.numeric(name).ok_or_else(|| CalibrateError::MissingColumn {
            path: s.input.path.clone().into(),
            name: name.clone(),
            what: "covariate",
        })?;
        let n = v.len() as f64;
        let m = v.iter().sum::<f64>() / n;
        let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n).sqrt();
        if sd.is_nan() || sd <= 0.0 {
            return Err(CalibrateError::Singular { columns: covariates.to_vec() });
        }
        out.push(v.iter().map(|x| (x - m) / sd).collect());
    }
    Ok(out)
}

/// Weighted least squares over `rows` with design columns `cols` (each indexed by unit);
/// returns `None` when `X'WX` is not positive definite.
pub(crate) fn wls(cols: &[&[f64]], y: &[f64], w: &[f64], rows: &[usize]) -> Option<DVector<f64>> {
    RowDesign::new(cols, y, rows).wls(w)
}

/// A least-squares design gathered once into rows (outcome alongside), for fits repeated
/// with new weights (bootstrap replicates).
pub(crate) struct RowDesign {
    p: usize,
    x: Vec<f64>,
    y: Vec<f64>,
}

impl RowDesign {
    pub(crate) fn new(cols: &[&[f64]], y: &[f64], rows: &[usize]) -> Self {
        let p = cols.len();
        let mut x = Vec::with_capacity(rows.len() * p);
        for &i in rows {
            x.extend(cols.iter().map(|c| c[i]));
        }
        RowDesign { p, x, y: rows.iter().map(|&i| y[i]).collect() }
    }

    /// Weighted least squares with weights `w` (one per row); `None` when `X'WX` is not
    /// positive definite.
    pub(crate) fn wls(&self, w: &[f64]) -> Option<DVector<f64>> {
        let p = self.p;
        // each entry summed over the rows in order (rows of weight 0 add nothing)
        let (lower, xty) =
            aftercast_match::linear::cross_products(p, self.y.len(), |r| &self.x[r * p..(r + 1) * p], &self.y, w);
        let xty = DVector::from_vec(xty);
        let xtx = DMatrix::<f64>::from_fn(p, p, |a, b| if b <= a { lower[a * p + b] } else { lower[b * p + a] });
        let chol = xtx.cholesky()?;
        let beta = chol.solve(&xty);
        beta.iter().all(|v| v.is_finite()).then_some(beta)
    }
}

impl UnitEstimator for Regression {
    fn name(&self) -> String {
        match self.kind {
            RegressionKind::Coefficient => "regression".into(),
            RegressionKind::Imputation => "regression-imputation".into(),
        }
    }

    fn estimate(
        &self,
        s: &UnitTable,
        outcome: &str,
        covariates: &[String],
        opts: &Inference,
    ) -> CalibrateResult<MethodEstimate> {
        let y = outcome_of(s, outcome)?;
        let n = s.len();
        let xs = standardised(s, covariates)?;
        let ones = vec![1.0; n];
        let tr: Vec<f64> = s.treated.iter().map(|&t| f64::from(u8::from(t))).collect();
        let treated: Vec<usize> = (0..n).filter(|&i| s.treated[i]).collect();
        let controls: Vec<usize> = (0..n).filter(|&i| !s.treated[i]).collect();
        let path: std::path::PathBuf = s.input.path.clone().into();
        if treated.is_empty() {
            return Err(CalibrateError::EmptyGroup { what: "treated arm", path });
        }
        if controls.is_empty() {
            return Err(CalibrateError::EmptyGroup { what: "pool", path });
        }
        let singular = || CalibrateError::Singular { columns: covariates.to_vec() };
        let kind = self.kind;
        // the least-squares design, gathered once for all replicates
        let mut cols: Vec<&[f64]> = vec![&ones];
        if kind == RegressionKind::Coefficient {
            cols.push(&tr);
        }
        cols.extend(xs.iter().map(Vec::as_slice));
        let all: Vec<usize> = treated.iter().chain(&controls).copied().collect();
        let rows = match kind {
            RegressionKind::Coefficient => RowDesign::new(&cols, y, &all),
            RegressionKind::Imputation => RowDesign::new(&cols, y, &controls),
        };
        // One replicate: weights for treated and controls (unit weights give the point).
        let one = |wt: &[f64], wc: &[f64]| -> Option<(f64, f64)> {
            let st: f64 = wt.iter().sum();
            let ybar_t = treated.iter().zip(wt).map(|(&i, w)| w * y[i]).sum::<f64>() / st;
            match kind {
                RegressionKind::Coefficient => {
                    let w: Vec<f64> = wt.iter().chain(wc).copied().collect();
                    let b = rows.wls(&w)?;
                    Some((b[1], ybar_t - b[1]))
                }
                RegressionKind::Imputation => {
                    let b = rows.wls(wc)?;
                    let pred = |i: usize| cols.iter().zip(b.iter()).map(|(c, bj)| c[i] * bj).sum::<f64>();
                    let cf = treated.iter().zip(wt).map(|(&i, w)| w * pred(i)).sum::<f64>() / st;
                    Some((ybar_t - cf, cf))
                }
            }
        };
        let (point, _) = one(&vec![1.0; treated.len()], &vec![1.0; controls.len()]).ok_or_else(singular)?;
        let reps = par_draws(child_seed(opts.seed, &self.name()), opts.draws, |_, rng| {
            let wt: Vec<f64> = (0..treated.len()).map(|_| exp1(rng)).collect();
            let wc: Vec<f64> = (0..controls.len()).map(|_| exp1(rng)).collect();
            one(&wt, &wc)
        });
        let failed = reps.iter().filter(|r| r.is_none()).count();
        let (draws, baseline): (Vec<f64>, Vec<f64>) = reps.into_iter().flatten().unzip();
        if draws.is_empty() {
            return Err(singular());
        }
        let mut diagnostics = Map::new();
        diagnostics.insert("covariates".into(), covariates.iter().map(|c| Value::from(c.as_str())).collect());
        let mut warnings = Vec::new();
        if failed > 0 {
            diagnostics.insert("singular_replicates".into(), failed.into());
            warnings.push(format!(
                "{failed} bootstrap replicates had a singular design and were dropped, so the interval rests on fewer draws: if that is many, a covariate is (nearly) constant or repeats another within a group; remove it from --covariates"
            ));
        }
        Ok(MethodEstimate {
            point,
            draws,
            baseline: Some(baseline),
            estimand: match kind {
                RegressionKind::Coefficient => "constant effect".into(),
                RegressionKind::Imputation => "ATT".into(),
            },
            diagnostics,
            warnings,
        })
    }
}
