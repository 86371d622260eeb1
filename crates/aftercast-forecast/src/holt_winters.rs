//! Holt-Winters exponential smoothing: additive trend (optionally damped) with none, additive
//! or multiplicative seasonality, in the error-correction form of Hyndman & Athanasopoulos
//! (Forecasting: Principles and Practice, section 8.3):
//!
//! ```text
//! yhat[t] = (l[t-1] + phi b[t-1]) + s[t-m]              (additive; times s[t-m] if multiplicative)
//! l[t]    = alpha (y[t] - s[t-m]) + (1-alpha)(l[t-1] + phi b[t-1])      (y[t] / s[t-m] if mult.)
//! b[t]    = beta (l[t] - l[t-1]) + (1-beta) phi b[t-1]
//! s[t]    = gamma (y[t] - l[t-1] - phi b[t-1]) + (1-gamma) s[t-m]      (y[t] / (l + phi b) if mult.)
//! ```
//!
//! Smoothing parameters are fitted by least squares (SSE) with L-BFGS on logit-transformed
//! values. Missing observations leave the states to run on their forecasts. Prediction paths
//! are simulated by feeding `yhat + e`, `e ~ N(0, sigma^2)`, back through the recursions
//! (`sigma^2` = SSE / (n - number of smoothing parameters)).

use crate::error::{ForecastError, ForecastResult};
use crate::optim::{OptimReport, minimise};
use aftercast_resample::rng::{Stream, par_draws};
use rand::RngExt;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};

/// Seasonality of a Holt-Winters model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Seasonality {
    /// No seasonal component.
    None,
    /// Seasonal effects add to the level.
    Additive,
    /// Seasonal effects multiply the level (needs positive data).
    Multiplicative,
}

/// Structure of a Holt-Winters model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct HwSpec {
    /// Whether a trend is included.
    pub trend: bool,
    /// Whether the trend is damped (phi estimated in [0.8, 0.98], common practice).
    pub damped: bool,
    /// Seasonality.
    pub seasonality: Seasonality,
    /// Seasonal period (ignored without seasonality).
    pub period: usize,
}

/// Smoothing parameters.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct HwParams {
    /// Level smoothing.
    pub alpha: f64,
    /// Trend smoothing.
    pub beta: f64,
    /// Seasonal smoothing.
    pub gamma: f64,
    /// Damping (1 when undamped).
    pub phi: f64,
}

/// Initial states: level, trend and the `m` seasonal values `s[1-m], ..., s[0]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HwInit {
    /// Initial level `l[0]`.
    pub level: f64,
    /// Initial trend `b[0]`.
    pub trend: f64,
    /// Initial seasonal values, oldest first.
    pub seasonal: Vec<f64>,
}

/// States after running the recursions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HwState {
    /// Level.
    pub level: f64,
    /// Trend.
    pub trend: f64,
    /// The last `m` seasonal values, oldest first.
    pub seasonal: Vec<f64>,
}

impl HwSpec {
    fn m(&self) -> usize {
        if self.seasonality == Seasonality::None { 0 } else { self.period }
    }

    /// One-step forecast from a state.
    fn yhat(&self, st: &HwState, phi: f64) -> f64 {
        let base = st.level + if self.trend { phi * st.trend } else { 0.0 };
        match self.seasonality {
            Seasonality::None => base,
            Seasonality::Additive => base + st.seasonal[0],
            Seasonality::Multiplicative => base * st.seasonal[0],
        }
    }

    /// Update a state with observation `y` (NaN: use the forecast).
    fn update(&self, st: &mut HwState, p: &HwParams, y: f64) {
        let phi = if self.trend { p.phi } else { 0.0 };
        let y = if y.is_finite() { y } else { self.yhat(st, p.phi) };
        let base = st.level + phi * st.trend;
        let s_old = if self.m() > 0 { st.seasonal[0] } else { 0.0 };
        let deseason = match self.seasonality {
            Seasonality::None => y,
            Seasonality::Additive => y - s_old,
            Seasonality::Multiplicative => y / s_old,
        };
        let level = p.alpha * deseason + (1.0 - p.alpha) * base;
        if self.trend {
            st.trend = p.beta * (level - st.level) + (1.0 - p.beta) * phi * st.trend;
        }
        if self.m() > 0 {
            let s_new = match self.seasonality {
                Seasonality::Additive => p.gamma * (y - base) + (1.0 - p.gamma) * s_old,
                Seasonality::Multiplicative => p.gamma * (y / base) + (1.0 - p.gamma) * s_old,
                Seasonality::None => 0.0,
            };
            st.seasonal.remove(0);
            st.seasonal.push(s_new);
        }
        st.level = level;
    }

