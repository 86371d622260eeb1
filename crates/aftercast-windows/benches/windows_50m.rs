//! Benchmark of the issue's size: 50,000,000 events (Parquet, 1,000,000 units, 3 metrics) ->
//! three forward windows (7d, 14d, 28d) + one pre-period window (28d) per unit, with sum,
//! count and active days of each metric (36 value columns), on 2 worker threads; then the unit
//! table is written as Parquet.
//!
//! ```text
//! cargo bench -p aftercast-windows --bench windows_50m            # generates the data once
//! /usr/bin/time -v target/release/deps/windows_50m-* --bench      # peak memory
//! ```
//! Data goes to `$ACW_BENCH_DIR` (default /tmp/aftercast-windows-bench), never into the
//! repository; `ACW_BENCH_EVENTS` / `ACW_BENCH_UNITS` change the size. Numbers are recorded in
//! docs/performance.md ("windows"), not asserted.

use aftercast_windows::time::{Offset, parse_timestamp};
use aftercast_windows::*;
use std::path::PathBuf;
use std::time::Instant;

fn env_u64(name: &str, default: u64) -> u64 {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    if std::env::args().any(|a| a == "--list") {
        println!("windows_50m: bench");
        return Ok(());
    }
    let n_events = env_u64("ACW_BENCH_EVENTS", 50_000_000);
    let n_units = env_u64("ACW_BENCH_UNITS", 1_000_000);
    let dir = PathBuf::from(std::env::var("ACW_BENCH_DIR").unwrap_or_else(|_| "/tmp/aftercast-windows-bench".into()));
    std::fs::create_dir_all(&dir)?;
    let events = dir.join(format!("events_{n_events}_{n_units}.parquet"));
    let exposures = dir.join(format!("exposures_{n_units}.csv"));
    if !events.exists() || !exposures.exists() {
        let t = Instant::now();
        synth::write_synthetic(n_events, n_units, 20_260_101, 1_000_000, &events, &exposures)?;
        println!("generated {} events over {} units in {:.1} s", n_events, n_units, t.elapsed().as_secs_f64());
    }
    let ts = |s: &str| parse_timestamp(s, Offset::UTC).ok_or("bad time");
    use Aggregation::*;
    let aggs = [Sum, Count, ActiveDays];
    let spec = WindowSpec::params()
        .window(WindowKind::parse("7d")?)
        .window(WindowKind::parse("14d")?)
        .window(WindowKind::parse("28d")?)
        .window(WindowKind::parse("pre:28d")?)
        .metric("visit", &aggs)
        .metric("order", &aggs)
        .metric("refund", &aggs)
        .from(ts("2026-01-01")?)
        .until(ts("2026-04-01")?)
        .bad_rows(BadRowPolicy::Skip)
        .check()?;
    let opts = ExposureOptions {
        unit: "unit".into(),
        time: Some("exposure".into()),
        group: Some("region".into()),
        launch: None,
        reference: Some(ts("2026-02-15")?),
    };
    let threads = env_u64("ACW_BENCH_THREADS", 2) as usize;
    let iterations = env_u64("ACW_BENCH_ITERATIONS", 2);
    let mut best = f64::INFINITY;
    for i in 0..iterations {
        let t = Instant::now();
        let ex = Exposures::read(&exposures, &opts, &spec)?;
        let t_ex = t.elapsed().as_secs_f64();
        let out = run(&EventSource::new(&events, spec.columns().clone()), &ex, &spec, threads)?;
        let t_run = t.elapsed().as_secs_f64();
        let table = dir.join("units_out.parquet");
        output::write_units(&table, &out.units, &spec)?;
        let total = t.elapsed().as_secs_f64();
        best = best.min(total);
        println!(
            "iteration {i}: exposures {t_ex:.2} s, events pass {:.2} s, write table {:.2} s, total {total:.2} s ({} rows, {} used, {} skipped, {} threads)",
            t_run - t_ex,
            total - t_run,
            out.events.rows,
            out.events.used,
            out.events.skipped(),
            threads
        );
    }
    println!("windows_50m: best total {best:.2} s over {iterations} iterations");
    Ok(())
}
