//! The comparison table: every observational method against the experimental truth.
//!
//! Per method and setting (pool, or series): the point estimate, its interval (equal-tailed,
//! at the options' level), `bias = estimate - truth`, `relative_bias = bias / truth`,
//! `bias_in_truth_sd = bias / sd(truth draws)`, whether the method's interval covers the
//! truth's point value, and whether its verdict word equals the experiment's.

use crate::error::{CalibrateError, CalibrateResult};
use crate::estimators::{MethodEstimate, UnitEstimator};
use crate::history::HistoryRecord;
use crate::sample::{Pool, UnitCompareSpec, observational_sample};
use crate::truth::{Metric, Truth, experiment_truth};
use aftercast_core::estimate::Inference;
use aftercast_core::estimate::{Estimate, Per, Point, Scope};
use aftercast_core::result::{EffectBlock, EffectDraws, EstimateRow, Summary, Verdict};
use aftercast_core::table::InputInfo;
use aftercast_core::units::UnitTable;
use aftercast_resample::{judge, scalar_block};
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value, json};

/// The truth as the table needs it, for unit-level and series-level comparisons alike.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct TruthSummary {
    /// What the truth is ("difference in means of re78", ...).
    pub label: String,
    /// The truth's point value.
    pub point: f64,
    /// Summary of its draws.
    pub summary: Summary,
    /// Effect block.
    pub effect: EffectBlock,
    /// Verdict.
    pub verdict: Verdict,
    /// Further numbers (arm values, counts, allocation).
    pub details: Map<String, Value>,
    /// The truth's draws (effect and control level per draw), for the one summary path.
    #[serde(skip)]
    pub draws: Vec<f64>,
    /// Control level per draw.
    #[serde(skip)]
    pub baseline: Vec<f64>,
    /// The control level at the point.
    #[serde(skip)]
    pub baseline_point: f64,
    /// Units (or periods) the cumulative effect is summed over.
    #[serde(skip)]
    pub units: usize,
}

impl From<&Truth> for TruthSummary {
    fn from(t: &Truth) -> Self {
        let mut details = Map::new();
        details.insert("treated_value".into(), json!(t.treated_value));
        details.insert("control_value".into(), json!(t.control_value));
        details.insert("n_treated".into(), json!(t.n_treated));
        details.insert("n_control".into(), json!(t.n_control));
        let label = match &t.metric {
            Metric::Mean { outcome } => format!("difference in means of {outcome}"),
            Metric::Ratio { numerator, denominator } => format!("difference in {numerator}/{denominator}"),
        };
        TruthSummary {
            label,
            point: t.point,
            summary: t.summary,
            effect: t.effect.clone(),
            verdict: t.verdict,
            details,
            draws: t.draws.clone(),
            baseline: t.baseline.clone(),
            baseline_point: t.control_value,
            units: t.n_treated,
        }
    }
}

/// One row of the comparison table.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ComparisonRow {
    /// Method.
    pub method: String,
    /// Setting (pool name, series).
    pub setting: String,
    /// Estimand the method targets.
    pub estimand: String,
    /// Point estimate.
    pub estimate: f64,
    /// Summary of the method's draws (`estimate` is the point).
    pub summary: Summary,
    /// Estimate minus truth.
    pub bias: f64,
    /// Bias divided by the truth (NaN when the truth is 0).
    pub relative_bias: f64,
    /// Bias divided by the sd of the truth's draws.
    pub bias_in_truth_sd: f64,
    /// Whether the highest-density interval `[summary.hdi_lower, summary.hdi_upper]` (the one
    /// the verdicts are judged on) holds the truth's point value.
    pub covers_truth: bool,
    /// The method's verdict.
    pub verdict: Verdict,
    /// Whether it equals the experiment's verdict.
    pub verdict_agrees: bool,
    /// Method-specific numbers.
    pub diagnostics: Map<String, Value>,
    /// Warnings of the method.
    pub warnings: Vec<String>,
}

