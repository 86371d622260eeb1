//! The Bayesian bootstrap (Rubin 1981, "The Bayesian bootstrap", Ann. Statist. 9:130-134).
//!
//! Each replicate puts Dirichlet(1, ..., 1) weights on the observed units and evaluates the
//! statistic under those weights: a weighted mean, a ratio of weighted sums, a weighted
//! quantile, or a contrast between groups that each get their own Dirichlet (stratified by
//! group). Dirichlet(1, ..., 1) weights are realised as independent Exp(1) draws divided by their
//! sum, so a replicate never needs the normalised weights: a weighted mean is
//! `sum w x / sum w` over the raw Exp(1) draws `w`.
//!
//! # Streaming
//!
//! No draws x units matrix is ever held. Replicate `i` makes one pass over the (prepared) data
//! with its own stream [`crate::rng::Stream::new`]`(seed, i)`; replicates run in parallel through
//! [`crate::rng::par_draws`], so a seed gives bit-identical draws for any number of threads.
//! Memory is the data plus, for quantiles only, one weight buffer per running thread.
//!
//! # Exact tie aggregation
//!
//! A value that appears `k` times gets `k` Exp(1) weights; only their sum enters any statistic
//! of the values (the units are exchangeable within the tie), and the sum of `k` independent
//! Exp(1) variables is exactly Gamma(k, 1). So the data are compressed once to distinct values
//! ("atoms") with counts, and each atom gets ONE Gamma(k, 1) weight per replicate. The draws have
//! exactly the same distribution as per-unit weights (not an approximation), while a metric
//! where 90% of users spend nothing costs per distinct value instead of per unit.
//! [`TieAggregation`] says when to compress.
//!
//! Data are sorted once when prepared, so results do not depend on the order of the input
//! units.
//!
//! # Examples
//!
//! ```
//! use aftercast_resample::bayes::BayesBootstrap;
//! let treated = [0.0, 0.0, 3.0, 5.0, 0.0, 8.0];
//! let control = [0.0, 1.0, 0.0, 2.0, 0.0, 0.0, 4.0];
//! let draws = BayesBootstrap::new(1000, 42).two_groups(&treated, &control)?;
//! assert_eq!(draws.difference.len(), 1000);
//! let relative = draws.relative()?; // (treated - control) / control, per draw
//! assert!(relative.iter().all(|r| r.is_finite()));
//! # Ok::<(), aftercast_resample::bayes::BayesError>(())
//! ```

use crate::rng::{Stream, par_draws};
use rand::Rng;
use rand_distr::{Distribution, Exp1, Gamma};
use std::collections::HashMap;

/// Relative cost of one Gamma(k, 1) draw (k >= 2, Marsaglia-Tsang) to one Exp(1) draw
/// (ziggurat), used by [`TieAggregation::Auto`]. Measured with the resampling benchmark on the
/// shared development machine: 2.65 (k = 2) and 2.51 (k = 50) in the quietest run, 1.7-3.4
/// under load (docs/performance.md, "Resampling"). Only speed depends on it, never the
/// draws' distribution.
pub const GAMMA_COST: f64 = 2.5;

/// When to compress tied values into one Gamma(k, 1) weight per distinct value.
///
/// Compression is exact in every mode: it changes the cost, never the distribution of the
/// draws (it does change which random numbers are used, so draws are reproducible per mode).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum TieAggregation {
    /// Compress when it is cheaper: when `singletons + GAMMA_COST * tied_atoms < units`.
    #[default]
    Auto,
    /// Always compress to distinct values.
    Always,
    /// Never compress: one Exp(1) weight per unit.
    Never,
}

