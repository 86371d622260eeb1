//! Placebo backtests of a counterfactual model: false positives, coverage, accuracy, and the
//! power to see an injected lift after each wait, with the minimum detectable effect.
//!
//! **Placebo origins.** Inside the pre-period `y[0..n]` (the caller cuts the series before the
//! real change, so no placebo window reaches the real post-period), `K` pseudo-intervention
//! origins `o_k` are spread evenly over `min_train ..= n - W`, where `W` is the longest wait.
//! The caller sets `min_train` so that every fit sees at least one full cycle of the model's
//! longest season. At each origin the model is fitted on `y[0..o_k]` and draws counterfactual
//! paths for `y[o_k .. o_k + W]`, where nothing happened.
//!
//! **Per origin and wait `L`** (sums skip missing observations):
//! `A_d = sum_{t<L} y[o+t] / sum_{t<L} cf_d[t]` per path draw `d`, and the HDI `[a_lo, a_hi]` of
//! `A` at the level. The relative effect of a window with no change is `A_d - 1` per draw; with
//! an injected multiplicative lift `δ` (every observed value times `1 + δ`) it is
//! `(1 + δ) A_d - 1`, an increasing affine map of `A_d`, so its HDI is `[(1+δ) a_lo - 1,
//! (1+δ) a_hi - 1]` exactly; the injected windows need no refit (the model only sees data
//! before the origin). The lift is seen when that HDI excludes zero on its side, so the
//! smallest increase seen is `1 / a_lo - 1` and the smallest decrease `1 - 1 / a_hi`: the
//! thresholds [`crate::plan`] turns into power, minimum detectable effects and waits, for every
//! wait from 1 to `W`.
//!
//! - *false positive* (at the longest wait): the HDI of the relative effect excludes 0;
//! - *window coverage*: the equal-tailed interval of the summed counterfactual holds the
//!   observed sum; *pointwise coverage*: share of periods whose observation lies inside that
//!   period's equal-tailed counterfactual interval; *RMSE*: of `y - mean cf` over periods.
//!
//! A placebo date whose fit fails is reported by its date and message and left out of every
//! number, never averaged in. Runs are parallel over origins ([`par_draws`], one stream per
//! origin, so the finished results do not depend on the thread count), report their progress
//! to a [`Progress`] the caller supplies (the binary draws a bar on a terminal), write each
//! finished origin to a JSON-lines file at once, and stop cleanly when a stop flag is raised
//! (the binary raises it on Ctrl-C).

use crate::error::{CalibrateError, CalibrateResult};
use crate::plan::{PlanQuestion, Thresholds};
use aftercast_core::estimate::{Estimate, Per, Point, Scope};
use aftercast_core::result::{EffectDraws, Planning};
use aftercast_core::time::TimePoint;
use aftercast_resample::rng::{child_seed, par_draws};
use aftercast_resample::summary::{hdi, quantile_sorted};
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
/// | `waits` | (required) | waits shown in the power and MDE tables | 1..=any |
/// | `lifts` | 1%, 2%, 5%, 10% | injected multiplicative lifts | > -1, non-zero |
/// | `min_train` | (required) | shortest fitting span | >= 2 |
/// | `draws` | 500 | counterfactual paths per origin | >= 20 |
/// | `level` | 0.9 | interval level | (0, 1) |
/// | `power` | 0.8 | target power | (0, 1) |
/// | `seed` | 20240601 (`aftercast_core::DEFAULT_SEED`) | seed | any |
/// | `wait_unit` | "periods" | what one step of wait is | any |
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BacktestSpec {
    /// Number of placebo origins.
    pub placebos: usize,
    /// Waits shown in the tables (the longest sets the placebo window).
    pub waits: Vec<usize>,
    /// Injected lifts (fractions: 0.02 = +2%).
    pub lifts: Vec<f64>,
    /// Shortest fitting span.
    pub min_train: usize,
    /// Paths per origin.
    pub draws: usize,
    /// Interval level.
    pub level: f64,
    /// Target power.
    pub power: f64,
    /// Seed.
    pub seed: u64,
    /// What one step of wait is ("days", "weeks", ...).
    pub wait_unit: String,
}

