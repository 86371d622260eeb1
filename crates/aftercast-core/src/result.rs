//! The shared result: effect draws, their summaries, the ROPE verdict and the JSON document
//! every verb writes. Summaries are computed in `aftercast-resample`; this module only holds
//! the types so that every crate (and the tests) can read and write them.

use crate::table::InputInfo;
use crate::time::TimePoint;
use serde::{Deserialize, Serialize};

/// Read a number that JSON may hold as `null` (serde_json writes NaN and infinities as null).
fn nullable_f64<'de, D: serde::Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    let v: Option<f64> = Option::deserialize(d)?;
    Ok(v.unwrap_or(f64::NAN))
}

/// Draws of an effect: the common end of every estimator.
#[derive(Debug, Clone)]
pub enum EffectDraws {
    /// A series method: for each draw a whole counterfactual path over the post-period.
    /// `counterfactual[d][t]`; `observed[t]`. Effects are `observed - counterfactual` per draw.
    Path {
        /// Post-period times.
        times: Vec<TimePoint>,
        /// Observed outcome in the post-period.
        observed: Vec<f64>,
        /// Counterfactual draws, one path per draw.
        counterfactual: Vec<Vec<f64>>,
    },
    /// A unit-level estimand (e.g. ATT): one effect per draw, and per draw the counterfactual
    /// mean it is relative to.
    Scalar {
        /// Effect draws.
        effect: Vec<f64>,
        /// Counterfactual level per draw (for the relative effect), if meaningful.
        baseline: Option<Vec<f64>>,
    },
}

/// Summary of one set of draws (the `S` object of the JSON result).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// The method's point answer (where a summary has none of its own, the mean of the draws).
    #[serde(deserialize_with = "nullable_f64")]
    pub estimate: f64,
    /// Mean of the draws.
    #[serde(deserialize_with = "nullable_f64")]
    pub mean: f64,
    /// Median of the draws.
    #[serde(deserialize_with = "nullable_f64")]
    pub median: f64,
    /// Standard deviation of the draws.
    #[serde(deserialize_with = "nullable_f64")]
    pub sd: f64,
    /// Lower end of the equal-tailed interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub lower: f64,
    /// Upper end of the equal-tailed interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub upper: f64,
    /// Lower end of the highest-density interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub hdi_lower: f64,
    /// Upper end of the highest-density interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub hdi_upper: f64,
    /// Share of draws above zero.
    #[serde(deserialize_with = "nullable_f64")]
    pub prob_positive: f64,
    /// Share of draws above the user's threshold, when one is given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub prob_above_threshold: Option<f64>,
}

/// Units of the region of practical equivalence.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RopeUnits {
    /// Percent of the counterfactual (judged on the relative effect).
    Percent,
    /// The outcome's own units (judged on the average effect).
    Outcome,
}

/// The ROPE as given: `--rope 1%` (relative) or `--rope 25` (outcome units).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Rope {
    /// Lower bound (in `units`; percent values are stored as fractions, 1% = 0.01).
    pub low: f64,
    /// Upper bound.
    pub high: f64,
    /// Units of the bounds.
    pub units: RopeUnits,
}

impl Default for Rope {
    fn default() -> Self {
        Rope { low: -0.01, high: 0.01, units: RopeUnits::Percent }
    }
}

impl std::str::FromStr for Rope {
    type Err = String;
    /// `1%` gives [-1%, +1%] relative; `25` gives [-25, +25] in outcome units;
    /// `-2%:1%` or `-10:30` give asymmetric bounds.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let t = s.trim();
        let parse_one = |x: &str| -> Result<(f64, bool), String> {
            let x = x.trim();
            let (num, pct) = match x.strip_suffix('%') {
                Some(n) => (n, true),
                None => (x, false),
            };
            let v: f64 = num.trim().parse().map_err(|_| format!("'{s}' is not a ROPE (examples: 1%, 25, -2%:1%)"))?;
            if !v.is_finite() {
                return Err(format!("'{s}': ROPE bounds must be finite"));
            }
            Ok((if pct { v / 100.0 } else { v }, pct))
        };
        let (low, high, pct) = if let Some((a, b)) = t.split_once(':') {
            let (a, pa) = parse_one(a)?;
            let (b, pb) = parse_one(b)?;
            if pa != pb {
                return Err(format!("'{s}': both ROPE bounds must be in percent or both in outcome units"));
            }
            (a, b, pa)
        } else {
            let (v, p) = parse_one(t)?;
            if v < 0.0 {
                return Err(format!(
                    "'{s}': one value gives a ROPE of plus and minus it; write it positive, or give both bounds (-2%:1%)"
                ));
            }
            (-v, v, p)
        };
        if low >= high {
            return Err(format!("'{s}': the ROPE needs low < high"));
        }
        Ok(Rope { low, high, units: if pct { RopeUnits::Percent } else { RopeUnits::Outcome } })
    }
}

