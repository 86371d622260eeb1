//! The forecasting analysis: prepare a series (log scale, controls, events, seasons), fit the
//! chosen model on the pre-period, draw joint counterfactual paths over the post-period, and
//! turn them into effects, diagnostics and the shared JSON result.

use crate::backtest::{Backtest, BacktestRow, BacktestSummary, score};
use crate::diagnostics::{ControlBreak, FitStats, LjungBox, break_threshold, control_break, fit_stats, ljung_box};
use crate::error::{ForecastError, ForecastResult};
use crate::events::EventCalendar;
use crate::harmonic::{self, HarmonicFit, HarmonicSpec};
use crate::holt_winters::{self, HwFit, HwSpec, Seasonality};
use crate::optim::OptimReport;
use crate::params::{Choice, SHRINK_FROM_CONTROLS};
use crate::params::{ModelKind, Season, ValidParams};
use crate::structural::{self, Initialisation, SeasonKind, SimulationOptions, StructuralFit, StructuralSpec, Trend};
use aftercast_core::estimate::{Estimate, Point, Scope};
use aftercast_core::result::{EffectDraws, PathPoint};
use aftercast_core::series::{Series, Split};
use aftercast_core::time::TimePoint;
use aftercast_resample::rng::child_seed;
use aftercast_resample::{FinishError, Finished};
use serde::{Deserialize, Serialize};

/// A dummy seasonal longer than this is replaced by a trigonometric one (state dimension).
pub const MAX_DUMMY_PERIOD: usize = 60;

/// The inputs of a model on one fitting span, on the model's scale.
#[derive(Debug, Clone)]
pub struct Prepared {
    /// Outcome on the model scale (log if asked), up to the end of the post-period.
    pub y: Vec<f64>,
    /// Regressors (controls, then event indicators) over the same span.
    pub regs: Vec<Vec<f64>>,
    /// Their names.
    pub reg_names: Vec<String>,
    /// How many of the regressors are controls (they come first; event indicators follow).
    pub n_controls: usize,
    /// Seasonal components in use.
    pub seasons: Vec<Season>,
    /// Whether the model scale is the log.
    pub log: bool,
    /// Times of the span.
    pub times: Vec<TimePoint>,
}

/// A model fitted on a span.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "kebab-case")]
pub enum FittedModel {
    /// Structural model.
    Structural(StructuralFit),
    /// Holt-Winters.
    HoltWinters(HwFit),
    /// Harmonic regression.
    Harmonic(HarmonicFit),
}

impl FittedModel {
    /// The model's name.
    pub fn name(&self) -> &'static str {
        match self {
            FittedModel::Structural(_) => "structural",
            FittedModel::HoltWinters(_) => "holt-winters",
            FittedModel::Harmonic(_) => "harmonic",
        }
    }

    /// Warnings raised while fitting.
    pub fn warnings(&self) -> &[String] {
        match self {
            FittedModel::Structural(f) => &f.warnings,
            FittedModel::HoltWinters(f) => &f.warnings,
            FittedModel::Harmonic(f) => &f.warnings,
        }
    }
}

/// The structural model the parameters ask for, on periods `0..n_fit` (the AR(1) component
/// as asked; `auto` starts without it). Shrunk controls are scaled by their variance over the
/// fitting span.
fn structural_spec(p: &Prepared, params: &ValidParams, n_fit: usize) -> StructuralSpec {
    let pp = params.get();
    let shrink = match pp.shrink_controls {
        Choice::On => p.n_controls > 0,
        Choice::Off => false,
        Choice::Auto => p.n_controls >= SHRINK_FROM_CONTROLS,
    };
    let control_scales = if shrink {
        p.regs[..p.n_controls]
            .iter()
            .map(|x| {
                let v = &x[..n_fit];
                let m = v.iter().sum::<f64>() / v.len() as f64;
                let var = v.iter().map(|a| (a - m).powi(2)).sum::<f64>() / v.len() as f64;
                if var > 0.0 { var } else { 1.0 }
            })
            .collect()
    } else {
        Vec::new()
    };
    // a regressor constant over the fitting span (an event that has not occurred yet in a
    // backtest fold) cannot be learned: its coefficient is fixed at zero
    let absent =
        p.regs.iter().enumerate().filter(|(_, x)| x[..n_fit].iter().all(|v| *v == x[0])).map(|(k, _)| k).collect();
    StructuralSpec {
        trend: pp.trend.unwrap_or(Trend::Level),
        seasons: p.seasons.iter().map(Season::kind).collect(),
        n_regressors: p.regs.len(),
        ar: pp.ar == Choice::On,
        control_scales,
        absent,
        init: Initialisation::ExactDiffuse,
    }
}

/// Distinct parameter draws of the structural model in each backtest fold (the analysis itself
/// uses `parameter_sets`): a backtest scores 200 paths per fold, and 25 parameter draws are
/// enough to carry their uncertainty into a score at a quarter of the filter passes.
pub const BACKTEST_PARAMETER_SETS: usize = 25;

/// Ljung-Box p-value under which the one-step residuals count as autocorrelated.
pub const LJUNG_BOX_ALPHA: f64 = 0.01;

