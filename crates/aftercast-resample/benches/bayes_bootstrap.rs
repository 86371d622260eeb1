//! Bayesian-bootstrap benchmark (issue 2, "Performance"): two groups of 500,000 units, 2,000
//! draws of the difference in means, (a) continuous outcomes, (b) 90% zeros, against the
//! RNG-only limit (Exp(1) variates per second from our streams).
//!
//! A plain timing binary (`harness = false`): each case is a multi-second run, so a few timed
//! repetitions say more than a statistical harness would. Run with
//! `cargo bench -p aftercast-resample --bench bayes_bootstrap`; pass `ab` to run only cases
//! (a) and (b) once (for `/usr/bin/time -v` peak-memory measurement).

use aftercast_resample::bayes::{BayesBootstrap, Sample, TieAggregation, exp1};
use aftercast_resample::rng::{Stream, par_draws};
use rand::RngExt;
use rand_distr::{Distribution, Gamma};
use std::hint::black_box;
use std::time::Instant;

const UNITS: usize = 500_000;
const DRAWS: usize = 2_000;

fn lognormal(rng: &mut Stream) -> f64 {
    // Box-Muller normal -> lognormal spend-like values (all distinct in practice)
    let u1: f64 = 1.0 - rng.random::<f64>();
    let u2: f64 = rng.random::<f64>();
    let z = (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos();
    (3.0 + 0.8 * z).exp()
}

fn group(seed: u64, zero_share: f64) -> Vec<f64> {
    let mut rng = Stream::new(seed, 999);
    (0..UNITS).map(|_| if rng.random::<f64>() < zero_share { 0.0 } else { lognormal(&mut rng) }).collect()
}

/// Process CPU time (user + system) in seconds, from /proc/self/stat (Linux; 0 elsewhere).
fn cpu_seconds() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    // fields after the ")" that ends the command name: utime is the 12th, stime the 13th
    let rest = stat.rsplit_once(')').map(|(_, r)| r).unwrap_or("");
    let f: Vec<&str> = rest.split_whitespace().collect();
    let field = |i: usize| f.get(i).and_then(|x| x.parse::<f64>().ok()).unwrap_or(0.0);
    (field(11) + field(12)) / 100.0
}

/// Times `reps` runs; prints wall and CPU seconds of each and returns the best wall time.
/// On a shared machine the CPU time (summed over threads) is the steadier number.
fn time<T>(label: &str, reps: usize, mut f: impl FnMut() -> T) -> f64 {
    let mut best = f64::INFINITY;
    let mut all = Vec::new();
    for _ in 0..reps {
        let c0 = cpu_seconds();
        let t0 = Instant::now();
        black_box(f());
        let s = t0.elapsed().as_secs_f64();
        let c = cpu_seconds() - c0;
        best = best.min(s);
        all.push(format!("{s:.3} s wall / {c:.2} s CPU"));
    }
    println!("{label}: best {best:.3} s (runs: {})", all.join(", "));
    best
}

fn main() {
    let only_ab = std::env::args().any(|a| a == "ab");
    let threads = rayon::current_num_threads();
    println!("rayon threads: {threads}; units per group {UNITS}; draws {DRAWS}");
    let (ta, ca) = (group(1, 0.0), group(2, 0.0));
    let (tb, cb) = (group(3, 0.9), group(4, 0.9));
    let boot = BayesBootstrap::new(DRAWS, 42);
    if only_ab {
        time("(a) continuous", 1, || boot.two_groups(&ta, &ca).expect("a"));
        time("(b) 90% zeros", 1, || boot.two_groups(&tb, &cb).expect("b"));
        return;
    }
    let atoms_a = Sample::new(&ta, TieAggregation::Auto).expect("sample").atoms();
    let atoms_b = Sample::new(&tb, TieAggregation::Auto).expect("sample").atoms();
    println!("atoms per replicate: (a) treated {atoms_a}; (b) treated {atoms_b}");

    // RNG-only limit: the same number of Exp(1) variates as case (a), same parallel layout.
    let n_exp = (2 * UNITS * DRAWS) as f64;
    let rng_s = time("RNG only: Exp(1) ziggurat, 2 x 500,000 x 2,000 variates", 2, || {
        par_draws(42, DRAWS, |_, rng| (0..2 * UNITS).map(|_| exp1(rng)).sum::<f64>())
    });
    println!(
        "  => {:.3e} Exp(1) variates/s ({:.2} ns each per core)",
        n_exp / rng_s,
        rng_s * threads as f64 / n_exp * 1e9
    );
    let inv_s = time("RNG only: Exp(1) by inversion -ln(1-U), 1/4 of the variates", 1, || {
        par_draws(42, DRAWS / 4, |_, rng| (0..2 * UNITS).map(|_| rng.exp1()).sum::<f64>())
    });
    println!("  => {:.3e} variates/s", n_exp / 4.0 / inv_s);

    // Relative cost of a Gamma(k) draw (k >= 2) to an Exp(1) draw, single thread.
    let m = 20_000_000usize;
    let mut rng = Stream::new(7, 0);
    let t_exp = time("single thread: 20M Exp(1)", 1, || (0..m).map(|_| exp1(&mut rng)).sum::<f64>());
    for k in [2.0, 50.0] {
        let g = Gamma::new(k, 1.0).expect("gamma");
        let t_g =
            time(&format!("single thread: 20M Gamma({k})"), 1, || (0..m).map(|_| g.sample(&mut rng)).sum::<f64>());
        println!("  => Gamma({k}) / Exp(1) cost ratio {:.2}", t_g / t_exp);
    }

    let a = time("(a) continuous, two groups, difference of means", 2, || boot.two_groups(&ta, &ca).expect("a"));
    println!("  => {:.2}x the RNG-only time", a / rng_s);
    let b = time("(b) 90% zeros, tie aggregation (Auto)", 3, || boot.two_groups(&tb, &cb).expect("b"));
    println!("  => (a)/(b) = {:.1}x", a / b);
    let b_never = time("(b) 90% zeros, per-unit weights (Never)", 1, || {
        boot.with_ties(TieAggregation::Never).two_groups(&tb, &cb).expect("b never")
    });
    println!("  => tie aggregation speed-up on zero-heavy data: {:.1}x", b_never / b);
}
