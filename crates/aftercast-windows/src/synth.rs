//! A deterministic synthetic event log for the Spark equality check, the benchmark and tests.
//!
//! Events: units `u0000001`.., metrics `visit` (value 1), `order` (a multiple of 0.25 up to
//! 400, so every sum is exact in f64 on any engine) and `refund` (likewise), times uniform over
//! 2025-12-30 .. 2026-04-04 UTC (beyond the data start 2026-01-01 and the data end
//! 2026-04-01 on each side), stored as a Parquet `TIMESTAMP(MICROS, UTC)`. 0.1% of rows name a
//! unit missing from the exposures. Exposures (CSV `unit,exposure,region`): 70% of units
//! exposed between 2026-02-01 and 2026-03-25 (so some forward windows are incomplete), the rest
//! never exposed; five regions. The same arguments give the same bytes.

use arrow_array::{ArrayRef, Float64Array, RecordBatch, StringArray, TimestampMicrosecondArray};
use std::io::Write;
use std::path::Path;
use std::sync::Arc;

/// SplitMix64 (Steele, Lea and Flood 2014): a small deterministic generator.
struct SplitMix(u64);

impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }
}

/// Write `n_events` events over `n_units` units to `events` (Parquet, row groups of
/// `row_group` rows) and the exposures to `exposures` (CSV).
///
/// # Errors
/// I/O and Parquet write errors.
pub fn write_synthetic(
    n_events: u64,
    n_units: u64,
    seed: u64,
    row_group: usize,
    out_events: &Path,
    out_exposures: &Path,
) -> Result<(), Box<dyn std::error::Error>> {
    let day = 86_400_000_000i64;
    let t0 = 1_767_052_800_000_000i64; // 2025-12-30T00:00:00Z
    let span = 95 * day; // to 2026-04-04
    let exp0 = 1_769_904_000_000_000i64; // 2026-02-01T00:00:00Z
    let exp_span = 52 * day;

    let mut rng = SplitMix(seed);
    let mut ex = std::io::BufWriter::new(std::fs::File::create(out_exposures)?);
    writeln!(ex, "unit,exposure,region")?;
    for u in 1..=n_units {
        let region = ["north", "south", "east", "west", "centre"][rng.below(5) as usize];
        if rng.below(10) < 7 {
            let t = exp0 + (rng.below(exp_span as u64 / 1_000_000) as i64) * 1_000_000;
            let secs = t.div_euclid(1_000_000);
            let (d, s) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
            let (y, m, dd) = crate::time::civil_from_days(d);
            writeln!(ex, "u{u:07},{y:04}-{m:02}-{dd:02}T{:02}:{:02}:{:02}Z,{region}", s / 3600, (s / 60) % 60, s % 60)?;
        } else {
            writeln!(ex, "u{u:07},,{region}")?;
        }
    }
    ex.flush()?;

    let schema = Arc::new(arrow_schema::Schema::new(vec![
        arrow_schema::Field::new("unit", arrow_schema::DataType::Utf8, false),
        arrow_schema::Field::new(
            "time",
            arrow_schema::DataType::Timestamp(arrow_schema::TimeUnit::Microsecond, Some("UTC".into())),
            false,
        ),
        arrow_schema::Field::new("metric", arrow_schema::DataType::Utf8, false),
        arrow_schema::Field::new("value", arrow_schema::DataType::Float64, false),
    ]));
    let props = parquet::file::properties::WriterProperties::builder()
        .set_compression(parquet::basic::Compression::SNAPPY)
        .set_max_row_group_row_count(Some(row_group))
        .build();
    let mut w = parquet::arrow::ArrowWriter::try_new(std::fs::File::create(out_events)?, schema.clone(), Some(props))?;
    let mut left = n_events;
    while left > 0 {
        let n = left.min(row_group as u64) as usize;
        left -= n as u64;
        let mut units = Vec::with_capacity(n);
        let mut times = Vec::with_capacity(n);
        let mut metrics = Vec::with_capacity(n);
        let mut values = Vec::with_capacity(n);
        for _ in 0..n {
            let u = if rng.below(1000) == 0 { n_units + 1 + rng.below(100) } else { 1 + rng.below(n_units) };
            units.push(format!("u{u:07}"));
            times.push(t0 + rng.below(span as u64) as i64);
            let k = rng.below(10);
            let (m, v) = if k < 6 {
                ("visit", 1.0)
            } else if k < 9 {
                ("order", 0.25 * (1 + rng.below(1600)) as f64)
            } else {
                ("refund", 0.25 * (1 + rng.below(400)) as f64)
            };
            metrics.push(m);
            values.push(v);
        }
        let cols: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(units)),
            Arc::new(TimestampMicrosecondArray::from(times).with_timezone("UTC")),
            Arc::new(StringArray::from(metrics)),
            Arc::new(Float64Array::from(values)),
        ];
        w.write(&RecordBatch::try_new(schema.clone(), cols)?)?;
    }
    w.close()?;
    Ok(())
}