/// The lifts a plan asks about unless told otherwise: +1%, +2%, +5%, +10%.
pub const DEFAULT_LIFTS: [f64; 4] = [0.01, 0.02, 0.05, 0.10];

impl BacktestSpec {
    /// Defaults for the given waits and shortest fitting span.
    pub fn new(waits: Vec<usize>, min_train: usize) -> Self {
        let mut waits = waits;
        waits.sort_unstable();
        waits.dedup();
        BacktestSpec {
            placebos: 50,
            waits,
            lifts: DEFAULT_LIFTS.to_vec(),
            min_train,
            draws: 500,
            level: 0.9,
            power: 0.8,
            seed: aftercast_core::DEFAULT_SEED,
            wait_unit: "periods".into(),
        }
    }

    fn check(&self) -> CalibrateResult<()> {
        let bad = |name: &'static str, value: String, detail: &str| {
            Err(CalibrateError::BadParameter { name, value, detail: detail.into() })
        };
        if !(1..=100_000).contains(&self.placebos) {
            return bad("--placebos", self.placebos.to_string(), "between 1 and 100000");
        }
        if self.waits.is_empty() || self.waits.contains(&0) {
            return bad("--waits", format!("{:?}", self.waits), "positive waits");
        }
        if let Some(l) = self.lifts.iter().find(|l| !(l.is_finite() && **l > -1.0 && **l != 0.0)) {
            return bad("--lifts", l.to_string(), "finite, above -100%, not zero");
        }
        if self.lifts.is_empty() {
            return bad("--lifts", String::new(), "at least one lift");
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

    /// Longest wait: the placebo window.
    pub fn horizon(&self) -> usize {
        self.waits.iter().copied().max().unwrap_or(0)
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

/// Per-wait numbers of one origin.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WindowRatio {
    /// The wait.
    pub wait: usize,
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
    /// Where the run's window is.
    #[serde(flatten)]
    pub job: PlaceboJob,
    /// Median over draws of the relative placebo effect over the longest wait.
    pub relative_median: f64,
    /// HDI of the relative placebo effect (it holds the median).
    pub relative_hdi: (f64, f64),
    /// Median average-per-period placebo effect (outcome units).
    pub average_median: f64,
    /// Mean counterfactual level per period over the window (outcome units).
    pub counterfactual_level: f64,
    /// The HDI of the relative effect excludes zero.
    pub false_positive: bool,
    /// The equal-tailed interval of the counterfactual sum holds the observed sum.
    pub window_covered: bool,
    /// Periods whose observation lies inside the pointwise interval.
    pub periods_covered: usize,
    /// Observed periods in the window.
    pub periods_observed: usize,
    /// Sum of squared errors `y - mean cf` over the window.
    pub squared_error: f64,
    /// Sum of |y| over the window.
    pub abs_observed: f64,
    /// Per shown wait.
    pub windows: Vec<WindowRatio>,
    /// Thresholds (smallest increase, smallest decrease seen) at every wait 1..=W.
    #[serde(skip)]
    pub thresholds: Vec<(f64, f64)>,
}

/// A placebo date whose fit failed: reported, left out of every number.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboFailure {
    /// Index among the planned origins.
    pub index: usize,
    /// Where the run's window is.
    #[serde(flatten)]
    pub job: PlaceboJob,
    /// What went wrong.
    pub message: String,
}

impl PlaceboFailure {
    /// Where it failed, in words: "placebo date 2025-02-01", "unit r07 from 2026-03-02".
    pub fn place(&self) -> String {
        let j = &self.job;
        let when = j.time.map_or_else(|| format!("position {}", j.origin), |t| t.to_string());
        match &j.label {
            Some(u) => format!("placebo unit {u} from {when}"),
            None => format!("placebo date {when}"),
        }
    }
}

/// A finished (or interrupted) backtest.
#[derive(Debug, Clone, PartialEq, Serialize)]
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
    /// Share of origins whose window sum was covered.
    pub window_coverage: f64,
    /// Share of periods covered pointwise.
    pub pointwise_coverage: f64,
    /// RMSE of the counterfactual mean.
    pub rmse: f64,
    /// RMSE divided by the mean |y| of the windows.
    pub rmse_relative: f64,
    /// Power, minimum detectable effects, waits and false positives.
    #[serde(skip)]
    pub planning: Planning,
    /// Finished origins.
    pub origins: Vec<OriginResult>,
    /// Origins whose fit failed.
    pub failures: Vec<PlaceboFailure>,
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

/// Thresholds `(1 / a_lo - 1, 1 - 1 / a_hi)` of a ratio HDI (infinite where no lift is seen).
pub fn ratio_thresholds(lo: f64, hi: f64) -> (f64, f64) {
    let up = if lo > 0.0 { 1.0 / lo - 1.0 } else { f64::INFINITY };
    let down = if hi > 0.0 && hi.is_finite() { 1.0 - 1.0 / hi } else { f64::INFINITY };
    (up, down)
}

/// The median of a sorted, non-empty slice.
fn median_sorted(v: &[f64]) -> f64 {
    quantile_sorted(v, 0.5)
}

fn evaluate_origin(index: usize, job: &PlaceboJob, spec: &BacktestSpec, w: &PlaceboWindow) -> OriginResult {
    let h = spec.horizon();
    let y = &w.observed;
    let paths = &w.paths;
    let tail = (1.0 - spec.level) / 2.0;
    // running sums per draw over observed periods, so every wait costs one pass
    let mut scf = vec![0.0; paths.len()];
    let mut sy = 0.0;
    let mut thresholds = Vec::with_capacity(h);
    let mut shown = Vec::new();
    let mut ratios = Vec::with_capacity(paths.len());
    for t in 0..h {
        if y[t].is_finite() {
            sy += y[t];
            for (s, p) in scf.iter_mut().zip(paths) {
                *s += p[t];
            }
        }
        ratios.clear();
        ratios.extend(scf.iter().map(|s| sy / s).filter(|v| v.is_finite()));
        ratios.sort_by(f64::total_cmp);
        let (lo, hi) = if ratios.is_empty() { (f64::NAN, f64::NAN) } else { hdi(&ratios, spec.level) };
        thresholds.push(if lo.is_nan() { (f64::INFINITY, f64::INFINITY) } else { ratio_thresholds(lo, hi) });
        if spec.waits.contains(&(t + 1)) {
            shown.push(WindowRatio { wait: t + 1, ratio_lower: lo, ratio_upper: hi });
        }
    }
    let nobs = y.iter().filter(|v| v.is_finite()).count();
    let mut rel: Vec<f64> = scf.iter().map(|s| sy / s - 1.0).filter(|v| v.is_finite()).collect();
    rel.sort_by(f64::total_cmp);
    let (rlo, rhi) = if rel.is_empty() { (f64::NAN, f64::NAN) } else { hdi(&rel, spec.level) };
    let rmed = if rel.is_empty() { f64::NAN } else { median_sorted(&rel) };
    let mut avg: Vec<f64> = scf.iter().map(|s| (sy - s) / nobs.max(1) as f64).collect();
    avg.sort_by(f64::total_cmp);
    let mut scf_sorted = scf.clone();
    scf_sorted.sort_by(f64::total_cmp);
    let window_covered = quantile_sorted(&scf_sorted, tail) <= sy && sy <= quantile_sorted(&scf_sorted, 1.0 - tail);
    let mut periods_covered = 0;
    let mut sq = 0.0;
    let mut abs_obs = 0.0;
    let mut col = Vec::with_capacity(paths.len());
    for t in 0..h {
        if !y[t].is_finite() {
            continue;
        }
        col.clear();
        col.extend(paths.iter().map(|p| p[t]));
        col.sort_by(f64::total_cmp);
        let mean = col.iter().sum::<f64>() / col.len() as f64;
        if quantile_sorted(&col, tail) <= y[t] && y[t] <= quantile_sorted(&col, 1.0 - tail) {
            periods_covered += 1;
        }
        sq += (y[t] - mean).powi(2);
        abs_obs += y[t].abs();
    }
    OriginResult {
        index,
        job: job.clone(),
        relative_median: rmed,
        relative_hdi: (rlo, rhi),
        average_median: median_sorted(&avg),
        counterfactual_level: median_sorted(&scf_sorted) / nobs.max(1) as f64,
        false_positive: rlo > 0.0 || rhi < 0.0,
        window_covered,
        periods_covered,
        periods_observed: nobs,
        squared_error: sq,
        abs_observed: abs_obs,
        windows: shown,
        thresholds,
    }
}

/// Whether a lift is detected at one origin and window (see the module docs).
pub fn detected(w: &WindowRatio, lift: f64) -> bool {
    crate::plan::seen(lift, ratio_thresholds(w.ratio_lower, w.ratio_upper))
}

/// Aggregate finished origins into the report's numbers.
pub fn aggregate(
    model: &str,
    series: &str,
    spec: &BacktestSpec,
    planned: usize,
    mut origins: Vec<OriginResult>,
    failures: Vec<PlaceboFailure>,
    interrupted: bool,
) -> BacktestReport {
    origins.sort_by_key(|o| o.index);
    let k = origins.len();
    let kf = k.max(1) as f64;
    let covered: usize = origins.iter().map(|o| o.periods_covered).sum();
    let observed: usize = origins.iter().map(|o| o.periods_observed).sum();
    let sq: f64 = origins.iter().map(|o| o.squared_error).sum();
    let abs: f64 = origins.iter().map(|o| o.abs_observed).sum();
    let rmse = (sq / observed.max(1) as f64).sqrt();
    let thresholds = Thresholds {
        waits: (1..=spec.horizon()).collect(),
        runs: origins.iter().map(|o| o.thresholds.clone()).collect(),
    };
    let question = PlanQuestion {
        shown: spec.waits.clone(),
        lifts: spec.lifts.clone(),
        level: spec.level,
        target: spec.power,
        judged_wait: spec.horizon(),
        wait_unit: spec.wait_unit.clone(),
    };
    let planning = crate::plan::planning(&thresholds, &question);
    let mut warnings = Vec::new();
    // placebo units of a panel plan come on top of its dates
    let units = origins.iter().filter(|o| o.job.label.is_some()).count()
        + failures.iter().filter(|f| f.job.label.is_some()).count();
    let dates = planned.saturating_sub(units);
    if dates < spec.placebos {
        warnings.push(format!(
            "only {dates} distinct placebo dates fit in the pre-period (asked for {}): the rates rest on fewer runs; a smaller --min-train or shorter --waits leaves room for more",
            spec.placebos
        ));
    }
    if interrupted {
        warnings.push(format!(
            "interrupted: {k} of {planned} placebo dates finished; the numbers use those only, so they are rougher than a full plan's: rerun to the end for the full set"
        ));
    }
    if let Some(f) = failures.first() {
        let at = f.place();
        warnings.push(format!(
            "{} of {planned} placebo fits failed and are left out of every number (first: {at}: {}); if many fail, the plan is unreliable: check the model on that stretch of the series",
            failures.len(),
            f.message
        ));
    }
    warnings.extend(crate::plan::warnings(&planning));
    BacktestReport {
        model: model.into(),
        series: series.into(),
        spec: spec.clone(),
        origins_planned: planned,
        origins_completed: k,
        interrupted,
        window_coverage: origins.iter().filter(|o| o.window_covered).count() as f64 / kf,
        pointwise_coverage: covered as f64 / observed.max(1) as f64,
        rmse,
        rmse_relative: if abs > 0.0 { rmse / (abs / observed.max(1) as f64) } else { f64::NAN },
        planning,
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

/// One placebo run of a plan: where its window starts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlaceboJob {
    /// Position of the window's first period in its series.
    pub origin: usize,
    /// Its time, when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub time: Option<TimePoint>,
    /// The placebo unit (placebo in space), if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
}

/// What a placebo run's model gives: the observed window (the longest wait's length) and
/// counterfactual paths of it.
#[derive(Debug, Clone, PartialEq)]
pub struct PlaceboWindow {
    /// Observed values of the window (NaN = missing).
    pub observed: Vec<f64>,
    /// Counterfactual paths, one per draw.
    pub paths: Vec<Vec<f64>>,
}

/// The window of one placebo run: `(job index, draws, seed)` to its observed values and paths.
pub type PathsOf<'a> = dyn Fn(usize, usize, u64) -> Result<PlaceboWindow, ModelError> + Sync + 'a;

/// Run a backtest of a model over the evenly spread placebo origins of a series' pre-period.
///
/// # Errors
/// [`CalibrateError::BadParameter`] for bad settings, [`CalibrateError::TooShort`] when no
/// origin fits, and the errors of [`run_jobs`].
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
            detail: format!(
                "{} to fit on (at least one full cycle of the longest season) plus the longest wait of {horizon}",
                spec.min_train
            ),
        });
    }
    let jobs: Vec<PlaceboJob> = origins
        .iter()
        .map(|&o| PlaceboJob { origin: o, time: data.times.and_then(|t| t.get(o).copied()), label: None })
        .collect();
    let paths = |i: usize, draws: usize, seed: u64| {
        let o = origins[i];
        let ctrl: Vec<Vec<f64>> = data.controls.iter().map(|c| c[..o + horizon].to_vec()).collect();
        let paths = model.paths(&data.y[..o], &ctrl, horizon, draws, seed)?;
        Ok(PlaceboWindow { observed: data.y[o..o + horizon].to_vec(), paths })
    };
    run_jobs(&model.name(), data.name, &jobs, &paths, spec, control)
}

