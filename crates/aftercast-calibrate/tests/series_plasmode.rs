//! Series-level comparison on simulated experiment arms with a known lift, the structural
//! model as a backtest model, and plasmode simulation on the NSW covariates.
mod common;
use aftercast_calibrate::adapters::forecast::StructuralModel;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, PathModel, RunControl};
use aftercast_calibrate::plasmode::{PlasmodeSpec, plasmode};
use aftercast_calibrate::series::{ArmSeries, compare_series, series_truth};
use aftercast_calibrate::{Naive, Regression, RegressionKind, UnitEstimator};
use aftercast_core::Inference;
use aftercast_resample::rng::Stream;
use common::{COVARIATES, nsw, tol};
use rand_distr::{Distribution, StandardNormal};

fn normal(rng: &mut Stream) -> f64 {
    StandardNormal.sample(rng)
}

/// Arms of a past experiment: a common local-level demand, the treated arm lifted by `lift`
/// in the window, both arms with their own noise.
fn arms(seed: u64, lift: f64) -> ArmSeries {
    let mut rng = Stream::new(seed, 0);
    let n = 120;
    let (ws, we) = (100, 114);
    let mut level = 1000.0;
    let (mut t, mut c) = (Vec::new(), Vec::new());
    for i in 0..n {
        level += 8.0 * normal(&mut rng);
        let z1: f64 = StandardNormal.sample(&mut rng);
        let z2: f64 = StandardNormal.sample(&mut rng);
        let l = if (ws..we).contains(&i) { 1.0 + lift } else { 1.0 };
        t.push(0.3 * level * l + 6.0 * z1);
        c.push(0.7 * level + 6.0 * z2);
    }
    ArmSeries {
        name: format!("sim{seed}"),
        treated: t,
        control: c,
        treated_share: 0.3,
        control_share: 0.7,
        window_start: ws,
        window_end: we,
        controls: Vec::new(),
        donors: Vec::new(),
        inputs: Vec::new(),
    }
}

#[test]
fn series_truth_is_recovered_exactly() {
    let a = arms(1, 0.05);
    let opts = Inference { draws: 500, ..Default::default() };
    let truth = series_truth(&a, &opts).unwrap();
    let r = 0.3 / 0.7;
    let want = (100..114).map(|t| a.treated[t] - r * a.control[t]).sum::<f64>() / 14.0;
    assert!((truth.point - want).abs() < tol::ARITH, "{} vs {want}", truth.point);
    let rel = (100..114).map(|t| a.treated[t]).sum::<f64>() / (100..114).map(|t| r * a.control[t]).sum::<f64>() - 1.0;
    assert!((truth.details["relative"].as_f64().unwrap() - rel).abs() < tol::ARITH);
}

#[test]
fn structural_forecast_interval_covers_the_truth_in_most_seeded_runs() {
    let model = StructuralModel::local_level();
    let opts = Inference { draws: 200, ..Default::default() };
    let runs = 20;
    let mut covered = 0;
    for seed in 0..runs {
        let c = compare_series(&arms(100 + seed, 0.05), &[&model as &dyn PathModel], &[], &opts).unwrap();
        assert!(c.failures.is_empty(), "{:?}", c.failures);
        covered += usize::from(c.rows[0].covers_truth);
    }
    eprintln!("covered {covered} of {runs}");
    // at least 85% of seeded runs (nominal 90%)
    assert!(covered as f64 >= 0.85 * runs as f64, "{covered} of {runs}");
}

#[test]
fn structural_model_backtest_runs_and_is_calibrated_on_a_local_level_series() {
    let mut rng = Stream::new(9, 0);
    let mut level = 200.0;
    let y: Vec<f64> = (0..160)
        .map(|_| {
            level += 2.0 * normal(&mut rng);
            level + 4.0 * normal(&mut rng)
        })
        .collect();
    let data = BacktestData { name: "ll", y: &y, controls: &[], times: None };
    let spec = BacktestSpec { placebos: 12, draws: 200, ..BacktestSpec::new(vec![10], 60) };
    let r = backtest::run(&StructuralModel::local_level(), &data, &spec, &RunControl::default()).unwrap();
    assert_eq!(r.origins_completed, 12, "{:?}", r.failures);
    eprintln!("fpr {} pointwise {}", r.planning.false_positive_rate.rate, r.pointwise_coverage);
    assert!(r.pointwise_coverage > 0.75, "{}", r.pointwise_coverage);
    assert!(r.planning.false_positive_rate.rate <= 0.35, "{}", r.planning.false_positive_rate.rate);
}

#[test]
fn plasmode_on_nsw_covariates_recovers_the_known_effect() {
    let units = nsw();
    let cov: Vec<String> = COVARIATES.iter().map(|s| s.to_string()).collect();
    let reg = Regression { kind: RegressionKind::Imputation };
    let methods: Vec<&dyn UnitEstimator> = vec![&Naive, &reg];
    let opts = Inference { draws: 200, ..Default::default() };
    let rep =
        plasmode(&units, "re78", &cov, &methods, &PlasmodeSpec { effect: 1000.0, replicates: 60 }, &opts).unwrap();
    for r in &rep {
        eprintln!(
            "{}: bias {:.1} (se {:.1}) rmse {:.1} coverage {:.3} power {:.3}",
            r.method, r.bias, r.bias_se, r.rmse, r.coverage, r.power
        );
        assert_eq!(r.replicates, 60);
        // The NSW arms are randomized, so both are unbiased here: |bias| within 3 Monte-Carlo se.
        assert!(r.bias.abs() < 3.0 * r.bias_se + 1e-9, "{}: {} ({})", r.method, r.bias, r.bias_se);
        assert!(r.coverage >= 0.75, "{}: {}", r.method, r.coverage);
    }
    // The arms are randomized, so the covariate imbalance (the only error adjustment removes) is
    // small and fixed across replicates; both errors are then dominated by the same simulated
    // noise, and adjustment neither halves nor doubles them (60 paired replicates: the RMSE
    // ratio has a Monte-Carlo spread of roughly +-10%).
    let ratio = rep[1].rmse / rep[0].rmse;
    assert!((0.75..=1.25).contains(&ratio), "RMSE ratio {ratio}");
}
