//! The evidence base: every comparison appended to a JSON-lines file, and a per-method
//! summary of how far the methods have landed from experimental truths.
//!
//! ## The interval inflation factor
//!
//! For a record with interval `[l, u]`, centre `m = (l + u) / 2` and half-width
//! `h = (u - l) / 2`, the interval widened about its centre by a factor `c` is
//! `[m - c h, m + c h]`; it holds the truth `θ` exactly when `c >= r`, with
//! `r = |θ - m| / h` the record's *required factor* (`r = 0` when `θ = m`, `r = ∞` when
//! `h = 0` and `θ != m`). Over `n` records of one method, the **inflation factor** is the
//! smallest `c` such that at least a share `level` of the widened intervals cover the truth:
//! `c* = r_(k)`, the `k`-th smallest required factor with `k = ceil(level · n)`.
//! `c* > 1`: the method's intervals have been too narrow (multiply the half-width of a new
//! interval of the same method by `c*` before trusting its nominal level); `c* < 1`: they have
//! been wider than needed. With `n` records the empirical coverage moves in steps of `1/n`,
//! so `c*` is only as good as the number (and variety) of experiments behind it.
//!
//! Records with different levels are summarised separately (the key is method + level).

use crate::error::{CalibrateError, CalibrateResult};
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::Path;

/// One recorded comparison of one method with one experimental truth.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HistoryRecord {
    /// Method.
    pub method: String,
    /// Setting (pool, series, experiment label).
    pub setting: String,
    /// What the truth measures.
    #[serde(default)]
    pub metric: String,
    /// The experimental truth.
    pub truth: f64,
    /// The method's point estimate.
    pub estimate: f64,
    /// Lower end of the method's interval.
    pub lower: f64,
    /// Upper end of the method's interval.
    pub upper: f64,
    /// Level of that interval.
    pub level: f64,
}

impl HistoryRecord {
    /// The factor by which the interval must be widened about its centre to hold the truth.
    pub fn required_factor(&self) -> f64 {
        let m = 0.5 * (self.lower + self.upper);
        let h = 0.5 * (self.upper - self.lower);
        let d = (self.truth - m).abs();
        if d == 0.0 {
            0.0
        } else if h > 0.0 {
            d / h
        } else {
            f64::INFINITY
        }
    }

    /// Whether the stated interval holds the truth.
    pub fn covers(&self) -> bool {
        self.lower <= self.truth && self.truth <= self.upper
    }
}

/// Append records to a JSON-lines file (created if absent), one object per line.
///
/// # Errors
/// [`CalibrateError::Io`] when the file cannot be opened or written.
pub fn append(path: &Path, records: &[HistoryRecord]) -> CalibrateResult<()> {
    let io =
        |source| CalibrateError::Io { path: path.to_path_buf(), what: "cannot append to the history file", source };
    let mut text = String::new();
    for r in records {
        text.push_str(&serde_json::to_string(r).unwrap_or_default());
        text.push('\n');
    }
    // appended in place (a history grows), but never to an input of this run or through a link
    aftercast_core::output::check_output(path)?;
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
        .map_err(|e| aftercast_core::output::output_error(path, e))?;
    f.write_all(text.as_bytes()).map_err(io)?;
    f.flush().map_err(io)
}

/// Read a history file. Blank lines are skipped.
///
/// # Errors
/// [`CalibrateError::Io`]; [`CalibrateError::BadHistory`] naming the line that is not a record
/// or carries a non-finite number or a level outside (0, 1).
pub fn read(path: &Path) -> CalibrateResult<Vec<HistoryRecord>> {
    let bytes = aftercast_core::table::read_input(path)?;
    let text = String::from_utf8(bytes).map_err(|e| CalibrateError::Io {
        path: path.to_path_buf(),
        what: "cannot read the history file",
        source: std::io::Error::new(std::io::ErrorKind::InvalidData, e.utf8_error()),
    })?;
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        let bad = |detail: String| CalibrateError::BadHistory { path: path.to_path_buf(), line: i + 1, detail };
        let r: HistoryRecord = serde_json::from_str(line).map_err(|e| bad(e.to_string()))?;
        for (name, v) in [("truth", r.truth), ("estimate", r.estimate), ("lower", r.lower), ("upper", r.upper)] {
            if !v.is_finite() {
                return Err(bad(format!("{name} is {v}")));
            }
        }
        if r.lower > r.upper {
            return Err(bad(format!("lower {} is above upper {}", r.lower, r.upper)));
        }
        if !(r.level > 0.0 && r.level < 1.0) {
            return Err(bad(format!("level {} is outside (0, 1)", r.level)));
        }
        out.push(r);
    }
    Ok(out)
}

