//! Criterion benchmarks of aftercast-forecast.
//! Benchmark of the structural model at the size of the issue: 1,095 daily pre-period values +
//! 90 post-period values, local linear trend + weekly dummy seasonal + yearly trigonometric
//! seasonal (K = 4) + two controls; MLE fit + 1,000 joint path draws. Data:
//! benches/data/bench_series.csv (written by benches/bench_statsmodels.py, which times the same
//! job with statsmodels).

use aftercast_forecast::structural::{Initialisation, SimulationOptions, fit, simulate};
use criterion::{Criterion, criterion_group, criterion_main};

#[path = "shared/job.rs"]
mod job;

fn bench(c: &mut Criterion) {
    let (y, x) = job::load();
    let n_pre = job::N_PRE;
    let spec = job::spec(Initialisation::ExactDiffuse);
    let xp: Vec<Vec<f64>> = x.iter().map(|v| v[..n_pre].to_vec()).collect();
    let mut g = c.benchmark_group("forecast");
    g.sample_size(10);
    g.bench_function("structural_mle_1095", |b| b.iter(|| fit(&spec, &y[..n_pre], &xp, None).unwrap()));
    let f = fit(&spec, &y[..n_pre], &xp, None).unwrap();
    eprintln!(
        "fit: converged {} ({}, {} iterations), loglik {:.3}, params {:?}",
        f.optim.converged, f.optim.reason, f.optim.iterations, f.loglik, f.params
    );
    let t0 = std::time::Instant::now();
    for _ in 0..10 {
        std::hint::black_box(aftercast_forecast::structural::score_at(&spec, &f.theta, &y[..n_pre], &xp));
    }
    let t1 = std::time::Instant::now();
    for _ in 0..10 {
        let p = spec.params_from_theta(&f.theta);
        std::hint::black_box(aftercast_forecast::structural::filter(&spec.system(&p), &y[..n_pre], &xp, false));
    }
    eprintln!("one score pass {:?}, one filter pass {:?}", (t1 - t0) / 10, t1.elapsed() / 10);
    let opts = SimulationOptions { draws: 1000, seed: 1, parameter_uncertainty: true, parameter_sets: 100 };
    g.bench_function("structural_draws_1000x90", |b| b.iter(|| simulate(&f, &y[..n_pre], &x, 0, 90, &opts).unwrap()));
    g.bench_function("structural_mle_plus_1000_draws", |b| {
        b.iter(|| {
            let f = fit(&spec, &y[..n_pre], &xp, None).unwrap();
            simulate(&f, &y[..n_pre], &x, 0, 90, &opts).unwrap()
        })
    });
    g.finish();
}

mod group {
    #![allow(missing_docs)]
    use super::*;
    criterion_group!(benches, bench);
}
use group::benches;
criterion_main!(benches);