impl ComparisonRow {
    /// Build a row from a method's draws. `n_treated` scales the cumulative effect.
    pub fn new(
        method: &str,
        setting: &str,
        est: MethodEstimate,
        truth: &TruthSummary,
        n_treated: Option<usize>,
        opts: &Inference,
    ) -> Self {
        let base_point = est.baseline.as_ref().map(|b| b.iter().sum::<f64>() / b.len().max(1) as f64);
        let (effect, _) = scalar_block(est.point, base_point, &est.draws, est.baseline.as_deref(), n_treated, opts);
        let (verdict, _) = judge(&effect, &opts.rope);
        let summary = effect.average;
        let bias = est.point - truth.point;
        ComparisonRow {
            method: method.into(),
            setting: setting.into(),
            estimand: est.estimand,
            estimate: est.point,
            summary,
            bias,
            relative_bias: if truth.point != 0.0 { bias / truth.point } else { f64::NAN },
            bias_in_truth_sd: if truth.summary.sd > 0.0 { bias / truth.summary.sd } else { f64::NAN },
            covers_truth: summary.hdi_lower <= truth.point && truth.point <= summary.hdi_upper,
            verdict,
            verdict_agrees: verdict == truth.verdict,
            diagnostics: est.diagnostics,
            warnings: est.warnings,
        }
    }

    /// The row in the shared result's form.
    pub fn to_estimate_row(&self) -> EstimateRow {
        EstimateRow {
            method: self.method.clone(),
            setting: self.setting.clone(),
            estimand: self.estimand.clone(),
            summary: self.summary,
            bias: self.bias,
            relative_bias: self.relative_bias,
            bias_in_truth_sd: self.bias_in_truth_sd,
            covers_truth: self.covers_truth,
            verdict: self.verdict,
            verdict_agrees: self.verdict_agrees,
            diagnostics: self.diagnostics.clone(),
            warnings: self.warnings.clone(),
        }
    }
}

/// A method that could not run on a setting (the table goes on without it).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct MethodFailure {
    /// Method.
    pub method: String,
    /// Setting.
    pub setting: String,
    /// The error, as text.
    pub message: String,
}

/// A finished comparison.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Comparison {
    /// The truth.
    pub truth: TruthSummary,
    /// One row per method and setting.
    pub rows: Vec<ComparisonRow>,
    /// Methods that failed.
    pub failures: Vec<MethodFailure>,
    /// Options used.
    pub options: Inference,
    /// Input files.
    pub inputs: Vec<InputInfo>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
    /// "units" or "series".
    pub kind: String,
}

impl Comparison {
    /// One history record per row.
    pub fn history_records(&self) -> Vec<HistoryRecord> {
        self.rows
            .iter()
            .map(|r| HistoryRecord {
                method: r.method.clone(),
                setting: r.setting.clone(),
                metric: self.truth.label.clone(),
                truth: self.truth.point,
                estimate: r.estimate,
                lower: r.summary.lower,
                upper: r.summary.upper,
                level: self.options.level,
            })
            .collect()
    }

