//! The one estimate: what every estimator hands back, before any summary is taken.
//!
//! An [`Estimate`] holds the estimator's own point answer ([`Point`]), its draws
//! ([`EffectDraws`]), the [`Scope`] of the numbers, the method's typed diagnostics (`D`, one
//! type per method family), typed figure data ([`Figures`]), warnings and assumptions. The
//! summary path in `aftercast-resample` turns an estimate plus the [`Inference`] options into
//! the result document, the terminal summary and the report's inputs; nothing else summarises
//! draws or applies the ROPE.

use crate::error::DataError;
use crate::result::{
    BalanceRow, EffectDraws, EstimateRow, PathPoint, PlaceboSummary, Planning, Rope, SampleCounts, Summary, UnitWeight,
};
use serde::{Deserialize, Serialize};

/// The one default seed of every verb and library entry point.
pub const DEFAULT_SEED: u64 = 20_240_601;
/// The default interval level.
pub const DEFAULT_LEVEL: f64 = 0.9;
/// The default number of draws.
pub const DEFAULT_DRAWS: usize = 1000;

/// How uncertainty is drawn and summarised; defined once, used by every verb.
///
/// | field | default | meaning | allowed |
/// | --- | --- | --- | --- |
/// | `level` | 0.9 | level of every interval (and of the HDI the verdict is judged on) | (0, 1) |
/// | `draws` | 1000 | posterior, bootstrap or simulation draws | 10..=10,000,000 |
/// | `seed` | 20240601 | seed of every random stream | any |
/// | `rope` | +-1% relative | region of practical equivalence | low < high |
/// | `threshold` | none | effect whose exceedance chance is reported (outcome units) | finite |
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Inference {
    /// Interval level.
    pub level: f64,
    /// Number of draws.
    pub draws: usize,
    /// Seed of every random stream.
    pub seed: u64,
    /// Region of practical equivalence of the verdict.
    pub rope: Rope,
    /// Optional threshold (outcome units) for the chance the average effect exceeds it.
    pub threshold: Option<f64>,
}

impl Default for Inference {
    fn default() -> Self {
        Inference {
            level: DEFAULT_LEVEL,
            draws: DEFAULT_DRAWS,
            seed: DEFAULT_SEED,
            rope: Rope::default(),
            threshold: None,
        }
    }
}

impl Inference {
    /// Check the ranges.
    ///
    /// # Errors
    /// [`DataError::BadArgument`] naming the flag.
    pub fn check(&self) -> Result<(), DataError> {
        let bad = |what: &str, text: String, detail: &str| DataError::BadArgument {
            what: what.to_string(),
            text,
            detail: detail.to_string(),
        };
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(bad("--level", self.level.to_string(), "strictly between 0 and 1"));
        }
        if !(10..=10_000_000).contains(&self.draws) {
            return Err(bad("--draws", self.draws.to_string(), "between 10 and 10000000"));
        }
        if let Some(t) = self.threshold
            && !t.is_finite()
        {
            return Err(bad("--threshold", t.to_string(), "a finite number"));
        }
        if !(self.rope.low.is_finite() && self.rope.high.is_finite() && self.rope.low < self.rope.high) {
            return Err(bad(
                "--rope",
                format!("{}:{}", self.rope.low, self.rope.high),
                "finite bounds with low < high",
            ));
        }
        Ok(())
    }
}

/// What one number of the `average` summary is per.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Per {
    /// Per post-period (a series; with several treated units, of their combined path).
    Period,
    /// Per treated unit (a unit-level estimand such as the ATT).
    Unit,
    /// Summed over all treated units.
    AllTreated,
    /// Per recorded comparison (a history of method-versus-experiment comparisons).
    Comparison,
    /// Per adopted unit and period (a rollout: the average over every unit-period after
    /// adoption that the estimate covers); `units` counts those unit-periods.
    UnitPeriod,
}

/// The scope of the numbers: what `average` is per, and how many treated units stand behind it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Scope {
    /// What `average` is per.
    pub per: Per,
    /// Treated units behind the numbers (1 for a single series).
    pub units: usize,
}

impl Scope {
    /// One series, or one treated unit.
    pub fn series() -> Scope {
        Scope { per: Per::Period, units: 1 }
    }

