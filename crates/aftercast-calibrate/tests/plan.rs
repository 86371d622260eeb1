//! Plans checked against analytic results: a forecast plan of white noise around a constant
//! level, and a plasmode plan of a randomized unit table analysed by a difference in means.
mod common;
use aftercast_calibrate::adapters::forecast::ForecastPlan;
use aftercast_calibrate::adapters::matching::MatchEstimator;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, RunControl};
use aftercast_calibrate::plasmode::{SizeQuestion, plan_sizes};
use aftercast_calibrate::{Naive, UnitEstimator};
use aftercast_core::estimate::Inference;
use aftercast_core::series::{Series, Split};
use aftercast_core::table::InputInfo;
use aftercast_core::time::{Frequency, TimeAxis, TimePoint};
use aftercast_core::units::UnitTable;
use aftercast_forecast::structural::Trend;
use aftercast_forecast::{Choice, ForecastParams, ModelKind};
use aftercast_resample::rng::Stream;
use common::{iid_series, tol};
use rand::RngExt;
use rand_distr::StandardNormal;

/// z_0.95 + z_0.80 (scipy.stats.norm.ppf(0.95) + norm.ppf(0.8), scipy 1.17.1).
const Z_SUM: f64 = 1.6448536269514722 + 0.8416212335729143;

fn series(y: Vec<f64>) -> Series {
    let n = y.len();
    Series {
        name: "noise".into(),
        axis: TimeAxis::regular(Frequency::Period, TimePoint::Period(0), n).unwrap(),
        outcome: y,
        controls: vec![],
        input: InputInfo { path: "simulated".into(), sha256: String::new(), rows: n },
        notes: vec![],
    }
}

#[test]
fn local_level_plan_of_white_noise_matches_the_analytic_mde_and_false_positive_rate() {
    // y ~ N(100, 5^2), no effect anywhere; a local-level forecast without season
    let (mu, sigma) = (100.0, 5.0);
    let y = iid_series(4000, mu, sigma, 21);
    let s = series(y);
    let params = ForecastParams::builder()
        .model(ModelKind::Structural)
        .trend(Trend::Level)
        .ar(Choice::Off)
        .no_seasons()
        .draws(1000)
        .check()
        .unwrap();
    let split = Split { pre_end: 4000, post_start: 4000, post_end: 4000 };
    let mut plan = ForecastPlan::new(&s, split, &params, None).unwrap();
    let spec = BacktestSpec { placebos: 120, draws: 1000, seed: 5, ..BacktestSpec::new(vec![7, 14, 28, 56], 400) };
    plan.choose(spec.horizon()).unwrap();
    let data = BacktestData { name: "noise", y: &s.outcome, controls: &[], times: Some(s.axis.points()) };
    let r = backtest::run(&plan, &data, &spec, &RunControl::default()).unwrap();
    assert_eq!(r.origins_completed, 120, "{:?}", r.failures);
    let p = &r.planning;
    // Analytic: the relative error of a w-day mean is about N(0, (sigma/mu)^2 / w) (the level
    // is known to within sigma / sqrt(400) or better, a few percent of that), so the 80%-power
    // MDE at a 90% interval is (z_0.95 + z_0.8) sigma / (mu sqrt(w)).
    for m in &p.mde {
        let want = Z_SUM * sigma / mu / (m.wait as f64).sqrt();
        let got = m.mde.unwrap();
        eprintln!("wait {:2}: mde {got:.4}, analytic {want:.4}", m.wait);
        assert!((got / want - 1.0).abs() < 0.2, "wait {}: {got} against {want}", m.wait);
    }
    // the MDE falls with the wait
    assert!(p.mde.windows(2).all(|w| w[1].mde.unwrap() < w[0].mde.unwrap()));
    // Nominal 10% at level 0.9: within 4%-16% over 120 placebo dates
    let fpr = p.false_positive_rate.rate;
    assert!(fpr >= tol::FPR_RANGE.0 && fpr <= tol::FPR_RANGE.1, "false-positive rate {fpr}");
    // power rises with the lift and with the wait
    let pw = |w: usize, l: f64| p.power.iter().find(|x| x.wait == w && x.lift == l).unwrap().power;
    for x in &p.power {
        eprintln!("wait {:2} lift {:+.2}: power {:.3}", x.wait, x.lift, x.power);
    }
    for w in [7, 14, 28, 56] {
        assert!(pw(w, 0.01) <= pw(w, 0.02) && pw(w, 0.02) <= pw(w, 0.05) && pw(w, 0.05) <= pw(w, 0.10));
    }
    // with the wait: each step may dip by sampling noise only (two binomial standard errors
    // over 120 runs; at +1% the theoretical rise from 7 to 14 days is 0.13 to 0.18, inside
    // that noise), and the rise from the shortest to the longest wait is clear
    for l in [0.01, 0.02, 0.05] {
        for w in [[7, 14], [14, 28], [28, 56]] {
            let (a, b) = (pw(w[0], l), pw(w[1], l));
            let se = (a * (1.0 - a) / 120.0).sqrt().max(1.0 / 120.0);
            assert!(b >= a - 2.0 * se, "lift {l}: power {a} after {} but {b} after {}", w[0], w[1]);
        }
        assert!(pw(56, l) > pw(7, l), "lift {l}");
    }
    // the analytic wait for +2%: (Z_SUM * 0.05 / 0.02)^2 = 38.8 days; the plan's lies near it
    let w2 = p.wait_for.iter().find(|w| w.lift == 0.02).unwrap().wait.unwrap();
    assert!((28..=56).contains(&w2), "{w2}");
    // every placebo summary's point lies inside its own interval
    for o in &r.origins {
        assert!(o.relative_hdi.0 <= o.relative_median && o.relative_median <= o.relative_hdi.1);
    }
}

