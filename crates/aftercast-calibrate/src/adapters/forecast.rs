//! The forecasting analysis of `aftercast-forecast` as a [`PathModel`].
//!
//! [`ForecastPlan`] is what a plan of a `forecast` analysis runs: at each placebo date it calls
//! the analysis's own fitting path ([`ValidParams::fit`]: preparation of the log scale,
//! controls and events, the backtest choice of trend or model where the analysis has one, the
//! fit) and its own counterfactual draws ([`Fitted::counterfactual`](aftercast_forecast::Fitted)),
//! on the series cut at the placebo window's end. The only difference from the analysis is that
//! what the analysis resolves on its whole pre-period stays fixed: the seasons (so a shorter
//! placebo fit does not quietly drop its yearly season) and, where the model or trend is left
//! to the data, the model the analysis's own backtest chooses ([`ForecastPlan::choose`]), so
//! every placebo date previews the model the analysis will run.
//!
//! [`StructuralModel`] is a bare structural model on plain vectors, for series-level
//! comparisons with experiments.

use crate::backtest::{ModelError, PathModel};
use aftercast_core::series::{Series, Split};
use aftercast_core::time::TimeAxis;
use aftercast_forecast::analysis::prepare;
use aftercast_forecast::structural::{self, Initialisation, SeasonKind, SimulationOptions, StructuralSpec, Trend};
use aftercast_forecast::{EventCalendar, ForecastResult, ModelKind, Season, ValidParams};

/// A forecast analysis set-up, ready to be fitted at any placebo date of its series.
#[derive(Debug, Clone)]
pub struct ForecastPlan<'a> {
    series: &'a Series,
    params: ValidParams,
    events: Option<&'a EventCalendar>,
    washout: usize,
    seasons: Vec<Season>,
    name: String,
    split: Split,
    /// The chosen model fitted on the real pre-period: where each placebo fit's optimiser
    /// starts (the optimum it finds is its own).
    warm: Option<aftercast_forecast::FittedModel>,
    /// Two cycles are needed: the seasons follow the data's frequency, or the model is chosen
    /// by backtest.
    two_cycles: bool,
}

impl<'a> ForecastPlan<'a> {
    /// The set-up of an analysis of `series` with its real split (the pre-period the placebo
    /// dates are placed in), parameters and events. The seasons are resolved as the analysis
    /// resolves them on that pre-period.
    ///
    /// # Errors
    /// The analysis's preparation errors (log of a non-positive value, unknown log control,
    /// bad season, ...).
    pub fn new(
        series: &'a Series,
        split: Split,
        params: &ValidParams,
        events: Option<&'a EventCalendar>,
    ) -> ForecastResult<Self> {
        let (prepared, _, _) = prepare(series, &split, params, events)?;
        let seasons = prepared.seasons;
        let name = params.get().model.name().to_string();
        let two_cycles = params.get().model == ModelKind::Auto || params.get().seasons.is_none();
        Ok(ForecastPlan {
            warm: None,
            two_cycles,
            series,
            params: params.clone(),
            events,
            washout: split.post_start - split.pre_end,
            seasons,
            name,
            split,
        })
    }

    /// Fix the model the analysis's own backtest chooses (where the model or trend is left to
    /// the data) on the real pre-period, at the real post-period's horizon (or `horizon` when
    /// the plan is made before the change). Returns the chosen model's name.
    ///
    /// # Errors
    /// Preparation errors.
    pub fn choose(&mut self, horizon: usize) -> ForecastResult<String> {
        let mut split = self.split;
        if split.post_len() == 0 {
            split.post_end = split.post_start + horizon;
        }
        let fixed = self.params.for_placebo(self.seasons.clone(), self.params.get().inference.draws, 0);
        let series = if split.post_end > self.series.len() {
            // before the change: the choice's backtest reads only the pre-period, so the
            // series is padded with missing values to the horizon
            let mut s = self.series.clone();
            let extra = split.post_end - s.len();
            let last = *s.axis.points().last().ok_or_else(|| aftercast_forecast::ForecastError::BadParameter {
                name: "data",
                value: "0 periods".into(),
                detail: "the series is empty".into(),
            })?;
            let mut pts = s.axis.points().to_vec();
            for k in 1..=extra {
                pts.push(aftercast_core::time::step_forward(s.axis.frequency(), last, k as i64).unwrap_or(last));
            }
            s.axis = TimeAxis::from_regular_points(s.axis.frequency(), pts);
            s.outcome.extend(std::iter::repeat_n(f64::NAN, extra));
            for (_, v) in &mut s.controls {
                let l = *v.last().unwrap_or(&0.0);
                v.extend(std::iter::repeat_n(l, extra));
            }
            std::borrow::Cow::Owned(s)
        } else {
            std::borrow::Cow::Borrowed(self.series)
        };
        let chosen = fixed.chosen(&series, split, self.events)?;
        self.params = chosen.params;
        // the warm start: the chosen model on the real pre-period
        let real = Split { post_end: split.post_start + 1, ..split };
        self.warm = if real.post_end <= series.len() {
            self.params.fit(&series, real, self.events).ok().map(|f| f.model)
        } else {
            None
        };
        let pp = self.params.get();
        self.name = chosen.name.clone();
        let labels: Vec<String> = self.seasons.iter().map(Season::label).collect();
        if !labels.is_empty() {
            self.name.push_str(&format!(", seasons {}", labels.join(", ")));
        }
        if pp.log {
            self.name.push_str(", log scale");
        }
        Ok(chosen.name)
    }