/// Everything that can be wrong with the input of a Bayesian bootstrap.
///
/// Groups are numbered by their position in the call: for single-sample functions the sample is
/// group 0; for [`BayesBootstrap::two_groups`] treated is group 0 and control group 1; for the
/// stratified functions, the position in the slice of groups.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum BayesError {
    /// A group has no units.
    #[error("group {group} has no units: the Bayesian bootstrap needs at least one observation")]
    EmptyGroup {
        /// The group.
        group: usize,
    },
    /// A value is NaN or infinite.
    #[error("group {group}, unit {index}: value {value} is not a finite number")]
    NonFinite {
        /// The group.
        group: usize,
        /// 0-based position of the unit within the group as given.
        index: usize,
        /// The offending value.
        value: f64,
    },
    /// The numerator and denominator of a ratio have different lengths.
    #[error("group {group}: numerator has {numerator} units but denominator has {denominator}")]
    LengthMismatch {
        /// The group.
        group: usize,
        /// Number of numerator values.
        numerator: usize,
        /// Number of denominator values.
        denominator: usize,
    },
    /// Every denominator value is zero, so every replicate's denominator sum is zero.
    #[error("group {group}: all {units} denominator values are zero; the ratio is undefined")]
    ZeroDenominator {
        /// The group whose values form the denominator.
        group: usize,
        /// Number of units in that group.
        units: usize,
    },
    /// One replicate gave a non-finite statistic (e.g. a denominator sum of exactly zero for a
    /// denominator with values of both signs).
    #[error("replicate {replicate}: the statistic is {value} (its denominator is zero or the statistic overflowed)")]
    NonFiniteDraw {
        /// 0-based replicate index.
        replicate: usize,
        /// The value the replicate produced.
        value: f64,
    },
    /// A quantile probability outside [0, 1].
    #[error("quantile probability {p} is outside [0, 1]")]
    InvalidProbability {
        /// The probability given.
        p: f64,
    },
    /// Zero replicates were requested.
    #[error("the number of draws must be at least 1")]
    NoDraws,
}

/// How one atom's weight is drawn.
#[derive(Debug, Clone, Copy)]
enum Shape {
    /// A single unit: Exp(1) (ziggurat).
    Exp,
    /// `k >= 2` tied units: Gamma(k, 1).
    Gamma(Gamma<f64>),
}

impl Shape {
    #[inline]
    fn sample<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        match self {
            Shape::Exp => Exp1.sample(rng),
            Shape::Gamma(g) => g.sample(rng),
        }
    }
}

/// Weight layout of a prepared sample: per atom, which [`Shape`] to draw.
#[derive(Debug, Clone)]
struct Atoms {
    /// Per atom, an index into `table`; empty means every atom is one unit (Exp(1)).
    kinds: Vec<u32>,
    /// Distinct shapes (one per distinct count).
    table: Vec<Shape>,
    /// Units per atom (empty means all ones).
    counts: Vec<u64>,
}

impl Atoms {
    fn singles() -> Self {
        Atoms { kinds: Vec::new(), table: Vec::new(), counts: Vec::new() }
    }

    fn from_counts(counts: Vec<u64>) -> Self {
        let mut index: HashMap<u64, u32> = HashMap::new();
        let mut table = Vec::new();
        let kinds = counts
            .iter()
            .map(|&k| {
                *index.entry(k).or_insert_with(|| {
                    table.push(if k == 1 {
                        Shape::Exp
                    } else {
                        // k >= 2 here: Gamma::new cannot fail for a finite shape >= 1.
                        Shape::Gamma(Gamma::new(k as f64, 1.0).unwrap_or_else(|_| unreachable!()))
                    });
                    (table.len() - 1) as u32
                })
            })
            .collect();
        Atoms { kinds, table, counts }
    }

    /// Calls `f(atom, raw_weight)` for every atom in order, drawing the weights from `rng`.
    #[inline]
    fn for_each<R: Rng + ?Sized>(&self, n_atoms: usize, rng: &mut R, mut f: impl FnMut(usize, f64)) {
        if self.kinds.is_empty() {
            for j in 0..n_atoms {
                let w: f64 = Exp1.sample(rng);
                f(j, w);
            }
        } else {
            for (j, &k) in self.kinds.iter().enumerate() {
                let w = self.table[k as usize].sample(rng);
                f(j, w);
            }
        }
    }
}

/// Sorts `keys` (with the unit index carried along) and checks finiteness. Returns the sorted
/// values.
fn checked_sorted(values: &[f64], group: usize) -> Result<Vec<f64>, BayesError> {
    if values.is_empty() {
        return Err(BayesError::EmptyGroup { group });
    }
    if let Some((index, &value)) = values.iter().enumerate().find(|(_, v)| !v.is_finite()) {
        return Err(BayesError::NonFinite { group, index, value });
    }
    let mut v = values.to_vec();
    v.sort_unstable_by(f64::total_cmp);
    Ok(v)
}