/// Fit the structural model; with `ar = auto`, refit with an AR(1) component when the
/// one-step residuals are autocorrelated (Ljung-Box p below [`LJUNG_BOX_ALPHA`]) and keep it when
/// it lowers the AIC (two more parameters).
fn fit_structural(
    spec: StructuralSpec,
    params: &ValidParams,
    y: &[f64],
    regs: &[Vec<f64>],
    warm: Option<&StructuralFit>,
) -> ForecastResult<StructuralFit> {
    // a warm start with an AR component goes straight to the AR model (the choice was made on
    // a nearby span); one without starts the model without it
    let (spec, warm_theta) = match warm {
        Some(w) if params.get().ar == Choice::Auto && w.spec.ar && !spec.ar => {
            let s = StructuralSpec { ar: true, ..spec };
            let ok = w.theta.len() == s.n_params();
            (s, ok.then(|| w.theta.clone()))
        }
        Some(w) => {
            let ok = w.theta.len() == spec.n_params() && w.spec.ar == spec.ar;
            (spec, ok.then(|| w.theta.clone()))
        }
        None => (spec, None),
    };
    let f = structural::fit(&spec, y, regs, warm_theta.as_deref())?;
    if params.get().ar != Choice::Auto || spec.ar {
        return Ok(f);
    }
    let lb = structural_one_step(&f, y, regs).2;
    if lb.p_value >= LJUNG_BOX_ALPHA {
        return Ok(f);
    }
    let with_ar = StructuralSpec { ar: true, ..spec };
    // start from the fit without it: the irregular variance shared with the new component
    let mut p0 = f.params.clone();
    p0.ar_variance = Some(p0.irregular / 2.0);
    p0.irregular /= 2.0;
    p0.ar_coef = Some(0.5);
    for v in p0.seasons.iter_mut().chain([&mut p0.level]).chain(p0.slope.as_mut()) {
        *v = v.max(f.params.irregular * 1e-6);
    }
    let start = with_ar.theta_from_params(&p0);
    match structural::fit(&with_ar, y, regs, Some(&start)) {
        Ok(mut g) if g.loglik - 2.0 > f.loglik => {
            g.notes.push(format!(
                "an AR(1) component was added: the one-step residuals were autocorrelated without it (Ljung-Box p = {:.3}) and it improves the fit (log-likelihood {:.1} -> {:.1}, coefficient {:.2})",
                lb.p_value,
                f.loglik,
                g.loglik,
                g.params.ar_coef.unwrap_or(0.0)
            ));
            Ok(g)
        }
        _ => Ok(f),
    }
}

/// One-step predictions, their sd (NaN in the diffuse period) and the Ljung-Box test of the
/// standardised residuals of a structural fit.
fn structural_one_step(f: &StructuralFit, y: &[f64], regs: &[Vec<f64>]) -> (Vec<f64>, Vec<f64>, LjungBox, Vec<f64>) {
    let n = y.len();
    let out = structural::loglik_at(&f.spec, &f.params, y, regs);
    let tr = out.trace.unwrap_or_default();
    let mut pred = vec![f64::NAN; n];
    let mut sd = vec![f64::NAN; n];
    let mut std_res = Vec::new();
    for t in 0..n {
        if tr.diffuse[t] || !tr.forecast_var[t].is_finite() {
            continue;
        }
        pred[t] = tr.forecast[t];
        sd[t] = tr.forecast_var[t].sqrt();
        if y[t].is_finite() {
            std_res.push((y[t] - pred[t]) / sd[t]);
        }
    }
    let lags = (std_res.len() / 5).clamp(1, 10);
    let lb = ljung_box(&std_res, lags);
    (pred, sd, lb, std_res)
}

fn hw_spec(p: &Prepared, params: &ValidParams) -> (HwSpec, Option<String>) {
    let mut note = None;
    let ints: Vec<usize> = p
        .seasons
        .iter()
        .filter_map(|s| match s.kind() {
            SeasonKind::Dummy { period } => Some(period),
            _ => None,
        })
        .collect();
    let period = match (ints.iter().min(), p.seasons.first()) {
        (Some(&m), _) => Some(m),
        (None, Some(s)) => {
            let m = s.period.round().max(2.0) as usize;
            note = Some(format!(
                "holt-winters needs a whole seasonal period, so {} is rounded to {m} and its seasonal pattern can slip out of step over a long post-period: for a fractional season use --model structural or harmonic",
                s.period
            ));
            Some(m)
        }
        (None, None) => None,
    };
    if p.seasons.len() > 1 {
        note = Some(format!(
            "holt-winters models one seasonal period ({}); the other seasons are left out, so their pattern is missing from the counterfactual and can read as an effect: use --model structural or harmonic to model several seasons",
            period.unwrap_or(0)
        ));
    }
    let seasonality = if period.is_none() { Seasonality::None } else { params.get().hw_seasonality };
    (HwSpec { trend: true, damped: params.get().hw_damped, seasonality, period: period.unwrap_or(1) }, note)
}

fn harmonic_spec(p: &Prepared, params: &ValidParams) -> HarmonicSpec {
    HarmonicSpec {
        seasons: p.seasons.iter().map(|s| (s.period, s.fourier_harmonics())).collect(),
        ridge: params.get().ridge,
    }
}

fn truncate(regs: &[Vec<f64>], n: usize) -> Vec<Vec<f64>> {
    regs.iter().map(|r| r[..n].to_vec()).collect()
}

/// Fit a model on periods `0..n_fit` of `p`.
///
/// # Errors
/// The fitting errors of each model family.
pub fn fit_model(kind: ModelKind, p: &Prepared, params: &ValidParams, n_fit: usize) -> ForecastResult<FittedModel> {
    fit_model_from(kind, p, params, n_fit, None)
}

/// As [`fit_model`], the structural optimiser starting from `warm` (a nearby fit's optimiser
/// vector, e.g. the previous backtest fold's) when it has the right length.
///
/// # Errors
/// The fitting errors of each model family.
pub fn fit_model_from(
    kind: ModelKind,
    p: &Prepared,
    params: &ValidParams,
    n_fit: usize,
    warm: Option<&StructuralFit>,
) -> ForecastResult<FittedModel> {
    let at = p.times.get(n_fit).or(p.times.last()).map(ToString::to_string).unwrap_or_default();
    let y = &p.y[..n_fit];
    match kind {
        ModelKind::Structural | ModelKind::Auto => {
            let spec = structural_spec(p, params, n_fit);
            let needed = spec.n_states() - spec.control_scales.len() - spec.absent.len() + 3;
            let found = y.iter().filter(|v| v.is_finite()).count();
            if found < needed {
                return Err(ForecastError::TooShort { model: "structural", needed, found, at });
            }
            Ok(FittedModel::Structural(fit_structural(spec, params, y, &truncate(&p.regs, n_fit), warm)?))
        }
        ModelKind::HoltWinters => {
            let (spec, note) = hw_spec(p, params);
            let mut f = holt_winters::fit(&spec, y, &at)?;
            if let Some(n) = note {
                f.warnings.push(n);
            }
            if !p.regs.is_empty() {
                f.warnings.push(
                    "holt-winters does not use control series or event indicators, so they do not inform the counterfactual: use --model structural or harmonic to include --controls and --events"
                        .into(),
                );
            }
            Ok(FittedModel::HoltWinters(f))
        }
        ModelKind::Harmonic => {
            Ok(FittedModel::Harmonic(harmonic::fit(&harmonic_spec(p, params), y, &p.regs, &p.reg_names, &at)?))
        }
    }
}

