//! One seed, any thread count: bit-identical results (DESIGN.md, "Numbers and
//! reproducibility"). Two rayon pools (1 and 2 threads) run the same calls.

use aftercast_resample::bayes::{BayesBootstrap, TieAggregation};
use aftercast_resample::blocks::{BlockScheme, Wrap, replicates};
use aftercast_resample::rng::Stream;
use rand::RngExt;

fn run_all() -> Vec<Vec<u64>> {
    let mut rng = Stream::new(2, 2);
    let t: Vec<f64> =
        (0..3000).map(|_| if rng.random::<f64>() < 0.9 { 0.0 } else { rng.random::<f64>() * 80.0 }).collect();
    let c: Vec<f64> = (0..2500).map(|_| rng.random::<f64>() * 60.0).collect();
    let series: Vec<f64> = (0..300).map(|k| (k as f64 * 0.2).sin() + rng.random::<f64>()).collect();
    let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<u64>>();
    let mut out = Vec::new();
    for ties in [TieAggregation::Auto, TieAggregation::Never] {
        let boot = BayesBootstrap::new(300, 17).with_ties(ties);
        let d = boot.two_groups(&t, &c).expect("two groups");
        out.push(bits(&d.difference));
        out.push(bits(&d.relative().expect("relative")));
        out.push(bits(
            &boot
                .ratio(&t, &c[..3000.min(c.len())].iter().chain(&c[..500]).copied().collect::<Vec<_>>())
                .expect("ratio"),
        ));
        out.push(bits(&boot.quantiles(&t, &[0.5, 0.95]).expect("quantiles").concat()));
    }
    for scheme in [BlockScheme::Stationary { mean_length: 6.3 }, BlockScheme::Moving { length: 9, wrap: Wrap::Clipped }]
    {
        out.push(bits(&replicates(&series, &scheme, 400, 5, |s| s.iter().sum::<f64>()).expect("replicates")));
    }
    out
}

#[test]
fn same_seed_same_bits_for_one_and_two_threads() {
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().expect("pool").install(run_all);
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build().expect("pool").install(run_all);
    assert_eq!(one, two);
    // and the result depends on the seed (guards against a constant output)
    let other = BayesBootstrap::new(300, 18).mean(&[1.0, 2.0, 5.0]).expect("mean");
    let base = BayesBootstrap::new(300, 17).mean(&[1.0, 2.0, 5.0]).expect("mean");
    assert_ne!(other, base);
}
