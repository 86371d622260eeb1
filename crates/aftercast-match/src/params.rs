//! Parameters of a propensity-score analysis: a builder, checked into [`ValidParams`].
//!
//! | parameter | default | meaning | allowed |
//! | --- | --- | --- | --- |
//! | `covariates` | (required) | numeric or categorical columns of the propensity model | at least one |
//! | `terms` | none | derived terms (`age^2`, `educ:re74`, `zero(re74)`) | see [`crate::design`] |
//! | `method` | `nearest` | estimator | nearest, strata, ipw, overlap, aipw |
//! | `estimand` | `att` | target population | att, ate (overlap: ATO always) |
//! | `k` | 1 | matches per unit | 1..=50 |
//! | `replace` | false | reuse controls | |
//! | `caliper` | 0.2 SD of the logit | largest logit distance | > 0, or none |
//! | `mahalanobis` | false | choose within the caliper by Mahalanobis distance | needs a caliper |
//! | `exact` | none | categorical columns matched exactly | |
//! | `bias_correct` | false | Abadie-Imbens (2011) regression correction | nearest only |
//! | `penalty` | 0 | L2 penalty on standardised coefficients | >= 0 |
//! | `separation` | penalise(1.0) | what to do when the groups separate | |
//! | `trim` | none | common-support trimming before estimation | none, minmax, crump, fixed(a) |
//! | `strata` | 5 | number of propensity strata | 2..=100 |
//! | `inference` | 1000 draws, seed 20240601, level 0.9 | [`Inference`]: Bayesian-bootstrap replicates (weighting) or normal draws (nearest), seed, interval level | draws 50..=100000 |
//! | `pre_outcome` | none | pre-period outcome: estimate on the change (matched DiD) | |
//! | `variance_neighbours` | 2 | J of the Abadie-Imbens conditional variance | 1..=20 |
//! | `alpha` | 0.05 | level of the Rosenbaum bound | (0, 0.5) |
//! | `bins` | 20 | propensity histogram bins | 2..=200 |

use crate::design::{DesignSpec, Term};
use crate::error::{MatchError, MatchResult};
use aftercast_core::estimate::Inference;
use serde::{Deserialize, Serialize};

/// The estimator.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// k:1 nearest-neighbour matching on the logit of the propensity score.
    #[default]
    Nearest,
    /// Subclassification on propensity quantiles.
    Strata,
    /// Normalised inverse probability weighting.
    Ipw,
    /// Overlap weights.
    Overlap,
    /// Augmented IPW (doubly robust) with linear outcome models.
    Aipw,
}

impl Method {
    /// The name as on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Method::Nearest => "nearest",
            Method::Strata => "strata",
            Method::Ipw => "ipw",
            Method::Overlap => "overlap",
            Method::Aipw => "aipw",
        }
    }
}

impl std::str::FromStr for Method {
    type Err = MatchError;
    fn from_str(s: &str) -> MatchResult<Self> {
        match s.trim().to_ascii_lowercase().as_str() {
            "nearest" => Ok(Method::Nearest),
            "strata" => Ok(Method::Strata),
            "ipw" => Ok(Method::Ipw),
            "overlap" => Ok(Method::Overlap),
            "aipw" => Ok(Method::Aipw),
            _ => Err(MatchError::BadParameter {
                name: "--method",
                value: s.into(),
                detail: "one of nearest, strata, ipw, overlap, aipw".into(),
            }),
        }
    }
}

/// The target population.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "UPPERCASE")]
pub enum Estimand {
    /// Average effect on the treated.
    #[default]
    Att,
    /// Average effect over everyone.
    Ate,
}

impl std::str::FromStr for Estimand {
    type Err = MatchError;
    fn from_str(s: &str) -> MatchResult<Self> {
        match s.trim().to_ascii_lowercase().as_str() {
            "att" => Ok(Estimand::Att),
            "ate" => Ok(Estimand::Ate),
            _ => Err(MatchError::BadParameter { name: "--estimand", value: s.into(), detail: "att or ate".into() }),
        }
    }
}

/// The caliper.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Caliper {
    /// No caliper.
    None,
    /// This many standard deviations of the logit of the propensity score (all units).
    SdOfLogit(f64),
}

impl Default for Caliper {
    /// 0.2 SD of the logit (Austin 2011, Pharm. Stat. 10:150-161).
    fn default() -> Self {
        Caliper::SdOfLogit(0.2)
    }
}

