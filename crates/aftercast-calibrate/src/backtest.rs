//! Placebo backtests of a counterfactual model: false positives, coverage, accuracy, and the
//! power to see an injected lift, per post-period length, with the minimum detectable effect.
//!
//! **Placebo origins.** Inside the pre-period `y[0..n]` (the caller cuts the series before the
//! real change), `K` pseudo-intervention origins `o_k` are spread evenly over
//! `min_train ..= n - H_max`, where `H_max` is the longest window asked for (at least the real
//! post length `H`). At each origin the model is fitted on `y[0..o_k]` and draws counterfactual
//! paths for `y[o_k .. o_k + H_max]`, where nothing happened.
//!
//! **Per origin and window length `L`** (sums skip missing observations):
//! `A_d = sum_{t<L} y[o+t] / sum_{t<L} cf_d[t]` per path draw `d`, and the HDI `[a_lo, a_hi]` of
//! `A` at the level. The relative effect of a window with no change is `A - 1`; with an
//! injected multiplicative lift `δ` (every observed value times `1 + δ`) it is
//! `(1 + δ) A - 1`, an increasing affine map of `A`, so its HDI is `[(1+δ) a_lo - 1,
//! (1+δ) a_hi - 1]` exactly; the injected windows need no refit (the model only sees data
//! before the origin).
//!
//! - *false positive* (at the real post length `H`): the HDI of the relative effect excludes 0
//!   (the verdict would be gain, gain-but-small, loss-but-small or loss);
//! - *detected* lift `δ > 0`: `(1+δ) a_lo > 1` (the verdict would say the metric rose);
//!   for `δ < 0`: `(1+δ) a_hi < 1`;
//! - *window coverage*: the equal-tailed interval of the summed counterfactual holds the
//!   observed sum; *pointwise coverage*: share of periods whose observation lies inside that
//!   period's equal-tailed counterfactual interval; *RMSE*: of `y - mean cf` over periods.
//!
//! **Minimum detectable effect.** At origin `k` the smallest detected increase is
//! `δ_k = 1 / a_lo - 1` (when `a_lo > 0`), so the empirical power at any `δ` is the share of
//! origins with `δ_k < δ`, a step function. The MDE at power `p` is the `ceil(p K)`-th smallest
//! `δ_k`: the smallest lift whose empirical power reaches `p`. It is the exact inverse of the
//! empirical power curve (what linear interpolation of the power at the requested sizes tends to
//! as the grid gets finer), so no interpolation between grid sizes is needed. Decreases use
//! `δ_k = 1 - 1 / a_hi`.
//!
//! Runs are parallel over origins ([`par_draws`], one stream per origin, so the finished
//! results do not depend on the thread count), report their progress to a [`Progress`] the
//! caller supplies (the binary draws a bar on a terminal), write each finished origin to a
//! JSON-lines file at once, and stop cleanly when a stop flag is raised (the binary raises it
//! on Ctrl-C).

use crate::error::{CalibrateError, CalibrateResult};
use aftercast_core::estimate::{Estimate, MdePoint, Per, Point, PowerPoint, Scope};
use aftercast_core::result::EffectDraws;
use aftercast_core::time::TimePoint;
use aftercast_resample::rng::{child_seed, par_draws};
use aftercast_resample::summary::{hdi, quantile_sorted, summarize};
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, Ordering};

/// Error type a model may return.
pub type ModelError = Box<dyn std::error::Error + Send + Sync>;

/// A counterfactual model for backtests: fit on a prefix of a series, draw future paths.
pub trait PathModel: Send + Sync {
    /// Model name.
    fn name(&self) -> String;

    /// Fit on `y` (the prefix) and return `draws` paths of the next `horizon` periods.
    /// `controls[j]` is control series `j` over the prefix followed by the `horizon` future
    /// periods (controls are untouched by the change, so their future is known).
    ///
    /// # Errors
    /// Whatever the model refuses (too short, not identified, ...).
    fn paths(
        &self,
        y: &[f64],
        controls: &[Vec<f64>],
        horizon: usize,
        draws: usize,
        seed: u64,
    ) -> Result<Vec<Vec<f64>>, ModelError>;
}