/// Draw joint paths (model scale) of periods `n_fit + skip .. n_fit + skip + horizon`.
///
/// (Eight plain arguments: each is one number of the simulation and none belongs with another.)
///
/// # Errors
/// Simulation errors of the model family.
#[allow(clippy::too_many_arguments)]
pub fn draw_paths(
    model: &FittedModel,
    p: &Prepared,
    params: &ValidParams,
    n_fit: usize,
    skip: usize,
    horizon: usize,
    draws: usize,
    seed: u64,
) -> ForecastResult<Vec<Vec<f64>>> {
    match model {
        FittedModel::Structural(f) => {
            let opts = SimulationOptions {
                draws,
                seed,
                parameter_uncertainty: params.get().parameter_uncertainty,
                parameter_sets: params.get().parameter_sets.min(draws),
            };
            structural::simulate(f, &p.y[..n_fit], &truncate(&p.regs, n_fit + skip + horizon), skip, horizon, &opts)
        }
        FittedModel::HoltWinters(f) => Ok(f.simulate(skip, horizon, draws, seed)),
        FittedModel::Harmonic(f) => f.simulate(&truncate(&p.regs, n_fit + skip + horizon), skip, horizon, draws, seed),
    }
}

/// One-step (structural, Holt-Winters) or in-sample (harmonic) predictions over `0..n_fit` on
/// the model scale, their predictive sd, and standardised residuals for the Ljung-Box test.
fn in_sample(model: &FittedModel, p: &Prepared, n_fit: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let y = &p.y[..n_fit];
    match model {
        FittedModel::Structural(f) => {
            let (pred, sd, _, std_res) = structural_one_step(f, y, &truncate(&p.regs, n_fit));
            (pred, sd, std_res)
        }
        FittedModel::HoltWinters(f) => {
            let s = f.sigma2.sqrt();
            let m = if f.spec.seasonality == Seasonality::None { 1 } else { f.spec.period };
            let pred: Vec<f64> = f.fitted.iter().enumerate().map(|(t, v)| if t < m { f64::NAN } else { *v }).collect();
            let res: Vec<f64> = (m..n_fit).filter(|&t| y[t].is_finite()).map(|t| (y[t] - f.fitted[t]) / s).collect();
            (pred, vec![s; n_fit], res)
        }
        FittedModel::Harmonic(f) => {
            let res: Vec<f64> = f.residuals.iter().map(|r| r / f.sigma).collect();
            (f.fitted.clone(), vec![f.sigma; n_fit], res)
        }
    }
}

/// Standard normal quantile `Phi^-1(p)`: statrs' `Normal::standard().inverse_cdf` (Boost's
/// rational approximations of `erfc_inv`, within a few ulp of the true value). `p <= 0` gives
/// -inf, `p >= 1` +inf and NaN gives NaN, so no input reaches statrs' panic outside `[0, 1]`.
pub fn normal_quantile(p: f64) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    if p.is_nan() {
        return f64::NAN;
    }
    if p <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if p >= 1.0 {
        return f64::INFINITY;
    }
    Normal::standard().inverse_cdf(p)
}

/// Structural-model diagnostics.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StructuralDiagnostics {
    /// `(name, value)` of the estimated variances (and damping).
    pub parameters: Vec<(String, f64)>,
    /// Asymptotic standard errors of the log-variances (0 where not propagated).
    pub log_variance_se: Vec<f64>,
    /// Maximised log-likelihood (Durbin & Koopman 2012 eq. 7.3).
    pub loglik: f64,
    /// Components whose variance was estimated at (effectively) zero.
    pub zero_variance: Vec<String>,
    /// Regression coefficients at the end of the pre-period.
    pub coefficients: Vec<ControlWeight>,
    /// Whether the control coefficients were shrunk together (empirical-Bayes ridge prior).
    #[serde(default)]
    pub shrunk_controls: bool,
    /// Choices made on the data (e.g. an AR(1) component added).
    #[serde(default)]
    pub notes: Vec<String>,
    /// Optimiser report.
    pub optimiser: OptimReport,
}

/// A regressor's coefficient at the end of the pre-period.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ControlWeight {
    /// Control or `event:NAME`.
    pub name: String,
    /// Posterior mean of the coefficient.
    pub coefficient: f64,
    /// Its posterior sd.
    pub sd: f64,
    /// Coefficient times the regressor's pre-period sd: its weight in the outcome's units,
    /// comparable across controls (the largest are the controls that drive the outcome).
    pub standardised: f64,
}

/// Everything the analysis reports about the pre-period fit (serialisable into the result's
/// `diagnostics` map).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Diagnostics {
    /// The model that produced the counterfactual.
    pub model: String,
    /// Whether the model ran on the log of the outcome.
    pub log_scale: bool,
    /// Seasonal components in use (`7`, `365.25:4`).
    pub seasons: Vec<String>,
    /// Regressors in use (controls, `event:NAME`).
    pub regressors: Vec<String>,
    /// Pre-period length.
    pub pre_periods: usize,
    /// Washout length.
    pub washout_periods: usize,
    /// Post-period length.
    pub post_periods: usize,
    /// Fit of the one-step (in-sample for harmonic) predictions on the outcome's scale.
    pub fit: FitStats,
    /// Ljung-Box test of the standardised one-step residuals.
    pub ljung_box: LjungBox,
    /// Mean coverage of the model's own intervals in the pre-period backtest.
    pub backtest_coverage: Option<f64>,
    /// Break checks of the control series at the intervention.
    pub control_breaks: Vec<ControlBreak>,
    /// Structural model details.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub structural: Option<StructuralDiagnostics>,
    /// Holt-Winters details: smoothing parameters, residual variance, optimiser report.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub holt_winters: Option<HoltWintersDiagnostics>,
    /// Harmonic-regression details: penalty, effective parameters, block length.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub harmonic: Option<HarmonicDiagnostics>,
    /// Whether the optimiser reported convergence (harmonic regression has none: true).
    pub converged: bool,
}

