//! The structural state-space model of `aftercast-forecast` as a [`PathModel`]: maximum
//! likelihood on the prefix, then simulated joint paths (state, future-noise and, optionally,
//! parameter uncertainty). Controls enter as regressors with time-invariant coefficients.

use crate::backtest::{ModelError, PathModel};
use aftercast_forecast::structural::{self, Initialisation, SeasonKind, SimulationOptions, StructuralSpec, Trend};

/// A structural model for backtests and series-level comparisons.
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
