//! Block bootstraps for time series, and the automatic block length.
//!
//! - **Stationary bootstrap** (Politis & Romano 1994, JASA 89:1303-1313): blocks start at
//!   uniformly chosen periods and have independent geometric lengths with mean `b`
//!   (`P(L = m) = (1 - p)^(m-1) p`, `p = 1/b`); a block running past the end wraps to the
//!   start (circular). The resampled series is stationary given the data.
//! - **Moving-block bootstrap** with a fixed length `l`, in two variants ([`Wrap`]):
//!   [`Wrap::Circular`] is the circular block bootstrap (Politis & Romano 1992): starts uniform
//!   over all `n` periods, blocks wrap; [`Wrap::Clipped`] is Künsch's (1989, Ann. Statist.
//!   17:1217-1241) moving-block bootstrap: starts uniform over the `n - l + 1` blocks that fit,
//!   no wrapping.
//! - **Automatic block length** ([`optimal_block_length`]): Politis & White (2004, Econometric
//!   Reviews 23:53-70) with the correction of Patton, Politis & White (2009, Econometric Reviews
//!   28:372-375), for the stationary and the circular bootstrap.
//!
//! Replicate `i` of a seed always uses `Stream::new(seed, i)` ([`replicates`]), so results do
//! not depend on the number of threads.
//!
//! # Examples
//!
//! ```
//! use aftercast_resample::blocks::{optimal_block_length, replicates, BlockScheme};
//! let x: Vec<f64> = (0..200).map(|t| ((t as f64) * 0.3).sin() + (t % 7) as f64 * 0.1).collect();
//! let b = optimal_block_length(&x)?;
//! let scheme = BlockScheme::Stationary { mean_length: b.stationary };
//! let means = replicates(&x, &scheme, 100, 42, |s| s.iter().sum::<f64>() / s.len() as f64)?;
//! assert_eq!(means.len(), 100);
//! # Ok::<(), aftercast_resample::blocks::BlockError>(())
//! ```

use crate::rng::par_draws;
use rand::{Rng, RngExt};
use rand_distr::{Distribution, Geometric};

/// Everything that can be wrong with the input of a block bootstrap.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum BlockError {
    /// The series has no values.
    #[error("the series is empty")]
    EmptySeries,
    /// A value is NaN or infinite (block bootstraps need a complete series).
    #[error("period {index}: value {value} is not a finite number (fill or drop missing periods first)")]
    NonFinite {
        /// 0-based period.
        index: usize,
        /// The offending value.
        value: f64,
    },
    /// A mean block length that is not a finite number >= 1.
    #[error("mean block length {value} must be a finite number of at least 1")]
    InvalidMeanLength {
        /// The value given.
        value: f64,
    },
    /// A fixed block length outside 1..=n.
    #[error("block length {length} must be between 1 and the series length {n}")]
    InvalidLength {
        /// The value given.
        length: usize,
        /// Series length.
        n: usize,
    },
    /// The series is too short for the automatic block length.
    #[error("the automatic block length needs more than {needed} periods; the series has {n}")]
    TooShort {
        /// Series length.
        n: usize,
        /// The number of lags needed (the series must be longer).
        needed: usize,
    },
    /// All values are equal: autocorrelations are undefined.
    #[error("the series is constant (every value is {value}); autocorrelations are undefined")]
    ConstantSeries {
        /// The constant value.
        value: f64,
    },
    /// Zero replicates were requested.
    #[error("the number of draws must be at least 1")]
    NoDraws,
}

/// Whether fixed-length blocks wrap around the end of the series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Wrap {
    /// Circular block bootstrap (Politis & Romano 1992): every period can start a block and
    /// blocks wrap, so every period is equally likely to be drawn.
    #[default]
    Circular,
    /// Künsch (1989): blocks are the `n - l + 1` stretches that fit; periods near the ends are
    /// drawn less often.
    Clipped,
}