    /// The shortest fitting span a placebo date may have, plus the washout: one full cycle
    /// of the longest season the user gave, and two cycles of a season that follows the data's
    /// frequency (the analysis itself keeps such a season only with two cycles, so a placebo
    /// fit on less would run a model the analysis never runs), or when the model is chosen by
    /// backtest (which needs a cycle to score on); at least 30 periods (common practice for
    /// a model with a handful of parameters, and more than the structural model's own
    /// minimum with a weekly season and a few regressors).
    pub fn min_train(&self) -> usize {
        let cycles = if self.two_cycles { 2.0 } else { 1.0 };
        let longest = self.seasons.iter().map(|s| s.period).fold(0.0, f64::max);
        ((longest * cycles).ceil() as usize).max(30) + self.washout
    }
}

impl PathModel for ForecastPlan<'_> {
    fn name(&self) -> String {
        self.name.clone()
    }

    /// `y` is the series before the placebo date (its length is the date's position); the
    /// controls passed are ignored: the set-up reads its own series, cut `horizon` periods
    /// after the date, so that controls, events and the calendar stay those of the analysis.
    fn paths(
        &self,
        y: &[f64],
        _controls: &[Vec<f64>],
        horizon: usize,
        draws: usize,
        seed: u64,
    ) -> Result<Vec<Vec<f64>>, ModelError> {
        let origin = y.len();
        let end = origin + horizon;
        if end > self.series.len() || origin < self.washout {
            return Err(format!("placebo window {origin}..{end} is outside the series").into());
        }
        let s = self.series;
        let cut = Series {
            name: s.name.clone(),
            axis: TimeAxis::from_regular_points(s.axis.frequency(), s.axis.points()[..end].to_vec()),
            outcome: s.outcome[..end].to_vec(),
            controls: s.controls.iter().map(|(n, v)| (n.clone(), v[..end].to_vec())).collect(),
            input: s.input.clone(),
            notes: Vec::new(),
        };
        let split = Split { pre_end: origin - self.washout, post_start: origin, post_end: end };
        let params = self.params.for_placebo(self.seasons.clone(), draws, seed);
        let fitted = params.fit_from(&cut, split, self.events, self.warm.as_ref())?;
        Ok(fitted.counterfactual()?.draws)
    }
}

/// A structural model for series-level comparisons.
#[derive(Debug, Clone, PartialEq)]
pub struct StructuralModel {
    /// Trend component.
    pub trend: Trend,
    /// Seasonal components.
    pub seasons: Vec<SeasonKind>,
    /// Draw parameters from the MLE's asymptotic normal too.
    pub parameter_uncertainty: bool,
    /// Distinct parameter draws (each one filter pass).
    pub parameter_sets: usize,
}

impl StructuralModel {
    /// Local level (random walk plus noise), no season.
    pub fn local_level() -> Self {
        StructuralModel { trend: Trend::Level, seasons: Vec::new(), parameter_uncertainty: true, parameter_sets: 20 }
    }

    /// Local linear trend with a weekly dummy seasonal: the usual model of daily totals.
    pub fn daily() -> Self {
        StructuralModel {
            trend: Trend::LinearTrend,
            seasons: vec![SeasonKind::Dummy { period: 7 }],
            parameter_uncertainty: true,
            parameter_sets: 20,
        }
    }
}

impl PathModel for StructuralModel {
    fn name(&self) -> String {
        let trend = match self.trend {
            Trend::Level => "level",
            Trend::LinearTrend => "trend",
            Trend::DampedTrend => "damped",
        };
        let mut s = format!("structural({trend}");
        for k in &self.seasons {
            match k {
                SeasonKind::Dummy { period } => s.push_str(&format!(", season {period}")),
                SeasonKind::Trig { period, harmonics } => s.push_str(&format!(", season {period}:{harmonics}")),
            }
        }
        s.push(')');
        s
    }

    fn paths(
        &self,
        y: &[f64],
        controls: &[Vec<f64>],
        horizon: usize,
        draws: usize,
        seed: u64,
    ) -> Result<Vec<Vec<f64>>, ModelError> {
        let spec = StructuralSpec {
            trend: self.trend,
            seasons: self.seasons.clone(),
            n_regressors: controls.len(),
            ar: false,
            control_scales: vec![],
            absent: vec![],
            init: Initialisation::ExactDiffuse,
        };
        let fit = structural::fit(&spec, y, controls, None)?;
        let opts = SimulationOptions {
            draws,
            seed,
            parameter_uncertainty: self.parameter_uncertainty,
            parameter_sets: self.parameter_sets,
        };
        Ok(structural::simulate(&fit, y, controls, 0, horizon, &opts)?)
    }
}
