//! Harmonic regression: intercept + linear trend + Fourier terms for each season + event
//! indicators + controls, ridge-penalised (columns standardised on the pre-period, intercept not
//! penalised, penalty chosen by generalised cross-validation unless given). Residual
//! autocorrelation is carried into the intervals by the stationary bootstrap (Politis & Romano
//! 1994) of the pre-period residuals with the Politis-White automatic mean block length: each
//! draw refits the coefficients on `fitted + resampled residuals` (coefficient uncertainty) and
//! adds a resampled residual path over the future (future noise with its autocorrelation).

use crate::error::{ForecastError, ForecastResult};
use crate::linalg::ridge_solve;
use aftercast_resample::blocks::{BlockScheme, draw_blocks, expand, optimal_block_length, resample_series};
use aftercast_resample::rng::{Stream, par_draws};
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Structure of a harmonic regression.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HarmonicSpec {
    /// `(period, harmonics)` per season.
    pub seasons: Vec<(f64, usize)>,
    /// Fixed ridge penalty; `None` chooses it by GCV.
    pub ridge: Option<f64>,
}

/// A fitted harmonic regression.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct HarmonicFit {
    /// Structure.
    pub spec: HarmonicSpec,
    /// Column names (after the intercept).
    pub columns: Vec<String>,
    /// Ridge penalty used.
    pub lambda: f64,
    /// Coefficients on the standardised columns (intercept first).
    pub beta: Vec<f64>,
    /// Pre-period fitted values (NaN where the outcome is missing).
    pub fitted: Vec<f64>,
    /// Residuals of the observed pre-period values, in time order.
    pub residuals: Vec<f64>,
    /// Residual sd.
    pub sigma: f64,
    /// Mean block length of the stationary bootstrap.
    pub mean_block_length: f64,
    /// Effective number of parameters (trace of the hat matrix).
    pub effective_params: f64,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    #[serde(skip)]
    design: Design,
}

#[derive(Debug, Clone, Default)]
struct Design {
    mean: Vec<f64>,
    sd: Vec<f64>,
    n_pre: usize,
    rows: Vec<usize>,
    x: DMatrix<f64>,
}

fn raw_row(spec: &HarmonicSpec, t: usize, n_pre: usize, regs: &[Vec<f64>], out: &mut Vec<f64>) {
    out.clear();
    out.push(t as f64 / n_pre.max(1) as f64);
    for &(period, k) in &spec.seasons {
        for j in 1..=k {
            let a = 2.0 * std::f64::consts::PI * j as f64 * t as f64 / period;
            out.push(a.cos());
            if (2.0 * j as f64 - period).abs() > 1e-12 {
                out.push(a.sin());
            }
        }
    }
    for r in regs {
        out.push(r[t]);
    }
}

fn column_names(spec: &HarmonicSpec, reg_names: &[String]) -> Vec<String> {
    let mut v = vec!["trend".to_string()];
    for &(period, k) in &spec.seasons {
        for j in 1..=k {
            v.push(format!("cos({period}:{j})"));
            if (2.0 * j as f64 - period).abs() > 1e-12 {
                v.push(format!("sin({period}:{j})"));
            }
        }
    }
    v.extend(reg_names.iter().cloned());
    v
}