/// Which block bootstrap to run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BlockScheme {
    /// Stationary bootstrap with geometric block lengths of this mean (>= 1), circular.
    Stationary {
        /// Mean block length `b`.
        mean_length: f64,
    },
    /// Moving-block bootstrap with this fixed length (1..=n).
    Moving {
        /// Block length `l`.
        length: usize,
        /// Circular or clipped.
        wrap: Wrap,
    },
}

/// One resampled block: `len` periods starting at `start`, wrapping modulo the series length.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Block {
    /// First period (0-based).
    pub start: usize,
    /// Number of periods.
    pub len: usize,
}

fn check_series(x: &[f64]) -> Result<(), BlockError> {
    if x.is_empty() {
        return Err(BlockError::EmptySeries);
    }
    match x.iter().enumerate().find(|(_, v)| !v.is_finite()) {
        Some((index, &value)) => Err(BlockError::NonFinite { index, value }),
        None => Ok(()),
    }
}

fn check_scheme(scheme: &BlockScheme, n: usize) -> Result<(), BlockError> {
    if n == 0 {
        return Err(BlockError::EmptySeries);
    }
    match *scheme {
        BlockScheme::Stationary { mean_length } => {
            if !(mean_length.is_finite() && mean_length >= 1.0) {
                return Err(BlockError::InvalidMeanLength { value: mean_length });
            }
        }
        BlockScheme::Moving { length, .. } => {
            if length == 0 || length > n {
                return Err(BlockError::InvalidLength { length, n });
            }
        }
    }
    Ok(())
}

/// Draw the blocks of one resample of a series of length `n`, covering `out_len` periods. All
/// blocks but the last have their drawn length; the last is cut to end at `out_len`.
///
/// # Errors
/// [`BlockError::EmptySeries`] for `n == 0`, [`BlockError::InvalidMeanLength`],
/// [`BlockError::InvalidLength`].
pub fn draw_blocks<R: Rng + ?Sized>(
    scheme: &BlockScheme,
    n: usize,
    out_len: usize,
    rng: &mut R,
) -> Result<Vec<Block>, BlockError> {
    check_scheme(scheme, n)?;
    let mut blocks = Vec::new();
    let mut filled = 0usize;
    match *scheme {
        BlockScheme::Stationary { mean_length } => {
            // Geometric counts failures before the first success; a block has 1 + that periods.
            let geo =
                Geometric::new(1.0 / mean_length).map_err(|_| BlockError::InvalidMeanLength { value: mean_length })?;
            while filled < out_len {
                let start = rng.random_range(0..n);
                let drawn = geo.sample(rng).saturating_add(1);
                let len = usize::try_from(drawn).unwrap_or(usize::MAX).min(out_len - filled);
                blocks.push(Block { start, len });
                filled += len;
            }
        }
        BlockScheme::Moving { length, wrap } => {
            let starts = match wrap {
                Wrap::Circular => n,
                Wrap::Clipped => n - length + 1,
            };
            while filled < out_len {
                let start = rng.random_range(0..starts);
                let len = length.min(out_len - filled);
                blocks.push(Block { start, len });
                filled += len;
            }
        }
    }
    Ok(blocks)
}

/// Expand blocks into period indices (modulo `n`).
pub fn expand(blocks: &[Block], n: usize) -> Vec<usize> {
    let mut idx = Vec::with_capacity(blocks.iter().map(|b| b.len).sum());
    for b in blocks {
        let mut t = b.start % n.max(1);
        for _ in 0..b.len {
            idx.push(t);
            t += 1;
            if t == n {
                t = 0;
            }
        }
    }
    idx
}

/// The period indices of one resample of length `n`.
///
/// # Errors
/// As [`draw_blocks`].
pub fn resample_indices<R: Rng + ?Sized>(
    scheme: &BlockScheme,
    n: usize,
    rng: &mut R,
) -> Result<Vec<usize>, BlockError> {
    Ok(expand(&draw_blocks(scheme, n, n, rng)?, n))
}

