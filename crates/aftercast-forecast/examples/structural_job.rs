//! The benchmark job of docs/performance.md ("forecast"), timed in-process and printed as one
//! JSON line for benches/side_by_side.py: 1,095 daily pre-period values of
//! benches/data/bench_series.csv, local linear trend + weekly dummy seasonal + yearly
//! trigonometric seasonal (K = 4) + two controls, exact diffuse MLE, then 1,000 joint 90-day
//! paths with parameter uncertainty (100 parameter draws). Best of `--reps` runs (default 3).
//!
//! `cargo run --release -p aftercast-forecast --example structural_job -- [--reps N]`

use aftercast_forecast::structural::{Initialisation, SimulationOptions, fit, simulate};
use std::time::Instant;

#[path = "../benches/shared/job.rs"]
mod job;

fn main() {
    let reps: usize = std::env::args().skip_while(|a| a != "--reps").nth(1).and_then(|v| v.parse().ok()).unwrap_or(3);
    let (y, x) = job::load();
    let n_pre = job::N_PRE;
    let xp: Vec<Vec<f64>> = x.iter().map(|v| v[..n_pre].to_vec()).collect();
    let spec = job::spec(Initialisation::ExactDiffuse);
    let opts = SimulationOptions { draws: 1000, seed: 1, parameter_uncertainty: true, parameter_sets: 100 };
    let mut times = Vec::new();
    let mut fit_times = Vec::new();
    let mut last = None;
    for _ in 0..reps.max(1) {
        let t0 = Instant::now();
        let f = fit(&spec, &y[..n_pre], &xp, None).expect("fit");
        let t1 = Instant::now();
        let paths = simulate(&f, &y[..n_pre], &x, 0, 90, &opts).expect("paths");
        times.push(t0.elapsed().as_secs_f64());
        fit_times.push((t1 - t0).as_secs_f64());
        last = Some((f, paths.len()));
    }
    let (f, n_paths) = last.expect("one run");
    let best = times.iter().copied().fold(f64::INFINITY, f64::min);
    let best_fit = fit_times.iter().copied().fold(f64::INFINITY, f64::min);
    println!(
        "{{\"job\":\"structural MLE + {n_paths} paths\",\"best_s\":{best:.4},\"best_fit_s\":{best_fit:.4},\"all_s\":{times:?},\"loglik\":{:.4},\"iterations\":{},\"threads\":{},\"init\":\"{:?}\"}}",
        f.loglik,
        f.optim.iterations,
        rayon::current_num_threads(),
        f.spec.init
    );
}
