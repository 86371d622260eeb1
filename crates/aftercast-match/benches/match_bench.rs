//! Benchmark of the sizes: 1,000,000 units (10% treated), 10 numeric covariates.
//! - propensity fit + 1:1 caliper matching without replacement + Abadie-Imbens variance
//!   (criterion, 10 samples), and the same with replacement (the job scikit-learn's
//!   NearestNeighbors does; see benches/sklearn_pipeline.py)
//! - ipw with 500 Bayesian-bootstrap replicates re-fitting the propensity model (timed once;
//!   set MATCH_BENCH_IPW=0 to skip)
//!
//! Run: cargo bench -p aftercast-match --bench match_bench
//! Numbers go to docs/performance.md ("match").

use aftercast_core::table::InputInfo;
use aftercast_core::units::UnitTable;
use aftercast_match::{MatchParams, Method};
use aftercast_resample::rng::Stream;
use criterion::Criterion;
use rand_distr::{Distribution, StandardNormal};
use std::time::Instant;

fn synthetic(n: usize, seed: u64) -> UnitTable {
    let p = 10;
    let mut s = Stream::new(seed, 0);
    let mut cols: Vec<Vec<f64>> = (0..p).map(|_| Vec::with_capacity(n)).collect();
    let mut treated = Vec::with_capacity(n);
    let mut y = Vec::with_capacity(n);
    let b = [0.4, -0.3, 0.2, 0.25, -0.15, 0.1, 0.3, -0.2, 0.05, 0.15];
    for _ in 0..n {
        let x: Vec<f64> = (0..p).map(|_| StandardNormal.sample(&mut s)).collect();
        let eta = -2.45 + x.iter().zip(&b).map(|(a, c)| a * c).sum::<f64>();
        let t = s.uniform() < 1.0 / (1.0 + (-eta).exp());
        let noise: f64 = StandardNormal.sample(&mut s);
        y.push(x.iter().sum::<f64>() + if t { 1.0 } else { 0.0 } + noise);
        for (c, v) in cols.iter_mut().zip(x) {
            c.push(v);
        }
        treated.push(t);
    }
    UnitTable {
        ids: (0..n).map(|i| i.to_string()).collect(),
        lines: (0..n as u64).map(|i| i + 2).collect(),
        treated,
        outcomes: vec![("y".into(), y)],
        numeric: cols.into_iter().enumerate().map(|(j, c)| (format!("x{}", j + 1), c)).collect(),
        categorical: Vec::new(),
        input: InputInfo { path: "synthetic".into(), sha256: String::new(), rows: n },
        dropped_rows: 0,
    }
}

fn main() {
    let n = 1_000_000;
    let units = synthetic(n, 42);
    let covs: Vec<String> = (1..=10).map(|j| format!("x{j}")).collect();
    eprintln!("treated share {:.4}", units.n_treated() as f64 / n as f64);
    let mut c = Criterion::default().sample_size(10).configure_from_args();
    let nearest = MatchParams::new(covs.clone()).method(Method::Nearest).draws(1000).check().unwrap();
    c.bench_function("match/nearest_1to1_caliper_no_replace_ai_variance_1m", |b| {
        b.iter(|| {
            let f = nearest.fit(&units, "y").unwrap();
            std::hint::black_box(f.estimate)
        })
    });
    let nearest_rep = MatchParams::new(covs.clone()).method(Method::Nearest).replace(true).draws(1000).check().unwrap();
    c.bench_function("match/nearest_1to1_caliper_with_replacement_ai_variance_1m", |b| {
        b.iter(|| {
            let f = nearest_rep.fit(&units, "y").unwrap();
            std::hint::black_box(f.estimate)
        })
    });
    c.final_summary();
    if std::env::var("MATCH_BENCH_IPW").map(|v| v != "0").unwrap_or(true) {
        let ipw = MatchParams::new(covs).method(Method::Ipw).draws(500).check().unwrap();
        let t0 = Instant::now();
        let f = ipw.fit(&units, "y").unwrap();
        let dt = t0.elapsed().as_secs_f64();
        println!(
            "match/ipw_bayesian_bootstrap_500_refit_1m: {dt:.2} s (one run; estimate {:.4}, {} threads)",
            f.estimate,
            rayon::current_num_threads()
        );
    }
}