/// One resampled series.
///
/// # Errors
/// [`BlockError::EmptySeries`], [`BlockError::NonFinite`], and the scheme errors of
/// [`draw_blocks`].
pub fn resample_series<R: Rng + ?Sized>(x: &[f64], scheme: &BlockScheme, rng: &mut R) -> Result<Vec<f64>, BlockError> {
    check_series(x)?;
    Ok(resample_indices(scheme, x.len(), rng)?.into_iter().map(|i| x[i]).collect())
}

/// `draws` replicates of a statistic of the resampled series, in parallel; replicate `i` uses
/// `Stream::new(seed, i)`. Only one resampled series per running thread is alive at a time.
///
/// # Errors
/// [`BlockError::NoDraws`], and the errors of [`resample_series`].
pub fn replicates<T: Send>(
    x: &[f64],
    scheme: &BlockScheme,
    draws: usize,
    seed: u64,
    stat: impl Fn(&[f64]) -> T + Sync + Send,
) -> Result<Vec<T>, BlockError> {
    if draws == 0 {
        return Err(BlockError::NoDraws);
    }
    check_series(x)?;
    check_scheme(scheme, x.len())?;
    let n = x.len();
    Ok(par_draws(seed, draws, |_, rng| {
        let blocks = draw_blocks(scheme, n, n, rng).unwrap_or_default();
        let series: Vec<f64> = expand(&blocks, n).into_iter().map(|i| x[i]).collect();
        stat(&series)
    }))
}

/// The automatic block lengths and the quantities behind them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BlockLength {
    /// Mean block length for the stationary bootstrap, in [1, `b_max`].
    pub stationary: f64,
    /// Block length for the circular block bootstrap, in [1, `b_max`] (not rounded).
    pub circular: f64,
    /// `m_hat`: the lag after which the correlogram looks negligible.
    pub m_hat: usize,
    /// Lag-window bandwidth `M = min(2 m_hat, m_max)`.
    pub bandwidth: usize,
    /// Upper bound `ceil(min(3 sqrt(N), N / 3))`.
    pub b_max: f64,
    /// `G = sum_{|k| <= M} lambda(k/M) |k| R(k)`.
    pub g: f64,
    /// Flat-top estimate of the long-run variance, `g(0) = sum_{|k| <= M} lambda(k/M) R(k)`.
    pub long_run_variance: f64,
}

/// Flat-top (trapezoidal) lag window of Politis & Romano (1995): 1 on [0, 1/2], falling
/// linearly to 0 at 1.
pub fn flat_top(t: f64) -> f64 {
    let a = t.abs();
    if a <= 0.5 {
        1.0
    } else if a <= 1.0 {
        2.0 * (1.0 - a)
    } else {
        0.0
    }
}

