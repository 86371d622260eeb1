//! Realistic result fixtures shared by the chart and HTML tests. Values are invented but shaped
//! like the verbs' output: a daily forecast with a launch effect, a yearly synthetic control with
//! placebo runs, a matching analysis with balance and sensitivity, a comparison with an
//! experiment and a backtest grid.
#![allow(dead_code)]

use aftercast_core::estimate::{Figures, KeptDraws, NamedCurve, Per, PropensityHistogram, Scope, SensitivityCurve};
use aftercast_core::result::{
    AnalysisResult, BalanceRow, EffectBlock, EstimateRow, IntervalKind, Judged, JudgedOn, PathPoint, PlaceboSummary,
    Rope, RopeUnits, SampleCounts, Summary, UnitWeight, Verdict,
};
use aftercast_core::table::InputInfo;
use aftercast_core::time::TimePoint;
use serde_json::json;

/// Deterministic pseudo-random numbers (64-bit LCG, Knuth's constants) for fixture noise.
pub struct Lcg(u64);

impl Lcg {
    pub fn new(seed: u64) -> Lcg {
        Lcg(seed.wrapping_mul(2862933555777941757).wrapping_add(3037000493))
    }
    pub fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// Standard normal by Box-Muller.
    pub fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

/// A summary of a normal(mean, sd) effect at level 0.9.
pub fn summary(mean: f64, sd: f64) -> Summary {
    let z = 1.6448536269514722;
    Summary {
        estimate: mean,
        mean,
        median: mean,
        sd,
        lower: mean - z * sd,
        upper: mean + z * sd,
        hdi_lower: mean - z * sd,
        hdi_upper: mean + z * sd,
        prob_positive: if sd > 0.0 {
            0.5 * (1.0 + erf(mean / (sd * std::f64::consts::SQRT_2)))
        } else {
            f64::from(u8::from(mean > 0.0))
        },
        prob_above_threshold: None,
    }
}

/// Abramowitz & Stegun 7.1.26 (|error| < 1.5e-7), enough for fixture probabilities.
fn erf(x: f64) -> f64 {
    let t = 1.0 / (1.0 + 0.3275911 * x.abs());
    let y = 1.0
        - (((((1.061405429 * t - 1.453152027) * t) + 1.421413741) * t - 0.284496736) * t + 0.254829592)
            * t
            * (-x * x).exp();
    if x >= 0.0 { y } else { -y }
}

fn base(verb: &str, method: &str, effect: EffectBlock, verdict: Verdict, rope: Rope) -> AnalysisResult {
    AnalysisResult {
        outcome_unit: None,
        tool_version: "0.1.0".into(),
        verb: verb.into(),
        method: method.into(),
        level: 0.9,
        seed: 20240302,
        inputs: vec![InputInfo {
            path: format!("demo-data/{verb}.csv"),
            sha256: format!("{:064x}", verb.len() as u64 * 0x9e37_79b9),
            rows: 162,
        }],
        estimand: None,
        scope: Scope::series(),
        judged_on: JudgedOn {
            quantity: match (rope.units, effect.relative.is_some()) {
                (RopeUnits::Percent, true) => Judged::Relative,
                (RopeUnits::Percent, false) => Judged::Sign,
                (RopeUnits::Outcome, _) => Judged::Average,
            },
            interval: IntervalKind::Hdi,
        },
        effect,
        verdict,
        rope,
        threshold: None,
        diagnostics: serde_json::Map::new(),
        warnings: vec![],
        path: None,
        weights: None,
        placebo: None,
        balance: None,
        sample: None,
        truth: None,
        estimates: None,
        planning: None,
        breakdowns: vec![],
        assumptions: vec![],
    }
}

/// Daily weekly-active-users series: 120 pre days, 42 post days, a +40 lift after 2025-05-01.
pub fn forecast() -> AnalysisResult {
    let start = chrono::NaiveDate::from_ymd_opt(2025, 1, 1).expect("date");
    let mut rng = Lcg::new(7);
    let (pre, post) = (120usize, 42usize);
    let mut path = Vec::new();
    let mut cum = 0.0;
    let mut cum_var = 0.0;
    for t in 0..pre + post {
        let level = 1000.0 + 0.8 * t as f64 + 45.0 * (2.0 * std::f64::consts::PI * t as f64 / 7.0).sin();
        let is_post = t >= pre;
        let noise = 12.0 * rng.normal();
        let lift = if is_post { 40.0 } else { 0.0 };
        let observed = level + noise + lift;
        let h = if is_post { (t - pre + 1) as f64 } else { 0.0 };
        let sd = 15.0 + 2.0 * h.sqrt();
        let (effect, cumulative) = if is_post {
            let e = observed - level;
            cum += e;
            cum_var += sd * sd;
            (Some(summary(e, sd)), Some(summary(cum, cum_var.sqrt() * 1.3)))
        } else {
            (None, None)
        };
        path.push(PathPoint {
            time: TimePoint::Date(start + chrono::Duration::days(t as i64)),
            observed: if t == 37 { None } else { Some(observed) },
            counterfactual: level,
            lower: level - 1.645 * sd,
            upper: level + 1.645 * sd,
            post: is_post,
            effect,
            cumulative,
        });
    }
    let effect = EffectBlock {
        average: summary(39.2, 6.1),
        cumulative: Some(summary(1646.0, 256.0)),
        relative: Some(summary(0.0352, 0.0055)),
        total: None,
    };
    let mut r = base("forecast", "structural", effect, Verdict::Gain, Rope::default());
    r.estimand = Some("effect on the series over the post-period (observed minus counterfactual)".into());
    r.path = Some(path);
    r.assumptions = vec![
        "The control series were not affected by the launch.".into(),
        "The relation between the controls and the outcome before the launch held after it.".into(),
    ];
    r.warnings = vec![
        "The residuals show weekly autocorrelation at lag 7 (Ljung-Box p = 0.03); the band may be too narrow.".into(),
    ];
    r.diagnostics.insert("pre_mape".into(), json!(0.0114));
    r.diagnostics.insert("ljung_box_p".into(), json!(0.03));
    r.diagnostics.insert("model".into(), json!("local linear trend + weekly seasonal"));
    r.diagnostics.insert("converged".into(), json!(true));
    r.diagnostics.insert("state_variances".into(), json!({"level": 2.1, "slope": 0.001, "seasonal": 0.4}));
    r
}

/// Draws of the forecast's relative and average effects.
pub fn forecast_draws(n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut rng = Lcg::new(11);
    let rel = (0..n).map(|_| 0.0352 + 0.0055 * rng.normal()).collect();
    let avg = (0..n).map(|_| 39.2 + 6.1 * rng.normal()).collect();
    (rel, avg)
}

/// Yearly panel 1970-2000, treated from 1989, with 12 placebo runs stored in `extra`.
pub fn synthetic() -> AnalysisResult {
    let mut rng = Lcg::new(3);
    let years: Vec<i64> = (1970..=2000).collect();
    let mut path = Vec::new();
    for (i, y) in years.iter().enumerate() {
        let post = *y >= 1989;
        let synth = 120.0 - 0.9 * i as f64 + 3.0 * rng.normal();
        let gap = if post { -8.0 - 0.9 * (*y - 1989) as f64 } else { 2.0 * rng.normal() };
        let sd = if post { 4.0 } else { 0.0 };
        let effect = post.then(|| summary(gap, 4.0));
        let cumulative = post.then(|| summary(gap * ((*y - 1988) as f64), 4.0 * ((*y - 1988) as f64).sqrt()));
        path.push(PathPoint {
            time: TimePoint::Period(*y),
            observed: Some(synth + gap),
            counterfactual: synth,
            lower: synth - 1.645 * sd,
            upper: synth + 1.645 * sd,
            post,
            effect,
            cumulative,
        });
    }
    let effect = EffectBlock {
        average: summary(-15.8, 3.9),
        cumulative: Some(summary(-190.0, 41.0)),
        relative: Some(summary(-0.19, 0.045)),
        total: None,
    };
    let mut r =
        base("synthetic", "weights", effect, Verdict::Loss, Rope { low: -0.02, high: 0.02, units: RopeUnits::Percent });
    r.path = Some(path);
    r.weights = Some(
        [
            ("Utah", 0.334),
            ("Nevada", 0.235),
            ("Montana", 0.199),
            ("Colorado", 0.161),
            ("Connecticut", 0.069),
            ("Idaho", 0.002),
        ]
        .iter()
        .map(|(u, w)| UnitWeight { unit: (*u).into(), weight: *w })
        .collect(),
    );
    r.placebo = Some(PlaceboSummary { p_value: 1.0 / 13.0, rank: 1, units: 13 });
    r.assumptions = vec![
        "No donor was affected by the programme.".into(),
        "The treated unit lies in the convex hull of the donors before 1989.".into(),
    ];
    r.diagnostics.insert("pre_rmspe".into(), json!(1.76));
    r
}

/// Loyalty-scheme matching analysis (ATT), outcome-unit ROPE of 25.
pub fn matching() -> AnalysisResult {
    let effect = EffectBlock {
        average: summary(61.0, 18.0),
        cumulative: Some(summary(61.0 * 412.0, 18.0 * 412.0)),
        relative: Some(summary(0.071, 0.021)),
        total: None,
    };
    let mut r = base(
        "match",
        "nearest",
        effect,
        Verdict::GainButSmall,
        Rope { low: -25.0, high: 25.0, units: RopeUnits::Outcome },
    );
    r.estimand = Some("ATT".into());
    r.scope = Scope { per: Per::Unit, units: 412 };
    r.balance = Some(
        [
            ("age", 0.42, 0.03),
            ("tenure_months", 0.61, 0.05),
            ("spend_pre", 0.88, 0.12),
            ("visits_pre", 0.35, -0.02),
            ("region=north", -0.18, 0.01),
        ]
        .iter()
        .map(|(c, b, a)| BalanceRow {
            covariate: (*c).into(),
            smd_before: *b,
            smd_after: *a,
            var_ratio_before: 1.3,
            var_ratio_after: 1.05,
        })
        .collect(),
    );
    r.sample = Some(SampleCounts { treated: 420, controls_used: 398, treated_dropped: 8 });
    r.diagnostics.insert("standard_error".into(), json!(18.0));
    r.warnings = vec!["8 of 420 treated customers had no control within the caliper and were left out.".into()];
    r.assumptions = vec!["No unmeasured trait drives both joining and spending (no hidden confounding).".into()];
    r
}

/// Comparison with last year's randomized holdout.
pub fn compare() -> AnalysisResult {
    let effect = EffectBlock { average: summary(55.0, 20.0), cumulative: None, relative: None, total: None };
    let mut r = base(
        "compare",
        "experiment",
        effect,
        Verdict::GainButSmall,
        Rope { low: -25.0, high: 25.0, units: RopeUnits::Outcome },
    );
    let truth = summary(48.0, 9.0);
    r.truth = Some(truth);
    r.estimates = Some(
        [("nearest", 55.0, 20.0), ("ipw", 71.0, 15.0), ("aipw", 50.0, 12.0), ("naive difference", 140.0, 10.0)]
            .iter()
            .map(|(m, mean, sd)| {
                let s = summary(*mean, *sd);
                EstimateRow {
                    method: (*m).into(),
                    summary: s,
                    setting: "pool".into(),
                    estimand: "ATT".into(),
                    bias: mean - truth.median,
                    relative_bias: (mean - truth.median) / truth.median,
                    bias_in_truth_sd: (mean - truth.median) / truth.sd,
                    covers_truth: s.hdi_lower <= truth.median && truth.median <= s.hdi_upper,
                    verdict: Verdict::GainButSmall,
                    verdict_agrees: true,
                    diagnostics: Default::default(),
                    warnings: Vec::new(),
                }
            })
            .collect(),
    );
    r
}

/// A plan's result: a normal approximation of power, `Phi(lift / se(w) - 1.645)` with
/// `se(w) = 0.02 / sqrt(w)`, and its MDE `2.486 se(w)` (z_0.95 + z_0.8).
pub fn backtest() -> AnalysisResult {
    use aftercast_core::result::{FalsePositiveRate, PlanMde, PlanPower, Planning, WaitFor};
    let effect =
        EffectBlock { average: summary(0.0, 0.01), cumulative: None, relative: Some(summary(0.0, 0.01)), total: None };
    let mut r = base("plan", "structural", effect, Verdict::Negligible, Rope::default());
    let waits = [7usize, 14, 28, 56];
    let lifts = [0.01, 0.02, 0.05, 0.10];
    let se = |w: usize| 0.02 / (w as f64).sqrt();
    let mut power = Vec::new();
    for &w in &waits {
        for &lift in &lifts {
            let p = 0.5 * (1.0 + erf((lift / se(w) - 1.645) / std::f64::consts::SQRT_2));
            power.push(PlanPower { wait: w, lift, power: p });
        }
    }
    r.planning = Some(Planning {
        level: 0.9,
        target_power: 0.8,
        wait_unit: "days".into(),
        false_positive_rate: FalsePositiveRate { rate: 0.08, lower: 0.04, upper: 0.15, placebos: 50 },
        power,
        mde: waits.iter().map(|&w| PlanMde { wait: w, mde: Some(2.486 * se(w)) }).collect(),
        wait_for: vec![
            WaitFor { lift: 0.01, wait: None },
            WaitFor { lift: 0.02, wait: Some(7) },
            WaitFor { lift: 0.05, wait: Some(2) },
            WaitFor { lift: 0.10, wait: Some(1) },
        ],
        longest_wait: 56,
        answer: vec![],
    });
    r
}

fn normal_draws(seed: u64, n: usize, mean: f64, sd: f64) -> Vec<f64> {
    let mut rng = Lcg::new(seed);
    (0..n).map(|_| mean + sd * rng.normal()).collect()
}

/// The kept draws and figure data of a fixture, as the summary path hands them over.
pub fn inputs_for(stem: &str) -> (KeptDraws, Figures) {
    let mut figures = Figures::default();
    let draws = match stem {
        "forecast" => {
            let (rel, avg) = forecast_draws(4000);
            KeptDraws { relative: rel, average: avg, ..KeptDraws::default() }
        }
        "synthetic" => {
            let mut rng = Lcg::new(5);
            figures.placebo_gaps = (0..11)
                .map(|k| NamedCurve {
                    name: format!("Donor {k}"),
                    values: (1970..=2000)
                        .map(|y| if y >= 1989 { 5.0 * rng.normal() } else { 2.5 * rng.normal() })
                        .collect(),
                })
                .collect();
            KeptDraws {
                relative: normal_draws(6, 2000, -0.19, 0.045),
                average: normal_draws(7, 2000, -15.8, 3.9),
                ..KeptDraws::default()
            }
        }
        "match" => {
            let edges: Vec<f64> = (0..=20).map(|i| f64::from(i) / 20.0).collect();
            let bump = |c: f64, w: f64| -> Vec<f64> {
                let v: Vec<f64> = (0..20).map(|i| (-(((f64::from(i) + 0.5) / 20.0 - c) / w).powi(2)).exp()).collect();
                let s: f64 = v.iter().sum();
                v.iter().map(|x| x / s).collect()
            };
            figures.propensity = Some(PropensityHistogram {
                edges,
                treated_before: bump(0.62, 0.18),
                control_before: bump(0.3, 0.16),
                treated_after: bump(0.55, 0.17),
                control_after: bump(0.53, 0.17),
            });
            let gamma: Vec<f64> = (0..=20).map(|i| 1.0 + 0.1 * f64::from(i)).collect();
            let p_upper = gamma.iter().map(|g| (0.001 * g.powf(6.0)).min(1.0)).collect();
            figures.sensitivity = Some(SensitivityCurve { gamma, p_upper, alpha: 0.05 });
            KeptDraws { average: normal_draws(8, 2000, 61.0, 18.0), ..KeptDraws::default() }
        }
        "compare" => KeptDraws { average: normal_draws(9, 2000, 55.0, 20.0), ..KeptDraws::default() },
        "backtest" => KeptDraws {
            relative: normal_draws(10, 500, 0.0, 0.01),
            average: normal_draws(11, 500, 0.0, 0.01),
            ..KeptDraws::default()
        },
        _ => KeptDraws::default(),
    };
    (draws, figures)
}

/// Every fixture with a file stem.
pub fn all() -> Vec<(&'static str, AnalysisResult)> {
    vec![
        ("forecast", forecast()),
        ("synthetic", synthetic()),
        ("match", matching()),
        ("compare", compare()),
        ("backtest", backtest()),
    ]
}
