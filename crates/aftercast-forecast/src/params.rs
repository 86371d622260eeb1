//! Parameters of a forecasting analysis: a builder ([`ForecastParams`]) that checking turns into
//! validated parameters ([`ValidParams`]), which fit data.
//!
//! | name | default | meaning | allowed |
//! | --- | --- | --- | --- |
//! | `model` | `structural` | model family | `structural`, `holt-winters`, `harmonic`, `auto` |
//! | `seasons` | from the data's frequency | seasonal components (`7`, `365.25:4`) | period > 1; `K <= period / 2` |
//! | `trend` | auto (`None`) | structural trend; auto: local level vs local linear trend by the pre-period backtest's CRPS, a local level when no backtest fold fits in the pre-period | `level`, `linear-trend`, `damped-trend` |
//! | `ar` | `auto` | AR(1) component in the structural model: `auto` adds it when the one-step residuals are autocorrelated (Ljung-Box p < 0.01) and it lowers the AIC | `auto`, `on`, `off` |
//! | `shrink_controls` | `auto` | shrink the control coefficients together (empirical-Bayes ridge prior); `auto`: from 5 controls on | `auto`, `on`, `off` |
//! | `log` | `false` | model the log of the outcome (multiplicative effects) | outcome > 0 |
//! | `inference` | level 0.9, 1000 draws, seed 20240601, ROPE +-1% | [`Inference`] (shared by every verb) | see there |
//! | `parameter_uncertainty` | `true` | draw structural variances from the MLE's asymptotic normal | |
//! | `parameter_sets` | `100` | distinct parameter draws (one filter pass each) | >= 1 |
//! | `hw_seasonality` | `additive` | Holt-Winters seasonality | `none`, `additive`, `multiplicative` |
//! | `hw_damped` | `false` | damped Holt-Winters trend | |
//! | `ridge` | GCV | harmonic-regression ridge penalty (on standardised columns) | >= 0 |
//! | `backtest_folds` | `3` | rolling origins in the pre-period | 0 ..= 20 |
//! | `backtest_draws` | `200` | path draws per backtest forecast | >= 10 |

use crate::error::{ForecastError, ForecastResult};
use crate::holt_winters::Seasonality;
use crate::structural::{SeasonKind, Trend};
use aftercast_core::DataError;
use aftercast_core::estimate::Inference;
use aftercast_core::time::Frequency;
use serde::{Deserialize, Serialize};

/// Model family.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum ModelKind {
    /// Structural time-series model (state space, exact diffuse Kalman filter).
    #[default]
    Structural,
    /// Holt-Winters exponential smoothing.
    HoltWinters,
    /// Ridge-penalised harmonic regression with stationary-bootstrap residuals.
    Harmonic,
    /// Choose by rolling-origin backtest (lowest CRPS).
    Auto,
}

impl ModelKind {
    /// The name as written on the command line and in results.
    pub fn name(self) -> &'static str {
        match self {
            ModelKind::Structural => "structural",
            ModelKind::HoltWinters => "holt-winters",
            ModelKind::Harmonic => "harmonic",
            ModelKind::Auto => "auto",
        }
    }
}

impl std::str::FromStr for ModelKind {
    type Err = ForecastError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().to_ascii_lowercase().as_str() {
            "structural" => Ok(ModelKind::Structural),
            "holt-winters" | "holtwinters" => Ok(ModelKind::HoltWinters),
            "harmonic" => Ok(ModelKind::Harmonic),
            "auto" => Ok(ModelKind::Auto),
            _ => Err(ForecastError::BadParameter {
                name: "model",
                value: s.to_string(),
                detail: "use structural, holt-winters, harmonic or auto".into(),
            }),
        }
    }
}

/// A choice that can also be left to the data.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Choice {
    /// Decided by the rule documented where the choice is used.
    #[default]
    Auto,
    /// Always.
    On,
    /// Never.
    Off,
}

impl std::str::FromStr for Choice {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim() {
            "auto" => Ok(Choice::Auto),
            "on" => Ok(Choice::On),
            "off" => Ok(Choice::Off),
            other => Err(format!("'{other}' is not one of auto, on, off")),
        }
    }
}

/// The `--trend` option: `auto` or a trend.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct TrendOption(pub Option<Trend>);

impl std::str::FromStr for TrendOption {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        if s.trim() == "auto" {
            return Ok(TrendOption(None));
        }
        s.parse::<Trend>()
            .map(|t| TrendOption(Some(t)))
            .map_err(|_| format!("'{}' is not a trend (auto, level, linear-trend, damped-trend)", s.trim()))
    }
}

/// Longest seasonal period accepted (a guard: a season must repeat within the pre-period, and
/// no series this tool reads has 100,000 periods of pre-period).
pub const MAX_SEASON_PERIOD: f64 = 100_000.0;

/// Number of controls from which `shrink_controls = auto` shrinks their coefficients.
pub const SHRINK_FROM_CONTROLS: usize = 5;

