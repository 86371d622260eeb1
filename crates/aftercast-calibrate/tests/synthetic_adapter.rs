//! The synthetic control of aftercast-synth behind the backtest and series-compare traits.
use aftercast_calibrate::adapters::synthetic::SyntheticModel;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, PathModel, RunControl};
use aftercast_calibrate::series::{ArmSeries, compare_series};
use aftercast_core::estimate::Inference;
use aftercast_resample::rng::Stream;
use rand_distr::{Distribution, StandardNormal};

fn normal(rng: &mut Stream) -> f64 {
    StandardNormal.sample(rng)
}

/// Eight donors with their own random-walk levels; the target is 0.5 d1 + 0.3 d2 + 0.2 d3 + noise.
fn panel(seed: u64, n: usize) -> (Vec<f64>, Vec<Vec<f64>>) {
    let mut rng = Stream::new(seed, 0);
    let mut levels: Vec<f64> = (0..8).map(|j| 100.0 + 10.0 * j as f64).collect();
    let mut donors: Vec<Vec<f64>> = (0..8).map(|_| Vec::with_capacity(n)).collect();
    let mut y = Vec::with_capacity(n);
    for _ in 0..n {
        for (j, l) in levels.iter_mut().enumerate() {
            *l += normal(&mut rng);
            donors[j].push(*l + 0.5 * normal(&mut rng));
        }
        y.push(
            0.5 * donors[0].last().unwrap()
                + 0.3 * donors[1].last().unwrap()
                + 0.2 * donors[2].last().unwrap()
                + 0.3 * normal(&mut rng),
        );
    }
    (y, donors)
}

#[test]
fn synthetic_model_backtest_tracks_a_convex_mix_of_donors() {
    let (y, donors) = panel(4, 90);
    let data = BacktestData { name: "mix", y: &y, controls: &donors, times: None };
    let spec = BacktestSpec { placebos: 8, ..BacktestSpec::new(vec![10], 40) };
    let model = SyntheticModel::default();
    let r = backtest::run(&model, &data, &spec, &RunControl::default()).unwrap();
    assert_eq!(r.origins_completed, 8, "{:?}", r.failures);
    eprintln!("rmse {} fpr {} pointwise {}", r.rmse, r.planning.false_positive_rate.rate, r.pointwise_coverage);
    // the counterfactual is the donor mix: its error is near the target's own noise (0.3) plus
    // the donors' (0.5 weighted), far below the series' spread over time
    assert!(r.rmse < 1.5, "{}", r.rmse);
}

#[test]
fn series_compare_with_donor_segments() {
    let (mut y, donors) = panel(8, 90);
    for v in &mut y[70..84] {
        *v *= 1.05;
    }
    // control arm: a scaled copy of the treated arm's counterfactual plus noise, allocation 50/50
    let (base, _) = panel(8, 90);
    let arms = ArmSeries {
        name: "segments".into(),
        treated: y,
        control: base,
        treated_share: 0.5,
        control_share: 0.5,
        window_start: 70,
        window_end: 84,
        controls: Vec::new(),
        donors: donors.iter().enumerate().map(|(j, d)| (format!("seg{j}"), d.clone())).collect(),
        inputs: Vec::new(),
    };
    let model = SyntheticModel::default();
    let c = compare_series(&arms, &[], &[&model as &dyn PathModel], &Inference { draws: 200, ..Default::default() })
        .unwrap();
    assert!(c.failures.is_empty(), "{:?}", c.failures);
    let row = &c.rows[0];
    eprintln!("truth {} estimate {} [{}, {}]", c.truth.point, row.estimate, row.summary.lower, row.summary.upper);
    // the truth here is exactly the injected 5% of the treated arm's own level over the window
    let want: f64 = (70..84).map(|t| arms.treated[t] - arms.control[t]).sum::<f64>() / 14.0;
    assert!((c.truth.point - want).abs() < 1e-9);
    assert!(row.bias.abs() < 0.25 * c.truth.point.abs(), "bias {} truth {}", row.bias, c.truth.point);
}