    /// Run the recursions over `y`: one-step fitted values, final state, SSE over observed values.
    pub fn run(&self, p: &HwParams, init: &HwInit, y: &[f64]) -> (Vec<f64>, HwState, f64) {
        let mut st = HwState { level: init.level, trend: init.trend, seasonal: init.seasonal.clone() };
        let mut fitted = Vec::with_capacity(y.len());
        let mut sse = 0.0;
        for &yt in y {
            let f = self.yhat(&st, p.phi);
            fitted.push(f);
            if yt.is_finite() {
                sse += (yt - f).powi(2);
            }
            self.update(&mut st, p, yt);
        }
        (fitted, st, sse)
    }

    /// Point forecasts `h = 1..=horizon` steps after a state.
    pub fn forecast(&self, p: &HwParams, st: &HwState, horizon: usize) -> Vec<f64> {
        let phi = if self.trend { p.phi } else { 0.0 };
        let m = self.m();
        let mut damp = 0.0;
        let mut pw = 1.0;
        (1..=horizon)
            .map(|h| {
                pw *= phi;
                damp += pw;
                let base = st.level + damp * st.trend;
                match self.seasonality {
                    Seasonality::None => base,
                    Seasonality::Additive => base + st.seasonal[(h - 1) % m],
                    Seasonality::Multiplicative => base * st.seasonal[(h - 1) % m],
                }
            })
            .collect()
    }

    /// Heuristic initial states from the first two seasons (level: mean of the first season;
    /// trend: difference of the first two season means per period; seasonal: first season's
    /// deviations from its mean, or ratios to it).
    pub fn initial_states(&self, y: &[f64]) -> HwInit {
        let m = self.m().max(1);
        let obs: Vec<f64> = y.iter().copied().filter(|v| v.is_finite()).collect();
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len().max(1) as f64;
        let first = &obs[..m.min(obs.len())];
        let l0 = mean(first);
        let b0 = if self.trend && obs.len() >= 2 * m { (mean(&obs[m..2 * m]) - l0) / m as f64 } else { 0.0 };
        let seasonal = match self.seasonality {
            Seasonality::None => Vec::new(),
            Seasonality::Additive => first.iter().map(|v| v - l0).collect(),
            Seasonality::Multiplicative => first.iter().map(|v| v / l0).collect(),
        };
        HwInit { level: l0, trend: b0, seasonal }
    }

    fn n_smoothing(&self) -> usize {
        1 + usize::from(self.trend) + usize::from(self.m() > 0) + usize::from(self.trend && self.damped)
    }

    fn params_from(&self, th: &[f64]) -> HwParams {
        let sig = |x: f64| 1.0 / (1.0 + (-x).exp());
        let mut i = 0;
        let mut next = || {
            let v = th[i];
            i += 1;
            v
        };
        let alpha = sig(next());
        let beta = if self.trend { sig(next()) } else { 0.0 };
        let gamma = if self.m() > 0 { sig(next()) } else { 0.0 };
        let phi = if self.trend && self.damped { 0.8 + 0.18 * sig(next()) } else { 1.0 };
        HwParams { alpha, beta, gamma, phi }
    }
}

/// A fitted Holt-Winters model.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct HwFit {
    /// Structure.
    pub spec: HwSpec,
    /// Smoothing parameters.
    pub params: HwParams,
    /// Initial states used.
    pub init: HwInit,
    /// State after the fitting span.
    pub state: HwState,
    /// One-step fitted values over the fitting span.
    pub fitted: Vec<f64>,
    /// Residual variance SSE / (n - number of smoothing parameters).
    pub sigma2: f64,
    /// How the optimiser stopped.
    pub optim: OptimReport,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