/// Settings of a backtest.
///
/// | field | default | meaning | allowed |
/// | --- | --- | --- | --- |
/// | `placebos` | 50 | number of placebo origins K | 1..=100000 |
/// | `post_length` | (required) | real post-period length H | >= 1 |
/// | `lengths` | H/4, H/2, H | window lengths for power and MDE | 1..=any |
/// | `lifts` | -5%, 1%, 2%, 5%, 10% | injected multiplicative lifts | > -1, non-zero |
/// | `min_train` | 2 H (at least 10) | shortest fitting span | >= 2 |
/// | `draws` | 500 | counterfactual paths per origin | >= 20 |
/// | `level` | 0.9 | interval level | (0, 1) |
/// | `power` | 0.8 | target power of the MDE | (0, 1) |
/// | `seed` | 20240601 (`aftercast_core::DEFAULT_SEED`) | seed | any |
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BacktestSpec {
    /// Number of placebo origins.
    pub placebos: usize,
    /// Real post-period length.
    pub post_length: usize,
    /// Window lengths for power.
    pub lengths: Vec<usize>,
    /// Injected lifts (fractions: 0.02 = +2%).
    pub lifts: Vec<f64>,
    /// Shortest fitting span.
    pub min_train: usize,
    /// Paths per origin.
    pub draws: usize,
    /// Interval level.
    pub level: f64,
    /// Target power of the MDE.
    pub power: f64,
    /// Seed.
    pub seed: u64,
}

impl BacktestSpec {
    /// Defaults for a real post length `h`.
    pub fn new(post_length: usize) -> Self {
        let mut lengths = vec![(post_length / 4).max(1), (post_length / 2).max(1), post_length.max(1)];
        lengths.dedup();
        BacktestSpec {
            placebos: 50,
            post_length,
            lengths,
            lifts: vec![-0.05, 0.01, 0.02, 0.05, 0.10],
            min_train: (2 * post_length).max(10),
            draws: 500,
            level: 0.9,
            power: 0.8,
            seed: aftercast_core::DEFAULT_SEED,
        }
    }

    fn check(&self) -> CalibrateResult<()> {
        let bad = |name: &'static str, value: String, detail: &str| {
            Err(CalibrateError::BadParameter { name, value, detail: detail.into() })
        };
        if self.post_length == 0 {
            return bad("--end", "0".into(), "the post-period needs at least one period");
        }
        if !(1..=100_000).contains(&self.placebos) {
            return bad("--placebos", self.placebos.to_string(), "between 1 and 100000");
        }
        if self.lengths.is_empty() || self.lengths.contains(&0) {
            return bad("--lengths", format!("{:?}", self.lengths), "positive window lengths");
        }
        if let Some(l) = self.lifts.iter().find(|l| !(l.is_finite() && **l > -1.0 && **l != 0.0)) {
            return bad("--lifts", l.to_string(), "finite, above -100%, not zero");
        }
        if self.min_train < 2 {
            return bad("--min-train", self.min_train.to_string(), "at least 2");
        }
        if self.draws < 20 {
            return bad("--draws", self.draws.to_string(), "at least 20");
        }
        if !(self.level > 0.0 && self.level < 1.0) {
            return bad("--level", self.level.to_string(), "strictly between 0 and 1");
        }
        if !(self.power > 0.0 && self.power < 1.0) {
            return bad("--power", self.power.to_string(), "strictly between 0 and 1");
        }
        Ok(())
    }

    /// Longest window.
    pub fn horizon(&self) -> usize {
        self.lengths.iter().copied().max().unwrap_or(0).max(self.post_length)
    }
}