/// A seasonal component as the user gives it: `P` (an integer period is a dummy seasonal, a
/// fractional one trigonometric with `min(4, P/2)` harmonics) or `P:K` (trigonometric, K harmonics).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Season {
    /// The period in time steps.
    pub period: f64,
    /// Harmonics, for a trigonometric seasonal.
    pub harmonics: Option<usize>,
}

impl std::str::FromStr for Season {
    type Err = ForecastError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let bad = |d: &str| ForecastError::BadSeason { text: s.to_string(), detail: d.to_string() };
        let (p, k) = match s.trim().split_once(':') {
            Some((p, k)) => (p, Some(k)),
            None => (s.trim(), None),
        };
        let period: f64 = p.trim().parse().map_err(|_| bad("the period is not a number (examples: 7, 365.25:4)"))?;
        if !period.is_finite() || period < 2.0 {
            return Err(bad("the period must be at least 2"));
        }
        if period > MAX_SEASON_PERIOD {
            return Err(bad("the period is longer than any series can cover (at most 100000 periods)"));
        }
        let harmonics = match k {
            Some(k) => {
                let k: usize = k.trim().parse().map_err(|_| bad("the number of harmonics is not a whole number"))?;
                if k == 0 || 2.0 * k as f64 > period + 1e-12 {
                    return Err(bad("the number of harmonics must be between 1 and period / 2"));
                }
                Some(k)
            }
            None => None,
        };
        Ok(Season { period, harmonics })
    }
}

impl Season {
    /// The structural component this season becomes.
    pub fn kind(&self) -> SeasonKind {
        let is_int = (self.period - self.period.round()).abs() < 1e-9;
        match self.harmonics {
            None if is_int => SeasonKind::Dummy { period: self.period.round() as usize },
            None => {
                SeasonKind::Trig { period: self.period, harmonics: ((self.period / 2.0).floor() as usize).clamp(1, 4) }
            }
            Some(k) => SeasonKind::Trig { period: self.period, harmonics: k },
        }
    }

    /// The component the structural model uses: as [`Season::kind`], except that a dummy
    /// seasonal longer than [`crate::analysis::MAX_DUMMY_PERIOD`] becomes trigonometric with
    /// `min(period / 2, 10)` harmonics (a dummy seasonal has `period - 1` states).
    pub fn structural_kind(&self) -> SeasonKind {
        match self.kind() {
            SeasonKind::Dummy { period } if period > crate::analysis::MAX_DUMMY_PERIOD => {
                SeasonKind::Trig { period: self.period, harmonics: (period / 2).min(10) }
            }
            k => k,
        }
    }

    /// Number of Fourier harmonics used by the harmonic regression for this season.
    pub fn fourier_harmonics(&self) -> usize {
        match self.kind() {
            SeasonKind::Dummy { period } => period / 2,
            SeasonKind::Trig { harmonics, .. } => harmonics,
        }
    }

    /// The seasons that follow a frequency (daily: 7 and 365.25:4; weekly: 52.18:4; monthly:
    /// 12; quarterly: 4; integer periods: none).
    pub fn defaults(freq: Frequency) -> Vec<Season> {
        freq.default_seasons()
            .into_iter()
            .map(|p| {
                let is_int = (p - p.round()).abs() < 1e-9;
                Season { period: p, harmonics: (!is_int).then_some(4) }
            })
            .collect()
    }

    /// Text form (`7` or `365.25:4`).
    pub fn label(&self) -> String {
        match self.kind() {
            SeasonKind::Dummy { period } => format!("{period}"),
            SeasonKind::Trig { period, harmonics } => format!("{period}:{harmonics}"),
        }
    }
}

/// Unchecked parameters (builder). See the module table for defaults and ranges.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ForecastParams {
    /// Model family.
    pub model: ModelKind,
    /// Seasonal components; `None` follows the data's frequency.
    pub seasons: Option<Vec<Season>>,
    /// Structural trend; `None` chooses between a local level and a local linear trend by the
    /// pre-period backtest (a local level when the backtest cannot run).
    pub trend: Option<Trend>,
    /// AR(1) component of the structural model.
    #[serde(default)]
    pub ar: Choice,
    /// Shrinkage of the control coefficients in the structural model.
    #[serde(default)]
    pub shrink_controls: Choice,
    /// Model the log of the outcome.
    pub log: bool,
    /// Controls entered on the log scale (a count that relates to the outcome
    /// multiplicatively); each value must be positive.
    #[serde(default)]
    pub log_controls: Vec<String>,
    /// Level, draws, seed, ROPE and threshold (one definition for every verb).
    pub inference: Inference,
    /// Structural parameter uncertainty.
    pub parameter_uncertainty: bool,
    /// Distinct structural parameter draws.
    pub parameter_sets: usize,
    /// Holt-Winters seasonality.
    pub hw_seasonality: Seasonality,
    /// Holt-Winters damped trend.
    pub hw_damped: bool,
    /// Harmonic-regression ridge penalty; `None` chooses it by generalised cross-validation.
    pub ridge: Option<f64>,
    /// Rolling origins of the pre-period backtest.
    pub backtest_folds: usize,
    /// Draws per backtest forecast.
    pub backtest_draws: usize,
}