/// Whether to compress, given the run lengths of the sorted data.
fn decide(ties: TieAggregation, units: usize, counts: &[u64]) -> bool {
    match ties {
        TieAggregation::Always => true,
        TieAggregation::Never => false,
        TieAggregation::Auto => {
            let singles = counts.iter().filter(|&&k| k == 1).count() as f64;
            let tied = (counts.len() as f64) - singles;
            singles + GAMMA_COST * tied < units as f64
        }
    }
}

/// One group's data prepared for the Bayesian bootstrap: sorted, checked, and (depending on
/// the [`TieAggregation`]) compressed to distinct values with counts.
///
/// # Examples
///
/// ```
/// use aftercast_resample::bayes::{Sample, TieAggregation};
/// use aftercast_resample::rng::Stream;
/// let s = Sample::new(&[0.0, 0.0, 0.0, 2.0, 5.0], TieAggregation::Always)?;
/// assert_eq!(s.atoms(), 3); // 0 (three units), 2, 5
/// let mut rng = Stream::new(1, 0);
/// let m = s.draw_mean(&mut rng);
/// assert!((0.0..=5.0).contains(&m));
/// # Ok::<(), aftercast_resample::bayes::BayesError>(())
/// ```
#[derive(Debug, Clone)]
pub struct Sample {
    values: Vec<f64>,
    atoms: Atoms,
    units: usize,
    min: f64,
    max: f64,
}

impl Sample {
    /// Prepare the values of group 0.
    ///
    /// # Errors
    /// [`BayesError::EmptyGroup`] for no values, [`BayesError::NonFinite`] for NaN or infinity.
    pub fn new(values: &[f64], ties: TieAggregation) -> Result<Self, BayesError> {
        Self::for_group(values, ties, 0)
    }

    /// Prepare the values of group `group` (the number only labels errors).
    ///
    /// # Errors
    /// As [`Sample::new`].
    pub fn for_group(values: &[f64], ties: TieAggregation, group: usize) -> Result<Self, BayesError> {
        let sorted = checked_sorted(values, group)?;
        let units = sorted.len();
        let (min, max) = (sorted[0], sorted[units - 1]);
        let mut distinct: Vec<f64> = Vec::new();
        let mut counts: Vec<u64> = Vec::new();
        for &v in &sorted {
            match distinct.last() {
                // `==` merges -0.0 and 0.0, which total_cmp sorts next to each other.
                Some(&last) if last == v => *counts.last_mut().unwrap_or_else(|| unreachable!()) += 1,
                _ => {
                    distinct.push(v);
                    counts.push(1);
                }
            }
        }
        let compress = decide(ties, units, &counts) && distinct.len() < units;
        let (values, atoms) =
            if compress { (distinct, Atoms::from_counts(counts)) } else { (sorted, Atoms::singles()) };
        Ok(Sample { values, atoms, units, min, max })
    }

    /// Number of units.
    pub fn units(&self) -> usize {
        self.units
    }

    /// Number of atoms (weights drawn per replicate): distinct values when compressed, units
    /// otherwise.
    pub fn atoms(&self) -> usize {
        self.values.len()
    }

    /// Whether tied values were compressed.
    pub fn is_compressed(&self) -> bool {
        !self.atoms.kinds.is_empty()
    }

    /// The atoms' values, ascending.
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// Units per atom.
    pub fn counts(&self) -> Vec<u64> {
        if self.atoms.counts.is_empty() { vec![1; self.values.len()] } else { self.atoms.counts.clone() }
    }

    /// Draw one replicate's raw weights and return `(sum w, sum w x)` (unnormalised: the
    /// weighted mean is the ratio). One pass over the atoms.
    pub fn draw_sums<R: Rng + ?Sized>(&self, rng: &mut R) -> (f64, f64) {
        let mut sw = 0.0;
        let mut swx = 0.0;
        let vals = &self.values;
        self.atoms.for_each(vals.len(), rng, |j, w| {
            sw += w;
            swx += w * vals[j];
        });
        (sw, swx)
    }