/// The series a backtest runs on: its pre-period only.
#[derive(Debug, Clone, Copy)]
pub struct BacktestData<'a> {
    /// Series name.
    pub name: &'a str,
    /// Outcome over the pre-period (NaN = missing).
    pub y: &'a [f64],
    /// Control series over the same periods.
    pub controls: &'a [Vec<f64>],
    /// Times of the periods, if known (for the report).
    pub times: Option<&'a [TimePoint]>,
}

/// Where finished results go while the run goes on, how it is stopped and who hears of its
/// progress.
#[derive(Default, Clone, Copy)]
pub struct RunControl<'a> {
    /// Raised (e.g. by Ctrl-C) to stop: origins not started yet are skipped.
    pub stop: Option<&'a AtomicBool>,
    /// JSON-lines file receiving a header line and then every finished origin at once.
    pub partial: Option<&'a Path>,
    /// Told how many origins there are and each time one finishes (e.g. a progress bar the
    /// binary draws on a terminal).
    pub progress: Option<&'a dyn Progress>,
}

/// Progress of a long run, reported by the library and shown (or not) by the caller.
pub trait Progress: Sync {
    /// The run has `total` steps.
    fn start(&self, total: u64, what: &str);
    /// One more step finished.
    fn step(&self);
    /// The run ended (finished or stopped).
    fn finish(&self);
}

/// Per-window numbers of one origin.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WindowRatio {
    /// Window length.
    pub length: usize,
    /// Lower end of the HDI of observed sum / counterfactual sum.
    pub ratio_lower: f64,
    /// Upper end.
    pub ratio_upper: f64,
}

/// The outcome of one placebo origin.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OriginResult {
    /// Index among the planned origins.
    pub index: usize,
    /// Position of the first pseudo-post period in the series.
    pub origin: usize,
    /// Its time, when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub time: Option<TimePoint>,
    /// Mean relative placebo effect over the real post length.
    pub relative_mean: f64,
    /// HDI of the relative placebo effect.
    pub relative_hdi: (f64, f64),
    /// Mean average-per-period placebo effect (outcome units).
    pub average_mean: f64,
    /// The HDI of the relative effect excludes zero.
    pub false_positive: bool,
    /// The equal-tailed interval of the counterfactual sum holds the observed sum.
    pub window_covered: bool,
    /// Periods (of H) whose observation lies inside the pointwise interval.
    pub periods_covered: usize,
    /// Observed periods in the window of length H.
    pub periods_observed: usize,
    /// Sum of squared errors `y - mean cf` over the window of length H.
    pub squared_error: f64,
    /// Sum of |y| over the window of length H.
    pub abs_observed: f64,
    /// Per window length.
    pub windows: Vec<WindowRatio>,
}

/// Power at one window length and lift.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PowerRow {
    /// Window length.
    pub length: usize,
    /// Lift (fraction).
    pub lift: f64,
    /// Share of origins where the lift was detected.
    pub power: f64,
    /// Origins where it was detected.
    pub detected: usize,
    /// Origins.
    pub origins: usize,
}

/// Minimum detectable effect at one window length.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MdeRow {
    /// Window length.
    pub length: usize,
    /// Smallest increase detected at the target power (fraction), if any.
    pub increase: Option<f64>,
    /// Smallest decrease (as a positive fraction) detected at the target power, if any.
    pub decrease: Option<f64>,
}

/// A finished (or interrupted) backtest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BacktestReport {
    /// Model.
    pub model: String,
    /// Series.
    pub series: String,
    /// Settings.
    pub spec: BacktestSpec,
    /// Origins planned.
    pub origins_planned: usize,
    /// Origins finished.
    pub origins_completed: usize,
    /// Whether the run was stopped early.
    pub interrupted: bool,
    /// Share of finished origins with a false positive.
    pub false_positive_rate: f64,
    /// Binomial standard error of that share (optimistic when windows overlap).
    pub false_positive_se: f64,
    /// Share of origins whose window sum was covered.
    pub window_coverage: f64,
    /// Share of periods covered pointwise.
    pub pointwise_coverage: f64,
    /// RMSE of the counterfactual mean.
    pub rmse: f64,
    /// RMSE divided by the mean |y| of the windows.
    pub rmse_relative: f64,
    /// Power per length and lift.
    pub power: Vec<PowerRow>,
    /// MDE per length.
    pub mde: Vec<MdeRow>,
    /// Finished origins.
    pub origins: Vec<OriginResult>,
    /// Origins whose fit failed (index, message).
    pub failures: Vec<(usize, String)>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