/// Run placebo jobs in parallel and aggregate them.
///
/// # Errors
/// [`CalibrateError::BadParameter`] for bad settings, [`CalibrateError::Io`] for the
/// partial-results file, [`CalibrateError::Interrupted`] when stopped before any run finished.
/// A model that fails on a run is recorded in [`BacktestReport::failures`]; if every run fails
/// the first failure is returned as [`CalibrateError::Method`].
pub fn run_jobs(
    model: &str,
    series: &str,
    jobs: &[PlaceboJob],
    paths_of: &PathsOf<'_>,
    spec: &BacktestSpec,
    control: &RunControl<'_>,
) -> CalibrateResult<BacktestReport> {
    spec.check()?;
    let horizon = spec.horizon();
    let partial = match control.partial {
        Some(p) => {
            // written line by line so that an interruption keeps what is done; never over an
            // input or through a link
            aftercast_core::output::check_output(p)?;
            let file = std::fs::File::create(p).map_err(|e| aftercast_core::output::output_error(p, e))?;
            let mut w = Partial { file, path: p.to_path_buf() };
            w.write(&json!({"record": "header", "model": model, "series": series, "runs": jobs.len(), "spec": spec}))?;
            Some(Mutex::new(w))
        }
        None => None,
    };
    if let Some(p) = control.progress {
        p.start(jobs.len() as u64, "placebo runs");
    }
    let seed = child_seed(spec.seed, "backtest-origins");
    let write_error: Mutex<Option<CalibrateError>> = Mutex::new(None);
    type Outcome = Option<Result<OriginResult, PlaceboFailure>>;
    let outcomes: Vec<Outcome> = par_draws(seed, jobs.len(), |i, rng| {
        if control.stop.is_some_and(|s| s.load(Ordering::SeqCst)) {
            return None;
        }
        let job = &jobs[i];
        let model_seed = rng.next_u64();
        let fail = |message: String| PlaceboFailure { index: i, job: job.clone(), message };
        let out = match paths_of(i, spec.draws, model_seed) {
            Ok(w) => {
                let p = &w.paths;
                if w.observed.len() != horizon
                    || p.is_empty()
                    || p.iter().any(|x| x.len() != horizon || x.iter().any(|v| !v.is_finite()))
                {
                    Err(fail(format!(
                        "the fit at this date gave a counterfactual that is not a finite number in every one of the {horizon} periods, so it cannot be scored"
                    )))
                } else {
                    Ok(evaluate_origin(i, job, spec, &w))
                }
            }
            Err(e) => Err(fail(e.to_string())),
        };
        if let Some(pw) = &partial {
            let v = match &out {
                Ok(r) => json!({"record": "origin", "result": r}),
                Err(f) => json!({"record": "failure", "failure": f}),
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
        let f = failures.first().cloned();
        let at = f.as_ref().map_or_else(String::new, PlaceboFailure::place);
        let m = f.map_or_else(|| "no placebo run finished".to_string(), |f| f.message);
        return Err(CalibrateError::Method {
            method: model.to_string(),
            setting: format!("{series} ({at}); every placebo fit failed"),
            source: m.into(),
        });
    }
    let report = aggregate(model, series, spec, jobs.len(), done, failures, interrupted);
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
    /// The one estimate of a backtest: the draws are the placebo effects of the origins (what
    /// the model reports where nothing happened; centred near zero for a well-calibrated model),
    /// one per origin: its median average effect and its counterfactual level, so the relative
    /// effect of a draw is that origin's own. The point is the median over origins of both the
    /// average and the relative effect, so it lies inside their intervals. The plan (power,
    /// minimum detectable effects, waits, false positives) is its own section.
    pub fn estimate(&self) -> Estimate<BacktestDiagnostics> {
        let avg: Vec<f64> = self.origins.iter().map(|o| o.average_median).collect();
        let base: Vec<f64> = self.origins.iter().map(|o| o.counterfactual_level).collect();
        let sorted_median = |v: Vec<f64>| {
            let mut f: Vec<f64> = v.into_iter().filter(|x| x.is_finite()).collect();
            f.sort_by(f64::total_cmp);
            if f.is_empty() { f64::NAN } else { median_sorted(&f) }
        };
        let point = sorted_median(avg.clone());
        let rel = sorted_median(avg.iter().zip(&base).map(|(a, b)| a / b).collect());
        // the baseline that makes point / baseline the median relative effect
        let base_point =
            if rel != 0.0 && rel.is_finite() && point != 0.0 { point / rel } else { sorted_median(base.clone()) };
        let table = self.clone();
        let mut est = Estimate::new(
            "plan",
            &self.model,
            "placebo effect (no change happened)",
            Point::Scalar { effect: point, baseline: Some(base_point) },
            EffectDraws::Scalar { effect: avg, baseline: Some(base) },
            Scope { per: Per::Period, units: 1 },
            BacktestDiagnostics {
                effect_is: "distribution over placebo dates of the placebo effect per period".into(),
                backtest: table,
            },
        );
        est.sections.planning = Some(self.planning.clone());
        for w in &self.warnings {
            est.warn(w.clone());
        }
        est.assumptions = vec![
            "Nothing changed at the placebo dates, so any effect found there is an error of the model.".into(),
            "The stretch after the change behaves like the stretches before it: a plan from the past holds only if the series keeps its noise and season.".into(),
            "A change multiplies every observed value of the window by the same factor.".into(),
            "A randomized test with a holdout is stronger evidence than any plan of an observational analysis, where one is possible.".into(),
        ];
        est
    }
}

/// The typed diagnostics of a backtest: what the effect summaries describe, and the table.
#[derive(Debug, Clone, Serialize)]
pub struct BacktestDiagnostics {
    /// What the effect summaries describe.
    pub effect_is: String,
    /// The placebo runs (coverage, accuracy, origins, failures).
    pub backtest: BacktestReport,
}
