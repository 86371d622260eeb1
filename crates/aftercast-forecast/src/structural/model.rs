//! Components of the structural model and their state-space form.
//!
//! State vector, in order: level; slope (linear or damped trend); for each season its states
//! (dummy seasonal: `s - 1` states; trigonometric: `2K` states, or `2K - 1` when `2K = s`, because
//! the sine partner of the frequency-pi harmonic is never observed); the autoregressive
//! component when present (one stationary state); one regression coefficient per regressor
//! (controls, then event indicators). Regression coefficients are states with no
//! disturbance (time-invariant), so they are estimated by the filter, not by the optimiser.

use serde::{Deserialize, Serialize};

/// The trend part of a structural model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Trend {
    /// Local level: `mu[t+1] = mu[t] + eta[t]` (the default: a counterfactual forecast carries
    /// the last level forward and no extrapolated slope).
    #[default]
    Level,
    /// Local linear trend: `mu[t+1] = mu[t] + nu[t] + eta[t]`, `nu[t+1] = nu[t] + zeta[t]`.
    LinearTrend,
    /// Damped trend: `nu[t+1] = phi nu[t] + zeta[t]` with `0 < phi < 1` estimated by MLE.
    DampedTrend,
}

/// One seasonal component.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum SeasonKind {
    /// Dummy seasonal of integer period `s`: the `s` effects sum to a zero-mean disturbance.
    Dummy {
        /// The period (2 or more).
        period: usize,
    },
    /// Trigonometric seasonal of (possibly fractional) period `s` with `K` harmonics
    /// `lambda_j = 2 pi j / s`, each a stochastic cycle with the same disturbance variance.
    Trig {
        /// The period (more than 2).
        period: f64,
        /// Number of harmonics, 1 <= K <= s/2.
        harmonics: usize,
    },
}

impl SeasonKind {
    /// Number of states this component uses.
    pub fn n_states(&self) -> usize {
        match *self {
            SeasonKind::Dummy { period } => period - 1,
            SeasonKind::Trig { period, harmonics } => {
                let mut n = 2 * harmonics;
                if (2.0 * harmonics as f64 - period).abs() < 1e-12 {
                    n -= 1;
                }
                n
            }
        }
    }
}

/// How the initial state is treated.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Initialisation {
    /// Exact diffuse initialisation (Durbin & Koopman 2012, section 5.2): the nonstationary
    /// states have an infinite-variance prior handled by the exact initial Kalman filter.
    #[default]
    ExactDiffuse,
    /// Approximate diffuse: variance `kappa` for nonstationary states, and the first
    /// (number of diffuse states) log-likelihood terms are left out.
    ApproximateDiffuse {
        /// The large prior variance (e.g. 1e6).
        kappa: f64,
    },
}

/// The structure of a structural model (which components), without parameter values.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StructuralSpec {
    /// The trend.
    pub trend: Trend,
    /// The seasonal components.
    pub seasons: Vec<SeasonKind>,
    /// Number of regressors (controls and event indicators) whose coefficients are states.
    pub n_regressors: usize,
    /// An AR(1) component `c[t+1] = rho c[t] + kappa[t]` (stationary, `|rho| < 1`) that absorbs
    /// autocorrelated departures from the other components.
    #[serde(default)]
    pub ar: bool,
    /// Shrinkage of the control coefficients: when not empty, the first `control_scales.len()`
    /// regressors (the controls) get a proper prior `N(0, tau2 / control_scales[k])` (their
    /// pre-period variances) instead of a diffuse one, with `tau2` estimated by maximum
    /// likelihood (an empirical-Bayes ridge: many candidate controls are shrunk together, and
    /// their remaining uncertainty is carried by the filter into the paths).
    #[serde(default)]
    pub control_scales: Vec<f64>,
    /// Regressors (indices among the regressors) whose coefficient is fixed at zero: constant
    /// over the fitting span (an event that has not occurred yet in a backtest fold), so the
    /// data cannot learn it; its effect stays out of the forecast.
    #[serde(default)]
    pub absent: Vec<usize>,
    /// Initial-state treatment.
    pub init: Initialisation,
}