impl Default for ForecastParams {
    fn default() -> Self {
        ForecastParams {
            model: ModelKind::Structural,
            seasons: None,
            trend: None,
            ar: Choice::Auto,
            shrink_controls: Choice::Auto,
            log: false,
            log_controls: Vec::new(),
            inference: Inference::default(),
            parameter_uncertainty: true,
            parameter_sets: 100,
            hw_seasonality: Seasonality::Additive,
            hw_damped: false,
            ridge: None,
            backtest_folds: 3,
            backtest_draws: 200,
        }
    }
}

/// Checked parameters; obtained only through [`ForecastParams::check`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidParams(pub(crate) ForecastParams);

impl ForecastParams {
    /// Start from the defaults.
    pub fn builder() -> Self {
        Self::default()
    }
    /// Set the model family.
    pub fn model(mut self, m: ModelKind) -> Self {
        self.model = m;
        self
    }
    /// Add a seasonal component (the first call replaces the frequency defaults).
    pub fn season(mut self, s: Season) -> Self {
        self.seasons.get_or_insert_with(Vec::new).push(s);
        self
    }
    /// Use no seasonal component at all.
    pub fn no_seasons(mut self) -> Self {
        self.seasons = Some(Vec::new());
        self
    }
    /// Set the structural trend (`None`: chosen by the pre-period backtest).
    pub fn trend(mut self, t: impl Into<Option<Trend>>) -> Self {
        self.trend = t.into();
        self
    }
    /// AR(1) component: auto, on or off.
    pub fn ar(mut self, c: Choice) -> Self {
        self.ar = c;
        self
    }
    /// Shrinkage of the control coefficients: auto, on or off.
    pub fn shrink_controls(mut self, c: Choice) -> Self {
        self.shrink_controls = c;
        self
    }
    /// Model the log of the outcome.
    pub fn log(mut self, on: bool) -> Self {
        self.log = on;
        self
    }
    /// Controls to enter on the log scale.
    pub fn log_controls(mut self, names: Vec<String>) -> Self {
        self.log_controls = names;
        self
    }
    /// Level, draws, seed, ROPE and threshold at once.
    pub fn inference(mut self, inf: Inference) -> Self {
        self.inference = inf;
        self
    }
    /// Interval level.
    pub fn level(mut self, l: f64) -> Self {
        self.inference.level = l;
        self
    }
    /// Number of draws.
    pub fn draws(mut self, n: usize) -> Self {
        self.inference.draws = n;
        self
    }
    /// Seed.
    pub fn seed(mut self, s: u64) -> Self {
        self.inference.seed = s;
        self
    }
    /// Rolling origins of the backtest (0 = none).
    pub fn backtest_folds(mut self, n: usize) -> Self {
        self.backtest_folds = n;
        self
    }

    /// Check every parameter against its allowed range.
    ///
    /// # Errors
    /// [`ForecastError::BadParameter`] naming the first offending parameter.
    pub fn check(self) -> ForecastResult<ValidParams> {
        let bad = |name: &'static str, value: String, detail: &str| {
            Err(ForecastError::BadParameter { name, value, detail: detail.to_string() })
        };
        if let Err(DataError::BadArgument { what, text, detail }) = self.inference.check() {
            return bad(
                match what.as_str() {
                    "--level" => "level",
                    "--draws" => "draws",
                    "--threshold" => "threshold",
                    _ => "rope",
                },
                text,
                &detail,
            );
        }
        if self.parameter_sets == 0 {
            return bad("parameter_sets", "0".into(), "at least 1");
        }
        if self.backtest_folds > 20 {
            return bad("backtest_folds", self.backtest_folds.to_string(), "at most 20");
        }
        if self.backtest_draws < 10 {
            return bad("backtest_draws", self.backtest_draws.to_string(), "at least 10 draws are needed");
        }
        if let Some(r) = self.ridge
            && !(r.is_finite() && r >= 0.0)
        {
            return bad("ridge", r.to_string(), "must be a finite number >= 0");
        }
        if let Some(ss) = &self.seasons {
            for s in ss {
                if !(s.period.is_finite() && s.period >= 2.0 && s.period <= MAX_SEASON_PERIOD) {
                    return bad("season", s.period.to_string(), "the period must be between 2 and 100000");
                }
                if let Some(k) = s.harmonics
                    && (k == 0 || 2.0 * k as f64 > s.period + 1e-12)
                {
                    return bad("season", s.label(), "harmonics must be between 1 and period / 2");
                }
            }
        }
        Ok(ValidParams(self))
    }
}

impl ValidParams {
    /// The checked values.
    pub fn get(&self) -> &ForecastParams {
        &self.0
    }

    /// The same parameters with the seasons fixed (as the analysis resolved them on its whole
    /// pre-period, so a shorter placebo fit keeps them) and another number of draws and seed:
    /// what a placebo fit of a plan runs with.
    pub fn for_placebo(&self, seasons: Vec<Season>, draws: usize, seed: u64) -> ValidParams {
        let mut p = self.0.clone();
        p.seasons = Some(seasons);
        p.inference.draws = draws;
        p.inference.seed = seed;
        ValidParams(p)
    }
}