    /// Words for the `average` row: "per period", "per period and treated unit", "per treated unit".
    pub fn average_label(&self) -> &'static str {
        match (self.per, self.units) {
            (Per::Period, 1) => "per period",
            (Per::Period, _) => "per period, per treated unit",
            (Per::Unit, _) => "per treated unit",
            (Per::AllTreated, _) => "all treated units",
            (Per::Comparison, _) => "per comparison",
            (Per::UnitPeriod, _) => "per adopted unit and period",
        }
    }

    /// Words for the `cumulative` row.
    pub fn cumulative_label(&self) -> &'static str {
        match (self.per, self.units) {
            (Per::Period, 1) => "total over the post-period",
            (Per::Period, _) => "post-period total, per treated unit",
            (Per::Unit | Per::AllTreated, _) => "total over the treated units",
            (Per::Comparison, _) => "total over the comparisons",
            (Per::UnitPeriod, _) => "total over the adopted unit-periods",
        }
    }
}

/// The estimator's own point answer, in the form of its draws.
#[derive(Debug, Clone, PartialEq)]
pub enum Point {
    /// A series method: the point counterfactual path over the post-period (the actual
    /// synthetic path, the forecast's median path), aligned with the draws' periods.
    Path(Vec<f64>),
    /// A unit-level estimand: the point effect and its counterfactual mean, if meaningful.
    Scalar {
        /// The point effect (e.g. the matching ATT).
        effect: f64,
        /// The counterfactual mean the relative effect is taken against.
        baseline: Option<f64>,
    },
}

/// A total over all treated units, when several stand behind a series estimate: the point is
/// the sum of the units' own effects over the post-period; the draws are the point plus
/// `units` times the deviation of each draw's per-unit total from its point (exact for a plain
/// mean of the treated units; for a size-weighted mean it assumes a common effect).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TotalRule {
    /// Number of treated units summed.
    pub units: usize,
    /// Sum of the units' own post-period effects.
    pub point: f64,
}

/// One named curve over the periods of a result's path (e.g. a placebo gap).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NamedCurve {
    /// Its name (a donor unit, a method).
    pub name: String,
    /// One value per period of the path (pre and post).
    pub values: Vec<f64>,
}

/// Counts of propensity scores per bin, before and after adjustment.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct PropensityHistogram {
    /// Bin edges (one more than the counts).
    pub edges: Vec<f64>,
    /// Treated share per bin, before.
    pub treated_before: Vec<f64>,
    /// Control share per bin, before.
    pub control_before: Vec<f64>,
    /// Treated share per bin, after.
    pub treated_after: Vec<f64>,
    /// Control share per bin, after.
    pub control_after: Vec<f64>,
}

/// How a conclusion weakens with hidden bias (Rosenbaum bounds).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct SensitivityCurve {
    /// Odds ratios of hidden bias.
    pub gamma: Vec<f64>,
    /// Upper bound of the p-value at each gamma.
    pub p_upper: Vec<f64>,
    /// Significance level of the curve.
    pub alpha: f64,
}

/// Typed data for the figures of a result, beyond its summaries and draws.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Figures {
    /// Placebo gaps of a synthetic control, one per kept donor run.
    pub placebo_gaps: Vec<NamedCurve>,
    /// Propensity-score histogram of a matching or weighting estimate.
    pub propensity: Option<PropensityHistogram>,
    /// Rosenbaum sensitivity curve.
    pub sensitivity: Option<SensitivityCurve>,
}

/// Sections of the result that only some verbs fill.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Sections {
    /// Pre-period rows of a series path (the in-sample fit), shown before the post rows.
    pub pre_path: Vec<PathPoint>,
    /// Donor weights.
    pub weights: Option<Vec<UnitWeight>>,
    /// Placebo-in-space summary.
    pub placebo: Option<PlaceboSummary>,
    /// Balance table.
    pub balance: Option<Vec<BalanceRow>>,
    /// Counts of a unit-level analysis.
    pub sample: Option<SampleCounts>,
    /// A comparison's experimental truth.
    pub truth: Option<Summary>,
    /// A comparison's rows, one per method and setting.
    pub estimates: Option<Vec<EstimateRow>>,
    /// A plan's power, minimum detectable effects and waits.
    pub planning: Option<Planning>,
    /// The effect broken down by event time, wave, calendar period, segment or placebo date,
    /// each row with draws aligned with the main draws.
    pub breakdowns: Vec<BreakdownInput>,
}