/// Parameter values of a structural model, on the natural scale.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StructuralParams {
    /// Irregular (observation) variance.
    pub irregular: f64,
    /// Level disturbance variance.
    pub level: f64,
    /// Slope disturbance variance (trend models only).
    pub slope: Option<f64>,
    /// One disturbance variance per seasonal component.
    pub seasons: Vec<f64>,
    /// Damping factor (damped trend only).
    pub damping: Option<f64>,
    /// Disturbance variance of the AR(1) component.
    #[serde(default)]
    pub ar_variance: Option<f64>,
    /// Coefficient of the AR(1) component.
    #[serde(default)]
    pub ar_coef: Option<f64>,
    /// Prior variance `tau2` of a standardised control's coefficient (shrinkage only).
    #[serde(default)]
    pub control_prior: Option<f64>,
}

/// Lower and upper bounds of the damping factor.
pub const DAMPING_RANGE: (f64, f64) = (0.0, 1.0);

impl StructuralSpec {
    /// Number of variances among the optimiser's parameters (they come first).
    pub fn n_variances(&self) -> usize {
        2 + usize::from(self.trend != Trend::Level)
            + self.seasons.len()
            + usize::from(self.ar)
            + usize::from(!self.control_scales.is_empty())
    }

    /// Number of parameters the optimiser sees: the log-variances, then the logit damping and
    /// the AR coefficient on the `atanh` scale.
    pub fn n_params(&self) -> usize {
        self.n_variances() + usize::from(self.trend == Trend::DampedTrend) + usize::from(self.ar)
    }

    /// Box of the optimiser's parameter `i` that is not a log-variance (damping: logit within
    /// +-8; AR coefficient: `atanh` within +-3, so `|rho| <= 0.995`).
    pub fn shape_bounds(&self, i: usize) -> (f64, f64) {
        if self.trend == Trend::DampedTrend && i == self.n_variances() { (-8.0, 8.0) } else { (-3.0, 3.0) }
    }

    /// Parameter names, in the order of the optimiser's vector.
    pub fn param_names(&self) -> Vec<String> {
        let mut v = vec!["irregular variance".to_string(), "level variance".to_string()];
        if self.trend != Trend::Level {
            v.push("slope variance".into());
        }
        for s in &self.seasons {
            v.push(match *s {
                SeasonKind::Dummy { period } => format!("seasonal({period}) variance"),
                SeasonKind::Trig { period, harmonics } => format!("seasonal({period}:{harmonics}) variance"),
            });
        }
        if self.ar {
            v.push("AR(1) variance".into());
        }
        if !self.control_scales.is_empty() {
            v.push("control prior variance".into());
        }
        if self.trend == Trend::DampedTrend {
            v.push("damping".into());
        }
        if self.ar {
            v.push("AR(1) coefficient".into());
        }
        v
    }

    /// Natural-scale parameters from the optimiser's vector (log-variances, logit damping,
    /// `atanh` AR coefficient).
    pub fn params_from_theta(&self, theta: &[f64]) -> StructuralParams {
        let mut i = 0;
        let mut next = || {
            let v = theta[i];
            i += 1;
            v
        };
        let irregular = next().exp();
        let level = next().exp();
        let slope = (self.trend != Trend::Level).then(|| next().exp());
        let seasons = self.seasons.iter().map(|_| next().exp()).collect();
        let ar_variance = self.ar.then(|| next().exp());
        let control_prior = (!self.control_scales.is_empty()).then(|| next().exp());
        let damping = (self.trend == Trend::DampedTrend).then(|| {
            let x = next();
            1.0 / (1.0 + (-x).exp())
        });
        let ar_coef = self.ar.then(|| next().tanh());
        StructuralParams { irregular, level, slope, seasons, damping, ar_variance, ar_coef, control_prior }
    }

    /// Natural-scale values in the order of [`Self::param_names`].
    pub fn natural(&self, p: &StructuralParams) -> Vec<f64> {
        let mut v = vec![p.irregular, p.level];
        v.extend(p.slope);
        v.extend(p.seasons.iter().copied());
        v.extend(p.ar_variance);
        v.extend(p.control_prior);
        v.extend(p.damping);
        v.extend(p.ar_coef);
        v
    }