    /// One replicate of the Dirichlet-weighted mean. The result is clamped to the data range
    /// (it lies there exactly; the clamp only removes last-bit rounding).
    pub fn draw_mean<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        let (sw, swx) = self.draw_sums(rng);
        (swx / sw).clamp(self.min, self.max)
    }

    /// One replicate's normalised Dirichlet weights, one per atom (summing to one). With
    /// compression an atom's weight is the total weight of its tied units.
    pub fn draw_weights<R: Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        let mut w = Vec::with_capacity(self.values.len());
        self.atoms.for_each(self.values.len(), rng, |_, x| w.push(x));
        let total: f64 = w.iter().sum();
        w.iter_mut().for_each(|x| *x /= total);
        w
    }

    /// One replicate of weighted quantiles at the probabilities `ps` (each in [0, 1], any
    /// order). The weighted quantile is the inverse of the weighted empirical distribution
    /// function: the smallest value `x_j` whose cumulative weight reaches `p` times the total.
    pub fn draw_quantiles<R: Rng + ?Sized>(&self, rng: &mut R, ps: &[f64]) -> Vec<f64> {
        let n = self.values.len();
        let mut w = Vec::with_capacity(n);
        self.atoms.for_each(n, rng, |_, x| w.push(x));
        let total: f64 = w.iter().sum();
        let mut order: Vec<usize> = (0..ps.len()).collect();
        order.sort_by(|&a, &b| ps[a].total_cmp(&ps[b]));
        let mut out = vec![self.max; ps.len()];
        let mut cum = 0.0;
        let mut j = 0;
        for &q in &order {
            let target = ps[q] * total;
            while j < n {
                cum += w[j];
                if cum >= target {
                    break;
                }
                j += 1;
            }
            // Stay on atom j: the next (larger) probability may also stop here.
            out[q] = self.values[j.min(n - 1)];
            if j < n {
                cum -= w[j];
            }
        }
        out
    }
}

/// A group of (numerator, denominator) pairs prepared for a ratio of weighted sums
/// `sum w a / sum w b` (e.g. revenue per session over users). Tied pairs are compressed like
/// [`Sample`]'s values.
#[derive(Debug, Clone)]
pub struct PairSample {
    num: Vec<f64>,
    den: Vec<f64>,
    atoms: Atoms,
    units: usize,
}

impl PairSample {
    /// Prepare pairs for group `group` (the number only labels errors).
    ///
    /// # Errors
    /// [`BayesError::EmptyGroup`], [`BayesError::LengthMismatch`], [`BayesError::NonFinite`]
    /// (the index is the unit; numerator is checked before denominator),
    /// [`BayesError::ZeroDenominator`] when every denominator is zero.
    pub fn for_group(
        numerator: &[f64],
        denominator: &[f64],
        ties: TieAggregation,
        group: usize,
    ) -> Result<Self, BayesError> {
        if numerator.len() != denominator.len() {
            return Err(BayesError::LengthMismatch {
                group,
                numerator: numerator.len(),
                denominator: denominator.len(),
            });
        }
        if numerator.is_empty() {
            return Err(BayesError::EmptyGroup { group });
        }
        for (index, (&a, &b)) in numerator.iter().zip(denominator).enumerate() {
            for value in [a, b] {
                if !value.is_finite() {
                    return Err(BayesError::NonFinite { group, index, value });
                }
            }
        }
        if denominator.iter().all(|&b| b == 0.0) {
            return Err(BayesError::ZeroDenominator { group, units: denominator.len() });
        }
        let units = numerator.len();
        let mut pairs: Vec<(f64, f64)> = numerator.iter().copied().zip(denominator.iter().copied()).collect();
        pairs.sort_unstable_by(|x, y| x.0.total_cmp(&y.0).then(x.1.total_cmp(&y.1)));
        let mut distinct: Vec<(f64, f64)> = Vec::new();
        let mut counts: Vec<u64> = Vec::new();
        for &p in &pairs {
            match distinct.last() {
                Some(&last) if last.0 == p.0 && last.1 == p.1 => {
                    *counts.last_mut().unwrap_or_else(|| unreachable!()) += 1
                }
                _ => {
                    distinct.push(p);
                    counts.push(1);
                }
            }
        }
        let compress = decide(ties, units, &counts) && distinct.len() < units;
        let (kept, atoms) = if compress { (distinct, Atoms::from_counts(counts)) } else { (pairs, Atoms::singles()) };
        let (num, den) = kept.into_iter().unzip();
        Ok(PairSample { num, den, atoms, units })
    }

