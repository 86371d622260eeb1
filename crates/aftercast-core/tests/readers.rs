//! Reader tests: CSV and Parquet (written by pyarrow, tests/reference/make_parquet_fixtures.py)
//! give the same shapes; policies behave as documented.

use aftercast_core::panel::{LongPanelSpec, Panel};
use aftercast_core::policy::{GapPolicy, MissingPolicy};
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_core::time::{Frequency, TimePoint};
use aftercast_core::units::{UnitSpec, UnitTable};
use aftercast_core::{DataError, RawTable};
use std::path::{Path, PathBuf};

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data").join(name)
}

fn csv(text: &str) -> RawTable {
    RawTable::from_csv_bytes(Path::new("mem.csv"), text.as_bytes()).expect("csv")
}

fn spec(controls: &[&str]) -> SeriesSpec {
    SeriesSpec {
        time: "date".into(),
        outcome: "orders".into(),
        controls: controls.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    }
}

#[test]
fn parquet_series_equals_its_csv_twin() {
    let pq = Series::from_table(&RawTable::read(data("daily.parquet")).expect("parquet"), &spec(&["calls"]))
        .expect("series");
    let cs = Series::from_table(&RawTable::read(data("daily.csv")).expect("csv"), &spec(&["calls"])).expect("series");
    assert_eq!(pq.len(), 30);
    assert_eq!(pq.frequency(), Frequency::Daily);
    assert_eq!(pq.axis.points(), cs.axis.points());
    assert_eq!(pq.outcome, cs.outcome, "float64 values survive exactly");
    assert_eq!(pq.controls, cs.controls);
    assert_eq!(pq.input.rows, 30);
    assert_eq!(pq.input.sha256.len(), 64);
}

#[test]
fn parquet_unit_table_with_bool_treatment_and_null_outcome() {
    let t = RawTable::read(data("units.parquet")).expect("parquet");
    let mut s = UnitSpec {
        id: Some("id".into()),
        treatment: "treat".into(),
        outcomes: vec!["spend".into()],
        numeric: vec!["age".into(), "score".into()],
        categorical: vec!["region".into()],
        missing: MissingPolicy::Error,
    };
    match UnitTable::from_table(&t, &s) {
        Err(DataError::MissingValue { at }) => {
            assert_eq!(at.line, Some(6), "row 4 (0-based) is line 6");
            assert_eq!(at.column_name.as_deref(), Some("spend"));
        }
        other => panic!("expected a missing value, got {other:?}"),
    }
    s.missing = MissingPolicy::DropRow;
    let u = UnitTable::from_table(&t, &s).expect("units");
    assert_eq!(u.len(), 11);
    assert_eq!(u.dropped_rows, 1);
    assert_eq!(u.n_treated(), 4);
    assert_eq!(u.numeric("age").expect("age")[0], 21.0);
    assert_eq!(u.numeric("score").expect("score")[2], 0.5);
    assert_eq!(u.categorical[0].levels, vec!["north", "south", "east"]);
}

#[test]
fn parquet_panel_with_timestamp_weeks() {
    let t = RawTable::read(data("panel.parquet")).expect("parquet");
    let p = Panel::from_long(
        &t,
        &LongPanelSpec { unit: "unit".into(), time: "week".into(), outcome: "revenue".into(), ..Default::default() },
    )
    .expect("panel");
    assert_eq!(p.units, vec!["a", "b", "c"]);
    assert_eq!(p.axis.frequency(), Frequency::Weekly);
    assert_eq!(p.periods(), 6);
    assert_eq!(p.outcome[1][2], 50.0 + 2.0 + f64::from(b'b'));
}