/// Common-support trimming applied before estimation (the propensity model is then re-fitted
/// on the units kept).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Trim {
    /// Keep everyone.
    #[default]
    None,
    /// Keep units whose propensity lies inside both groups' ranges.
    MinMax,
    /// Crump, Hotz, Imbens & Mitnik (2009) optimal limits alpha <= e <= 1 - alpha.
    Crump,
    /// Fixed limits a <= e <= 1 - a.
    Fixed(f64),
}

impl std::str::FromStr for Trim {
    type Err = MatchError;
    fn from_str(s: &str) -> MatchResult<Self> {
        let t = s.trim().to_ascii_lowercase();
        match t.as_str() {
            "none" => Ok(Trim::None),
            "minmax" | "min-max" => Ok(Trim::MinMax),
            "crump" => Ok(Trim::Crump),
            other => other.parse::<f64>().map(Trim::Fixed).map_err(|_| MatchError::BadParameter {
                name: "--trim",
                value: s.into(),
                detail: "none, minmax, crump, or a number a in (0, 0.5) for a <= e <= 1-a".into(),
            }),
        }
    }
}

/// What to do when the propensity model separates the groups.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SeparationPolicy {
    /// Warn and refit with this L2 penalty on the standardised coefficients.
    Penalise(f64),
    /// Refuse with [`MatchError::Separation`].
    Error,
}

impl std::str::FromStr for Caliper {
    type Err = String;
    /// `none`, or a width in standard deviations of the logit of the propensity score.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let t = s.trim();
        if t.eq_ignore_ascii_case("none") {
            return Ok(Caliper::None);
        }
        match t.parse::<f64>() {
            Ok(v) if v.is_finite() && v > 0.0 => Ok(Caliper::SdOfLogit(v)),
            _ => Err(format!("'{t}' is not a caliper (a positive width in SDs of the logit, or none)")),
        }
    }
}

impl std::str::FromStr for SeparationPolicy {
    type Err = String;
    /// `penalise` (refit with penalty 1 and warn) or `error`.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim() {
            "penalise" | "penalize" => Ok(SeparationPolicy::Penalise(1.0)),
            "error" => Ok(SeparationPolicy::Error),
            other => Err(format!("'{other}' is not a separation policy (penalise, error)")),
        }
    }
}

impl Default for SeparationPolicy {
    fn default() -> Self {
        SeparationPolicy::Penalise(1.0)
    }
}

/// The parameter builder. Every field has a default except the covariates.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct MatchParams {
    /// Covariates (numeric or categorical) of the propensity model.
    pub covariates: Vec<String>,
    /// Derived terms.
    pub terms: Vec<Term>,
    /// Estimator.
    pub method: Method,
    /// Estimand.
    pub estimand: Estimand,
    /// Matches per unit.
    pub k: usize,
    /// Match with replacement.
    pub replace: bool,
    /// Caliper.
    pub caliper: Caliper,
    /// Mahalanobis distance within the caliper.
    pub mahalanobis: bool,
    /// Exact-matching categorical columns.
    pub exact: Vec<String>,
    /// Bias-corrected matching.
    pub bias_correct: bool,
    /// L2 penalty of the propensity model.
    pub penalty: f64,
    /// Separation policy.
    pub separation: SeparationPolicy,
    /// Trimming rule.
    pub trim: Trim,
    /// Number of strata.
    pub strata: usize,
    /// Level, draws, seed, ROPE and threshold (one definition for every verb).
    pub inference: Inference,
    /// Pre-period outcome column (matched difference-in-differences).
    pub pre_outcome: Option<String>,
    /// J of the Abadie-Imbens conditional variance.
    pub variance_neighbours: usize,
    /// Level of the Rosenbaum bound.
    pub alpha: f64,
    /// Histogram bins.
    pub bins: usize,
}

impl MatchParams {
    /// Defaults for the given covariates.
    pub fn new<S: Into<String>>(covariates: impl IntoIterator<Item = S>) -> Self {
        MatchParams {
            covariates: covariates.into_iter().map(Into::into).collect(),
            terms: Vec::new(),
            method: Method::Nearest,
            estimand: Estimand::Att,
            k: 1,
            replace: false,
            caliper: Caliper::default(),
            mahalanobis: false,
            exact: Vec::new(),
            bias_correct: false,
            penalty: 0.0,
            separation: SeparationPolicy::default(),
            trim: Trim::None,
            strata: 5,
            inference: Inference::default(),
            pre_outcome: None,
            variance_neighbours: 2,
            alpha: 0.05,
            bins: 20,
        }
    }