/// Holt-Winters details of a forecast.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HoltWintersDiagnostics {
    /// Additive or multiplicative seasonality.
    pub seasonality: Seasonality,
    /// Seasonal period.
    pub period: usize,
    /// Damped trend.
    pub damped: bool,
    /// Level smoothing.
    pub alpha: f64,
    /// Trend smoothing.
    pub beta: f64,
    /// Seasonal smoothing.
    pub gamma: f64,
    /// Damping.
    pub phi: f64,
    /// Residual variance.
    pub sigma2: f64,
    /// Why the optimiser stopped.
    pub optimiser: OptimReport,
}

/// Harmonic-regression details of a forecast.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HarmonicDiagnostics {
    /// Ridge penalty.
    pub ridge_lambda: f64,
    /// Effective number of parameters.
    pub effective_parameters: f64,
    /// Residual standard deviation.
    pub residual_sd: f64,
    /// Mean block length of the residual bootstrap.
    pub mean_block_length: f64,
    /// Regression columns.
    pub columns: Vec<String>,
}

/// The typed diagnostics of a forecast estimate (the `diagnostics` object of its result).
#[derive(Debug, Clone, Serialize)]
pub struct ForecastDiagnostics {
    /// Fit and residual checks of the chosen model.
    #[serde(flatten)]
    pub model: Diagnostics,
    /// The model the counterfactual came from (`auto` names its choice here).
    pub chosen_model: String,
    /// Number of counterfactual paths drawn.
    pub draws: usize,
    /// The pre-period backtest, when run.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub backtest: Option<Backtest>,
}

/// Counterfactual draws on the outcome's scale.
#[derive(Debug, Clone)]
pub struct Counterfactual {
    /// Post-period times.
    pub times: Vec<TimePoint>,
    /// Observed post-period values (NaN where missing).
    pub observed: Vec<f64>,
    /// `draws[d][t]`.
    pub draws: Vec<Vec<f64>>,
}

/// A model fitted on the pre-period of a series, ready to draw counterfactuals.
#[derive(Debug, Clone)]
pub struct Fitted {
    /// The fitted model.
    pub model: FittedModel,
    /// Prepared inputs.
    pub prepared: Prepared,
    /// The split.
    pub split: Split,
    /// The parameters.
    pub params: ValidParams,
    /// Warnings so far (preparation and fitting).
    pub warnings: Vec<String>,
    /// Break checks of the controls.
    pub control_breaks: Vec<ControlBreak>,
}

/// Prepare a series: log scale, regressors (controls then events), seasons.
///
/// # Errors
/// [`ForecastError::NonPositiveForLog`], [`ForecastError::NonFiniteControl`],
/// [`ForecastError::BadEventDate`].
pub fn prepare(
    series: &Series,
    split: &Split,
    params: &ValidParams,
    events: Option<&EventCalendar>,
) -> ForecastResult<(Prepared, Vec<String>, Vec<ControlBreak>)> {
    let pp = params.get();
    let n = split.post_end;
    let pts = series.axis.points();
    let mut warnings = Vec::new();
    let mut y: Vec<f64> = series.outcome[..n].to_vec();
    if pp.log {
        for (t, v) in y.iter_mut().enumerate() {
            if v.is_finite() {
                if *v <= 0.0 {
                    return Err(ForecastError::NonPositiveForLog { at: pts[t].to_string(), value: *v });
                }
                *v = v.ln();
            }
        }
    }
    let mut regs = Vec::new();
    let mut names = Vec::new();
    let mut breaks = Vec::new();
    for name in &pp.log_controls {
        if !series.controls.iter().any(|(c, _)| c == name) {
            let controls: Vec<&str> = series.controls.iter().map(|(c, _)| c.as_str()).collect();
            return Err(ForecastError::UnknownLogControl { name: name.clone(), controls: controls.join(",") });
        }
    }
    let z_crit = break_threshold(series.controls.len());
    for (name, raw) in &series.controls {
        if let Some((t, v)) = raw[..n].iter().enumerate().find(|(_, v)| !v.is_finite()) {
            return Err(ForecastError::NonFiniteControl { name: name.clone(), value: *v, at: pts[t].to_string() });
        }
        let logged: Vec<f64>;
        let x: &[f64] = if pp.log_controls.contains(name) {
            if let Some((t, v)) = raw[..n].iter().enumerate().find(|(_, v)| **v <= 0.0) {
                return Err(ForecastError::NonPositiveControlForLog {
                    name: name.clone(),
                    at: pts[t].to_string(),
                    value: *v,
                });
            }
            logged = raw.iter().map(|v| v.ln()).collect();
            &logged
        } else {
            raw
        };
        let pre = &x[..split.pre_end];
        if pre.iter().all(|v| *v == pre[0]) {
            warnings.push(format!(
                "control '{name}' is constant in the pre-period and is left out, so it plays no part in the counterfactual: drop it from --controls or give a control that varies"
            ));
            continue;
        }
        let b = control_break(name, x, split.pre_end, split.post_start, split.post_end, z_crit);
        if b.flagged {
            warnings.push(format!(
                "control '{name}' shifts at the intervention (mean departure {:.4} from its pre-period trend, z = {:.1}); the change may have touched it, and a touched control hides part of the effect: remove it from --controls unless the shift has another known cause",
                b.shift, b.z
            ));
        }
        breaks.push(b);
        regs.push(x[..n].to_vec());
        names.push(name.clone());
    }
    let n_controls = regs.len();
    if let Some(cal) = events {
        let (inds, unused) = cal.indicators(&series.axis)?;
        if !unused.is_empty() {
            warnings.push(format!(
                "events with no date on the series' axis are ignored, so they do not adjust the counterfactual: {}; if one should fall inside the data, check its dates in the --events file against the series' time column",
                unused.join(", ")
            ));
        }
        for (name, v) in inds {
            if v[..split.pre_end].iter().all(|x| *x == 0.0) {
                warnings.push(format!(
                    "{name} does not occur in the pre-period; its effect cannot be learned and it is left out, so if it occurs in the post-period its effect counts as part of the change's: read the effect around those dates with care"
                ));
                continue;
            }
            if v[..split.pre_end].iter().all(|x| *x == 1.0) {
                warnings.push(format!(
                    "{name} covers the whole pre-period, so its effect cannot be told apart from the baseline and it is left out: check its dates in the --events file"
                ));
                continue;
            }
            regs.push(v[..n].to_vec());
            names.push(name);
        }
    }
    let user_seasons = pp.seasons.is_some();
    let mut seasons = Vec::new();
    for s in pp.seasons.clone().unwrap_or_else(|| Season::defaults(series.frequency())) {
        if user_seasons && s.period > split.pre_end as f64 {
            return Err(ForecastError::BadSeason {
                text: s.label(),
                detail: format!(
                    "the period is longer than the pre-period ({} periods), so the season cannot be learned",
                    split.pre_end
                ),
            });
        }
        if !user_seasons && s.period * 2.0 > split.pre_end as f64 {
            warnings.push(format!(
                "the pre-period ({} periods) is shorter than two cycles of the default season {}; that season is left out, so its pattern, if real, can read as an effect: give a longer pre-period, or --season {} to fit it from fewer cycles",
                split.pre_end,
                s.label(),
                s.label()
            ));
            continue;
        }
        // the structural model's rule for long dummy seasons (Season::structural_kind), said
        let s = match (s.kind(), s.structural_kind()) {
            (SeasonKind::Dummy { period }, SeasonKind::Trig { harmonics, .. }) => {
                warnings.push(format!(
                    "season {period} is long for a dummy seasonal, so a trigonometric seasonal {period}:{harmonics} is used instead; it follows a smooth pattern and can miss sharp one-period peaks: give --season {period}:K with a larger K if the season has them"
                ));
                Season { period: s.period, harmonics: Some(harmonics) }
            }
            _ => s,
        };
        seasons.push(s);
    }
    let prepared = Prepared { y, regs, reg_names: names, n_controls, seasons, log: pp.log, times: pts[..n].to_vec() };
    Ok((prepared, warnings, breaks))
}