    /// The optimiser's vector from natural-scale parameters.
    pub fn theta_from_params(&self, p: &StructuralParams) -> Vec<f64> {
        let mut v = vec![p.irregular.ln(), p.level.ln()];
        if self.trend != Trend::Level {
            v.push(p.slope.unwrap_or(1.0).ln());
        }
        for s in &p.seasons {
            v.push(s.ln());
        }
        if self.ar {
            v.push(p.ar_variance.unwrap_or(1.0).ln());
        }
        if !self.control_scales.is_empty() {
            v.push(p.control_prior.unwrap_or(1.0).ln());
        }
        if self.trend == Trend::DampedTrend {
            let phi = p.damping.unwrap_or(0.9);
            v.push((phi / (1.0 - phi)).ln());
        }
        if self.ar {
            v.push(p.ar_coef.unwrap_or(0.0).clamp(-0.995, 0.995).atanh());
        }
        v
    }

    /// Index of the AR(1) state, when present.
    pub fn ar_state(&self) -> Option<usize> {
        self.ar.then(|| self.regression_start() - 1)
    }

    /// Derivatives of the system matrices with respect to each entry of the optimiser's vector,
    /// at `theta` (for the score; see [`super::kalman::filter_with_score`]).
    pub fn system_derivatives(&self, theta: &[f64]) -> Vec<super::kalman::SystemDerivative> {
        use super::kalman::SystemDerivative;
        let p = self.params_from_theta(theta);
        let mut out = Vec::with_capacity(self.n_params());
        out.push(SystemDerivative { dh: p.irregular, ..Default::default() });
        out.push(SystemDerivative { dq: vec![(0, p.level)], ..Default::default() });
        let mut k = 1;
        if self.trend != Trend::Level {
            let s2 = p.slope.unwrap_or(0.0);
            let mut g = SystemDerivative { dq: vec![(1, s2)], ..Default::default() };
            if let Some(phi) = p.damping {
                g.dp0 = vec![(1, 1, s2 / (1.0 - phi * phi))];
            }
            out.push(g);
            k = 2;
        }
        for (si, s) in self.seasons.iter().enumerate() {
            let n = s.n_states();
            let var = p.seasons[si];
            let dq = match *s {
                SeasonKind::Dummy { .. } => vec![(k, var)],
                SeasonKind::Trig { .. } => (k..k + n).map(|i| (i, var)).collect(),
            };
            out.push(SystemDerivative { dq, ..Default::default() });
            k += n;
        }
        if let (Some(i), Some(s2), Some(rho)) = (self.ar_state(), p.ar_variance, p.ar_coef) {
            out.push(SystemDerivative {
                dq: vec![(i, s2)],
                dp0: vec![(i, i, s2 / (1.0 - rho * rho))],
                ..Default::default()
            });
        }
        if let Some(tau2) = p.control_prior {
            let r0 = self.regression_start();
            let dp0 = self
                .control_scales
                .iter()
                .enumerate()
                .filter(|(k, _)| !self.absent.contains(k))
                .map(|(k, v)| (r0 + k, r0 + k, tau2 / v))
                .collect();
            out.push(SystemDerivative { dp0, ..Default::default() });
        }
        if let Some(phi) = p.damping {
            let dphi = phi * (1.0 - phi);
            let s2 = p.slope.unwrap_or(0.0);
            out.push(SystemDerivative {
                dt: vec![(1, 1, dphi)],
                dp0: vec![(1, 1, s2 * 2.0 * phi / (1.0 - phi * phi).powi(2) * dphi)],
                ..Default::default()
            });
        }
        if let (Some(i), Some(s2), Some(rho)) = (self.ar_state(), p.ar_variance, p.ar_coef) {
            let drho = 1.0 - rho * rho;
            out.push(SystemDerivative {
                dt: vec![(i, i, drho)],
                dp0: vec![(i, i, s2 * 2.0 * rho / (1.0 - rho * rho).powi(2) * drho)],
                ..Default::default()
            });
        }
        out
    }