/// The evenly spread origins `min_train ..= n - horizon` (fewer than `k` when the span is short).
pub fn placebo_origins(n: usize, min_train: usize, horizon: usize, k: usize) -> Vec<usize> {
    if n < min_train + horizon || k == 0 {
        return Vec::new();
    }
    let lo = min_train;
    let hi = n - horizon;
    let span = hi - lo;
    if k == 1 {
        return vec![hi];
    }
    let mut v: Vec<usize> = (0..k).map(|i| lo + ((i as f64) * span as f64 / (k - 1) as f64).round() as usize).collect();
    v.dedup();
    v
}

fn evaluate_origin(
    index: usize,
    origin: usize,
    data: &BacktestData<'_>,
    spec: &BacktestSpec,
    paths: &[Vec<f64>],
) -> OriginResult {
    let h = spec.post_length;
    let y = &data.y[origin..origin + spec.horizon()];
    let tail = (1.0 - spec.level) / 2.0;
    let sums = |len: usize| -> (f64, Vec<f64>) {
        let sy: f64 = y[..len].iter().filter(|v| v.is_finite()).sum();
        let scf: Vec<f64> =
            paths.iter().map(|p| (0..len).filter(|&t| y[t].is_finite()).map(|t| p[t]).sum::<f64>()).collect();
        (sy, scf)
    };
    let ratio_hdi = |len: usize| -> (f64, f64) {
        let (sy, scf) = sums(len);
        let mut a: Vec<f64> = scf.iter().map(|s| sy / s).filter(|v| v.is_finite()).collect();
        a.sort_by(f64::total_cmp);
        hdi(&a, spec.level)
    };
    let (sy, scf) = sums(h);
    let rel: Vec<f64> = scf.iter().map(|s| sy / s - 1.0).collect();
    let rs = summarize(&rel, spec.level, None);
    let nobs = y[..h].iter().filter(|v| v.is_finite()).count();
    let avg: Vec<f64> = scf.iter().map(|s| (sy - s) / nobs.max(1) as f64).collect();
    let mut scf_sorted = scf.clone();
    scf_sorted.sort_by(f64::total_cmp);
    let window_covered = quantile_sorted(&scf_sorted, tail) <= sy && sy <= quantile_sorted(&scf_sorted, 1.0 - tail);
    let mut periods_covered = 0;
    let mut sq = 0.0;
    let mut abs_obs = 0.0;
    for t in 0..h {
        if !y[t].is_finite() {
            continue;
        }
        let mut col: Vec<f64> = paths.iter().map(|p| p[t]).collect();
        col.sort_by(f64::total_cmp);
        let mean = col.iter().sum::<f64>() / col.len() as f64;
        if quantile_sorted(&col, tail) <= y[t] && y[t] <= quantile_sorted(&col, 1.0 - tail) {
            periods_covered += 1;
        }
        sq += (y[t] - mean).powi(2);
        abs_obs += y[t].abs();
    }
    let windows = spec
        .lengths
        .iter()
        .map(|&len| {
            let (lo, hi) = ratio_hdi(len);
            WindowRatio { length: len, ratio_lower: lo, ratio_upper: hi }
        })
        .collect();
    OriginResult {
        index,
        origin,
        time: data.times.and_then(|t| t.get(origin).copied()),
        relative_mean: rs.mean,
        relative_hdi: (rs.hdi_lower, rs.hdi_upper),
        average_mean: avg.iter().sum::<f64>() / avg.len().max(1) as f64,
        false_positive: rs.hdi_lower > 0.0 || rs.hdi_upper < 0.0,
        window_covered,
        periods_covered,
        periods_observed: nobs,
        squared_error: sq,
        abs_observed: abs_obs,
        windows,
    }
}

