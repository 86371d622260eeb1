//! aftercast-demo: the invented demo scenario, Fernhill Outfitters, a fictional outdoor-gear
//! retailer.
//!
//! Everything here is made up and generated deterministically from fixed seeds, so the files
//! under `demo-data/` are reproduced byte for byte by [`write_scenario`]. Every true effect is
//! returned in a [`ScenarioTruth`]; the counterfactuals never appear in the written files.
//!
//! Files written (all CSV with a header, dates ISO 8601, timestamps UTC):
//! - `app_daily.csv`, `calendar.csv`: the app launch of 2026-03-02 ([`app`]).
//! - `regions_weekly.csv`: the spring sale in 6 of 40 regions ([`regions`]).
//! - `price_waves.csv`, `price_waves_starts.csv`: a price cut reaching the regions in three waves ([`waves`]).
//! - `members.csv`: the loyalty scheme ([`customers`]).
//! - `past_test/experiment.csv`, `past_test/pool.csv`: the randomized win-back test and a
//!   non-experimental pool ([`customers`]).
//! - `events.csv`, `exposures.csv`: the Trail Planner event log ([`events`]).
//! - `README.md`: the story, the columns and every true effect ([`readme`]).
//!
//! ```no_run
//! let truth = aftercast_demo::write_scenario(std::path::Path::new("demo-out"))?;
//! assert_eq!(truth.loyalty.sample_att, 6.0);
//! # Ok::<(), aftercast_demo::DemoError>(())
//! ```

pub mod app;
pub mod customers;
pub mod error;
pub mod events;
pub mod readme;
pub mod regions;
pub mod util;
pub mod waves;

pub use error::{DemoError, DemoResult};

use serde::Serialize;
use std::path::Path;

/// The seed every demo file is generated from. Each file has its own stream
/// `Stream::new(DEMO_SEED, index)`; the indices are the `STREAM_*` constants.
pub const DEMO_SEED: u64 = 20_260_302;
/// Stream index of `app_daily.csv`.
pub const STREAM_APP: u64 = 1;
/// Stream index of `regions_weekly.csv`.
pub const STREAM_REGIONS: u64 = 2;
/// Stream index of `members.csv`.
pub const STREAM_MEMBERS: u64 = 3;
/// Stream index of `past_test/experiment.csv` and `past_test/pool.csv`.
pub const STREAM_PAST_TEST: u64 = 4;
/// Stream index of `events.csv` and `exposures.csv`.
pub const STREAM_EVENTS: u64 = 5;
/// Stream index of `price_waves.csv` and `price_waves_starts.csv`.
pub const STREAM_WAVES: u64 = 6;

/// One written file: its path relative to the output folder and its number of data rows.
#[derive(Debug, Clone, Serialize)]
pub struct WrittenFile {
    /// Path relative to the output folder, with `/` separators.
    pub path: String,
    /// Data rows (the header not counted).
    pub rows: usize,
}

/// Every true effect of the demo scenario, computed inside the generator from the generated
/// data and its hidden counterfactuals.
#[derive(Debug, Clone, Serialize)]
pub struct ScenarioTruth {
    /// The seed all files were generated from ([`DEMO_SEED`]).
    pub seed: u64,
    /// The data files written, in writing order (`README.md`, written last from this truth,
    /// is not listed).
    pub files: Vec<WrittenFile>,
    /// The app feature launched to every app user on 2026-03-02 (`app_daily.csv`).
    pub app_launch: app::AppLaunchTruth,
    /// The spring sale in 6 regions (`regions_weekly.csv`).
    pub regional_sale: regions::RegionalSaleTruth,
    /// The self-selected loyalty scheme (`members.csv`).
    pub loyalty: customers::LoyaltyTruth,
    /// The past randomized test and the non-experimental pool (`past_test/`).
    pub past_test: customers::PastTestTruth,
    /// The Trail Planner exposure measured through event windows (`events.csv`,
    /// `exposures.csv`).
    pub trail_planner: events::ExposureTruth,
    /// The footwear price cut reaching the regions in three waves (`price_waves.csv`,
    /// `price_waves_starts.csv`).
    pub price_waves: waves::PriceWavesTruth,
}

/// Writes every demo file into `dir` (created if missing; existing demo files are replaced)
/// and returns the true effects.
///
/// The output is a pure function of [`DEMO_SEED`]: two calls write identical bytes.
///
/// # Errors
/// [`DemoError::Io`] when `dir` or a file in it cannot be created or written.
pub fn write_scenario(dir: &Path) -> DemoResult<ScenarioTruth> {
    std::fs::create_dir_all(dir.join("past_test")).map_err(|source| DemoError::Io {
        path: dir.to_path_buf(),
        what: "creating the demo folder".to_string(),
        source,
    })?;
    let mut files = Vec::new();

    let app = app::generate(DEMO_SEED, STREAM_APP)?;
    files.push(util::write_file(dir, "app_daily.csv", &app.csv, app.rows)?);
    files.push(util::write_file(dir, "calendar.csv", &app.calendar_csv, app.calendar_rows)?);

    let reg = regions::generate(DEMO_SEED, STREAM_REGIONS)?;
    files.push(util::write_file(dir, "regions_weekly.csv", &reg.csv, reg.rows)?);
    let (totals, total_rows) = regions::totals_csv(&reg.csv, &reg.truth.sale_regions);
    files.push(util::write_file(dir, "regions_weekly_totals.csv", &totals, total_rows)?);

    let members = customers::generate_members(DEMO_SEED, STREAM_MEMBERS)?;
    files.push(util::write_file(dir, "members.csv", &members.csv, members.rows)?);

    let past = customers::generate_past_test(DEMO_SEED, STREAM_PAST_TEST)?;
    files.push(util::write_file(dir, "past_test/experiment.csv", &past.experiment_csv, past.experiment_rows)?);
    files.push(util::write_file(dir, "past_test/pool.csv", &past.pool_csv, past.pool_rows)?);

    let ev = events::generate(DEMO_SEED, STREAM_EVENTS)?;
    files.push(util::write_file(dir, "events.csv", &ev.events_csv, ev.event_rows)?);
    files.push(util::write_file(dir, "exposures.csv", &ev.exposures_csv, ev.exposure_rows)?);

    let pw = waves::generate(DEMO_SEED, STREAM_WAVES)?;
    files.push(util::write_file(dir, "price_waves.csv", &pw.csv, pw.rows)?);
    files.push(util::write_file(dir, "price_waves_starts.csv", &pw.starts_csv, pw.start_rows)?);

    let truth = ScenarioTruth {
        seed: DEMO_SEED,
        files,
        app_launch: app.truth,
        regional_sale: reg.truth,
        loyalty: members.truth,
        past_test: past.truth,
        trail_planner: ev.truth,
        price_waves: pw.truth,
    };
    let text = readme::render(&truth);
    util::write_file(dir, "README.md", &text, text.lines().count())?;
    Ok(truth)
}