impl ValidParams {
    /// Fit the chosen model on the pre-period of `series` (for `auto`, the model with the lowest
    /// backtest CRPS; use [`analyse`] to get the backtest table as well).
    ///
    /// # Errors
    /// Preparation and fitting errors.
    pub fn fit(&self, series: &Series, split: Split, events: Option<&EventCalendar>) -> ForecastResult<Fitted> {
        self.fit_from(series, split, events, None)
    }

    /// As [`ValidParams::fit`], the structural optimiser starting from `warm` (a fit of the
    /// same model on a nearby span, e.g. the whole pre-period for a placebo date of a plan).
    ///
    /// # Errors
    /// Preparation and fitting errors.
    pub fn fit_from(
        &self,
        series: &Series,
        split: Split,
        events: Option<&EventCalendar>,
        warm: Option<&FittedModel>,
    ) -> ForecastResult<Fitted> {
        let (prepared, mut warnings, control_breaks) = prepare(series, &split, self, events)?;
        let chosen = self.choose_on(&prepared, &split, &mut warnings);
        let stage = aftercast_core::progress::stage(format!("fitting the {} model", chosen.name), None);
        let warm = match warm {
            Some(FittedModel::Structural(f)) => Some(f),
            _ => None,
        };
        let model = fit_model_from(chosen.kind, &prepared, &chosen.params, split.pre_end, warm)?;
        drop(stage);
        warnings.extend(model.warnings().iter().cloned());
        Ok(Fitted { model, prepared, split, params: chosen.params, warnings, control_breaks })
    }
}

impl ValidParams {
    /// The candidate an analysis with these parameters runs on `prepared`: the one asked for,
    /// or (trend or model left to the data) the one with the lowest backtest CRPS.
    fn choose_on(&self, prepared: &Prepared, split: &Split, warnings: &mut Vec<String>) -> Candidate {
        let cands = candidates(self);
        if cands.len() > 1 {
            let bt = run_backtest(prepared, split, self, &cands);
            choose(&bt, &cands, self.get().model == ModelKind::Auto, warnings)
        } else {
            cands[0].clone()
        }
    }

    /// The model an analysis of `series` with this split would run (see [`candidates`]): its
    /// name and its parameters, with the model family and trend fixed.
    ///
    /// # Errors
    /// Preparation errors.
    pub fn chosen(&self, series: &Series, split: Split, events: Option<&EventCalendar>) -> ForecastResult<Candidate> {
        let (prepared, mut warnings, _) = prepare(series, &split, self, events)?;
        Ok(self.choose_on(&prepared, &split, &mut warnings))
    }
}

/// A model the backtest can score: a family and the parameters it runs with.
#[derive(Debug, Clone)]
pub struct Candidate {
    /// Name in the backtest table.
    pub name: String,
    /// Model family.
    pub kind: ModelKind,
    /// Parameters (for `auto`, the structural trend differs between candidates).
    pub params: ValidParams,
}

/// The name of the structural model with this trend, in the backtest table and results.
pub fn structural_name(t: Trend) -> &'static str {
    match t {
        Trend::Level => "structural",
        Trend::LinearTrend => "structural-trend",
        Trend::DampedTrend => "structural-damped",
    }
}

/// The candidates of a run. The structural model with `trend` left to the data (the default)
/// is tried with a local level (`structural`) and with a local linear trend
/// (`structural-trend`) when the backtest runs; `auto` adds Holt-Winters and harmonic
/// regression. Otherwise the one model asked for. The first candidate is the fallback when no
/// backtest fold fits in the pre-period.
pub fn candidates(params: &ValidParams) -> Vec<Candidate> {
    let pp = params.get();
    let with = |kind: ModelKind, trend: Option<Trend>| {
        let mut q = pp.clone();
        q.model = kind;
        q.trend = trend;
        ValidParams(q)
    };
    let structural_kind = pp.model == ModelKind::Structural || pp.model == ModelKind::Auto;
    let mut out = Vec::new();
    if structural_kind {
        match pp.trend {
            Some(t) => out.push(Candidate {
                name: structural_name(t).into(),
                kind: ModelKind::Structural,
                params: with(ModelKind::Structural, Some(t)),
            }),
            None => {
                out.push(Candidate {
                    name: "structural".into(),
                    kind: ModelKind::Structural,
                    params: with(ModelKind::Structural, Some(Trend::Level)),
                });
                if pp.backtest_folds > 0 {
                    out.push(Candidate {
                        name: "structural-trend".into(),
                        kind: ModelKind::Structural,
                        params: with(ModelKind::Structural, Some(Trend::LinearTrend)),
                    });
                }
            }
        }
    }
    if pp.model == ModelKind::Auto {
        out.push(Candidate {
            name: "holt-winters".into(),
            kind: ModelKind::HoltWinters,
            params: with(ModelKind::HoltWinters, pp.trend),
        });
        out.push(Candidate {
            name: "harmonic".into(),
            kind: ModelKind::Harmonic,
            params: with(ModelKind::Harmonic, pp.trend),
        });
    }
    if out.is_empty() {
        out.push(Candidate { name: pp.model.name().into(), kind: pp.model, params: params.clone() });
    }
    out
}

