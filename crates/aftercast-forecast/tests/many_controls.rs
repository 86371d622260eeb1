//! Many candidate controls: 50 simulated series of which 3 drive the outcome. With five or more
//! controls the structural model shrinks their coefficients together (an empirical-Bayes ridge
//! prior whose variance is estimated by maximum likelihood). Checks (analytic: the generating
//! values are known): the three driving controls carry the three largest standardised weights,
//! and the 90% interval of the average effect covers the injected effect.

use aftercast_core::series::{Series, Split};
use aftercast_core::table::InputInfo;
use aftercast_core::time::{Frequency, TimeAxis, TimePoint};
use aftercast_forecast::{ForecastParams, ModelKind, analyse};
use aftercast_resample::rng::Stream;
use rand::RngExt;
use rand_distr::StandardNormal;

const N_PRE: usize = 200;
const N_POST: usize = 20;
const N_CONTROLS: usize = 50;
const EFFECT: f64 = 3.0;
/// Coefficients of the three driving controls (the others are 0).
const DRIVERS: [(usize, f64); 3] = [(4, 2.0), (17, 1.5), (33, -1.0)];

fn simulate(seed: u64) -> Series {
    let mut rng = Stream::new(seed, 0);
    let n = N_PRE + N_POST;
    let mut controls = Vec::new();
    for k in 0..N_CONTROLS {
        let mut x = Vec::with_capacity(n);
        let mut c: f64 = rng.sample(StandardNormal);
        for _ in 0..n {
            let e: f64 = rng.sample(StandardNormal);
            c = 0.5 * c + 0.75_f64.sqrt() * e;
            x.push(10.0 + c);
        }
        controls.push((format!("x{k}"), x));
    }
    let mut level = 50.0;
    let mut y = Vec::with_capacity(n);
    for t in 0..n {
        let e: f64 = rng.sample(StandardNormal);
        let u: f64 = rng.sample(StandardNormal);
        let drive: f64 = DRIVERS.iter().map(|&(k, b)| b * controls[k].1[t]).sum();
        y.push(level + drive + e + if t >= N_PRE { EFFECT } else { 0.0 });
        level += 0.3 * u;
    }
    Series {
        name: "y".into(),
        axis: TimeAxis::regular(Frequency::Period, TimePoint::Period(0), n).unwrap(),
        outcome: y,
        controls,
        input: InputInfo { path: "simulated".into(), sha256: String::new(), rows: n },
        notes: vec![],
    }
}

#[test]
fn fifty_candidate_controls_three_drive_the_outcome() {
    let params = ForecastParams::builder().model(ModelKind::Structural).draws(400).seed(3).check().unwrap();
    let split = Split { pre_end: N_PRE, post_start: N_PRE, post_end: N_PRE + N_POST };
    for seed in [11, 12] {
        let run = analyse(&simulate(seed), split, &params, None).unwrap();
        let st = run.diagnostics.structural.as_ref().unwrap();
        assert!(st.shrunk_controls, "50 controls must be shrunk together");
        let mut order: Vec<&aftercast_forecast::analysis::ControlWeight> = st.coefficients.iter().collect();
        order.sort_by(|a, b| b.standardised.abs().total_cmp(&a.standardised.abs()));
        let mut top: Vec<String> = order[..3].iter().map(|w| w.name.clone()).collect();
        top.sort();
        let mut want: Vec<String> = DRIVERS.iter().map(|(k, _)| format!("x{k}")).collect();
        want.sort();
        assert_eq!(top, want, "seed {seed}: largest standardised weights {:?}", &order[..5]);
        let avg = run.summarize(vec![]).unwrap().result.effect.average;
        assert!(avg.lower <= EFFECT && EFFECT <= avg.upper, "seed {seed}: interval {avg:?} misses {EFFECT}");
    }
}