/// The verdict words of the product.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// The interval lies wholly above the ROPE.
    Gain,
    /// The interval lies above zero but reaches into the ROPE.
    GainButSmall,
    /// The interval lies wholly inside the ROPE.
    Negligible,
    /// The interval lies below zero but reaches into the ROPE.
    LossButSmall,
    /// The interval lies wholly below the ROPE.
    Loss,
    /// The interval spans zero and leaves the ROPE.
    Inconclusive,
}

impl Verdict {
    /// The word as printed.
    pub fn word(self) -> &'static str {
        match self {
            Verdict::Gain => "gain",
            Verdict::GainButSmall => "gain-but-small",
            Verdict::Negligible => "negligible",
            Verdict::LossButSmall => "loss-but-small",
            Verdict::Loss => "loss",
            Verdict::Inconclusive => "inconclusive",
        }
    }

    /// One plain sentence for a manager.
    pub fn sentence(self) -> &'static str {
        match self {
            Verdict::Gain => "The change raised the metric by more than the smallest effect that matters.",
            Verdict::GainButSmall => "The change raised the metric, but the rise may be too small to matter.",
            Verdict::Negligible => "Any effect of the change is too small to matter.",
            Verdict::LossButSmall => "The change lowered the metric, but the fall may be too small to matter.",
            Verdict::Loss => "The change lowered the metric by more than the smallest effect that matters.",
            Verdict::Inconclusive => {
                "The data cannot tell whether the change helped, hurt or did nothing that matters."
            }
        }
    }
}

/// Effect summaries: average per period (or per unit), cumulative over the post-period, relative.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EffectBlock {
    /// Average effect per post-period (series) or per unit (unit-level estimand).
    pub average: Summary,
    /// Total effect over the post-period (series) or over the treated units (unit-level).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cumulative: Option<Summary>,
    /// Relative effect: sum of effect / sum of counterfactual, per draw.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub relative: Option<Summary>,
    /// Total over all treated units and post-periods, when several treated units stand behind
    /// a series estimate (see `scope`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub total: Option<Summary>,
}

impl Summary {
    /// The same summary with `estimate` set to the method's point answer.
    pub fn with_estimate(mut self, point: f64) -> Summary {
        self.estimate = point;
        self
    }

    /// The interval the verdict is judged on: the highest-density interval.
    pub fn judged_interval(&self) -> (f64, f64) {
        (self.hdi_lower, self.hdi_upper)
    }
}

/// Which summary the verdict was judged on, and with which interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Judged {
    /// The relative effect (a ROPE in percent of the counterfactual).
    Relative,
    /// The average effect (a ROPE in outcome units).
    Average,
    /// The average effect against zero alone (a percent ROPE without a counterfactual level).
    Sign,
}

/// How the verdict was reached: the quantity and the interval (always the HDI at `level`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct JudgedOn {
    /// The quantity.
    pub quantity: Judged,
    /// The interval: "hdi".
    pub interval: IntervalKind,
}

/// Kinds of interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum IntervalKind {
    /// Highest-density interval.
    Hdi,
}

/// One post- (or pre-) period row of a series result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PathPoint {
    /// The period.
    pub time: TimePoint,
    /// Observed value (`null` when missing).
    pub observed: Option<f64>,
    /// Counterfactual median.
    #[serde(deserialize_with = "nullable_f64")]
    pub counterfactual: f64,
    /// Lower end of the counterfactual interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub lower: f64,
    /// Upper end of the counterfactual interval.
    #[serde(deserialize_with = "nullable_f64")]
    pub upper: f64,
    /// Whether the period is after the change.
    #[serde(default)]
    pub post: bool,
    /// Pointwise effect summary (post-periods only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub effect: Option<Summary>,
    /// Cumulative effect summary up to this period (post-periods only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cumulative: Option<Summary>,
}

/// One donor weight of a synthetic control.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct UnitWeight {
    /// Donor unit.
    pub unit: String,
    /// Its weight.
    #[serde(deserialize_with = "nullable_f64")]
    pub weight: f64,
}

/// Placebo-in-space inference of a synthetic control.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboSummary {
    /// rank / number of units.
    #[serde(deserialize_with = "nullable_f64")]
    pub p_value: f64,
    /// Rank of the treated unit's post/pre RMSPE ratio (1 = largest).
    pub rank: usize,
    /// Number of units in the ranking (treated included).
    pub units: usize,
}