/// Whether a lift is detected at one origin and window (see the module docs).
pub fn detected(w: &WindowRatio, lift: f64) -> bool {
    if lift > 0.0 { (1.0 + lift) * w.ratio_lower > 1.0 } else { (1.0 + lift) * w.ratio_upper < 1.0 }
}

/// The `ceil(p n)`-th smallest value (None if it is not finite or there are no values).
fn order_stat(mut v: Vec<f64>, p: f64) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let k = ((p * v.len() as f64) - 1e-9).ceil().clamp(1.0, v.len() as f64) as usize;
    let x = v[k - 1];
    x.is_finite().then_some(x)
}

/// Aggregate finished origins into the report's numbers.
pub fn aggregate(
    model: &str,
    series: &str,
    spec: &BacktestSpec,
    planned: usize,
    mut origins: Vec<OriginResult>,
    failures: Vec<(usize, String)>,
    interrupted: bool,
) -> BacktestReport {
    origins.sort_by_key(|o| o.index);
    let k = origins.len();
    let kf = k.max(1) as f64;
    let fp = origins.iter().filter(|o| o.false_positive).count() as f64 / kf;
    let covered: usize = origins.iter().map(|o| o.periods_covered).sum();
    let observed: usize = origins.iter().map(|o| o.periods_observed).sum();
    let sq: f64 = origins.iter().map(|o| o.squared_error).sum();
    let abs: f64 = origins.iter().map(|o| o.abs_observed).sum();
    let rmse = (sq / observed.max(1) as f64).sqrt();
    let mut power = Vec::new();
    let mut mde = Vec::new();
    for (j, &len) in spec.lengths.iter().enumerate() {
        for &lift in &spec.lifts {
            let d = origins.iter().filter(|o| detected(&o.windows[j], lift)).count();
            power.push(PowerRow { length: len, lift, power: d as f64 / kf, detected: d, origins: k });
        }
        let inc: Vec<f64> = origins
            .iter()
            .map(|o| if o.windows[j].ratio_lower > 0.0 { 1.0 / o.windows[j].ratio_lower - 1.0 } else { f64::INFINITY })
            .collect();
        let dec: Vec<f64> = origins
            .iter()
            .map(|o| if o.windows[j].ratio_upper > 1.0 { 1.0 - 1.0 / o.windows[j].ratio_upper } else { f64::INFINITY })
            .collect();
        mde.push(MdeRow {
            length: len,
            increase: order_stat(inc, spec.power).map(|v| v.max(0.0)),
            decrease: order_stat(dec, spec.power).map(|v| v.max(0.0)),
        });
    }
    let mut warnings = Vec::new();
    if planned < spec.placebos {
        warnings.push(format!(
            "only {planned} distinct placebo origins fit in the pre-period (asked for {})",
            spec.placebos
        ));
    }
    if interrupted {
        warnings.push(format!("interrupted: {k} of {planned} placebo origins finished; the numbers use those only"));
    }
    if !failures.is_empty() {
        warnings.push(format!("{} placebo fits failed and are left out", failures.len()));
    }
    if k > 0 && k < 30 {
        warnings.push(format!(
            "{k} placebo origins give rates with a standard error near {:.0}%",
            50.0 / (k as f64).sqrt()
        ));
    }
    BacktestReport {
        model: model.into(),
        series: series.into(),
        spec: spec.clone(),
        origins_planned: planned,
        origins_completed: k,
        interrupted,
        false_positive_rate: fp,
        false_positive_se: (fp * (1.0 - fp) / kf).sqrt(),
        window_coverage: origins.iter().filter(|o| o.window_covered).count() as f64 / kf,
        pointwise_coverage: covered as f64 / observed.max(1) as f64,
        rmse,
        rmse_relative: if abs > 0.0 { rmse / (abs / observed.max(1) as f64) } else { f64::NAN },
        power,
        mde,
        origins,
        failures,
        warnings,
    }
}