/// One row of a breakdown before it is summarised.
#[derive(Debug, Clone, PartialEq)]
pub struct PartInput {
    /// What the row is (an event time "-2", a wave's start, a segment's value).
    pub label: String,
    /// Its position on a numeric axis (event time, shift), if it has one.
    pub key: Option<f64>,
    /// The estimator's point answer for the row.
    pub point: f64,
    /// Draws, the same resamples (by index) as the main draws; empty when the row has none.
    pub draws: Vec<f64>,
    /// Units behind the row.
    pub units: usize,
    /// A short note (e.g. "reference period", "too few units").
    pub note: Option<String>,
}

/// Which joint question a breakdown answers from its draws.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum JointQuestion {
    /// Are the rows of `rows` all zero? (e.g. the leads before adoption)
    AllZero,
    /// Are the rows all equal? (e.g. segment effects)
    AllEqual,
}

/// A breakdown of the effect before it is summarised.
#[derive(Debug, Clone, PartialEq)]
pub struct BreakdownInput {
    /// What the rows are by: `event-time`, `wave`, `calendar`, `segment`, `placebo-date`.
    pub by: String,
    /// A title in words.
    pub title: String,
    /// The rows.
    pub rows: Vec<PartInput>,
    /// A joint question over some rows (indices into `rows`), answered from the draws.
    pub joint: Option<(JointQuestion, Vec<usize>)>,
    /// Units resampled as clusters by the draws, when few enough to matter (the joint test then
    /// uses an F reference with clusters − 1 denominator degrees of freedom).
    pub clusters: Option<usize>,
}

/// What every estimator returns: one typed value from which every output is built.
#[derive(Debug, Clone)]
pub struct Estimate<D> {
    /// The verb (forecast, synthetic, match, compare, backtest).
    pub verb: String,
    /// The method within the verb.
    pub method: String,
    /// The estimand in words (ATT, effect on the series over the post-period, ...).
    pub estimand: String,
    /// The estimator's own point answer.
    pub point: Point,
    /// The draws.
    pub draws: EffectDraws,
    /// What the numbers are per.
    pub scope: Scope,
    /// The total over all treated units, when several stand behind a series estimate.
    pub total: Option<TotalRule>,
    /// The family's typed diagnostics.
    pub diagnostics: D,
    /// Optional sections of the result.
    pub sections: Sections,
    /// Typed figure data.
    pub figures: Figures,
    /// Plain-language warnings, each once.
    pub warnings: Vec<String>,
    /// The assumptions the estimate rests on, in plain words.
    pub assumptions: Vec<String>,
}

impl<D> Estimate<D> {
    /// An estimate with empty sections, figures, warnings and assumptions.
    pub fn new(
        verb: &str,
        method: &str,
        estimand: &str,
        point: Point,
        draws: EffectDraws,
        scope: Scope,
        diagnostics: D,
    ) -> Self {
        Estimate {
            verb: verb.to_string(),
            method: method.to_string(),
            estimand: estimand.to_string(),
            point,
            draws,
            scope,
            total: None,
            diagnostics,
            sections: Sections::default(),
            figures: Figures::default(),
            warnings: Vec::new(),
            assumptions: Vec::new(),
        }
    }

    /// Add a warning unless the same text is there already.
    pub fn warn(&mut self, text: impl Into<String>) {
        let t = text.into();
        if !self.warnings.contains(&t) {
            self.warnings.push(t);
        }
    }
}

/// Per-draw values of the summarised quantities, kept beside result.json so that charts (and
/// users) see the real distributions. Every vector has one entry per draw (or is empty).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct KeptDraws {
    /// Average effect (per period or per unit, as the scope says).
    pub average: Vec<f64>,
    /// Cumulative effect.
    pub cumulative: Vec<f64>,
    /// Relative effect (fraction of the counterfactual).
    pub relative: Vec<f64>,
    /// Total over all treated units.
    pub total: Vec<f64>,
}

impl KeptDraws {
    /// The columns by name, in file order, leaving out empty ones.
    pub fn columns(&self) -> Vec<(&'static str, &[f64])> {
        [
            ("average", self.average.as_slice()),
            ("cumulative", self.cumulative.as_slice()),
            ("relative", self.relative.as_slice()),
            ("total", self.total.as_slice()),
        ]
        .into_iter()
        .filter(|(_, v)| !v.is_empty())
        .collect()
    }
}