/// The false-positive rate of a plan: the share of placebo runs (where nothing happened) whose
/// interval excluded zero, with its binomial interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FalsePositiveRate {
    /// Share of placebo runs with a false positive.
    #[serde(deserialize_with = "nullable_f64")]
    pub rate: f64,
    /// Lower end of its Wilson score interval at the plan's level.
    #[serde(deserialize_with = "nullable_f64")]
    pub lower: f64,
    /// Upper end.
    #[serde(deserialize_with = "nullable_f64")]
    pub upper: f64,
    /// Placebo runs behind the rate.
    pub placebos: usize,
}

/// Power to see one lift after one wait.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlanPower {
    /// The wait (periods of the series, or units for a unit table).
    pub wait: usize,
    /// The lift (a fraction of the counterfactual: 0.02 = +2%).
    #[serde(deserialize_with = "nullable_f64")]
    pub lift: f64,
    /// Share of placebo runs in which the lift would be seen.
    #[serde(deserialize_with = "nullable_f64")]
    pub power: f64,
}

/// The smallest lift seen at the target power after one wait.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlanMde {
    /// The wait.
    pub wait: usize,
    /// Minimum detectable increase (a fraction), `None` when no lift reaches the target power.
    pub mde: Option<f64>,
}

/// The shortest wait after which a lift is seen at the target power.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct WaitFor {
    /// The lift (a fraction).
    #[serde(deserialize_with = "nullable_f64")]
    pub lift: f64,
    /// Shortest wait from which on the power stays at or above the target, `None` when it is
    /// not reached within the longest wait the data allow.
    pub wait: Option<usize>,
}

/// A lift as a short signed percent: 0.02 is "+2%", 0.005 "+0.5%", -0.05 "-5%".
pub fn lift_text(l: f64) -> String {
    if !l.is_finite() {
        return "n/a".into();
    }
    let pct = 100.0 * l;
    let text = if (pct - pct.round()).abs() < 1e-9 { format!("{:.0}", pct.abs()) } else { format!("{:.1}", pct.abs()) };
    format!("{}{text}%", if l < 0.0 { "-" } else { "+" })
}

/// A count with thousands separators: 100000 is "100,000".
pub fn count_text(n: usize) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// The answer of a plan: how long to wait (or how many units to have) to see a change of a
/// given size, from placebo runs of the analysis's own set-up.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Planning {
    /// Interval level of the analysis being planned.
    #[serde(deserialize_with = "nullable_f64")]
    pub level: f64,
    /// Target power.
    #[serde(deserialize_with = "nullable_f64")]
    pub target_power: f64,
    /// What one step of `wait` is: "days", "weeks", "months", "quarters", "periods" or "units".
    pub wait_unit: String,
    /// The false-positive rate at the level.
    pub false_positive_rate: FalsePositiveRate,
    /// Power per wait and lift.
    pub power: Vec<PlanPower>,
    /// Minimum detectable increase per wait.
    pub mde: Vec<PlanMde>,
    /// Shortest wait per lift.
    pub wait_for: Vec<WaitFor>,
    /// The longest wait the placebo runs could check.
    pub longest_wait: usize,
    /// The answer in plain words, one sentence per lift.
    pub answer: Vec<String>,
}

/// One covariate's balance before and after adjustment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BalanceRow {
    /// Covariate (or derived term) name.
    pub covariate: String,
    /// Standardised mean difference before adjustment.
    #[serde(deserialize_with = "nullable_f64")]
    pub smd_before: f64,
    /// Standardised mean difference after adjustment.
    #[serde(deserialize_with = "nullable_f64")]
    pub smd_after: f64,
    /// Variance ratio before adjustment (treated / control).
    #[serde(default)]
    #[serde(deserialize_with = "nullable_f64")]
    pub var_ratio_before: f64,
    /// Variance ratio after adjustment.
    #[serde(deserialize_with = "nullable_f64")]
    pub var_ratio_after: f64,
}

/// Counts of a unit-level analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SampleCounts {
    /// Treated units in the data.
    pub treated: usize,
    /// Control units that received weight or a match.
    pub controls_used: usize,
    /// Treated units left out (no match within the caliper, trimmed).
    pub treated_dropped: usize,
}

/// One row of a comparison against a randomized experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EstimateRow {
    /// Method name.
    pub method: String,
    /// Setting (pool name, series).
    pub setting: String,
    /// Estimand the method targets.
    pub estimand: String,
    /// Its summary (`summary.estimate` is the method's point answer).
    pub summary: Summary,
    /// Estimate minus truth.
    #[serde(deserialize_with = "nullable_f64")]
    pub bias: f64,
    /// Bias divided by the truth (null when the truth is 0).
    #[serde(deserialize_with = "nullable_f64")]
    pub relative_bias: f64,
    /// Bias divided by the sd of the truth's draws.
    #[serde(deserialize_with = "nullable_f64")]
    pub bias_in_truth_sd: f64,
    /// Whether its highest-density interval covers the experimental estimate.
    pub covers_truth: bool,
    /// The method's verdict.
    pub verdict: Verdict,
    /// Whether it equals the experiment's verdict.
    pub verdict_agrees: bool,
    /// Method-specific numbers.
    #[serde(default)]
    pub diagnostics: serde_json::Map<String, serde_json::Value>,
    /// Warnings of the method.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
}