    /// Number of units.
    pub fn units(&self) -> usize {
        self.units
    }

    /// Number of atoms (distinct pairs when compressed).
    pub fn atoms(&self) -> usize {
        self.num.len()
    }

    /// One replicate of `sum w a / sum w b` (may be non-finite if the weighted denominator is
    /// exactly zero, which needs denominators of both signs).
    pub fn draw_ratio<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        let (mut sa, mut sb) = (0.0, 0.0);
        let (num, den) = (&self.num, &self.den);
        self.atoms.for_each(num.len(), rng, |j, w| {
            sa += w * num[j];
            sb += w * den[j];
        });
        sa / sb
    }
}

/// Per-draw results of a two-group contrast (each group with its own Dirichlet weights).
#[derive(Debug, Clone, PartialEq)]
pub struct TwoGroupDraws {
    /// Weighted mean of the treated group, per draw.
    pub treated_mean: Vec<f64>,
    /// Weighted mean of the control group, per draw.
    pub control_mean: Vec<f64>,
    /// `treated_mean - control_mean`, per draw.
    pub difference: Vec<f64>,
    control_units: usize,
}

impl TwoGroupDraws {
    /// Relative difference `(treated - control) / control`, computed per draw.
    ///
    /// # Errors
    /// [`BayesError::ZeroDenominator`] (group 1) when every control draw is zero (all control
    /// values zero); [`BayesError::NonFiniteDraw`] when one draw's control mean is exactly zero.
    pub fn relative(&self) -> Result<Vec<f64>, BayesError> {
        if self.control_mean.iter().all(|&c| c == 0.0) {
            return Err(BayesError::ZeroDenominator { group: 1, units: self.control_units });
        }
        let rel: Vec<f64> = self.difference.iter().zip(&self.control_mean).map(|(d, c)| d / c).collect();
        check_finite(&rel)?;
        Ok(rel)
    }
}

fn check_finite(draws: &[f64]) -> Result<(), BayesError> {
    match draws.iter().enumerate().find(|(_, v)| !v.is_finite()) {
        Some((replicate, &value)) => Err(BayesError::NonFiniteDraw { replicate, value }),
        None => Ok(()),
    }
}

/// Settings of a Bayesian bootstrap run.
///
/// | field | default | meaning |
/// | --- | --- | --- |
/// | `draws` | (required) | number of replicates, at least 1 |
/// | `seed` | (required) | replicate `i` uses `Stream::new(seed, i)` |
/// | `ties` | [`TieAggregation::Auto`] | when to compress tied values |
///
/// # Examples
///
/// ```
/// use aftercast_resample::bayes::{BayesBootstrap, TieAggregation};
/// let boot = BayesBootstrap::new(2000, 7).with_ties(TieAggregation::Never);
/// let means = boot.mean(&[1.0, 2.0, 4.0, 7.0, 11.0])?;
/// let avg = means.iter().sum::<f64>() / means.len() as f64;
/// assert!((avg - 5.0).abs() < 0.2);
/// # Ok::<(), aftercast_resample::bayes::BayesError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BayesBootstrap {
    /// Number of replicates.
    pub draws: usize,
    /// Seed of the replicate streams.
    pub seed: u64,
    /// Tie policy.
    pub ties: TieAggregation,
}

impl BayesBootstrap {
    /// `draws` replicates from `seed`, tie policy [`TieAggregation::Auto`].
    pub fn new(draws: usize, seed: u64) -> Self {
        BayesBootstrap { draws, seed, ties: TieAggregation::Auto }
    }

    /// The same settings with another tie policy.
    pub fn with_ties(self, ties: TieAggregation) -> Self {
        BayesBootstrap { ties, ..self }
    }