/// Fit on the pre-period `y` (NaN = missing) with regressors `regs[k][t]` defined at least over
/// the pre-period.
///
/// # Errors
/// [`ForecastError::TooShort`] when fewer observations than columns + 2 are observed;
/// [`ForecastError::Singular`] when the penalised normal equations cannot be solved.
pub fn fit(
    spec: &HarmonicSpec,
    y: &[f64],
    regs: &[Vec<f64>],
    reg_names: &[String],
    at: &str,
) -> ForecastResult<HarmonicFit> {
    let n_pre = y.len();
    let rows: Vec<usize> = (0..n_pre).filter(|&t| y[t].is_finite()).collect();
    let mut buf = Vec::new();
    raw_row(spec, 0, n_pre, regs, &mut buf);
    let p_raw = buf.len();
    if rows.len() < p_raw + 3 {
        return Err(ForecastError::TooShort {
            model: "harmonic",
            needed: p_raw + 3,
            found: rows.len(),
            at: at.to_string(),
        });
    }
    let mut raw = DMatrix::zeros(rows.len(), p_raw);
    for (i, &t) in rows.iter().enumerate() {
        raw_row(spec, t, n_pre, regs, &mut buf);
        for (j, v) in buf.iter().enumerate() {
            raw[(i, j)] = *v;
        }
    }
    let n = rows.len() as f64;
    let mean: Vec<f64> = (0..p_raw).map(|j| raw.column(j).sum() / n).collect();
    let sd: Vec<f64> =
        (0..p_raw).map(|j| (raw.column(j).iter().map(|v| (v - mean[j]).powi(2)).sum::<f64>() / n).sqrt()).collect();
    let mut x = DMatrix::zeros(rows.len(), p_raw + 1);
    for i in 0..rows.len() {
        x[(i, 0)] = 1.0;
        for j in 0..p_raw {
            x[(i, j + 1)] = if sd[j] > 0.0 { (raw[(i, j)] - mean[j]) / sd[j] } else { 0.0 };
        }
    }
    let yv = DVector::from_iterator(rows.len(), rows.iter().map(|&t| y[t]));
    let xtx = x.transpose() * &x;
    let xty = x.transpose() * &yv;
    let pen_of = |lam: f64| -> Vec<f64> {
        // a zero column (constant regressor) gets a unit penalty so its coefficient is zero
        (0..=p_raw)
            .map(|j| {
                if j == 0 {
                    0.0
                } else if sd[j - 1] > 0.0 {
                    lam
                } else {
                    1.0
                }
            })
            .collect()
    };
    let gcv = |lam: f64| -> Option<(f64, f64, DVector<f64>)> {
        let pen = pen_of(lam);
        let b = ridge_solve(&xtx, &xty, &pen)?;
        let mut a = xtx.clone();
        for (i, p) in pen.iter().enumerate() {
            a[(i, i)] += p;
        }
        let inv = a.cholesky()?.inverse();
        let tr = (inv * &xtx).trace();
        let rss = (&yv - &x * &b).norm_squared();
        let denom = (n - tr).max(1e-9);
        Some((n * rss / (denom * denom), tr, b))
    };
    let lambda = match spec.ridge {
        Some(l) => l,
        None => {
            let grid: Vec<f64> = (0..=16).map(|k| n * 10f64.powf(-7.0 + 0.5 * k as f64)).collect();
            let mut best = (f64::INFINITY, grid[0]);
            for &l in &grid {
                if let Some((g, _, _)) = gcv(l)
                    && g < best.0
                {
                    best = (g, l);
                }
            }
            best.1
        }
    };
    let (_, tr, b) =
        gcv(lambda).ok_or_else(|| ForecastError::Singular { what: "the harmonic-regression normal matrix".into() })?;
    let fitted_obs = &x * &b;
    let residuals: Vec<f64> = (0..rows.len()).map(|i| yv[i] - fitted_obs[i]).collect();
    let mut fitted = vec![f64::NAN; n_pre];
    for (i, &t) in rows.iter().enumerate() {
        fitted[t] = fitted_obs[i];
    }
    let sigma = (residuals.iter().map(|r| r * r).sum::<f64>() / (n - tr).max(1.0)).sqrt();
    let mut warnings = Vec::new();
    let mean_block_length = match optimal_block_length(&residuals) {
        Ok(bl) => bl.stationary.max(1.0),
        Err(e) => {
            let b = (rows.len() as f64).cbrt().max(1.0);
            warnings.push(format!(
                "harmonic regression: the residuals' autocorrelation could not be measured ({e}), so the bootstrap uses blocks of about n^(1/3) = {b:.1} periods; if the residuals are strongly autocorrelated the interval may be too narrow: compare with --model structural"
            ));
            b
        }
    };
    Ok(HarmonicFit {
        spec: spec.clone(),
        columns: column_names(spec, reg_names),
        lambda,
        beta: b.iter().copied().collect(),
        fitted,
        residuals,
        sigma,
        mean_block_length,
        effective_params: tr,
        warnings,
        design: Design { mean, sd, n_pre, rows, x },
    })
}

impl HarmonicFit {
    fn standardised_row(&self, t: usize, regs: &[Vec<f64>], buf: &mut Vec<f64>) -> Vec<f64> {
        raw_row(&self.spec, t, self.design.n_pre, regs, buf);
        let mut r = vec![1.0];
        for (j, v) in buf.iter().enumerate() {
            let sd = self.design.sd[j];
            r.push(if sd > 0.0 { (v - self.design.mean[j]) / sd } else { 0.0 });
        }
        r
    }

    /// Point predictions at periods `ts` (regressors must cover them).
    pub fn predict(&self, ts: std::ops::Range<usize>, regs: &[Vec<f64>]) -> Vec<f64> {
        let mut buf = Vec::new();
        ts.map(|t| self.standardised_row(t, regs, &mut buf).iter().zip(&self.beta).map(|(a, b)| a * b).sum()).collect()
    }

    /// Joint future paths over periods `n_pre + skip .. n_pre + skip + horizon`.
    ///
    /// # Errors
    /// [`ForecastError::Singular`] if the penalised system cannot be factorised.
    pub fn simulate(
        &self,
        regs: &[Vec<f64>],
        skip: usize,
        horizon: usize,
        draws: usize,
        seed: u64,
    ) -> ForecastResult<Vec<Vec<f64>>> {
        let d = &self.design;
        let p = self.beta.len();
        let mut a = d.x.transpose() * &d.x;
        for j in 1..p {
            a[(j, j)] += if d.sd[j - 1] > 0.0 { self.lambda } else { 1.0 };
        }
        let chol = a
            .cholesky()
            .ok_or_else(|| ForecastError::Singular { what: "the harmonic-regression normal matrix".into() })?;
        let beta = DVector::from_column_slice(&self.beta);
        let fitted_obs = &d.x * &beta;
        let mut buf = Vec::new();
        let future: Vec<Vec<f64>> =
            (d.n_pre..d.n_pre + skip + horizon).map(|t| self.standardised_row(t, regs, &mut buf)).collect();
        let scheme = BlockScheme::Stationary { mean_length: self.mean_block_length };
        let n_res = self.residuals.len();
        let _ = &d.rows;
        Ok(par_draws(seed, draws, |_, rng: &mut Stream| {
            let e_star = resample_series(&self.residuals, &scheme, rng).unwrap_or_else(|_| self.residuals.clone());
            let y_star = DVector::from_iterator(n_res, (0..n_res).map(|i| fitted_obs[i] + e_star[i]));
            let b_star = chol.solve(&(d.x.transpose() * y_star));
            let blocks = draw_blocks(&scheme, n_res, skip + horizon, rng).unwrap_or_default();
            let idx = expand(&blocks, n_res);
            (skip..skip + horizon)
                .map(|h| {
                    let mu: f64 = future[h].iter().zip(b_star.iter()).map(|(a, b)| a * b).sum();
                    mu + idx.get(h).map_or(0.0, |&i| self.residuals[i])
                })
                .collect()
        }))
    }
}
