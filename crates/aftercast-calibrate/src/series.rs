//! Series-level comparison: a past experiment recorded as totals per period of each arm.
//!
//! **Truth.** With treated-arm share `a_t` and control-arm share `a_c` of the traffic, the
//! control arm scaled to the treated arm's size is `(a_t / a_c) C_t`; the effect on the treated
//! arm in period `t` of the test window is `d_t = T_t - (a_t / a_c) C_t`. The truth is the
//! average per period `mean_t d_t`, its relative form `sum T / sum (a_t/a_c) C - 1`, and its
//! interval a Bayesian bootstrap over the window's periods (periods treated as exchangeable
//! draws of the arms' noise; serial correlation would make it too narrow).
//!
//! **Observational estimates.** Each [`PathModel`] is fitted on the treated arm's own
//! pre-period, as if the change had gone to everyone, and draws counterfactual paths of the
//! window; the effect per draw is `mean_t (T_t - cf_t)`. Forecast models may use control
//! series the change did not touch; synthetic-control models get the donor segments as
//! controls.

use crate::backtest::PathModel;
use crate::compare::{Comparison, ComparisonRow, MethodFailure, TruthSummary};
use crate::error::{CalibrateError, CalibrateResult};
use crate::estimators::MethodEstimate;
use aftercast_core::estimate::Inference;
use aftercast_core::table::InputInfo;
use aftercast_resample::rng::child_seed;
use aftercast_resample::{judge, scalar_block};
use serde_json::{Map, json};

/// A past experiment as arm totals per period.
#[derive(Debug, Clone)]
pub struct ArmSeries {
    /// Label of the experiment (the setting of the table rows).
    pub name: String,
    /// Treated-arm total per period.
    pub treated: Vec<f64>,
    /// Control-arm total per period.
    pub control: Vec<f64>,
    /// Share of units in the treated arm.
    pub treated_share: f64,
    /// Share of units in the control arm.
    pub control_share: f64,
    /// First period of the test window.
    pub window_start: usize,
    /// End of the test window (exclusive).
    pub window_end: usize,
    /// Control series untouched by the change (for forecast models), full length.
    pub controls: Vec<(String, Vec<f64>)>,
    /// Donor segments untouched by the change (for synthetic-control models), full length.
    pub donors: Vec<(String, Vec<f64>)>,
    /// Input files.
    pub inputs: Vec<InputInfo>,
}

impl ArmSeries {
    fn check(&self) -> CalibrateResult<()> {
        let n = self.treated.len();
        let bad = |name: &'static str, value: String, detail: String| {
            Err(CalibrateError::BadParameter { name, value, detail })
        };
        if self.control.len() != n {
            return bad(
                "--control-arm",
                self.control.len().to_string(),
                format!("needs {n} periods like the treated arm"),
            );
        }
        for (what, s) in [("treated share", self.treated_share), ("control share", self.control_share)] {
            if !(s > 0.0 && s < 1.0) {
                return bad("--allocation", s.to_string(), format!("the {what} must be strictly between 0 and 1"));
            }
        }
        if !(self.window_start < self.window_end && self.window_end <= n) {
            return bad(
                "--start/--end",
                format!("{}..{}", self.window_start, self.window_end),
                format!("the test window must lie inside the {n} periods"),
            );
        }
        if self.window_start < 3 {
            return bad("--start", self.window_start.to_string(), "at least 3 pre-periods are needed".into());
        }
        for (name, v) in self.controls.iter().chain(&self.donors) {
            if v.len() != n {
                return bad("--controls/--donors", name.clone(), format!("has {} periods, not {n}", v.len()));
            }
        }
        for (t, v) in self.treated[self.window_start..self.window_end]
            .iter()
            .chain(&self.control[self.window_start..self.window_end])
            .enumerate()
        {
            if !v.is_finite() {
                return bad("arm totals", v.to_string(), format!("window value {t} is missing or not finite"));
            }
        }
        Ok(())
    }

    /// `d_t` over the window.
    pub fn window_effects(&self) -> Vec<f64> {
        let r = self.treated_share / self.control_share;
        (self.window_start..self.window_end).map(|t| self.treated[t] - r * self.control[t]).collect()
    }
}