#[test]
fn monthly_quarterly_and_integer_axes() {
    let m = csv("date,orders\n2023-11-01,1\n2023-12-01,2\n2024-01-01,3\n2024-02-01,4\n");
    assert_eq!(Series::from_table(&m, &spec(&[])).expect("monthly").frequency(), Frequency::Monthly);
    let q = csv("date,orders\n2023-10-01,1\n2024-01-01,2\n2024-04-01,3\n");
    assert_eq!(Series::from_table(&q, &spec(&[])).expect("quarterly").frequency(), Frequency::Quarterly);
    let y = csv("date,orders\n1970,1\n1971,2\n1972,3\n");
    let s = Series::from_table(&y, &spec(&[])).expect("years");
    assert_eq!(s.frequency(), Frequency::Period);
    assert_eq!(s.axis.points()[2], TimePoint::Period(1972));
    let sp = s.split("1971", None, 0, 1).expect("split");
    assert_eq!((sp.pre_end, sp.post_start, sp.post_end), (1, 1, 3));
}

#[test]
fn gap_fill_inserts_missing_periods() {
    let t = csv("date,orders\n2024-01-01,1\n2024-01-02,2\n2024-01-05,5\n2024-01-06,6\n");
    assert!(matches!(Series::from_table(&t, &spec(&[])), Err(DataError::Irregular { .. })));
    let s = Series::from_table(&t, &SeriesSpec { gaps: GapPolicy::Fill, ..spec(&[]) }).expect("filled");
    assert_eq!(s.len(), 6);
    assert_eq!(s.missing_count(), 2);
    assert!(s.outcome[2].is_nan() && s.outcome[3].is_nan());
    assert_eq!(s.outcome[4], 5.0);
}

#[test]
fn split_with_washout_and_end() {
    let rows: String = (1..=20).map(|d| format!("2024-01-{d:02},{d}\n")).collect();
    let t = csv(&format!("date,orders\n{rows}"));
    let s = Series::from_table(&t, &spec(&[])).expect("series");
    let sp = s.split("2024-01-11", Some("2024-01-15"), 2, 3).expect("split");
    assert_eq!((sp.pre_end, sp.post_start, sp.post_end), (8, 10, 15));
    assert!(matches!(s.split("2024-01-15", Some("2024-01-11"), 0, 3), Err(DataError::BadArgument { .. })));
}

#[test]
fn wide_panel_reads_unit_columns() {
    let t = csv("year,ohio,iowa,utah\n2000,1,2,3\n2001,4,5,6\n2002,7,8,9\n");
    let p = Panel::from_wide(&t, "year", None, &Default::default(), "sales").expect("wide");
    assert_eq!(p.units, vec!["ohio", "iowa", "utah"]);
    assert_eq!(p.outcome[2], vec![3.0, 6.0, 9.0]);
    assert_eq!(p.axis.frequency(), Frequency::Period);
}

#[test]
fn byte_order_mark_and_quoted_cells() {
    let t = RawTable::from_csv_bytes(
        Path::new("bom.csv"),
        b"\xEF\xBB\xBFdate,orders\n\"2024-01-01\",\"7\"\n2024-01-02,8\n",
    )
    .expect("bom");
    let s = Series::from_table(&t, &spec(&[])).expect("series");
    assert_eq!(s.outcome, vec![7.0, 8.0]);
}

#[test]
fn rope_parsing() {
    use aftercast_core::result::{Rope, RopeUnits};
    let r: Rope = "1%".parse().expect("rope");
    assert_eq!((r.low, r.high, r.units), (-0.01, 0.01, RopeUnits::Percent));
    let r: Rope = "25".parse().expect("rope");
    assert_eq!((r.low, r.high, r.units), (-25.0, 25.0, RopeUnits::Outcome));
    let r: Rope = "-2%:1%".parse().expect("rope");
    assert_eq!((r.low, r.high), (-0.02, 0.01));
    assert!("2%:1%".parse::<Rope>().is_err());
    assert!("1%:3".parse::<Rope>().is_err());
    assert!("wide".parse::<Rope>().is_err());
    assert!("0".parse::<Rope>().is_err());
}