    /// Add derived terms.
    pub fn terms(mut self, terms: impl IntoIterator<Item = Term>) -> Self {
        self.terms.extend(terms);
        self
    }

    /// The columns a unit table must hold for these parameters: the outcome (and the pre-period
    /// outcome), the covariates read as numbers unless named in `categorical` (exact-matching
    /// columns are categorical), and every column a term's factors name.
    pub fn unit_spec(
        &self,
        treatment: &str,
        outcome: &str,
        categorical: &[String],
        id: Option<String>,
        missing: aftercast_core::MissingPolicy,
    ) -> aftercast_core::units::UnitSpec {
        let mut categorical = categorical.to_vec();
        for e in &self.exact {
            if !categorical.contains(e) {
                categorical.push(e.clone());
            }
        }
        let mut outcomes = vec![outcome.to_string()];
        outcomes.extend(self.pre_outcome.iter().cloned());
        let mut numeric: Vec<String> = self.covariates.iter().filter(|c| !categorical.contains(c)).cloned().collect();
        for t in &self.terms {
            for f in &t.factors {
                let name = f.column();
                if !numeric.iter().any(|n| n == name)
                    && !categorical.iter().any(|c| c == name)
                    && !outcomes.iter().any(|o| o == name)
                {
                    numeric.push(name.to_string());
                }
            }
        }
        aftercast_core::units::UnitSpec {
            id,
            treatment: treatment.to_string(),
            outcomes,
            numeric,
            categorical,
            missing,
        }
    }

    /// Add squares of these covariates (`--squares a,b`).
    pub fn squares<S: AsRef<str>>(mut self, names: impl IntoIterator<Item = S>) -> Self {
        self.terms.extend(names.into_iter().map(|n| Term::square(n.as_ref().trim())));
        self
    }

    /// Add products given as `a:b` (`--interact a:b,c:d`).
    ///
    /// # Errors
    /// [`MatchError::BadTerm`] when a pair is not `a:b`.
    pub fn interact<S: AsRef<str>>(mut self, pairs: impl IntoIterator<Item = S>) -> MatchResult<Self> {
        for p in pairs {
            let p = p.as_ref();
            match p.split_once(':') {
                Some((a, b)) if !a.trim().is_empty() && !b.trim().is_empty() && !b.contains(':') => {
                    self.terms.push(Term::product(a.trim(), b.trim()))
                }
                _ => {
                    return Err(MatchError::BadTerm { text: p.into(), detail: "an interaction is written a:b".into() });
                }
            }
        }
        Ok(self)
    }

    /// Set the method.
    pub fn method(mut self, m: Method) -> Self {
        self.method = m;
        self
    }
    /// Set the estimand.
    pub fn estimand(mut self, e: Estimand) -> Self {
        self.estimand = e;
        self
    }
    /// Set k.
    pub fn k(mut self, k: usize) -> Self {
        self.k = k;
        self
    }
    /// Match with or without replacement.
    pub fn replace(mut self, r: bool) -> Self {
        self.replace = r;
        self
    }
    /// Set the caliper.
    pub fn caliper(mut self, c: Caliper) -> Self {
        self.caliper = c;
        self
    }
    /// Use the Mahalanobis distance within the caliper.
    pub fn mahalanobis(mut self, m: bool) -> Self {
        self.mahalanobis = m;
        self
    }
    /// Match exactly on these categorical columns.
    pub fn exact<S: Into<String>>(mut self, cols: impl IntoIterator<Item = S>) -> Self {
        self.exact = cols.into_iter().map(Into::into).collect();
        self
    }
    /// Bias-corrected matching.
    pub fn bias_correct(mut self, b: bool) -> Self {
        self.bias_correct = b;
        self
    }
    /// L2 penalty.
    pub fn penalty(mut self, p: f64) -> Self {
        self.penalty = p;
        self
    }
    /// Separation policy.
    pub fn separation(mut self, s: SeparationPolicy) -> Self {
        self.separation = s;
        self
    }
    /// Trimming rule.
    pub fn trim(mut self, t: Trim) -> Self {
        self.trim = t;
        self
    }
    /// Number of strata.
    pub fn strata(mut self, s: usize) -> Self {
        self.strata = s;
        self
    }
    /// Replicates / draws.
    pub fn draws(mut self, d: usize) -> Self {
        self.inference.draws = d;
        self
    }
    /// Seed.
    pub fn seed(mut self, s: u64) -> Self {
        self.inference.seed = s;
        self
    }
    /// Level, draws, seed, ROPE and threshold at once.
    pub fn inference(mut self, inf: Inference) -> Self {
        self.inference = inf;
        self
    }
    /// Pre-period outcome column.
    pub fn pre_outcome(mut self, c: impl Into<String>) -> Self {
        self.pre_outcome = Some(c.into());
        self
    }

