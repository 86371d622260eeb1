//! aftercast-core: the data model (dated series, panels, unit tables), CSV and Parquet readers
//! whose errors name file, line, column and the offending text, the missing-value and gap
//! policies, and the shared result types every estimator ends in.
//!
//! ```
//! use aftercast_core::table::RawTable;
//! use aftercast_core::series::{Series, SeriesSpec};
//! let csv = b"date,orders\n2024-01-01,10\n2024-01-02,12\n2024-01-03,11\n";
//! let table = RawTable::from_csv_bytes(std::path::Path::new("orders.csv"), csv)?;
//! let spec = SeriesSpec { time: "date".into(), outcome: "orders".into(), ..Default::default() };
//! let series = Series::from_table(&table, &spec)?;
//! assert_eq!(series.len(), 3);
//! # Ok::<(), aftercast_core::error::DataError>(())
//! ```

#[cfg(feature = "arrow")]
mod arrow_read;
pub mod budget;
pub mod column;
pub mod csv_read;
#[cfg(feature = "parquet")]
pub mod draws_file;
pub mod error;
pub mod estimate;
#[cfg(feature = "arrow")]
pub mod frame;
pub mod output;
pub mod panel;
#[cfg(feature = "parquet")]
mod parquet_read;
pub mod policy;
pub mod progress;
pub mod result;
pub mod series;
pub mod stop;
pub mod table;
pub mod time;
pub mod units;

pub use column::{Column, ColumnKind};
pub use error::{DataError, DataResult, Location};
pub use estimate::{DEFAULT_SEED, Estimate, Figures, Inference, KeptDraws, Per, Point, Scope};
pub use policy::{GapPolicy, MissingPolicy};
pub use result::{AnalysisResult, EffectBlock, EffectDraws, Rope, RopeUnits, Summary, Verdict};
pub use table::{InputInfo, Projection, RawTable};
pub use time::{Frequency, TimeAxis, TimePoint};