/// The truth of a series-level experiment.
///
/// # Errors
/// [`CalibrateError::BadParameter`] for inconsistent lengths, shares or window;
/// [`CalibrateError::Bootstrap`].
pub fn series_truth(arms: &ArmSeries, opts: &Inference) -> CalibrateResult<TruthSummary> {
    arms.check()?;
    opts.check()?;
    let d = arms.window_effects();
    let r = arms.treated_share / arms.control_share;
    let base: Vec<f64> = (arms.window_start..arms.window_end).map(|t| r * arms.control[t]).collect();
    let point = d.iter().sum::<f64>() / d.len() as f64;
    let seed = child_seed(opts.seed, "series-truth");
    // each draw: one Dirichlet weight vector over periods for the effect and the baseline
    let pairs: Vec<(f64, f64)> = aftercast_resample::rng::par_draws(seed, opts.draws, |_, rng| {
        let w = aftercast_resample::bayes::dirichlet_weights(d.len(), rng);
        let e: f64 = w.iter().zip(&d).map(|(w, x)| w * x).sum();
        let b: f64 = w.iter().zip(&base).map(|(w, x)| w * x).sum();
        (e, b)
    });
    let (draws, baseline): (Vec<f64>, Vec<f64>) = pairs.into_iter().unzip();
    let base_point = base.iter().sum::<f64>() / base.len() as f64;
    let (effect, _) = scalar_block(point, Some(base_point), &draws, Some(&baseline), Some(d.len()), opts);
    let (verdict, _) = judge(&effect, &opts.rope);
    let mut details = Map::new();
    details.insert("window_periods".into(), json!(d.len()));
    details.insert("allocation_ratio".into(), json!(r));
    details.insert("treated_total".into(), json!(arms.treated[arms.window_start..arms.window_end].iter().sum::<f64>()));
    details.insert("scaled_control_total".into(), json!(base.iter().sum::<f64>()));
    details.insert(
        "relative".into(),
        json!(arms.treated[arms.window_start..arms.window_end].iter().sum::<f64>() / base.iter().sum::<f64>() - 1.0),
    );
    Ok(TruthSummary {
        label: "average effect per period on the treated arm".into(),
        point,
        summary: effect.average,
        effect,
        verdict,
        details,
        draws,
        baseline,
        baseline_point: base_point,
        units: d.len(),
    })
}

fn model_estimate(
    model: &dyn PathModel,
    arms: &ArmSeries,
    controls: &[Vec<f64>],
    opts: &Inference,
) -> CalibrateResult<MethodEstimate> {
    let (s, e) = (arms.window_start, arms.window_end);
    let h = e - s;
    let ctrl: Vec<Vec<f64>> = controls.iter().map(|c| c[..e].to_vec()).collect();
    let paths = model
        .paths(&arms.treated[..s], &ctrl, h, opts.draws, child_seed(opts.seed, &model.name()))
        .map_err(|source| CalibrateError::Method { method: model.name(), setting: arms.name.clone(), source })?;
    if paths.is_empty() || paths.iter().any(|p| p.len() != h || p.iter().any(|v| !v.is_finite())) {
        return Err(CalibrateError::BadPaths {
            model: model.name(),
            origin: s,
            detail: format!("expected finite paths of length {h}"),
        });
    }
    let y = &arms.treated[s..e];
    let (draws, baseline): (Vec<f64>, Vec<f64>) = paths
        .iter()
        .map(|p| {
            let eff = y.iter().zip(p).map(|(a, b)| a - b).sum::<f64>() / h as f64;
            (eff, p.iter().sum::<f64>() / h as f64)
        })
        .unzip();
    let point = draws.iter().sum::<f64>() / draws.len() as f64;
    let mut diagnostics = Map::new();
    diagnostics.insert("paths".into(), json!(paths.len()));
    diagnostics.insert("fitted_on_periods".into(), json!(s));
    Ok(MethodEstimate {
        point,
        draws,
        baseline: Some(baseline),
        estimand: "effect on the treated arm".into(),
        diagnostics,
        warnings: Vec::new(),
    })
}

/// Compare forecast models (fitted on the treated arm's pre-period, with `arms.controls`) and
/// synthetic-control models (with `arms.donors` as donors) against the experiment's truth.
///
/// # Errors
/// Those of [`series_truth`]. A model that fails is listed in [`Comparison::failures`].
pub fn compare_series(
    arms: &ArmSeries,
    forecast_models: &[&dyn PathModel],
    donor_models: &[&dyn PathModel],
    opts: &Inference,
) -> CalibrateResult<Comparison> {
    let truth = series_truth(arms, opts)?;
    let h = arms.window_end - arms.window_start;
    let controls: Vec<Vec<f64>> = arms.controls.iter().map(|(_, v)| v.clone()).collect();
    let donors: Vec<Vec<f64>> = arms.donors.iter().map(|(_, v)| v.clone()).collect();
    let mut rows = Vec::new();
    let mut failures = Vec::new();
    let mut warnings = Vec::new();
    if !donor_models.is_empty() && donors.len() < 2 {
        warnings.push(
            "synthetic-control models need at least two donor segments; they were skipped, so the comparison has no synthetic-control rows: give at least two untouched segments with --donors"
                .into(),
        );
    }
    let runs = forecast_models
        .iter()
        .map(|m| (*m, &controls))
        .chain(donor_models.iter().filter(|_| donors.len() >= 2).map(|m| (*m, &donors)));
    for (m, c) in runs {
        match model_estimate(m, arms, c, opts) {
            Ok(est) => rows.push(ComparisonRow::new(&m.name(), &arms.name, est, &truth, Some(h), opts)),
            Err(e) => {
                failures.push(MethodFailure { method: m.name(), setting: arms.name.clone(), message: e.to_string() })
            }
        }
    }
    Ok(Comparison {
        truth,
        rows,
        failures,
        options: *opts,
        inputs: arms.inputs.clone(),
        warnings,
        kind: "series".into(),
    })
}