struct Partial {
    file: std::fs::File,
    path: PathBuf,
}

impl Partial {
    fn write(&mut self, v: &Value) -> CalibrateResult<()> {
        let line = format!("{v}\n");
        self.file.write_all(line.as_bytes()).and_then(|_| self.file.flush()).map_err(|source| CalibrateError::Io {
            path: self.path.clone(),
            what: "cannot write partial results",
            source,
        })
    }
}

/// Run a backtest.
///
/// # Errors
/// [`CalibrateError::BadParameter`] for bad settings, [`CalibrateError::TooShort`] when no
/// origin fits, [`CalibrateError::Io`] for the partial-results file,
/// [`CalibrateError::Interrupted`] when stopped before any origin finished,
/// [`CalibrateError::BadPaths`] when the model returns paths of the wrong shape. A model that
/// fails to fit at an origin is recorded in [`BacktestReport::failures`]; if every origin fails
/// the first failure is returned as [`CalibrateError::Method`].
pub fn run(
    model: &dyn PathModel,
    data: &BacktestData<'_>,
    spec: &BacktestSpec,
    control: &RunControl<'_>,
) -> CalibrateResult<BacktestReport> {
    spec.check()?;
    let n = data.y.len();
    let horizon = spec.horizon();
    for c in data.controls {
        if c.len() != n {
            return Err(CalibrateError::BadParameter {
                name: "--controls",
                value: c.len().to_string(),
                detail: format!("every control must have the series' {n} pre-period values"),
            });
        }
    }
    let origins = placebo_origins(n, spec.min_train, horizon, spec.placebos);
    if origins.is_empty() {
        return Err(CalibrateError::TooShort {
            series: data.name.into(),
            periods: n,
            needed: spec.min_train + horizon,
            detail: format!("{} to fit on plus a window of {horizon}", spec.min_train),
        });
    }
    let partial = match control.partial {
        Some(p) => {
            // written line by line so that an interruption keeps what is done; never over an
            // input or through a link
            aftercast_core::output::check_output(p)?;
            let file = std::fs::File::create(p).map_err(|e| aftercast_core::output::output_error(p, e))?;
            let mut w = Partial { file, path: p.to_path_buf() };
            w.write(&json!({"record": "header", "model": model.name(), "series": data.name, "origins": origins.len(), "spec": spec}))?;
            Some(Mutex::new(w))
        }
        None => None,
    };
    if let Some(p) = control.progress {
        p.start(origins.len() as u64, "placebo origins");
    }
    let seed = child_seed(spec.seed, "backtest-origins");
    let write_error: Mutex<Option<CalibrateError>> = Mutex::new(None);
    type Outcome = Option<Result<OriginResult, (usize, String)>>;
    let outcomes: Vec<Outcome> = par_draws(seed, origins.len(), |i, rng| {
        if control.stop.is_some_and(|s| s.load(Ordering::SeqCst)) {
            return None;
        }
        let o = origins[i];
        let model_seed = rng.next_u64();
        let ctrl: Vec<Vec<f64>> = data.controls.iter().map(|c| c[..o + horizon].to_vec()).collect();
        let out = match model.paths(&data.y[..o], &ctrl, horizon, spec.draws, model_seed) {
            Ok(p) => {
                if p.is_empty() || p.iter().any(|x| x.len() != horizon || x.iter().any(|v| !v.is_finite())) {
                    Err((i, format!("expected {} finite paths of length {horizon}", spec.draws)))
                } else {
                    Ok(evaluate_origin(i, o, data, spec, &p))
                }
            }
            Err(e) => Err((i, e.to_string())),
        };
        if let Some(pw) = &partial {
            let v = match &out {
                Ok(r) => json!({"record": "origin", "result": r}),
                Err((i, m)) => json!({"record": "failure", "index": i, "message": m}),
            };
            let res = pw.lock().map_err(|_| ()).map(|mut w| w.write(&v));
            if let Ok(Err(e)) = res
                && let Ok(mut slot) = write_error.lock()
            {
                slot.get_or_insert(e);
            }
        }
        if let Some(p) = control.progress {
            p.step();
        }
        Some(out)
    });
    if let Some(p) = control.progress {
        p.finish();
    }
    if let Some(e) = write_error.into_inner().ok().flatten() {
        return Err(e);
    }
    let interrupted = outcomes.iter().any(Option::is_none);
    let mut done = Vec::new();
    let mut failures = Vec::new();
    for o in outcomes.into_iter().flatten() {
        match o {
            Ok(r) => done.push(r),
            Err(f) => failures.push(f),
        }
    }
    if done.is_empty() {
        if interrupted && failures.is_empty() {
            return Err(CalibrateError::Interrupted);
        }
        let (i, m) = failures.first().cloned().unwrap_or((0, "no origin finished".into()));
        return Err(CalibrateError::Method {
            method: model.name(),
            setting: format!("{} (placebo origin {})", data.name, origins.get(i).copied().unwrap_or(0)),
            source: m.into(),
        });
    }
    let report = aggregate(&model.name(), data.name, spec, origins.len(), done, failures, interrupted);
    if let Some(pw) = &partial
        && let Ok(mut w) = pw.lock()
    {
        w.write(
            &json!({"record": "summary", "interrupted": interrupted, "origins_completed": report.origins_completed}),
        )?;
    }
    Ok(report)
}