/// Fit the smoothing parameters by least squares.
///
/// # Errors
/// [`ForecastError::TooShort`] with fewer than two seasons (or 4 values) observed,
/// [`ForecastError::FirstSeasonMissing`] with a missing value in the first season;
/// [`ForecastError::NonPositiveForMultiplicative`] for multiplicative seasonality on data with
/// a non-positive value; [`ForecastError::Optimiser`].
pub fn fit(spec: &HwSpec, y: &[f64], at: &str) -> ForecastResult<HwFit> {
    let m = spec.m();
    let n_obs = y.iter().filter(|v| v.is_finite()).count();
    let needed = (2 * m).max(4) + spec.n_smoothing();
    if n_obs < needed {
        return Err(ForecastError::TooShort { model: "holt-winters", needed, found: n_obs, at: at.to_string() });
    }
    if y.iter().take(m.max(1)).any(|v| !v.is_finite()) {
        return Err(ForecastError::FirstSeasonMissing { season: m.max(1), at: at.to_string() });
    }
    if spec.seasonality == Seasonality::Multiplicative
        && let Some(v) = y.iter().find(|v| v.is_finite() && **v <= 0.0)
    {
        return Err(ForecastError::NonPositiveForMultiplicative { at: at.to_string(), value: *v });
    }
    let init = spec.initial_states(y);
    let scale = {
        let obs: Vec<f64> = y.iter().copied().filter(|v| v.is_finite()).collect();
        let mu = obs.iter().sum::<f64>() / obs.len() as f64;
        (obs.iter().map(|v| (v - mu).powi(2)).sum::<f64>() / obs.len() as f64).max(1e-300)
    };
    let obj = |th: &[f64]| {
        let p = spec.params_from(th);
        let (_, _, sse) = spec.run(&p, &init, y);
        let pen: f64 = th.iter().map(|t| (t.abs() - 12.0).max(0.0).powi(2)).sum();
        sse / (scale * n_obs as f64) + pen
    };
    let mut x0 = vec![-1.0];
    if spec.trend {
        x0.push(-2.5);
    }
    if m > 0 {
        x0.push(-2.0);
    }
    if spec.trend && spec.damped {
        x0.push(1.0);
    }
    let out =
        minimise(&obj, &x0, 300, 1e-7).map_err(|detail| ForecastError::Optimiser { model: "holt-winters", detail })?;
    let params = spec.params_from(&out.x);
    let (fitted, state, sse) = spec.run(&params, &init, y);
    let dof = n_obs.saturating_sub(spec.n_smoothing()).max(1);
    let mut warnings = Vec::new();
    if !out.report.converged {
        warnings.push(format!(
            "holt-winters: the search for the smoothing parameters ({}) stopped before it settled ({}), so the forecast may fit the pre-period worse than it could and the interval may be off: compare with --model structural or harmonic",
            out.report.solver, out.report.reason
        ));
    }
    Ok(HwFit { spec: *spec, params, init, state, fitted, sigma2: sse / dof as f64, optim: out.report, warnings })
}

impl HwFit {
    /// Simulate `draws` joint paths of `skip + horizon` future periods (the first `skip` are
    /// dropped), feeding simulated observations back through the recursions.
    pub fn simulate(&self, skip: usize, horizon: usize, draws: usize, seed: u64) -> Vec<Vec<f64>> {
        let sd = self.sigma2.sqrt();
        par_draws(seed, draws, |_, rng: &mut Stream| {
            let mut st = self.state.clone();
            let mut path = Vec::with_capacity(horizon);
            for h in 0..skip + horizon {
                let e: f64 = rng.sample(StandardNormal);
                let y = self.spec.yhat(&st, self.params.phi) + sd * e;
                if h >= skip {
                    path.push(y);
                }
                self.spec.update(&mut st, &self.params, y);
            }
            path
        })
    }
}

impl std::str::FromStr for Seasonality {
    type Err = String;
    /// `additive` or `multiplicative` (`none` leaves the season out).
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim() {
            "none" => Ok(Seasonality::None),
            "additive" => Ok(Seasonality::Additive),
            "multiplicative" => Ok(Seasonality::Multiplicative),
            other => Err(format!("'{other}' is not a seasonality (additive, multiplicative, none)")),
        }
    }
}