fn choose(bt: &Backtest, cands: &[Candidate], auto: bool, warnings: &mut Vec<String>) -> Candidate {
    match bt.chosen.as_deref().and_then(|n| cands.iter().find(|c| c.name == n)) {
        Some(c) => c.clone(),
        None if auto => {
            warnings.push(format!(
                "--model auto: no model could be backtested in the pre-period, so the first candidate ({}) is used without a check that it forecasts this series well: choose the model with --model, or give a longer pre-period or a shorter post-period (--end) so a backtest fits",
                cands[0].name
            ));
            cands[0].clone()
        }
        None => cands[0].clone(),
    }
}

/// Rolling-origin backtest: origins step back from the end of the pre-period by the post
/// horizon; each fold fits on the data before the origin, skips the washout and scores the
/// next `horizon` periods (on the outcome's scale). At most `backtest_folds` folds, each with
/// at least half of the pre-period to fit on.
pub fn run_backtest(p: &Prepared, split: &Split, params: &ValidParams, models: &[Candidate]) -> Backtest {
    let pp = params.get();
    let skip = split.post_start - split.pre_end;
    let h = split.post_len();
    let mut origins = Vec::new();
    for k in 0..pp.backtest_folds {
        let Some(o) = split.pre_end.checked_sub(skip + h + k * h) else { break };
        if o < (split.pre_end / 2).max(10) {
            break;
        }
        origins.push(o);
    }
    let mut rows = Vec::new();
    let mut summary = Vec::new();
    for cand in models {
        let kind = cand.kind;
        let name = cand.name.as_str();
        let mut failed = None;
        let mut mine = Vec::new();
        let mut warm: Option<StructuralFit> = None;
        // folds run from the latest origin back; each structural fit starts from the previous one
        let mut bt_params = cand.params.clone();
        bt_params.0.parameter_sets = bt_params.0.parameter_sets.min(BACKTEST_PARAMETER_SETS);
        for (fi, &o) in origins.iter().enumerate() {
            let res = fit_model_from(kind, p, &bt_params, o, warm.as_ref()).and_then(|m| {
                if let FittedModel::Structural(f) = &m {
                    warm = Some(f.clone());
                }
                let seed = child_seed(pp.inference.seed, &format!("backtest-{name}-{fi}"));
                draw_paths(&m, p, &bt_params, o, skip, h, pp.backtest_draws, seed)
            });
            match res {
                Ok(paths) => {
                    let paths: Vec<Vec<f64>> = if p.log {
                        paths.into_iter().map(|v| v.into_iter().map(f64::exp).collect()).collect()
                    } else {
                        paths
                    };
                    let obs: Vec<f64> =
                        (o + skip..o + skip + h).map(|t| if p.log { p.y[t].exp() } else { p.y[t] }).collect();
                    let (c, mape, cov) = score(&paths, &obs, pp.inference.level);
                    mine.push(BacktestRow {
                        model: name.into(),
                        fit_end: p.times[o - 1],
                        first: p.times[o + skip],
                        horizon: h,
                        crps: c,
                        mape,
                        coverage: cov,
                    });
                }
                Err(e) => {
                    failed = Some(e.to_string());
                    break;
                }
            }
        }
        let mean = |f: &dyn Fn(&BacktestRow) -> f64| {
            let v: Vec<f64> = mine.iter().map(f).filter(|x| x.is_finite()).collect();
            if v.is_empty() { f64::NAN } else { v.iter().sum::<f64>() / v.len() as f64 }
        };
        let (c, m, cv) = (mean(&|r| r.crps), mean(&|r| r.mape), mean(&|r| r.coverage));
        summary.push(BacktestSummary {
            model: name.into(),
            folds: if failed.is_some() { 0 } else { mine.len() },
            crps: c,
            mape: m,
            coverage: cv,
            failed: failed.clone(),
        });
        if failed.is_none() {
            rows.extend(mine);
        }
    }
    let chosen = summary
        .iter()
        .filter(|s| s.failed.is_none() && s.folds > 0 && s.crps.is_finite())
        .min_by(|a, b| a.crps.total_cmp(&b.crps))
        .map(|s| s.model.clone());
    Backtest { level: pp.inference.level, washout: skip, rows, summary, chosen }
}

impl Fitted {
    /// Joint counterfactual path draws over the post-period, on the outcome's scale
    /// (`exp` of the model-scale paths when the model runs on the log).
    ///
    /// # Errors
    /// Simulation errors of the model family.
    pub fn counterfactual(&self) -> ForecastResult<Counterfactual> {
        let pp = self.params.get();
        let s = &self.split;
        let skip = s.post_start - s.pre_end;
        let paths = draw_paths(
            &self.model,
            &self.prepared,
            &self.params,
            s.pre_end,
            skip,
            s.post_len(),
            pp.inference.draws,
            pp.inference.seed,
        )?;
        let draws = if self.prepared.log {
            paths.into_iter().map(|v| v.into_iter().map(f64::exp).collect()).collect()
        } else {
            paths
        };
        let obs: Vec<f64> = (s.post_start..s.post_end)
            .map(|t| if self.prepared.log { self.prepared.y[t].exp() } else { self.prepared.y[t] })
            .collect();
        Ok(Counterfactual { times: self.prepared.times[s.post_start..s.post_end].to_vec(), observed: obs, draws })
    }