impl BacktestReport {
    /// The one estimate of a backtest: the draws are the mean placebo effects of the origins
    /// (what the model reports where nothing happened; centred near zero for a well-calibrated
    /// model); the planning table is the typed diagnostics and the power and MDE figures.
    pub fn estimate(&self) -> Estimate<BacktestDiagnostics> {
        let avg: Vec<f64> = self.origins.iter().map(|o| o.average_mean).collect();
        // counterfactual level of each origin: average effect / relative effect
        let base: Vec<f64> = self.origins.iter().map(|o| o.average_mean / o.relative_mean).collect();
        let finite = |v: &[f64]| {
            let f: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
            f.iter().sum::<f64>() / f.len().max(1) as f64
        };
        let point = finite(&avg);
        let base_point = finite(&base);
        let mut table = self.clone();
        let warnings = std::mem::take(&mut table.warnings);
        let power = self
            .power
            .iter()
            .map(|p| PowerPoint { post_length: p.length as f64, effect: p.lift, power: p.power })
            .collect();
        let mde = self
            .mde
            .iter()
            .filter_map(|m| m.increase.or(m.decrease).map(|v| MdePoint { post_length: m.length as f64, mde: v }))
            .collect();
        let mut est = Estimate::new(
            "backtest",
            &self.model,
            "placebo effect (no change happened)",
            Point::Scalar { effect: point, baseline: Some(base_point) },
            EffectDraws::Scalar { effect: avg, baseline: Some(base) },
            Scope { per: Per::Period, units: 1 },
            BacktestDiagnostics {
                effect_is: "distribution over placebo origins of the mean placebo effect per period".into(),
                backtest: table,
            },
        );
        est.figures.power = power;
        est.figures.mde = mde;
        est.figures.lifts_are_relative = true;
        for w in warnings {
            est.warn(w);
        }
        est.assumptions = vec![
            "Nothing changed at the placebo dates, so any effect found there is an error of the model.".into(),
            "The pre-period behaves like the post-period would have without the change.".into(),
            "Injected lifts multiply every observed value of the window by the same factor.".into(),
        ];
        est
    }
}

/// The typed diagnostics of a backtest: what the effect summaries describe, and the table.
#[derive(Debug, Clone, Serialize)]
pub struct BacktestDiagnostics {
    /// What the effect summaries describe.
    pub effect_is: String,
    /// The planning table (false positives, coverage, power, MDE, origins).
    pub backtest: BacktestReport,
}