    fn run<T: Send>(&self, f: impl Fn(&mut Stream) -> T + Sync + Send) -> Result<Vec<T>, BayesError> {
        if self.draws == 0 {
            return Err(BayesError::NoDraws);
        }
        Ok(par_draws(self.seed, self.draws, |_, rng| f(rng)))
    }

    /// Draws of the mean of `x`.
    ///
    /// # Errors
    /// [`BayesError::EmptyGroup`], [`BayesError::NonFinite`], [`BayesError::NoDraws`].
    pub fn mean(&self, x: &[f64]) -> Result<Vec<f64>, BayesError> {
        let s = Sample::new(x, self.ties)?;
        self.run(|rng| s.draw_mean(rng))
    }

    /// Draws of the ratio of sums `sum w a / sum w b` over units.
    ///
    /// # Errors
    /// As [`PairSample::for_group`]; [`BayesError::NonFiniteDraw`] if a replicate's weighted
    /// denominator is exactly zero; [`BayesError::NoDraws`].
    pub fn ratio(&self, numerator: &[f64], denominator: &[f64]) -> Result<Vec<f64>, BayesError> {
        let s = PairSample::for_group(numerator, denominator, self.ties, 0)?;
        let out = self.run(|rng| s.draw_ratio(rng))?;
        check_finite(&out)?;
        Ok(out)
    }

    /// Draws of the weighted `p`-quantile of `x` (see [`Sample::draw_quantiles`]).
    ///
    /// # Errors
    /// As [`BayesBootstrap::quantiles`].
    pub fn quantile(&self, x: &[f64], p: f64) -> Result<Vec<f64>, BayesError> {
        Ok(self.quantiles(x, &[p])?.into_iter().map(|q| q[0]).collect())
    }

    /// Draws of several weighted quantiles at once: `out[draw][k]` is the `ps[k]`-quantile.
    ///
    /// # Errors
    /// [`BayesError::InvalidProbability`] for a probability outside [0, 1], plus the errors of
    /// [`BayesBootstrap::mean`].
    pub fn quantiles(&self, x: &[f64], ps: &[f64]) -> Result<Vec<Vec<f64>>, BayesError> {
        if let Some(&p) = ps.iter().find(|p| !(0.0..=1.0).contains(*p)) {
            return Err(BayesError::InvalidProbability { p });
        }
        let s = Sample::new(x, self.ties)?;
        self.run(|rng| s.draw_quantiles(rng, ps))
    }

    /// Draws of the treated and control means and their difference; each group has its own
    /// Dirichlet weights (treated drawn first within each replicate's stream).
    ///
    /// # Errors
    /// [`BayesError::EmptyGroup`] / [`BayesError::NonFinite`] with group 0 (treated) or 1
    /// (control); [`BayesError::NoDraws`].
    pub fn two_groups(&self, treated: &[f64], control: &[f64]) -> Result<TwoGroupDraws, BayesError> {
        let t = Sample::for_group(treated, self.ties, 0)?;
        let c = Sample::for_group(control, self.ties, 1)?;
        let pairs = self.run(|rng| {
            let mt = t.draw_mean(rng);
            let mc = c.draw_mean(rng);
            (mt, mc)
        })?;
        let (treated_mean, control_mean): (Vec<f64>, Vec<f64>) = pairs.into_iter().unzip();
        let difference = treated_mean.iter().zip(&control_mean).map(|(a, b)| a - b).collect();
        Ok(TwoGroupDraws { treated_mean, control_mean, difference, control_units: c.units() })
    }

    /// Draws of each group's mean, every group with its own Dirichlet weights (stratified by
    /// group): `out[draw][group]`. Groups are drawn in slice order within a replicate's stream.
    ///
    /// # Errors
    /// [`BayesError::EmptyGroup`] / [`BayesError::NonFinite`] naming the group's position;
    /// [`BayesError::NoDraws`].
    pub fn stratified_means(&self, groups: &[&[f64]]) -> Result<Vec<Vec<f64>>, BayesError> {
        let samples = groups
            .iter()
            .enumerate()
            .map(|(g, x)| Sample::for_group(x, self.ties, g))
            .collect::<Result<Vec<_>, _>>()?;
        self.stratified_samples(&samples, |m| m.to_vec())
    }