    /// Check every parameter.
    ///
    /// # Errors
    /// [`MatchError::BadParameter`] or [`MatchError::Unsupported`] naming the parameter.
    pub fn check(self) -> MatchResult<ValidParams> {
        let bad = |name: &'static str, value: String, detail: &str| {
            Err(MatchError::BadParameter { name, value, detail: detail.into() })
        };
        if self.covariates.is_empty() {
            return bad("--covariates", String::new(), "at least one covariate is needed");
        }
        if !(1..=50).contains(&self.k) {
            return bad("--k", self.k.to_string(), "between 1 and 50");
        }
        if let Caliper::SdOfLogit(c) = self.caliper
            && !(c.is_finite() && c > 0.0)
        {
            return bad("--caliper", c.to_string(), "a positive number of standard deviations of the logit");
        }
        if !(self.penalty.is_finite() && self.penalty >= 0.0) {
            return bad("--penalty", self.penalty.to_string(), "zero or positive");
        }
        if let SeparationPolicy::Penalise(l) = self.separation
            && !(l.is_finite() && l > 0.0)
        {
            return bad("--separation-penalty", l.to_string(), "positive");
        }
        if let Trim::Fixed(a) = self.trim
            && !(a > 0.0 && a < 0.5)
        {
            return bad("--trim", a.to_string(), "a fixed limit a must satisfy 0 < a < 0.5");
        }
        if !(2..=100).contains(&self.strata) {
            return bad("--strata", self.strata.to_string(), "between 2 and 100");
        }
        if !(50..=100_000).contains(&self.inference.draws) {
            return bad("--draws", self.inference.draws.to_string(), "between 50 and 100000");
        }
        if !(self.inference.level > 0.0 && self.inference.level < 1.0) {
            return bad("--level", self.inference.level.to_string(), "strictly between 0 and 1");
        }
        if !(1..=20).contains(&self.variance_neighbours) {
            return bad("variance_neighbours", self.variance_neighbours.to_string(), "between 1 and 20");
        }
        if !(self.alpha > 0.0 && self.alpha < 0.5) {
            return bad("alpha", self.alpha.to_string(), "between 0 and 0.5");
        }
        if !(2..=200).contains(&self.bins) {
            return bad("bins", self.bins.to_string(), "between 2 and 200");
        }
        if self.mahalanobis && self.caliper == Caliper::None {
            return Err(MatchError::Unsupported {
                detail: "Mahalanobis matching is done within a caliper; give --caliper".into(),
            });
        }
        if self.method != Method::Nearest && (self.bias_correct || self.mahalanobis || !self.exact.is_empty()) {
            return Err(MatchError::Unsupported {
                detail: format!(
                    "bias adjustment, Mahalanobis distance and exact matching apply to --method nearest, not {}",
                    self.method.name()
                ),
            });
        }
        if self.method == Method::Nearest && self.estimand == Estimand::Ate && !self.replace {
            return Err(MatchError::Unsupported {
                detail: "the ATE by matching matches both groups to each other and needs --replace".into(),
            });
        }
        let mut seen = std::collections::HashSet::new();
        for c in &self.covariates {
            if !seen.insert(c.clone()) {
                return bad("--covariates", c.clone(), "named twice");
            }
        }
        Ok(ValidParams(self))
    }
}

/// Checked parameters; [`ValidParams::fit`] runs the analysis.
#[derive(Debug, Clone, Serialize)]
pub struct ValidParams(pub(crate) MatchParams);

impl ValidParams {
    /// The parameters.
    pub fn params(&self) -> &MatchParams {
        &self.0
    }

    /// The propensity design specification.
    pub fn design_spec(&self) -> DesignSpec {
        DesignSpec { covariates: self.0.covariates.clone(), terms: self.0.terms.clone() }
    }
}
