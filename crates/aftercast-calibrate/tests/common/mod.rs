//! Shared loaders, the honest test forecaster, and the one place where the tolerances of this
//! crate's tests live.
#![allow(dead_code)]

use aftercast_calibrate::backtest::{ModelError, PathModel};
use aftercast_calibrate::sample::{Pool, UnitCompareSpec, read_experiment, read_pool};
use aftercast_core::table::RawTable;
use aftercast_core::units::UnitTable;
use aftercast_resample::rng::Stream;
use rand::RngExt;
use rand_distr::{ChiSquared, Distribution, StandardNormal};
use std::path::{Path, PathBuf};

/// Tolerances of every test of this crate.
pub mod tol {
    /// Experimental difference in means against 6349.14 - 4554.80 = 1794.34 (two decimals).
    pub const TRUTH_DOLLARS: f64 = 0.005;
    /// Raw difference against Dehejia & Wahba (1999), who report whole dollars.
    pub const RAW_DIFF_DOLLARS: f64 = 1.0;
    /// Quantities computed two ways in floating point (bias = estimate - truth, ...).
    pub const ARITH: f64 = 1e-9;
    /// False-positive rate at level 0.9 over >= 100 placebo origins (nominal 10%).
    pub const FPR_RANGE: (f64, f64) = (0.04, 0.16);
}

pub fn data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests").join("data")
}

pub const COVARIATES: [&str; 8] = ["age", "educ", "marr", "nodegree", "black", "hisp", "re74", "re75"];

pub fn spec() -> UnitCompareSpec {
    UnitCompareSpec {
        arm: "treat".into(),
        outcome: "re78".into(),
        covariates: COVARIATES.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    }
}

pub fn nsw() -> UnitTable {
    let t = RawTable::read(data_dir().join("nsw_dehejia_wahba.csv")).unwrap();
    read_experiment(&t, &spec()).unwrap()
}

pub fn cps1() -> Pool {
    let t = RawTable::read(data_dir().join("cps1_comparison.csv")).unwrap();
    read_pool(&t, &spec(), Some("cps1")).unwrap()
}

/// An honest forecaster for simulated i.i.d. normal series: the exact posterior predictive
/// of future values under y ~ N(mu, sigma^2) with the reference prior p(mu, sigma^2) ∝ 1/sigma^2
/// (sigma^2 | y ~ (n-1) s^2 / chi2(n-1), mu | sigma^2, y ~ N(ybar, sigma^2/n)), fitted on the
/// last `window` values of the prefix. Its intervals for future sums are exact Student-t
/// prediction intervals, so placebo false-positive rates must sit at 1 - level.
#[derive(Debug, Clone, Copy)]
pub struct NormalPredictive {
    pub window: usize,
}

impl PathModel for NormalPredictive {
    fn name(&self) -> String {
        "normal-predictive".into()
    }

    fn paths(
        &self,
        y: &[f64],
        _c: &[Vec<f64>],
        horizon: usize,
        draws: usize,
        seed: u64,
    ) -> Result<Vec<Vec<f64>>, ModelError> {
        let w: Vec<f64> = y[y.len().saturating_sub(self.window)..].iter().copied().filter(|v| v.is_finite()).collect();
        let n = w.len();
        if n < 3 {
            return Err("too short".into());
        }
        let nf = n as f64;
        let mean = w.iter().sum::<f64>() / nf;
        let s2 = w.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0);
        let chi = ChiSquared::new(nf - 1.0).map_err(|e| e.to_string())?;
        let mut out = Vec::with_capacity(draws);
        for d in 0..draws {
            let mut rng = Stream::new(seed, d as u64);
            let sigma2 = (nf - 1.0) * s2 / chi.sample(&mut rng);
            let z: f64 = rng.sample(StandardNormal);
            let mu = mean + (sigma2 / nf).sqrt() * z;
            out.push((0..horizon).map(|_| mu + sigma2.sqrt() * rng.sample::<f64, _>(StandardNormal)).collect());
        }
        Ok(out)
    }
}

/// A seeded i.i.d. normal series.
pub fn iid_series(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
    let mut rng = Stream::new(seed, 0);
    (0..n).map(|_| mean + sd * rng.sample::<f64, _>(StandardNormal)).collect()
}

/// uniform helper used by simulations
pub fn uniform(rng: &mut Stream) -> f64 {
    rng.random::<f64>()
}