/// Automatic block length of Politis & White (2004), corrected by Patton, Politis & White
/// (2009), for the stationary and the circular block bootstrap.
///
/// With `R(k) = N^-1 sum_t (x_t - xbar)(x_{t+k} - xbar)` and `rho(k) = R(k) / R(0)`:
/// - `K_N = max(5, sqrt(log10 N))` (rounded up to an integer; 5 for any N below 10^25),
///   `m_max = ceil(sqrt N) + K_N`, `c = 2`, threshold `c sqrt(log10 N / N)`;
/// - `m_hat` = the smallest lag `m >= 1` such that `|rho(m)|, ..., |rho(m + K_N - 1)|` are all
///   below the threshold (the rule as coded by the authors' implementation, Patton's
///   `opt_block_length`; see docs/resampling.md); if there is no such run within `m_max`,
///   `m_hat` = the largest lag with a significant autocorrelation;
/// - `M = min(2 m_hat, m_max)`, flat-top window `lambda` ([`flat_top`]);
/// - `G = sum_{|k|<=M} lambda(k/M) |k| R(k)`, `g(0) = sum_{|k|<=M} lambda(k/M) R(k)`;
/// - corrected constants `D_SB = 2 g(0)^2`, `D_CB = (4/3) g(0)^2`;
/// - `b = (2 G^2 / D)^(1/3) N^(1/3)`, capped at `b_max = ceil(min(3 sqrt N, N / 3))` and
///   floored at 1 (a block cannot be shorter than one period).
///
/// # Errors
/// [`BlockError::EmptySeries`], [`BlockError::NonFinite`], [`BlockError::TooShort`] when
/// `N <= m_max`, [`BlockError::ConstantSeries`].
///
/// # Examples
///
/// ```
/// use aftercast_resample::blocks::optimal_block_length;
/// // A slowly moving series needs long blocks.
/// let x: Vec<f64> = (0..400).map(|t| ((t as f64) / 15.0).sin()).collect();
/// let b = optimal_block_length(&x)?;
/// assert!(b.stationary > 5.0 && b.circular > b.stationary);
/// # Ok::<(), aftercast_resample::blocks::BlockError>(())
/// ```
pub fn optimal_block_length(x: &[f64]) -> Result<BlockLength, BlockError> {
    check_series(x)?;
    let n = x.len();
    let nf = n as f64;
    let k_n = (nf.log10().max(0.0).sqrt().ceil() as usize).max(5);
    let m_max = (nf.sqrt().ceil() as usize) + k_n;
    if n <= m_max {
        return Err(BlockError::TooShort { n, needed: m_max });
    }
    let mean = x.iter().sum::<f64>() / nf;
    let eps: Vec<f64> = x.iter().map(|v| v - mean).collect();
    let acv: Vec<f64> =
        (0..=m_max).map(|k| eps[k..].iter().zip(&eps[..n - k]).map(|(a, b)| a * b).sum::<f64>() / nf).collect();
    if acv[0] <= 0.0 {
        return Err(BlockError::ConstantSeries { value: x[0] });
    }
    let threshold = 2.0 * (nf.log10() / nf).sqrt();
    let insignificant = |k: usize| (acv[k] / acv[0]).abs() < threshold;
    let m_hat = (1..=m_max + 1 - k_n)
        .find(|&m| (m..m + k_n).all(insignificant))
        .unwrap_or_else(|| (1..=m_max).rev().find(|&k| !insignificant(k)).unwrap_or(1));
    let big_m = (2 * m_hat).min(m_max);
    let (g, lrv) = window_sums(&acv, big_m);
    let b_max = (3.0 * nf.sqrt()).min(nf / 3.0).ceil();
    let d_sb = 2.0 * lrv * lrv;
    let d_cb = 4.0 / 3.0 * lrv * lrv;
    let scale = nf.powf(1.0 / 3.0);
    let finish = |d: f64| {
        let b = (2.0 * g * g / d).powf(1.0 / 3.0) * scale;
        // NaN (0/0) can only come from g = g(0) = 0; treat it as "no dependence" (length 1).
        if b.is_nan() { 1.0 } else { b.min(b_max).max(1.0) }
    };
    Ok(BlockLength {
        stationary: finish(d_sb),
        circular: finish(d_cb),
        m_hat,
        bandwidth: big_m,
        b_max,
        g,
        long_run_variance: lrv,
    })
}

/// `(G, g(0))` for autocovariances `acv[0..=M]` and bandwidth `M >= 1`.
fn window_sums(acv: &[f64], big_m: usize) -> (f64, f64) {
    let mut g = 0.0;
    let mut lrv = acv[0];
    for (k, &r) in acv.iter().enumerate().take(big_m + 1).skip(1) {
        let lam = flat_top(k as f64 / big_m as f64);
        g += 2.0 * lam * k as f64 * r;
        lrv += 2.0 * lam * r;
    }
    (g, lrv)
}