/// A randomized unit table: x ~ N(0, 1), treatment by a fair coin, y = 50 + 3 x + N(0, 10^2).
fn randomized(n: usize, seed: u64) -> UnitTable {
    let mut rng = Stream::new(seed, 1);
    let mut x = Vec::with_capacity(n);
    let mut y = Vec::with_capacity(n);
    let mut t = Vec::with_capacity(n);
    for _ in 0..n {
        let xi: f64 = rng.sample(StandardNormal);
        let e: f64 = rng.sample(StandardNormal);
        x.push(xi);
        y.push(50.0 + 3.0 * xi + 10.0 * e);
        t.push(rng.random_range(0.0..1.0) < 0.5);
    }
    UnitTable {
        ids: vec![],
        lines: (2..n as u64 + 2).collect(),
        treated: t,
        outcomes: vec![("y".into(), y)],
        numeric: vec![("x".into(), x)],
        categorical: vec![],
        input: InputInfo { path: "simulated".into(), sha256: String::new(), rows: n },
        dropped_rows: 0,
    }
}

#[test]
fn plasmode_plan_of_a_difference_in_means_matches_the_two_sample_formula() {
    let units = randomized(2000, 3);
    let opts = Inference { draws: 400, level: 0.9, seed: 9, ..Inference::default() };
    let q = SizeQuestion { sizes: vec![200, 800, 3200], runs: 120 };
    let plan = plan_sizes(&units, "y", &["x".to_string()], &Naive, &q, &opts, &RunControl::default()).unwrap();
    assert!(plan.failures.is_empty());
    // the outcome model's residual sd is near the true 10, its treated level near 50
    assert!((plan.sigma - 10.0).abs() < 0.6 && (plan.base - 50.0).abs() < 1.5, "{} {}", plan.sigma, plan.base);
    let question = aftercast_calibrate::plan::PlanQuestion {
        shown: vec![200, 800, 3200],
        lifts: vec![0.02, 0.05, 0.10],
        level: 0.9,
        target: 0.8,
        judged_wait: 800,
        wait_unit: "units".into(),
    };
    let p = aftercast_calibrate::plan::planning(&plan.thresholds, &question);
    // Two-sample formula (half treated, outcome sd sigma incl. the covariate's share, which a
    // difference in means leaves in: sd(y) = sqrt(10^2 + 3^2)): MDE = Z_SUM * sd * 2 / sqrt(n)
    let sd = (100.0f64 + 9.0).sqrt();
    for m in &p.mde {
        let want = Z_SUM * sd * 2.0 / (m.wait as f64).sqrt() / plan.base;
        let got = m.mde.unwrap();
        eprintln!("{} units: mde {got:.4}, formula {want:.4}", m.wait);
        assert!((got / want - 1.0).abs() < 0.2, "{} units: {got} against {want}", m.wait);
    }
    let fpr = p.false_positive_rate.rate;
    assert!(fpr >= tol::FPR_RANGE.0 && fpr <= tol::FPR_RANGE.1, "false-positive rate {fpr}");
}

#[test]
fn a_constant_effect_shifts_every_draw_of_the_matching_methods_by_itself() {
    // the premise of plan_sizes: adding tau to every treated outcome moves the estimate and
    // each draw by exactly tau, so one analysis per simulated data set gives every lift
    let base = randomized(600, 4);
    let tau = 3.25;
    let mut shifted = base.clone();
    let y: Vec<f64> =
        base.outcomes[0].1.iter().zip(&base.treated).map(|(v, t)| if *t { v + tau } else { *v }).collect();
    shifted.outcomes = vec![("y".into(), y)];
    let opts = Inference { draws: 200, seed: 11, ..Inference::default() };
    for method in [aftercast_match::Method::Nearest, aftercast_match::Method::Ipw, aftercast_match::Method::Aipw] {
        let m = MatchEstimator::new(method, vec![]);
        let a = m.estimate(&base, "y", &["x".to_string()], &opts).unwrap();
        let b = m.estimate(&shifted, "y", &["x".to_string()], &opts).unwrap();
        assert!((b.point - a.point - tau).abs() < 1e-9, "{}: {} vs {}", m.name(), a.point, b.point);
        assert_eq!(a.draws.len(), b.draws.len());
        for (x, z) in a.draws.iter().zip(&b.draws) {
            assert!((z - x - tau).abs() < 1e-8, "{}: draw {x} -> {z}", m.name());
        }
    }
}