    /// General stratified statistic: per replicate, every prepared group gets its own Dirichlet
    /// weights, and `f` maps the groups' weighted means (in slice order) to the replicate's
    /// value. Use it for contrasts of several arms, or a population mean re-weighted by known
    /// stratum shares.
    ///
    /// # Errors
    /// [`BayesError::NoDraws`].
    ///
    /// # Examples
    ///
    /// ```
    /// use aftercast_resample::bayes::{BayesBootstrap, Sample, TieAggregation};
    /// let a = Sample::for_group(&[1.0, 2.0, 3.0], TieAggregation::Auto, 0)?;
    /// let b = Sample::for_group(&[10.0, 20.0], TieAggregation::Auto, 1)?;
    /// // population mean with known stratum shares 0.8 / 0.2
    /// let pop = BayesBootstrap::new(500, 1).stratified_samples(&[a, b], |m| 0.8 * m[0] + 0.2 * m[1])?;
    /// assert!(pop.iter().all(|v| (2.8..=6.4).contains(v)));
    /// # Ok::<(), aftercast_resample::bayes::BayesError>(())
    /// ```
    pub fn stratified_samples<T: Send>(
        &self,
        groups: &[Sample],
        f: impl Fn(&[f64]) -> T + Sync + Send,
    ) -> Result<Vec<T>, BayesError> {
        self.run(|rng| {
            let means: Vec<f64> = groups.iter().map(|g| g.draw_mean(rng)).collect();
            f(&means)
        })
    }
}

impl BayesBootstrap {
    /// Stratified ratios of sums: per replicate every prepared pair group gets its own
    /// Dirichlet weights, and `f` maps the groups' ratios `sum w a / sum w b` (in slice order)
    /// to the replicate's value, e.g. the difference in revenue per session between arms.
    ///
    /// # Errors
    /// [`BayesError::NoDraws`]; [`BayesError::NonFiniteDraw`] if a replicate's value is not
    /// finite.
    ///
    /// # Examples
    ///
    /// ```
    /// use aftercast_resample::bayes::{BayesBootstrap, PairSample, TieAggregation};
    /// let t = PairSample::for_group(&[3.0, 0.0, 5.0], &[2.0, 1.0, 2.0], TieAggregation::Auto, 0)?;
    /// let c = PairSample::for_group(&[1.0, 0.0, 2.0, 0.0], &[1.0, 1.0, 2.0, 1.0], TieAggregation::Auto, 1)?;
    /// let diff = BayesBootstrap::new(500, 3).stratified_ratios(&[t, c], |r| r[0] - r[1])?;
    /// assert_eq!(diff.len(), 500);
    /// # Ok::<(), aftercast_resample::bayes::BayesError>(())
    /// ```
    pub fn stratified_ratios(
        &self,
        groups: &[PairSample],
        f: impl Fn(&[f64]) -> f64 + Sync + Send,
    ) -> Result<Vec<f64>, BayesError> {
        let out = self.run(|rng| {
            let ratios: Vec<f64> = groups.iter().map(|g| g.draw_ratio(rng)).collect();
            f(&ratios)
        })?;
        check_finite(&out)?;
        Ok(out)
    }
}

/// Per-unit Dirichlet(1, ..., 1) weights for `n` units (normalised Exp(1) draws). For `n == 0`
/// the result is empty.
///
/// ```
/// use aftercast_resample::{bayes::dirichlet_weights, rng::Stream};
/// let w = dirichlet_weights(4, &mut Stream::new(3, 0));
/// assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12);
/// ```
pub fn dirichlet_weights<R: Rng + ?Sized>(n: usize, rng: &mut R) -> Vec<f64> {
    let mut w: Vec<f64> = (0..n).map(|_| Exp1.sample(rng)).collect();
    let total: f64 = w.iter().sum();
    w.iter_mut().for_each(|x| *x /= total);
    w
}

/// One Exp(1) variate from `rng` (the ziggurat sampler every weight uses); exposed for the
/// RNG-only benchmark and for callers that build their own weighted statistics.
#[inline]
pub fn exp1<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    Exp1.sample(rng)
}