    /// Number of states.
    pub fn n_states(&self) -> usize {
        1 + usize::from(self.trend != Trend::Level)
            + self.seasons.iter().map(SeasonKind::n_states).sum::<usize>()
            + usize::from(self.ar)
            + self.n_regressors
    }

    /// Index of the first regression-coefficient state.
    pub fn regression_start(&self) -> usize {
        self.n_states() - self.n_regressors
    }

    /// Build the state-space system at these parameter values.
    pub fn system(&self, p: &StructuralParams) -> System {
        let m = self.n_states();
        let mut rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); m];
        let mut z_fixed = Vec::new();
        let mut q = vec![0.0; m];
        let mut diffuse = vec![true; m];
        let mut p_star0 = vec![0.0; m * m];
        // level
        rows[0].push((0, 1.0));
        z_fixed.push((0, 1.0));
        q[0] = p.level;
        let mut k = 1;
        if self.trend != Trend::Level {
            let phi = p.damping.unwrap_or(1.0);
            rows[0].push((1, 1.0));
            rows[1].push((1, phi));
            let s2 = p.slope.unwrap_or(0.0);
            q[1] = s2;
            if self.trend == Trend::DampedTrend {
                // the damped slope is stationary: its prior is its unconditional distribution
                diffuse[1] = false;
                p_star0[m + 1] = s2 / (1.0 - phi * phi);
            }
            k = 2;
        }
        for (si, s) in self.seasons.iter().enumerate() {
            let var = p.seasons[si];
            match *s {
                SeasonKind::Dummy { period } => {
                    let n = period - 1;
                    for j in 0..n {
                        rows[k].push((k + j, -1.0));
                    }
                    for j in 1..n {
                        rows[k + j].push((k + j - 1, 1.0));
                    }
                    z_fixed.push((k, 1.0));
                    q[k] = var;
                    k += n;
                }
                SeasonKind::Trig { period, harmonics } => {
                    for j in 1..=harmonics {
                        let lambda = 2.0 * std::f64::consts::PI * j as f64 / period;
                        let (sn, cs) = lambda.sin_cos();
                        z_fixed.push((k, 1.0));
                        if (2.0 * j as f64 - period).abs() < 1e-12 {
                            rows[k].push((k, -1.0));
                            q[k] = var;
                            k += 1;
                        } else {
                            rows[k].push((k, cs));
                            rows[k].push((k + 1, sn));
                            rows[k + 1].push((k, -sn));
                            rows[k + 1].push((k + 1, cs));
                            q[k] = var;
                            q[k + 1] = var;
                            k += 2;
                        }
                    }
                }
            }
        }
        if self.ar {
            let rho = p.ar_coef.unwrap_or(0.0);
            let s2 = p.ar_variance.unwrap_or(0.0);
            rows[k].push((k, rho));
            z_fixed.push((k, 1.0));
            q[k] = s2;
            diffuse[k] = false;
            p_star0[k * m + k] = s2 / (1.0 - rho * rho);
            k += 1;
        }
        for j in 0..self.n_regressors {
            rows[k + j].push((k + j, 1.0));
        }
        if let Some(tau2) = p.control_prior {
            for (j, v) in self.control_scales.iter().enumerate() {
                diffuse[k + j] = false;
                p_star0[(k + j) * m + k + j] = tau2 / v;
            }
        }
        for &j in &self.absent {
            diffuse[k + j] = false;
            p_star0[(k + j) * m + k + j] = 0.0;
        }
        let (p_inf0, p_star0) = match self.init {
            Initialisation::ExactDiffuse => {
                let mut pinf = vec![0.0; m * m];
                for i in 0..m {
                    if diffuse[i] {
                        pinf[i * m + i] = 1.0;
                    }
                }
                (pinf, p_star0)
            }
            Initialisation::ApproximateDiffuse { kappa } => {
                let mut ps = p_star0;
                for i in 0..m {
                    if diffuse[i] {
                        ps[i * m + i] = kappa;
                    }
                }
                (vec![0.0; m * m], ps)
            }
        };
        let burn = match self.init {
            Initialisation::ExactDiffuse => 0,
            Initialisation::ApproximateDiffuse { .. } => diffuse.iter().filter(|d| **d).count(),
        };
        System {
            m,
            rows,
            z_fixed,
            reg_start: self.regression_start(),
            n_reg: self.n_regressors,
            q,
            h: p.irregular,
            p_inf0,
            p_star0,
            burn,
        }
    }
}