/// The JSON document every verb writes (`--json FILE`, `DIR/result.json`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AnalysisResult {
    /// Version of aftercast that wrote it.
    pub tool_version: String,
    /// The verb (forecast, synthetic, match, compare, backtest).
    pub verb: String,
    /// The method within the verb.
    pub method: String,
    /// Interval level, e.g. 0.9.
    #[serde(deserialize_with = "nullable_f64")]
    pub level: f64,
    /// The seed that reproduces the run.
    pub seed: u64,
    /// Input files with hashes and row counts.
    pub inputs: Vec<InputInfo>,
    /// ATT, ATE, or the series estimand.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub estimand: Option<String>,
    /// The label of the outcome's units as the analyst gave it (`--outcome-unit`: "$",
    /// "orders"); shown beside every number in outcome units. Absent: plain numbers.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub outcome_unit: Option<String>,
    /// What the numbers are per.
    pub scope: crate::estimate::Scope,
    /// Effect summaries.
    pub effect: EffectBlock,
    /// The verdict word.
    pub verdict: Verdict,
    /// Which summary and interval the verdict was judged on.
    pub judged_on: JudgedOn,
    /// The ROPE used.
    pub rope: Rope,
    /// The threshold whose exceedance chance `effect.average.prob_above_threshold` gives.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<f64>,
    /// Method-specific diagnostics.
    pub diagnostics: serde_json::Map<String, serde_json::Value>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// Series verbs: counterfactual path.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub path: Option<Vec<PathPoint>>,
    /// `synthetic`: donor weights.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub weights: Option<Vec<UnitWeight>>,
    /// `synthetic`: placebo-in-space inference.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub placebo: Option<PlaceboSummary>,
    /// `match`: balance table.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub balance: Option<Vec<BalanceRow>>,
    /// `match`: counts.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sample: Option<SampleCounts>,
    /// `compare`: the experimental truth.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub truth: Option<Summary>,
    /// `compare`: one row per observational method.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub estimates: Option<Vec<EstimateRow>>,
    /// `plan`: power, minimum detectable effects and waits.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub planning: Option<Planning>,
    /// The effect by event time, wave, calendar period, segment or placebo date.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub breakdowns: Vec<Breakdown>,
    /// The assumptions the estimate rests on, in plain words.
    #[serde(default)]
    pub assumptions: Vec<String>,
}

/// One row of a breakdown: its label, position, units and summary.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BreakdownRow {
    /// What the row is (an event time, a wave's start, a segment's value).
    pub label: String,
    /// Its position on a numeric axis (event time, shift), if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub key: Option<f64>,
    /// Units behind the row.
    pub units: usize,
    /// The summary of the row's draws (estimate = the method's point answer).
    pub summary: Summary,
    /// A short note.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

/// The answer to a joint question over rows of a breakdown, from the draws: a Wald statistic
/// with the draws' covariance, its chi-square p-value, and for `all-equal` the chance that the
/// row with the highest point answer truly exceeds the one with the lowest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct JointTest {
    /// `all-zero` or `all-equal`.
    pub question: crate::estimate::JointQuestion,
    /// Labels of the rows tested.
    pub rows: Vec<String>,
    /// Wald statistic.
    #[serde(deserialize_with = "nullable_f64")]
    pub statistic: f64,
    /// Degrees of freedom.
    pub df: usize,
    /// Denominator degrees of freedom when the draws resample few clusters (units): the
    /// p-value is then the F(df, df_denominator) tail of statistic / df.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub df_denominator: Option<usize>,
    /// Tail probability of the statistic (chi-square, or F with clusters).
    #[serde(deserialize_with = "nullable_f64")]
    pub p_value: f64,
    /// `all-equal`: the share of draws in which the highest row exceeds the lowest.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub prob_order: Option<f64>,
}

/// The effect broken down by one dimension.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Breakdown {
    /// `event-time`, `wave`, `calendar`, `segment`, `placebo-date`.
    pub by: String,
    /// Title in words.
    pub title: String,
    /// Rows in order.
    pub rows: Vec<BreakdownRow>,
    /// The joint question answered from the draws, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub test: Option<JointTest>,
}

/// The version string written into results.
pub const TOOL_VERSION: &str = env!("CARGO_PKG_VERSION");