    /// The one estimate of a comparison: the experiment's difference as the point, the truth's
    /// draws, the per-method rows as the `estimates` section.
    pub fn estimate(&self) -> Estimate<CompareDiagnostics> {
        let mut warnings = self.warnings.clone();
        for f in &self.failures {
            warnings.push(format!(
                "{} could not run on {} and has no row in the comparison ({}): fix that cause, or leave the method out of --methods",
                f.method, f.setting, f.message
            ));
        }
        let diagnostics = CompareDiagnostics {
            kind: self.kind.clone(),
            truth_label: self.truth.label.clone(),
            truth_point: self.truth.point,
            truth_details: self.truth.details.clone(),
            failed_methods: self.failures.clone(),
        };
        let t = &self.truth;
        let mut est = Estimate::new(
            "compare",
            "experiment",
            if self.kind == "units" { "ATT" } else { "effect on the treated arm" },
            Point::Scalar { effect: t.point, baseline: Some(t.baseline_point) },
            EffectDraws::Scalar { effect: t.draws.clone(), baseline: Some(t.baseline.clone()) },
            Scope { per: Per::Unit, units: t.units },
            diagnostics,
        );
        est.sections.truth = Some(t.summary.with_estimate(t.point));
        est.sections.estimates = Some(self.rows.iter().map(ComparisonRow::to_estimate_row).collect());
        for w in warnings {
            est.warn(w);
        }
        est.assumptions = vec![
            "The experiment's arms were randomized, so their difference is the effect on the treated arm.".into(),
            "The pools describe the same kind of units as the experiment and none of them received the change.".into(),
            "Each observational method is judged by how far its answer lands from the experiment's, on this experiment only.".into(),
        ];
        est
    }
}

/// The typed diagnostics of a comparison.
#[derive(Debug, Clone, Serialize)]
pub struct CompareDiagnostics {
    /// "units" or "series".
    pub kind: String,
    /// What the truth is.
    pub truth_label: String,
    /// The truth's point value.
    pub truth_point: f64,
    /// Arm values, counts, allocation.
    pub truth_details: Map<String, Value>,
    /// Methods that could not run.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub failed_methods: Vec<MethodFailure>,
}

/// Compare every method on every pool against the experiment's truth.
///
/// The truth is the arm difference of `spec.outcome` in `experiment`; each method sees the
/// experiment's treated arm plus one pool as untreated units.
///
/// # Errors
/// Errors of the truth ([`experiment_truth`]) and of building the samples. A method that fails
/// on a pool does not stop the comparison: it is listed in [`Comparison::failures`].
pub fn compare_units(
    experiment: &UnitTable,
    pools: &[Pool],
    spec: &UnitCompareSpec,
    methods: &[&dyn UnitEstimator],
    opts: &Inference,
) -> CalibrateResult<Comparison> {
    opts.check()?;
    if pools.is_empty() {
        return Err(CalibrateError::BadParameter {
            name: "--pool",
            value: String::new(),
            detail: "at least one pool".into(),
        });
    }
    let truth = experiment_truth(experiment, &Metric::Mean { outcome: spec.outcome.clone() }, opts)?;
    let ts = TruthSummary::from(&truth);
    let mut rows = Vec::new();
    let mut failures = Vec::new();
    let mut inputs = vec![experiment.input.clone()];
    let mut warnings = Vec::new();
    if experiment.dropped_rows > 0 {
        warnings.push(format!(
            "{} experiment rows with empty cells were dropped, so the experiment's answer covers the remaining units only: fill those cells if the dropped units matter",
            experiment.dropped_rows
        ));
    }
    for pool in pools {
        inputs.push(pool.input.clone());
        if pool.dropped_rows > 0 {
            warnings.push(format!(
                "{} rows of pool {} with empty cells were dropped, so the methods compare against the remaining rows of that pool only: fill those cells if the dropped units matter",
                pool.dropped_rows, pool.name
            ));
        }
        let sample = observational_sample(experiment, pool, &spec.outcome)?;
        for m in methods {
            let _stage = aftercast_core::progress::stage(format!("{} on {}", m.name(), pool.name), None);
            match m.estimate(&sample, &spec.outcome, &spec.covariates, opts) {
                Ok(est) => rows.push(ComparisonRow::new(&m.name(), &pool.name, est, &ts, Some(truth.n_treated), opts)),
                Err(e) => failures.push(MethodFailure {
                    method: m.name(),
                    setting: pool.name.clone(),
                    message: format!("{e}"),
                }),
            }
        }
    }
    Ok(Comparison { truth: ts, rows, failures, options: *opts, inputs, warnings, kind: "units".into() })
}