/// A univariate linear Gaussian state-space system with a sparse transition matrix:
/// `y[t] = Z[t] a[t] + eps[t]`, `a[t+1] = T a[t] + eta[t]`, `eps ~ N(0, h)`, `eta ~ N(0, diag(q))`.
/// `Z[t]` is fixed except for the regression block, where it holds the regressors at `t`.
#[derive(Debug, Clone)]
pub struct System {
    /// Number of states.
    pub m: usize,
    /// Transition matrix by rows: `rows[i]` lists `(j, T[i][j])`.
    pub rows: Vec<Vec<(usize, f64)>>,
    /// Fixed part of `Z` as `(index, value)`.
    pub z_fixed: Vec<(usize, f64)>,
    /// First regression state.
    pub reg_start: usize,
    /// Number of regression states.
    pub n_reg: usize,
    /// Diagonal of the state disturbance covariance.
    pub q: Vec<f64>,
    /// Observation variance.
    pub h: f64,
    /// Diffuse part of the initial covariance (row-major `m x m`).
    pub p_inf0: Vec<f64>,
    /// Finite part of the initial covariance (row-major `m x m`).
    pub p_star0: Vec<f64>,
    /// Number of leading observations left out of the log-likelihood (approximate diffuse).
    pub burn: usize,
}

impl System {
    /// The sparse `Z[t]` given the regressors at `t` (`x[k][t]`).
    pub fn z_at(&self, x: &[Vec<f64>], t: usize, out: &mut Vec<(usize, f64)>) {
        out.clear();
        out.extend_from_slice(&self.z_fixed);
        for (k, col) in x.iter().enumerate().take(self.n_reg) {
            let v = col[t];
            if v != 0.0 {
                out.push((self.reg_start + k, v));
            }
        }
    }

    /// `a <- T a` using `scratch` of length `m`.
    pub fn transition_vec(&self, a: &mut [f64], scratch: &mut [f64]) {
        for (i, row) in self.rows.iter().enumerate() {
            scratch[i] = row.iter().map(|&(j, v)| v * a[j]).sum();
        }
        a.copy_from_slice(&scratch[..self.m]);
    }

    /// `P <- T P T'` (row-major, `P` symmetric) using `scratch` of length `m * m`; afterwards
    /// `scratch` holds `T P` of the old `P`.
    pub fn transition_cov(&self, p: &mut [f64], scratch: &mut [f64]) {
        let m = self.m;
        // scratch = T P
        for (i, row) in self.rows.iter().enumerate() {
            let dst = &mut scratch[i * m..(i + 1) * m];
            dst.fill(0.0);
            for &(j, v) in row {
                let src = &p[j * m..(j + 1) * m];
                for (d, s) in dst.iter_mut().zip(src) {
                    *d += v * s;
                }
            }
        }
        // p = scratch T' (symmetric: the upper triangle, mirrored)
        for i in 0..m {
            let w = &scratch[i * m..(i + 1) * m];
            for (k, row) in self.rows.iter().enumerate().skip(i) {
                let v: f64 = row.iter().map(|&(j, v)| v * w[j]).sum();
                p[i * m + k] = v;
                p[k * m + i] = v;
            }
        }
    }
}

impl std::str::FromStr for Trend {
    type Err = String;
    /// `level`, `linear-trend` or `damped-trend`.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim() {
            "level" => Ok(Trend::Level),
            "linear-trend" => Ok(Trend::LinearTrend),
            "damped-trend" => Ok(Trend::DampedTrend),
            other => Err(format!("'{other}' is not a trend (level, linear-trend, damped-trend)")),
        }
    }
}
