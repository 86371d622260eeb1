//! The synthetic control of `aftercast-synth` as a [`PathModel`]: the target series is the
//! treated unit and the controls are the donors. The counterfactual draws are the synthetic
//! control's own (placebo-scaled in-space draws, see the synthetic control's docs), so their
//! number is set by the donor pool, not by the `draws` argument.

use crate::backtest::{ModelError, PathModel};
use aftercast_core::panel::Panel;
use aftercast_core::table::InputInfo;
use aftercast_core::time::{Frequency, TimeAxis, TimePoint};
use aftercast_synth::{Method, SynthParams};

/// A synthetic control for backtests and series-level comparisons.
#[derive(Debug, Clone, PartialEq)]
pub struct SyntheticModel {
    /// The synthetic-control method.
    pub method: Method,
    /// Interval level of its draws.
    pub level: f64,
}

impl Default for SyntheticModel {
    fn default() -> Self {
        SyntheticModel { method: Method::Weights, level: 0.9 }
    }
}

impl PathModel for SyntheticModel {
    fn name(&self) -> String {
        format!("synthetic({})", self.method.name())
    }

    fn paths(
        &self,
        y: &[f64],
        controls: &[Vec<f64>],
        horizon: usize,
        _draws: usize,
        seed: u64,
    ) -> Result<Vec<Vec<f64>>, ModelError> {
        let n = y.len();
        let total = n + horizon;
        let axis = TimeAxis::regular(Frequency::Period, TimePoint::Period(0), total)?;
        // The target's future is unknown to the model: it is filled with its last pre-period
        // value, which enters only the treated unit's own post-period gap, not the
        // counterfactual (a weighted mix of donors) or its draws.
        let last = y.iter().rev().copied().find(|v| v.is_finite()).unwrap_or(0.0);
        let mut target: Vec<f64> = y.iter().map(|v| if v.is_finite() { *v } else { last }).collect();
        target.extend(std::iter::repeat_n(last, horizon));
        let mut outcome = vec![target];
        let mut units = vec!["target".to_string()];
        for (j, c) in controls.iter().enumerate() {
            outcome.push(c[..total].to_vec());
            units.push(format!("donor {}", j + 1));
        }
        let panel = Panel {
            name: "outcome".into(),
            units,
            axis,
            outcome,
            covariates: Vec::new(),
            input: InputInfo { path: "backtest".into(), sha256: String::new(), rows: total * (controls.len() + 1) },
        };
        let fit = SynthParams::new().method(self.method).level(self.level).seed(seed).check()?.fit(
            &panel,
            &["target".to_string()],
            TimePoint::Period(n as i64),
        )?;
        let draws = fit.draws.counterfactual;
        if draws.is_empty() {
            return Err(format!("the synthetic control gave no counterfactual draws ({})", fit.draws.source).into());
        }
        Ok(draws)
    }
}