    /// Pre-period rows of the path (observed, one-step prediction and its normal interval on
    /// the outcome's scale) and the diagnostics.
    pub fn diagnostics(&self, backtest_coverage: Option<f64>) -> (Diagnostics, Vec<PathPoint>) {
        let p = &self.prepared;
        let s = &self.split;
        let n = s.pre_end;
        let (pred, sd, std_res) = in_sample(&self.model, p, n);
        let z = normal_quantile(0.5 + self.params.get().inference.level / 2.0);
        let back = |v: f64| if p.log { v.exp() } else { v };
        let obs: Vec<f64> = p.y[..n].iter().map(|v| back(*v)).collect();
        let pred_o: Vec<f64> = pred.iter().map(|v| back(*v)).collect();
        // While a diffuse state is being resolved (the initial state, or the coefficient of an
        // event before its first occurrence) the one-step prediction carries (nearly) unbounded
        // variance; such periods (one-step sd above 10 times the median) are left out of the
        // pre-period path.
        let mut finite_sd: Vec<f64> = sd[..n].iter().copied().filter(|v| v.is_finite()).collect();
        finite_sd.sort_by(f64::total_cmp);
        let median_sd = finite_sd.get(finite_sd.len() / 2).copied().unwrap_or(f64::INFINITY);
        let pre_path: Vec<PathPoint> = (0..n)
            .filter(|&t| sd[t].is_finite() && sd[t] <= 10.0 * median_sd)
            .filter(|&t| pred[t].is_finite())
            .map(|t| PathPoint {
                time: p.times[t],
                observed: obs[t].is_finite().then_some(obs[t]),
                counterfactual: pred_o[t],
                lower: back(pred[t] - z * sd[t]),
                upper: back(pred[t] + z * sd[t]),
                post: false,
                effect: None,
                cumulative: None,
            })
            .collect();
        let lags = (std_res.len() / 5).clamp(1, 10);
        let lb = ljung_box(&std_res, lags);
        let mut d = Diagnostics {
            model: self.model.name().into(),
            log_scale: p.log,
            seasons: p.seasons.iter().map(Season::label).collect(),
            regressors: p.reg_names.clone(),
            pre_periods: n,
            washout_periods: s.post_start - s.pre_end,
            post_periods: s.post_len(),
            fit: fit_stats(&obs, &pred_o),
            ljung_box: lb,
            backtest_coverage,
            control_breaks: self.control_breaks.clone(),
            structural: None,
            holt_winters: None,
            harmonic: None,
            converged: true,
        };
        match &self.model {
            FittedModel::Structural(f) => {
                let names = f.spec.param_names();
                let natural = f.spec.natural(&f.params);
                let out = structural::loglik_at(&f.spec, &f.params, &p.y[..n], &truncate(&p.regs, n));
                let m = f.spec.n_states();
                let r0 = f.spec.regression_start();
                let coefficients = p
                    .reg_names
                    .iter()
                    .enumerate()
                    .map(|(k, name)| {
                        let i = r0 + k;
                        let x = &p.regs[k][..n];
                        let mean = x.iter().sum::<f64>() / n as f64;
                        let sd_x = (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n as f64).sqrt();
                        ControlWeight {
                            name: name.clone(),
                            coefficient: out.a_next[i],
                            sd: out.p_next[i * m + i].max(0.0).sqrt(),
                            standardised: out.a_next[i] * sd_x,
                        }
                    })
                    .collect();
                d.converged = f.optim.converged;
                d.structural = Some(StructuralDiagnostics {
                    parameters: names.into_iter().zip(natural).collect(),
                    log_variance_se: (0..f.theta.len()).map(|i| f.theta_cov[i][i].max(0.0).sqrt()).collect(),
                    loglik: f.loglik,
                    zero_variance: f.at_lower_edge.clone(),
                    coefficients,
                    shrunk_controls: !f.spec.control_scales.is_empty(),
                    notes: f.notes.clone(),
                    optimiser: f.optim.clone(),
                });
            }
            FittedModel::HoltWinters(f) => {
                d.converged = f.optim.converged;
                d.holt_winters = Some(HoltWintersDiagnostics {
                    seasonality: f.spec.seasonality,
                    period: f.spec.period,
                    damped: f.spec.damped,
                    alpha: f.params.alpha,
                    beta: f.params.beta,
                    gamma: f.params.gamma,
                    phi: f.params.phi,
                    sigma2: f.sigma2,
                    optimiser: f.optim.clone(),
                });
            }
            FittedModel::Harmonic(f) => {
                d.harmonic = Some(HarmonicDiagnostics {
                    ridge_lambda: f.lambda,
                    effective_parameters: f.effective_params,
                    residual_sd: f.sigma,
                    mean_block_length: f.mean_block_length,
                    columns: f.columns.clone(),
                });
            }
        }
        (d, pre_path)
    }
}

