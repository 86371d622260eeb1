//! Timing run: placebo backtest of the structural model (local linear trend, weekly dummy
//! season, the two control series as regressors) with 50 placebo dates on the demo's daily app
//! revenue before the launch, in parallel (progress bars and Ctrl-C are the binary's; `aftercast
//! backtest` has them). Partial results go to `backtest_partial.jsonl` in the temp dir.
//!
//! `cargo run -p aftercast-calibrate --example backtest_app_daily [--release] [-- --yearly]`
//! (`--yearly` adds a yearly trigonometric season with 4 harmonics and fits on at least 400 days)

use aftercast_calibrate::adapters::forecast::StructuralModel;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, RunControl};
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_core::table::RawTable;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/app_daily.csv");
    let table = RawTable::read(&path)?;
    let spec = SeriesSpec {
        time: "date".into(),
        outcome: "app_revenue".into(),
        controls: vec!["catalogue_orders".into(), "weather_index".into()],
        ..Default::default()
    };
    let series = Series::from_table(&table, &spec)?;
    let split = series.split("2026-03-02", None, 0, 30)?;
    let pre = split.pre_end;
    let y = &series.outcome[..pre];
    let controls: Vec<Vec<f64>> = series.controls.iter().map(|(_, v)| v[..pre].to_vec()).collect();
    let times = &series.axis.points()[..pre];
    let data = BacktestData { name: "app_revenue", y, controls: &controls, times: Some(times) };
    let mut bspec = BacktestSpec::new(split.post_len());
    bspec.placebos = 50;
    bspec.draws = 200;
    let partial = std::env::temp_dir().join("backtest_partial.jsonl");
    let control = RunControl { stop: None, partial: Some(&partial), progress: None };
    let mut model = StructuralModel::daily();
    if std::env::args().any(|a| a == "--yearly") {
        model.seasons.push(aftercast_forecast::structural::SeasonKind::Trig { period: 365.25, harmonics: 4 });
        bspec.min_train = 400;
    }
    let t0 = std::time::Instant::now();
    let r = backtest::run(&model, &data, &bspec, &control)?;
    let secs = t0.elapsed().as_secs_f64();
    println!(
        "{}: {} of {} placebo origins in {secs:.1} s on {} threads (pre-period {pre} days, window {} days)",
        r.model,
        r.origins_completed,
        r.origins_planned,
        rayon::current_num_threads(),
        split.post_len()
    );
    println!(
        "false-positive rate {:.3}, window coverage {:.3}, pointwise coverage {:.3}, RMSE {:.0} ({:.1}%)",
        r.false_positive_rate,
        r.window_coverage,
        r.pointwise_coverage,
        r.rmse,
        100.0 * r.rmse_relative
    );
    for m in &r.mde {
        println!("MDE at 80% power, {} days: {:?}", m.length, m.increase);
    }
    for f in r.failures.iter().take(3) {
        println!("failure at origin {}: {}", f.0, f.1);
    }
    Ok(())
}
