//! NSW experiment (Dehejia-Wahba subsample) as truth, CPS-1 as the non-experimental pool.
mod common;
use aftercast_calibrate::adapters::matching::MatchEstimator;
use aftercast_calibrate::truth::{Metric, experiment_truth};
use aftercast_calibrate::{DrawOptions, Naive, Regression, RegressionKind, UnitEstimator, compare_units};
use common::{cps1, nsw, spec, tol};

#[test]
fn print_table() {
    let opts = DrawOptions { draws: 400, ..Default::default() };
    let exp = nsw();
    let pools = vec![cps1()];
    let terms: Vec<aftercast_match::design::Term> =
        ["age^2", "age^3", "educ^2", "zero(re74)", "zero(re75)", "educ:re74"].iter().map(|t| t.parse().unwrap()).collect();
    let mut methods: Vec<Box<dyn UnitEstimator>> = vec![
        Box::new(Naive),
        Box::new(Regression { kind: RegressionKind::Coefficient }),
        Box::new(Regression { kind: RegressionKind::Imputation }),
    ];
    for m in MatchEstimator::all(&terms) {
        methods.push(Box::new(m));
    }
    let refs: Vec<&dyn UnitEstimator> = methods.iter().map(|m| m.as_ref()).collect();
    let t0 = std::time::Instant::now();
    let c = compare_units(&exp, &pools, &spec(), &refs, &opts).unwrap();
    eprintln!("truth {} sd {} [{}, {}] {:?}", c.truth.point, c.truth.summary.sd, c.truth.summary.lower, c.truth.summary.upper, c.truth.verdict);
    for r in &c.rows {
        eprintln!("{:24} {:10.1} [{:10.1}, {:10.1}] bias {:10.1} cover {} {:?} {}", r.method, r.estimate, r.summary.lower, r.summary.upper, r.bias, r.covers_truth, r.verdict, r.estimand);
    }
    eprintln!("failures {:?} {:?}", c.failures, t0.elapsed());
    let _ = experiment_truth(&exp, &Metric::Mean { outcome: "re78".into() }, &opts).unwrap();
    let _ = tol::ARITH;
}
