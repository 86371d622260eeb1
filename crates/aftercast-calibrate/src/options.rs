//! Options shared by every comparison: interval level, number of draws, seed, ROPE.

use crate::error::{CalibrateError, CalibrateResult};
use aftercast_core::result::Rope;
use serde::{Deserialize, Serialize};

/// How draws are made and summarised.
///
/// | field | default | meaning | allowed |
/// | --- | --- | --- | --- |
/// | `level` | 0.9 | interval level | (0, 1) |
/// | `draws` | 2000 | bootstrap replicates / simulated paths | 50..=1_000_000 |
/// | `seed` | 20260301 | seed of every random stream | any |
/// | `rope` | +-1% relative | region of practical equivalence of the verdicts | low < high |
/// | `threshold` | none | effect size whose exceedance probability is reported | finite |
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct DrawOptions {
    /// Interval level.
    pub level: f64,
    /// Number of draws.
    pub draws: usize,
    /// Seed.
    pub seed: u64,
    /// ROPE of the verdicts.
    pub rope: Rope,
    /// Optional threshold of interest.
    pub threshold: Option<f64>,
}

impl Default for DrawOptions {
    fn default() -> Self {
        DrawOptions { level: 0.9, draws: 2000, seed: 20260301, rope: Rope::default(), threshold: None }
    }
}

impl DrawOptions {
    /// Check the ranges.
    ///
    /// # Errors
    /// [`CalibrateError::BadParameter`] naming the flag.
    pub fn check(&self) -> CalibrateResult<()> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(CalibrateError::BadParameter {
                name: "--level",
                value: self.level.to_string(),
                detail: "strictly between 0 and 1".into(),
            });
        }
        if !(50..=1_000_000).contains(&self.draws) {
            return Err(CalibrateError::BadParameter {
                name: "--draws",
                value: self.draws.to_string(),
                detail: "between 50 and 1000000".into(),
            });
        }
        if let Some(t) = self.threshold
            && !t.is_finite()
        {
            return Err(CalibrateError::BadParameter {
                name: "--threshold",
                value: t.to_string(),
                detail: "a finite number".into(),
            });
        }
        Ok(())
    }
}
