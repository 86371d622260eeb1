//! Write the synthetic event log (Parquet) and exposures (CSV) of [`aftercast_windows::synth`]
//! for the Spark equality check and the benchmark.
//!
//! ```text
//! cargo run --release -p aftercast-windows --example gen_events -- \
//!     --events 1000000 --units 20000 --out-events /tmp/ev.parquet --out-exposures /tmp/ex.csv
//! ```

fn arg(args: &[String], name: &str) -> Option<String> {
    args.iter().position(|a| a == name).and_then(|i| args.get(i + 1).cloned())
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().collect();
    let n_events: u64 = arg(&args, "--events").ok_or("--events N")?.parse()?;
    let n_units: u64 = arg(&args, "--units").ok_or("--units N")?.parse()?;
    let out_events = arg(&args, "--out-events").ok_or("--out-events PATH")?;
    let out_exposures = arg(&args, "--out-exposures").ok_or("--out-exposures PATH")?;
    let seed: u64 = arg(&args, "--seed").map(|s| s.parse()).transpose()?.unwrap_or(20_260_101);
    let row_group: usize = arg(&args, "--row-group").map(|s| s.parse()).transpose()?.unwrap_or(1_000_000);
    aftercast_windows::synth::write_synthetic(
        n_events,
        n_units,
        seed,
        row_group,
        std::path::Path::new(&out_events),
        std::path::Path::new(&out_exposures),
    )
}
