//! aftercast-windows: from event logs (unit, timestamp, metric, value) to the tables the
//! estimators need: one row per unit with metric windows relative to each unit's exposure
//! (forward, deferred, pre-period, calendar), and per-group daily or weekly series.
//!
//! The native engine reads CSV, gzip CSV or Parquet in one streaming pass whose memory depends
//! on the number of units, not events; [`sql::spark_sql`] writes a Spark SQL script with the
//! same semantics, and [`spark::run_spark`] runs it through `spark-submit`. The exact semantics
//! are in docs/windows.md.
//!
//! ```
//! use aftercast_windows::*;
//! let t = |s: &str| time::parse_timestamp(s, time::Offset::UTC).unwrap();
//! let spec = WindowSpec::params()
//!     .window(WindowKind::parse("14d")?)
//!     .window(WindowKind::parse("pre:28d")?)
//!     .metric("orders", &[Aggregation::Sum, Aggregation::ActiveDays])
//!     .ratio("aov", "revenue", "orders")
//!     .until(t("2024-06-01"))
//!     .check()?;
//! assert_eq!(spec.value_columns().len(), 2 * (2 + 2));
//! # Ok::<(), WindowsError>(())
//! ```

pub mod engine;
pub mod error;
pub mod exposure;
pub mod output;
pub mod params;
pub mod source;
pub mod spark;
pub mod sql;
pub mod synth;
pub mod time;

pub use engine::{
    ColumnValues, EventCounts, GroupSeries, InclusionCounts, OutColumn, SeriesRow, UnitTable, WindowCounts,
    WindowsOutput, run,
};
pub use error::{Cell, WindowsError, WindowsResult};
pub use exposure::{ExposureOptions, Exposures, UnitRow};
pub use params::{
    Aggregation, Anchoring, BadRowPolicy, EventColumns, Population, SeriesFrequency, WindowDef, WindowKind,
    WindowParams, WindowSpec,
};
pub use source::{EventFormat, EventSource};
