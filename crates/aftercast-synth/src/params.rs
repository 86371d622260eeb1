//! Parameters: a builder ([`SynthParams`]) checked into [`ValidParams`], which fits.
//!
//! | parameter | default | meaning | allowed |
//! | --- | --- | --- | --- |
//! | `method` | `weights` | estimator, see [`Method`] | any |
//! | `placebo` | `true` | run placebo in space (needed for p-value and intervals) | bool |
//! | `placebo_exclude_factor` | none | drop placebos whose pre-RMSPE exceeds k times the treated unit's | k > 0 |
//! | `min_pre_periods` | 3 | fewest pre-periods accepted | ≥ 2 |
//! | `min_donors` | 2 | fewest donors accepted | ≥ 2 |
//! | `exclude` | none | units left out of the donor pool | unit names |
//! | `end` | none | last post-period used | a period of the panel |
//! | `predictors` | none | covariates averaged over the pre-period (`predictors` method) | covariate names |
//! | `predictor_outcome_blocks` | 3 | the pre-period outcome is averaged over this many equal blocks and each average is a predictor (`predictors` method; balance table) | 1..=24 |
//! | `ridge_lambda` | CV | ridge penalty of the augmented synthetic control; `None` = cross-validated | ≥ 0 |
//! | `cv_folds` | min(5, T0/3) | hold-out periods at the end of the pre-period for the ridge CV | ≥ 1 |
//! | `sdid_placebo_reps` | 200 | placebo replications for the SDID variance with one treated unit | ≥ 20 |
//! | `aggregate` | mean | how several treated units are combined, see [`Aggregation`] | any |
//! | `inference` | level 0.9, seed 20240601 | [`Inference`]: level of the intervals, seed of every random step (SDID placebo sets, permutation sets) | level in (0, 1) |
//! | `solver` | tol 1e-10 | simplex QP solver options | tol in (0, 1e-3] |

use crate::error::{SynthError, SynthResult};
use crate::simplex::SimplexOptions;
use aftercast_core::estimate::Inference;
use aftercast_core::time::TimePoint;
use serde::{Deserialize, Serialize};

/// The estimator.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Non-negative donor weights summing to one that minimise the pre-period outcome misfit.
    #[default]
    Weights,
    /// Predictor-matching synthetic control with an importance matrix V chosen to minimise the
    /// pre-period outcome MSPE (Abadie, Diamond & Hainmueller 2010).
    Predictors,
    /// Demeaned synthetic control: weights on demeaned outcomes plus a level shift
    /// (Doudchenko & Imbens 2016; Ferman & Pinto 2021).
    Intercept,
    /// Augmented synthetic control with a ridge outcome model (Ben-Michael, Feller & Rothstein 2021).
    Ridge,
    /// Synthetic difference-in-differences (Arkhangelsky, Athey, Hirshberg, Imbens & Wager 2021).
    Sdid,
}

impl Method {
    /// The name used on the command line and in results.
    pub fn name(self) -> &'static str {
        match self {
            Method::Weights => "weights",
            Method::Predictors => "predictors",
            Method::Intercept => "intercept",
            Method::Ridge => "ridge",
            Method::Sdid => "sdid",
        }
    }
}

impl std::str::FromStr for Method {
    type Err = SynthError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().to_ascii_lowercase().as_str() {
            "weights" => Ok(Method::Weights),
            "predictors" => Ok(Method::Predictors),
            "intercept" => Ok(Method::Intercept),
            "ridge" => Ok(Method::Ridge),
            "sdid" => Ok(Method::Sdid),
            _ => Err(SynthError::BadParameter {
                name: "method",
                value: s.to_string(),
                detail: "one of weights, predictors, intercept, ridge, sdid".into(),
            }),
        }
    }
}

/// How the paths of several treated units are combined.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Aggregation {
    /// Plain mean over treated units.
    #[default]
    Mean,
    /// Mean weighted by a per-unit size (e.g. population or revenue); one value per treated unit,
    /// in the order the treated units are given.
    Weighted(Vec<f64>),
    /// Mean weighted by each treated unit's pre-period mean of this panel column (a size such
    /// as population or store count).
    BySize(String),
}

/// Unchecked parameters (a builder).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SynthParams {
    /// The estimator.
    pub method: Method,
    /// Run placebo in space.
    pub placebo: bool,
    /// Drop placebos whose pre-RMSPE exceeds this multiple of the treated unit's.
    pub placebo_exclude_factor: Option<f64>,
    /// Level, draws, seed, ROPE and threshold (one definition for every verb).
    pub inference: Inference,
    /// Fewest pre-periods accepted.
    pub min_pre_periods: usize,
    /// Fewest donors accepted.
    pub min_donors: usize,
    /// Units left out of the donor pool.
    pub exclude: Vec<String>,
    /// Last post-period used.
    pub end: Option<TimePoint>,
    /// Covariates used as predictors (averaged over the pre-period).
    pub predictors: Vec<String>,
    /// Number of pre-period outcome block averages used as predictors.
    pub predictor_outcome_blocks: usize,
    /// Fixed ridge penalty (None: cross-validated).
    pub ridge_lambda: Option<f64>,
    /// Hold-out periods for the ridge cross-validation (None: min(5, T0/3)).
    pub cv_folds: Option<usize>,
    /// Placebo replications of the SDID variance (one treated unit).
    pub sdid_placebo_reps: usize,
    /// How several treated units are combined.
    pub aggregate: Aggregation,
    /// Simplex solver options.
    pub solver: SimplexOptions,
}

