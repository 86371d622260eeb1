//! Every tolerance of the resampling tests, in one place. Monte Carlo tolerances are stated
//! in multiples of the Monte Carlo standard error (SE) at the draw counts used.
#![allow(dead_code)]

/// Rubin (1981) variance of the Bayesian-bootstrap mean: relative error of a Monte Carlo
/// variance from `RUBIN_DRAWS` draws (relative SE about 0.3% there, so 2% is > 6 SE).
pub const RUBIN_VARIANCE_REL: f64 = 0.02;
/// Draws for the Rubin checks.
pub const RUBIN_DRAWS: usize = 200_000;
/// Posterior mean vs sample mean, in units of the posterior sd (SE = sd / sqrt(draws), i.e.
/// 0.0022 sd at 200,000 draws; 0.015 sd is about 7 SE).
pub const RUBIN_MEAN_SDS: f64 = 0.015;

/// Two-sample Kolmogorov-Smirnov test level for "same distribution" checks (fixed seeds, so
/// the outcome is deterministic; the level says how unusual a pass/fail split would be).
pub const KS_ALPHA: f64 = 0.001;
/// Moments of tied vs per-unit weights: relative error of mean / variance vs Rubin's exact
/// values at `TIE_DRAWS` draws (variance relative SE about 1%, so 5% is about 5 SE).
pub const TIE_MEAN_SDS: f64 = 0.05;
/// See [`TIE_MEAN_SDS`].
pub const TIE_VARIANCE_REL: f64 = 0.05;
/// Draws per policy in the tie-aggregation checks.
pub const TIE_DRAWS: usize = 20_000;

/// Block lengths vs the `arch` package: both follow the same formulas, so only floating-point
/// summation order separates them.
pub const ARCH_BLOCK_LENGTH_REL: f64 = 1e-10;

/// Equal-tailed interval ends vs numpy.quantile (type 7 on the same draws; only rounding).
pub const NUMPY_QUANTILE_ABS: f64 = 1e-12;
/// Mean and sd of the draws vs numpy (summation order only).
pub const NUMPY_MOMENT_ABS: f64 = 1e-12;

/// Stationary bootstrap: mean length of complete blocks vs the parameter, absolute (geometric
/// sd about b; with about 130,000 blocks the SE is about 0.02 for b = 7.5, so 0.1 is 5 SE).
pub const MEAN_BLOCK_ABS: f64 = 0.1;

/// Dirichlet weights sum to one up to rounding.
pub const WEIGHT_SUM_ABS: f64 = 1e-12;

/// Bayesian-bootstrap quantile: Monte Carlo frequency of each order statistic vs the exact
/// Binomial probabilities, absolute (SE at most 0.0016 at 100,000 draws; 0.008 is 5 SE).
pub const QUANTILE_FREQ_ABS: f64 = 0.008;
/// Draws for the quantile check.
pub const QUANTILE_DRAWS: usize = 100_000;