/// Everything a forecast analysis produces.
#[derive(Debug, Clone)]
pub struct ForecastRun {
    /// The fitted model and its inputs.
    pub fitted: Fitted,
    /// Name of the model that gave the counterfactual (as in the backtest table).
    pub chosen: String,
    /// Counterfactual draws.
    pub counterfactual: Counterfactual,
    /// The point counterfactual: the pointwise median of the draws (the forecast's own answer).
    pub median_path: Vec<f64>,
    /// Pre-period rows of the path.
    pub pre_path: Vec<PathPoint>,
    /// Diagnostics.
    pub diagnostics: Diagnostics,
    /// The backtest table (always for `auto`; for a fixed model when `backtest_folds > 0`).
    pub backtest: Option<Backtest>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

/// Pointwise median of path draws.
fn median_path(draws: &[Vec<f64>], len: usize) -> Vec<f64> {
    (0..len)
        .map(|t| {
            let mut v: Vec<f64> = draws.iter().map(|p| p[t]).filter(|x| x.is_finite()).collect();
            v.sort_by(f64::total_cmp);
            aftercast_resample::summary::quantile_sorted(&v, 0.5)
        })
        .collect()
}

/// Run a whole analysis: prepare, (backtest), fit, draw counterfactual paths.
/// This is what the `forecast` verb calls; [`ForecastRun::estimate`] hands the result on.
///
/// # Errors
/// Every [`ForecastError`] of preparation, fitting and simulation.
pub fn analyse(
    series: &Series,
    split: Split,
    params: &ValidParams,
    events: Option<&EventCalendar>,
) -> ForecastResult<ForecastRun> {
    let pp = params.get();
    // the counterfactual paths (and two working copies) must fit in memory
    aftercast_core::budget::check("--draws", pp.inference.draws as u64, 3 * 8 * split.post_end as u64, 0)?;
    let pre: Vec<f64> = series.outcome[..split.pre_end].iter().copied().filter(|v| v.is_finite()).collect();
    if let Some(first) = pre.first()
        && pre.iter().all(|v| v == first)
    {
        return Err(ForecastError::ConstantOutcome { value: *first, periods: pre.len() });
    }
    let (prepared, mut warnings, control_breaks) = prepare(series, &split, params, events)?;
    let models = candidates(params);
    let backtest = (pp.backtest_folds > 0 || pp.model == ModelKind::Auto).then(|| {
        let _stage =
            aftercast_core::progress::stage(format!("backtesting {} model(s) on the pre-period", models.len()), None);
        run_backtest(&prepared, &split, params, &models)
    });
    let chosen = match &backtest {
        Some(bt) if models.len() > 1 => choose(bt, &models, pp.model == ModelKind::Auto, &mut warnings),
        _ => models[0].clone(),
    };
    if let Some(bt) = &backtest
        && bt.rows.is_empty()
        && pp.backtest_folds > 0
    {
        let consequence = if pp.trend.is_none() && chosen.kind == ModelKind::Structural {
            " and the forecast keeps a local level (no slope), since a slope could not be checked: give a longer pre-period, a shorter post-period (--end), or choose the trend with --trend"
        } else {
            ": give a longer pre-period or a shorter post-period (--end)"
        };
        warnings.push(format!(
            "the pre-period is too short for a backtest at the post-period's horizon ({} periods), so the forecast's accuracy at that horizon is unchecked{consequence}",
            split.post_len()
        ));
    }
    if pp.trend.is_none() && pp.backtest_folds == 0 && chosen.kind == ModelKind::Structural {
        warnings.push(
            "with --folds 0 the trend is not checked on a backtest, so the forecast keeps a local level (no slope); if the series grows or shrinks, that reads as an effect: keep the backtest or give --trend".into(),
        );
    }
    let model = fit_model(chosen.kind, &prepared, &chosen.params, split.pre_end)?;
    warnings.extend(model.warnings().iter().cloned());
    let fitted =
        Fitted { model, prepared, split, params: chosen.params.clone(), warnings: warnings.clone(), control_breaks };
    let cf = fitted.counterfactual()?;
    let median = median_path(&cf.draws, cf.observed.len());
    let coverage = backtest
        .as_ref()
        .and_then(|bt| bt.summary.iter().find(|s| s.model == chosen.name && s.folds > 0).map(|s| s.coverage));
    let (diagnostics, pre_path) = fitted.diagnostics(coverage);
    if diagnostics.ljung_box.p_value < LJUNG_BOX_ALPHA {
        let has_ar = matches!(&fitted.model, FittedModel::Structural(f) if f.spec.ar);
        let fix = match (&fitted.model, has_ar, pp.ar) {
            (FittedModel::Structural(_), true, _) => {
                "an AR(1) component is already in the model; add an --events calendar for holidays and outliers, or a missing --season"
            }
            (FittedModel::Structural(_), false, Choice::Off) => "rerun with --ar on (an AR(1) component absorbs it)",
            (FittedModel::Structural(_), false, _) => {
                "an AR(1) component did not help; add an --events calendar for holidays and outliers, or a missing --season"
            }
            _ => "the structural model (--model structural) can absorb it with an AR(1) component (--ar auto or on)",
        };
        warnings.push(format!(
            "the model's one-step-ahead errors in the pre-period are correlated (Ljung-Box p = {:.3}), so the interval may be too narrow: {fix}",
            diagnostics.ljung_box.p_value
        ));
    }
    Ok(ForecastRun {
        fitted,
        chosen: chosen.name,
        counterfactual: cf,
        median_path: median,
        pre_path,
        diagnostics,
        backtest,
        warnings,
    })
}

impl ForecastRun {
    /// The one estimate: the median path as the point counterfactual, the path draws, the
    /// pre-period rows, typed diagnostics, warnings and assumptions.
    pub fn estimate(&self) -> Estimate<ForecastDiagnostics> {
        let pp = self.fitted.params.get();
        let cf = &self.counterfactual;
        let diagnostics = ForecastDiagnostics {
            model: self.diagnostics.clone(),
            chosen_model: self.chosen.clone(),
            draws: pp.inference.draws,
            backtest: self.backtest.clone(),
        };
        let mut est = Estimate::new(
            "forecast",
            self.fitted.model.name(),
            "effect on the series over the post-period (observed minus counterfactual)",
            Point::Path(self.median_path.clone()),
            EffectDraws::Path {
                times: cf.times.clone(),
                observed: cf.observed.clone(),
                counterfactual: cf.draws.clone(),
            },
            Scope::series(),
            diagnostics,
        );
        est.sections.pre_path = self.pre_path.clone();
        for w in &self.warnings {
            est.warn(w.clone());
        }
        est.assumptions = vec![
            "The change did not affect the control series or the event calendar.".into(),
            "Without the change, the pre-period's trend, seasonality and relation to the controls would have continued into the post-period.".into(),
            "Nothing else that moves the outcome happened at the intervention date.".into(),
        ];
        est
    }

    /// The estimate through the one summary path, with the run's own inference options.
    ///
    /// # Errors
    /// [`FinishError`] (a bug, not bad input).
    pub fn summarize(&self, inputs: Vec<aftercast_core::table::InputInfo>) -> Result<Finished, FinishError> {
        aftercast_resample::finish(self.estimate(), &self.fitted.params.get().inference, inputs)
    }
}

#[cfg(test)]
mod tests {
    use super::normal_quantile;

    #[test]
    fn normal_quantile_matches_scipy() {
        // Reference: scipy.stats.norm.ppf(p), scipy 1.17.1; each agrees with mpmath's
        // sqrt(2) * erfinv(2p - 1) at 40 digits to within 4e-16.
        // (p, norm.ppf(p))
        let cases = [
            (0.975, 1.959963984540054),
            (0.95, 1.6448536269514722),
            (0.995, 2.5758293035489004),
            (0.05, -1.6448536269514729),
            (1e-10, -6.361340902404056),
        ];
        for (p, want) in cases {
            let got = normal_quantile(p);
            assert!((got - want).abs() <= 1e-14 * want.abs(), "normal_quantile({p}) = {got}, want {want}");
        }
        assert_eq!(normal_quantile(0.5), 0.0);
        assert_eq!(normal_quantile(0.0), f64::NEG_INFINITY);
        assert_eq!(normal_quantile(1.0), f64::INFINITY);
        assert_eq!(normal_quantile(-0.5), f64::NEG_INFINITY);
        assert!(normal_quantile(f64::NAN).is_nan());
    }
}