/// Per-method summary over recorded comparisons.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MethodSummary {
    /// Method.
    pub method: String,
    /// Interval level of the records summarised.
    pub level: f64,
    /// Number of records.
    pub records: usize,
    /// Distinct settings among them.
    pub settings: usize,
    /// Mean of estimate - truth.
    pub mean_bias: f64,
    /// Root mean square of estimate - truth.
    pub rmse: f64,
    /// Share of records whose interval holds the truth.
    pub coverage: f64,
    /// Smallest widening factor that reaches `level` coverage (see the module docs).
    pub inflation_factor: f64,
    /// Mean of (estimate - truth) / |truth| over records with a non-zero truth.
    pub mean_relative_bias: Option<f64>,
}

/// Summarise records per method and level, in order of first appearance.
pub fn summarize(records: &[HistoryRecord]) -> Vec<MethodSummary> {
    let mut keys: Vec<(String, f64)> = Vec::new();
    for r in records {
        if !keys.iter().any(|(m, l)| *m == r.method && *l == r.level) {
            keys.push((r.method.clone(), r.level));
        }
    }
    keys.into_iter()
        .map(|(method, level)| {
            let rs: Vec<&HistoryRecord> = records.iter().filter(|r| r.method == method && r.level == level).collect();
            let n = rs.len() as f64;
            let bias: Vec<f64> = rs.iter().map(|r| r.estimate - r.truth).collect();
            let mut settings: Vec<&str> = rs.iter().map(|r| r.setting.as_str()).collect();
            settings.sort_unstable();
            settings.dedup();
            let rel: Vec<f64> =
                rs.iter().filter(|r| r.truth != 0.0).map(|r| (r.estimate - r.truth) / r.truth.abs()).collect();
            MethodSummary {
                level,
                records: rs.len(),
                settings: settings.len(),
                mean_bias: bias.iter().sum::<f64>() / n,
                rmse: (bias.iter().map(|b| b * b).sum::<f64>() / n).sqrt(),
                coverage: rs.iter().filter(|r| r.covers()).count() as f64 / n,
                inflation_factor: inflation_factor(&rs.iter().map(|r| r.required_factor()).collect::<Vec<_>>(), level),
                mean_relative_bias: (!rel.is_empty()).then(|| rel.iter().sum::<f64>() / rel.len() as f64),
                method,
            }
        })
        .collect()
}

/// The `ceil(level · n)`-th smallest required factor (NaN for no records).
pub fn inflation_factor(required: &[f64], level: f64) -> f64 {
    if required.is_empty() {
        return f64::NAN;
    }
    let mut r = required.to_vec();
    r.sort_by(f64::total_cmp);
    let n = r.len();
    // a tiny tolerance keeps level * n = integer from rounding up (0.9 * 10 = 9.000000000000002)
    let k = ((level * n as f64) - 1e-9).ceil().clamp(1.0, n as f64) as usize;
    r[k - 1]
}

/// The typed diagnostics of a history summary.
#[derive(Debug, Clone, Serialize)]
pub struct HistoryDiagnostics {
    /// What the effect summaries describe.
    pub effect_is: String,
    /// Number of records.
    pub records: usize,
    /// The per-method summary.
    pub history_summary: Vec<MethodSummary>,
}

/// The one estimate of a history summary: the biases (estimate minus truth) of every record as
/// the draws, each against its truth's magnitude (so the relative effect is the relative bias
/// and a ROPE in percent judges it), the per-method summary as diagnostics.
///
/// # Errors
/// [`CalibrateError::BadParameter`] when there are no records.
pub fn estimate(records: &[HistoryRecord]) -> CalibrateResult<aftercast_core::Estimate<HistoryDiagnostics>> {
    use aftercast_core::estimate::{Per, Point, Scope};
    if records.is_empty() {
        return Err(CalibrateError::BadParameter {
            name: "--summarize",
            value: String::new(),
            detail: "a history with at least one comparison".into(),
        });
    }
    let bias: Vec<f64> = records.iter().map(|r| r.estimate - r.truth).collect();
    let scale: Vec<f64> = records.iter().map(|r| r.truth.abs()).collect();
    let n = records.len() as f64;
    let mut est = aftercast_core::Estimate::new(
        "compare",
        "history-summary",
        "bias of observational methods (estimate minus experimental truth)",
        Point::Scalar { effect: bias.iter().sum::<f64>() / n, baseline: Some(scale.iter().sum::<f64>() / n) },
        aftercast_core::EffectDraws::Scalar { effect: bias, baseline: Some(scale) },
        Scope { per: Per::Comparison, units: records.len() },
        HistoryDiagnostics {
            effect_is: "estimate minus truth over every recorded comparison; relative = bias / |truth|".into(),
            records: records.len(),
            history_summary: summarize(records),
        },
    );
    est.assumptions = vec!["Past experiments are a fair sample of the situations the methods will be used in.".into()];
    Ok(est)
}