impl Default for SynthParams {
    fn default() -> Self {
        Self {
            method: Method::Weights,
            placebo: true,
            placebo_exclude_factor: None,
            inference: Inference::default(),
            min_pre_periods: 3,
            min_donors: 2,
            exclude: Vec::new(),
            end: None,
            predictors: Vec::new(),
            predictor_outcome_blocks: 3,
            ridge_lambda: None,
            cv_folds: None,
            sdid_placebo_reps: 200,
            aggregate: Aggregation::Mean,
            solver: SimplexOptions::default(),
        }
    }
}

macro_rules! setter {
    ($(#[$m:meta])* $name:ident: $t:ty) => {
        $(#[$m])*
        pub fn $name(mut self, v: $t) -> Self {
            self.$name = v;
            self
        }
    };
}

impl SynthParams {
    /// Defaults (method `weights`, placebo on, level 0.9).
    pub fn new() -> Self {
        Self::default()
    }
    setter!(/// Set the method.
        method: Method);
    setter!(/// Run placebo in space or not.
        placebo: bool);
    setter!(/// Exclude placebos with pre-RMSPE above k times the treated unit's.
        placebo_exclude_factor: Option<f64>);
    setter!(/// Level, draws, seed, ROPE and threshold at once.
        inference: Inference);
    /// Set the interval level.
    pub fn level(mut self, v: f64) -> Self {
        self.inference.level = v;
        self
    }
    /// Set the seed.
    pub fn seed(mut self, v: u64) -> Self {
        self.inference.seed = v;
        self
    }
    setter!(/// Set the fewest pre-periods accepted.
        min_pre_periods: usize);
    setter!(/// Set the fewest donors accepted.
        min_donors: usize);
    setter!(/// Units to leave out of the donor pool.
        exclude: Vec<String>);
    setter!(/// Last post-period used.
        end: Option<TimePoint>);
    setter!(/// Covariate predictors.
        predictors: Vec<String>);
    setter!(/// Number of pre-period outcome block averages used as predictors.
        predictor_outcome_blocks: usize);
    setter!(/// Fixed ridge penalty.
        ridge_lambda: Option<f64>);
    setter!(/// Ridge CV hold-out periods.
        cv_folds: Option<usize>);
    setter!(/// SDID placebo replications.
        sdid_placebo_reps: usize);
    setter!(/// Aggregation of several treated units.
        aggregate: Aggregation);
    setter!(/// Solver options.
        solver: SimplexOptions);

    /// Check every parameter.
    ///
    /// # Errors
    /// [`SynthError::BadParameter`] naming the parameter and its allowed range.
    pub fn check(self) -> SynthResult<ValidParams> {
        let bad = |name: &'static str, value: String, detail: &str| {
            Err(SynthError::BadParameter { name, value, detail: detail.to_string() })
        };
        if !(self.inference.level > 0.0 && self.inference.level < 1.0) {
            return bad("level", self.inference.level.to_string(), "must lie strictly between 0 and 1");
        }
        if let Some(k) = self.placebo_exclude_factor
            && !(k.is_finite() && k > 0.0)
        {
            return bad("placebo_exclude_factor", k.to_string(), "must be a positive number");
        }
        if self.min_pre_periods < 2 {
            return bad("min_pre_periods", self.min_pre_periods.to_string(), "must be at least 2");
        }
        if self.min_donors < 2 {
            return bad("min_donors", self.min_donors.to_string(), "must be at least 2");
        }
        if !(1..=24).contains(&self.predictor_outcome_blocks) {
            // each block is a dimension of the predictor-importance search
            return bad(
                "--outcome-blocks",
                self.predictor_outcome_blocks.to_string(),
                "between 1 and 24 (each block is a dimension of the predictor-importance search)",
            );
        }
        if let Some(l) = self.ridge_lambda
            && !(l.is_finite() && l >= 0.0)
        {
            return bad("ridge_lambda", l.to_string(), "must be a finite number >= 0");
        }
        if self.cv_folds == Some(0) {
            return bad("cv_folds", "0".into(), "must be at least 1");
        }
        if self.sdid_placebo_reps < 20 {
            return bad("sdid_placebo_reps", self.sdid_placebo_reps.to_string(), "must be at least 20");
        }
        if let Aggregation::Weighted(w) = &self.aggregate
            && (w.iter().any(|v| !(v.is_finite() && *v >= 0.0)) || w.iter().sum::<f64>() <= 0.0)
        {
            return bad("aggregate", format!("{w:?}"), "sizes must be finite, non-negative and not all zero");
        }
        let tol = self.solver.tolerance;
        if !(tol > 0.0 && tol <= 1e-3) {
            return bad("solver.tolerance", tol.to_string(), "must lie in (0, 1e-3]");
        }
        if self.solver.max_iterations == 0 {
            return bad("solver.max_iterations", "0".into(), "must be at least 1");
        }
        Ok(ValidParams(self))
    }
}

/// Checked parameters; [`ValidParams::fit`](crate::ValidParams::fit) runs the estimator.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidParams(pub(crate) SynthParams);

impl ValidParams {
    /// The parameters.
    pub fn get(&self) -> &SynthParams {
        &self.0
    }

    /// The same parameters for a placebo run of a plan: the window ends at `end`, the units
    /// in `exclude` also leave the donor pool, and the draws use `seed`.
    pub fn for_placebo(&self, end: TimePoint, exclude: &[String], seed: u64) -> ValidParams {
        let mut p = self.0.clone();
        p.end = Some(end);
        for u in exclude {
            if !p.exclude.contains(u) {
                p.exclude.push(u.clone());
            }
        }
        p.inference.seed = seed;
        ValidParams(p)
    }
}
