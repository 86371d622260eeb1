//! The hand-computed fixture: tests/fixtures/events.csv and exposures.csv, every cell asserted.
//!
//! Analysis offset +02:00 (day boundaries at 22:00Z), data start (from) 2024-02-01T00:00+02:00, data
//! end (until) 2024-03-20T00:00+02:00, never-exposed units anchored at the reference time
//! 2024-03-10T00:00+02:00. Windows: `fwd_7d` = [0, 7d), `def_2d_3d` = [2d, 5d), `pre_3d` =
//! [-3d, 0), `cal_2d` = [2024-03-18T00:00+02:00, 2024-03-20T00:00+02:00). Metrics: orders (sum,
//! count, active days, mean per active day, any), revenue (sum; negative allowed: refunds),
//! ratio rpo = revenue / orders. Event numbers below are data lines minus one.
//!
//! Unit a (north), exposed 2024-03-01T00:00+02:00: exposure exactly on a local day boundary.
//! - #1 at the anchor itself (+02:00 notation) and #3 at the anchor in Z notation (22:00Z):
//!   both in fwd (from is inclusive), neither in pre.
//! - #2 at 23:59:59 local the day before: pre only.
//! - #4 at exactly anchor + 7d: not in fwd (to is exclusive).
//! - #5 at 21:59:59Z on 03-07 = 23:59:59 local: in fwd, local day 03-07.
//! - #6 and #7 are the same event twice, at def's start: both counted (duplicates count).
//! - #8 and #9 revenue 50.5 and -10.25 (a refund) on 03-02: fwd revenue 40.25.
//! - #10 at cal's start (03-18 00:00 local): in cal. #11 at 23:00Z on 03-19 = 01:00 local on
//!   03-20, at/after the end: nowhere. #12 is a metric the run does not use.
//!   fwd orders = 1+4+16+32+32 = 85 over 3 local days (03-01, 03-03, 03-07): mean 85/3.
//!
//! Unit b (north), exposed 2024-03-05T13:30Z (15:30 local): exposure inside a day.
//! - #13 one microsecond before exposure: pre. #14 at exposure: fwd.
//! - #15 23:00Z on 03-05 is 01:00 local on 03-06 (a different local day than in UTC).
//! - #16 written with a -05:00 offset (21:00Z, 23:00 local 03-05).
//! - #17 at exposure + 7d: not in fwd. #18 one second before def's end: def and fwd.
//! - #19 at pre's start: pre. #20 revenue written without offset: read as local time.
//! - #21 a bare date: local midnight of 03-07 (= 03-06T22:00Z): fwd, not def.
//!   fwd orders = 2+4+8+32+128 = 174 on local days 03-05, 03-06, 03-07, 03-10: mean 43.5.
//!   cal: no events: sum 0, count 0, days 0, mean undefined (empty), any 0.
//!
//! Unit c (south), exposed 2024-03-15T00:00+02:00, near the data end: fwd ends 03-22 > end, so
//! every fwd cell is empty; def [03-17, 03-20) ends exactly at the end and is complete.
//! - #22 at 23:59:59 local on 03-19: def and cal. #25 exactly at the end: nowhere.
//!
//! Unit d (south), never exposed: anchored at the reference 2024-03-10T00:00+02:00,
//! `exposed` = 0. #26/#27 a duplicate pair (both counted), #28 at def's start, #29 one second
//! before the anchor: pre.
//!
//! Unit e (south), exposed 2024-02-02T00:00+02:00: pre [01-30, 02-02) starts before the data
//! start, so every pre cell is empty; #31 (in that pre window) is still in the daily series.

use aftercast_windows::time::{Offset, parse_timestamp};
use aftercast_windows::*;
use std::path::{Path, PathBuf};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(name)
}

fn plus2() -> Offset {
    Offset::parse("+02:00").unwrap()
}

fn ts(s: &str) -> i64 {
    parse_timestamp(s, plus2()).unwrap()
}

fn spec(policy: BadRowPolicy) -> WindowSpec {
    use Aggregation::*;
    WindowSpec::params()
        .window(WindowKind::parse("7d").unwrap())
        .window(WindowKind::parse("deferred:2d+3d").unwrap())
        .window(WindowKind::parse("pre:3d").unwrap())
        .window(WindowKind::parse("calendar:2d").unwrap())
        .metric("orders", &[Sum, Count, ActiveDays, MeanPerActiveDay, Any])
        .metric("revenue", &[Sum])
        .ratio("rpo", "revenue", "orders")
        .allow_negative("revenue")
        .offset(plus2())
        .from(ts("2024-02-01T00:00:00"))
        .until(ts("2024-03-20T00:00:00"))
        .series(SeriesFrequency::Daily)
        .bad_rows(policy)
        .check()
        .unwrap()
}

fn exposures(spec: &WindowSpec) -> Exposures {
    let opts = ExposureOptions {
        unit: "unit".into(),
        time: Some("exposure".into()),
        group: Some("region".into()),
        launch: None,
        reference: Some(ts("2024-03-10T00:00:00")),
    };
    Exposures::read(&fixture("exposures.csv"), &opts, spec).unwrap()
}

const N: Option<f64> = None;

/// Expected cells per unit, per window (fwd, def, pre, cal), in column order: orders sum,
/// count, active_days, mean_per_active_day, any, revenue sum, rpo num, rpo den.
/// (unit, exposed, group, cells per window).
type Expected = (&'static str, bool, &'static str, [[Option<f64>; 8]; 4]);

fn expected() -> Vec<Expected> {
    let s = Some;
    vec![
        (
            "a",
            true,
            "north",
            [
                [s(85.0), s(5.0), s(3.0), s(85.0 / 3.0), s(1.0), s(40.25), s(40.25), s(85.0)],
                [s(64.0), s(2.0), s(1.0), s(64.0), s(1.0), s(0.0), s(0.0), s(64.0)],
                [s(2.0), s(1.0), s(1.0), s(2.0), s(1.0), s(0.0), s(0.0), s(2.0)],
                [s(64.0), s(1.0), s(1.0), s(64.0), s(1.0), s(0.0), s(0.0), s(64.0)],
            ],
        ),
        (
            "b",
            true,
            "north",
            [
                [s(174.0), s(5.0), s(4.0), s(43.5), s(1.0), s(0.0), s(0.0), s(174.0)],
                [s(32.0), s(1.0), s(1.0), s(32.0), s(1.0), s(0.0), s(0.0), s(32.0)],
                [s(65.0), s(2.0), s(2.0), s(32.5), s(1.0), s(7.0), s(7.0), s(65.0)],
                [s(0.0), s(0.0), s(0.0), N, s(0.0), s(0.0), s(0.0), s(0.0)],
            ],
        ),
        (
            "c",
            true,
            "south",
            [
                [N; 8],
                [s(5.0), s(1.0), s(1.0), s(5.0), s(1.0), s(0.0), s(0.0), s(5.0)],
                [s(0.0), s(0.0), s(0.0), N, s(0.0), s(12.0), s(12.0), s(0.0)],
                [s(5.0), s(1.0), s(1.0), s(5.0), s(1.0), s(0.0), s(0.0), s(5.0)],
            ],
        ),
        (
            "d",
            false,
            "south",
            [
                [s(10.0), s(3.0), s(2.0), s(5.0), s(1.0), s(0.0), s(0.0), s(10.0)],
                [s(6.0), s(1.0), s(1.0), s(6.0), s(1.0), s(0.0), s(0.0), s(6.0)],
                [s(1.0), s(1.0), s(1.0), s(1.0), s(1.0), s(0.0), s(0.0), s(1.0)],
                [s(0.0), s(0.0), s(0.0), N, s(0.0), s(0.0), s(0.0), s(0.0)],
            ],
        ),
        (
            "e",
            true,
            "south",
            [
                [s(10.0), s(1.0), s(1.0), s(10.0), s(1.0), s(0.0), s(0.0), s(10.0)],
                [s(0.0), s(0.0), s(0.0), N, s(0.0), s(0.0), s(0.0), s(0.0)],
                [N; 8],
                [s(0.0), s(0.0), s(0.0), N, s(0.0), s(0.0), s(0.0), s(0.0)],
            ],
        ),
    ]
}

fn cell(c: &OutColumn, u: usize) -> Option<f64> {
    match &c.values {
        ColumnValues::Int(v) => v[u].map(|x| x as f64),
        ColumnValues::Float(v) => v[u],
    }
}

fn assert_fixture_table(out: &WindowsOutput) {
    let t = &out.units;
    let names: Vec<&str> = t.columns.iter().map(|c| c.name.as_str()).collect();
    let mut want_names = Vec::new();
    for w in ["fwd_7d", "def_2d_3d", "pre_3d", "cal_2d"] {
        for s in [
            "orders_sum",
            "orders_count",
            "orders_active_days",
            "orders_mean_per_active_day",
            "orders_any",
            "revenue_sum",
            "rpo_num",
            "rpo_den",
        ] {
            want_names.push(format!("{w}_{s}"));
        }
    }
    assert_eq!(names, want_names);
    let exp = expected();
    assert_eq!(t.units, ["a", "b", "c", "d", "e"]);
    for (u, (id, exposed, group, windows)) in exp.iter().enumerate() {
        assert_eq!(t.units[u], *id);
        assert_eq!(t.exposed[u], *exposed, "exposed of {id}");
        assert_eq!(t.groups[u], *group, "group of {id}");
        for (w, row) in windows.iter().enumerate() {
            for (k, want) in row.iter().enumerate() {
                let col = &t.columns[w * 8 + k];
                assert_eq!(cell(col, u), *want, "unit {id}, column {}", col.name);
            }
        }
    }
    // Integer aggregations are integer columns.
    assert!(matches!(t.columns[1].values, ColumnValues::Int(_)));
    assert!(matches!(t.columns[0].values, ColumnValues::Float(_)));
    // Anchors: exact exposure instants; d at the reference.
    assert_eq!(t.anchors[0], ts("2024-03-01T00:00:00"));
    assert_eq!(t.anchors[1], ts("2024-03-05T15:30:00"));
    assert_eq!(t.anchors[3], ts("2024-03-10T00:00:00"));
}

#[test]
fn hand_computed_fixture_every_cell() {
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events.csv"), spec.columns().clone()), &ex, &spec, 2).unwrap();
    assert_fixture_table(&out);
    // Inclusion counts per window and group.
    let w = |name: &str| out.windows.iter().find(|w| w.window == name).unwrap();
    let fwd = w("fwd_7d");
    assert_eq!(
        (fwd.all.units, fwd.all.included, fwd.all.excluded_ends_after_end, fwd.all.excluded_starts_before_start),
        (5, 4, 1, 0)
    );
    let south = fwd.by_group["south"];
    assert_eq!((south.units, south.included, south.excluded_ends_after_end), (3, 2, 1));
    assert_eq!(fwd.by_group["north"].included, 2);
    let pre = w("pre_3d");
    assert_eq!((pre.all.included, pre.all.excluded_starts_before_start, pre.all.excluded_ends_after_end), (4, 1, 0));
    assert_eq!(pre.by_group["south"].excluded_starts_before_start, 1);
    assert_eq!(w("def_2d_3d").all.included, 5);
    assert_eq!(w("cal_2d").all.included, 5);
    assert_eq!((out.exposed_units, out.never_exposed_units), (4, 1));
    assert_eq!(out.events.rows, 31);
    assert_eq!(out.events.other_metric, 1);
    assert_eq!(out.events.used, 30);
    assert_eq!(out.events.skipped(), 0);
}

#[test]
fn fixture_daily_series() {
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events.csv"), spec.columns().clone()), &ex, &spec, 1).unwrap();
    let s = out.series.unwrap();
    assert_eq!(s.metrics, ["orders", "revenue"]);
    // 2024-02-01 .. 2024-03-19: 29 + 19 = 48 local days per group, north first.
    assert_eq!(s.rows.len(), 2 * 48);
    assert_eq!(s.rows[0].group, "north");
    assert_eq!(s.rows[0].day, "2024-02-01");
    assert_eq!(s.rows[47].day, "2024-03-19");
    let row = |g: &str, d: &str| s.rows.iter().find(|r| r.group == g && r.day == d).unwrap();
    // North on 03-03: a's duplicate pair (32 + 32).
    let r = row("north", "2024-03-03");
    assert_eq!((r.units, r.total[0], r.events[0], r.per_unit[0]), (2, 64.0, 2, 32.0));
    // North on 03-05 (local): b's #13, #14, #16 = 1 + 2 + 8; #15 is on 03-06 locally.
    let r = row("north", "2024-03-05");
    assert_eq!((r.total[0], r.events[0], r.per_unit[0]), (11.0, 3, 5.5));
    assert_eq!(row("north", "2024-03-06").total[0], 4.0);
    // North revenue on 03-02: 50.5 - 10.25.
    assert_eq!(row("north", "2024-03-02").total[1], 40.25);
    // South on 03-11: d's duplicate pair; per unit over the group's 3 units.
    let r = row("south", "2024-03-11");
    assert_eq!((r.units, r.total[0], r.events[0], r.per_unit[0]), (3, 4.0, 2, 4.0 / 3.0));
    // Totals over the range: every orders event before the end: 159 + 255 + 8 + 11 + 17.
    let total: f64 = s.rows.iter().map(|r| r.total[0]).sum();
    let events: u64 = s.rows.iter().map(|r| r.events[0]).sum();
    assert_eq!((total, events), (450.0, 24));
    let rev: f64 = s.rows.iter().map(|r| r.total[1]).sum();
    assert_eq!(rev, 59.25);
}

#[test]
fn day_start_anchoring_moves_the_anchor_to_local_midnight() {
    use Aggregation::*;
    let spec = WindowSpec::params()
        .window(WindowKind::parse("7d").unwrap())
        .metric("orders", &[Sum])
        .offset(plus2())
        .anchoring(Anchoring::DayStart)
        .until(ts("2024-03-20T00:00:00"))
        .check()
        .unwrap();
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events.csv"), spec.columns().clone()), &ex, &spec, 1).unwrap();
    // b: anchor 2024-03-05T00:00+02:00, window to 03-12T00:00+02:00: now #13 (15:29 local on
    // 03-05) is inside; #17 (15:30 local on 03-12) is not: 1 + 2 + 4 + 8 + 32 + 128.
    assert_eq!(out.units.anchors[1], ts("2024-03-05T00:00:00"));
    assert_eq!(cell(&out.units.columns[0], 1), Some(175.0));
    // a is exposed at local midnight: unchanged.
    assert_eq!(cell(&out.units.columns[0], 0), Some(85.0));
}

#[test]
fn bad_rows_stop_with_line_and_column_by_default() {
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let err = run(&EventSource::new(fixture("events_bad.csv"), spec.columns().clone()), &ex, &spec, 2).unwrap_err();
    match &err {
        WindowsError::UnknownUnit { at, unit } => {
            assert_eq!(unit, "zz");
            assert_eq!((at.line, at.column, at.column_name.as_str()), (14, 1, "unit"));
        }
        other => panic!("unexpected error {other:?}"),
    }
    assert!(err.to_string().contains("line 14, column 1 ('unit')"), "{err}");
}

#[test]
fn each_bad_row_kind_is_reported_at_its_cell() {
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let header = "unit,time,metric,value\n";
    let good = "a,2024-03-02T00:00:00Z,orders,1\n";
    let cases: [(&str, &str, u64); 5] = [
        ("a,2024-03-32T00:00:00Z,orders,1\n", "BadTimestamp", 2),
        ("a,2024-03-02T00:00:00Z,orders,-1\n", "NegativeValue", 4),
        ("a,2024-03-02T00:00:00Z,orders,lots\n", "BadValue", 4),
        ("a,,orders,1\n", "MissingCell", 2),
        ("a,2024-03-02T00:00:00Z,orders,inf\n", "BadValue", 4),
    ];
    let dir = tempfile::tempdir().unwrap();
    for (i, (row, kind, column)) in cases.iter().enumerate() {
        let p = dir.path().join(format!("e{i}.csv"));
        std::fs::write(&p, format!("{header}{good}{good}{row}{good}")).unwrap();
        let err = run(&EventSource::new(&p, spec.columns().clone()), &ex, &spec, 1).unwrap_err();
        let (at, got) = match &err {
            WindowsError::BadTimestamp { at, .. } => (at, "BadTimestamp"),
            WindowsError::NegativeValue { at, .. } => (at, "NegativeValue"),
            WindowsError::BadValue { at, .. } => (at, "BadValue"),
            WindowsError::MissingCell { at } => (at, "MissingCell"),
            other => panic!("case {i}: unexpected {other:?}"),
        };
        assert_eq!(got, *kind, "case {i}");
        assert_eq!((at.line, at.column), (4, *column as usize), "case {i}: {err}");
    }
}

#[test]
fn skip_policy_counts_bad_rows_and_keeps_the_rest() {
    let spec = spec(BadRowPolicy::Skip);
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events_bad.csv"), spec.columns().clone()), &ex, &spec, 2).unwrap();
    assert_fixture_table(&out);
    let e = out.events;
    assert_eq!(e.rows, 37);
    assert_eq!(
        (
            e.skipped_unknown_unit,
            e.skipped_bad_timestamp,
            e.skipped_negative,
            e.skipped_bad_value,
            e.skipped_missing,
            e.skipped_malformed
        ),
        (1, 1, 1, 1, 1, 1)
    );
    assert_eq!(e.used, 30);
}

#[test]
fn thread_count_and_input_format_do_not_change_the_output() {
    use arrow_array::{ArrayRef, RecordBatch, StringArray};
    use std::io::Write;
    use std::sync::Arc;
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let csv = EventSource::new(fixture("events.csv"), spec.columns().clone());
    let one = run(&csv, &ex, &spec, 1).unwrap();
    for threads in [2, 3, 8] {
        assert_eq!(run(&csv, &ex, &spec, threads).unwrap(), one, "threads {threads}");
    }
    let dir = tempfile::tempdir().unwrap();
    // gzip CSV.
    let gz = dir.path().join("events.csv.gz");
    let mut enc = flate2::write::GzEncoder::new(std::fs::File::create(&gz).unwrap(), flate2::Compression::default());
    enc.write_all(&std::fs::read(fixture("events.csv")).unwrap()).unwrap();
    enc.finish().unwrap();
    assert_eq!(run(&EventSource::new(&gz, spec.columns().clone()), &ex, &spec, 2).unwrap(), one);
    // Parquet with text columns, three row groups.
    let text = std::fs::read_to_string(fixture("events.csv")).unwrap();
    let rows: Vec<Vec<&str>> = text.lines().skip(1).map(|l| l.split(',').collect()).collect();
    let col = |i: usize| -> ArrayRef { Arc::new(StringArray::from(rows.iter().map(|r| r[i]).collect::<Vec<_>>())) };
    let value: ArrayRef = Arc::new(arrow_array::Float64Array::from(
        rows.iter().map(|r| r[3].parse::<f64>().unwrap()).collect::<Vec<_>>(),
    ));
    let batch =
        RecordBatch::try_from_iter(vec![("unit", col(0)), ("time", col(1)), ("metric", col(2)), ("value", value)])
            .unwrap();
    let pq = dir.path().join("events.parquet");
    let props = parquet::file::properties::WriterProperties::builder().set_max_row_group_row_count(Some(12)).build();
    let mut w =
        parquet::arrow::ArrowWriter::try_new(std::fs::File::create(&pq).unwrap(), batch.schema(), Some(props)).unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
    assert_eq!(run(&EventSource::new(&pq, spec.columns().clone()), &ex, &spec, 2).unwrap(), one);
}

#[test]
fn outputs_and_sidecar_are_written() {
    let spec = spec(BadRowPolicy::Error);
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events.csv"), spec.columns().clone()), &ex, &spec, 1).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let csv_path = dir.path().join("units.csv");
    output::write_units(&csv_path, &out.units, &spec).unwrap();
    let text = std::fs::read_to_string(&csv_path).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    assert!(header.starts_with("unit,group,exposed,anchor,fwd_7d_orders_sum,fwd_7d_orders_count"), "{header}");
    let c_row = text.lines().find(|l| l.starts_with("c,")).unwrap();
    assert!(c_row.starts_with("c,south,1,2024-03-15T00:00:00+02:00,,,,,,,,,5,1,1,5,1,0,0,5,"), "{c_row}");
    let b_row = text.lines().find(|l| l.starts_with("b,")).unwrap();
    assert!(b_row.starts_with("b,north,1,2024-03-05T15:30:00+02:00,174,5,4,43.5,1,0,0,174,"), "{b_row}");
    // The table reads back through the core reader, as `match` would read it.
    let table = aftercast_core::RawTable::read(&csv_path).unwrap();
    assert_eq!(table.row_count(), 5);
    let pq = dir.path().join("units.parquet");
    output::write_units(&pq, &out.units, &spec).unwrap();
    let back = aftercast_core::RawTable::read(&pq).unwrap();
    assert_eq!(back.header(), table.header());
    let doc = output::sidecar_json(&spec, &out, "native");
    assert_eq!(doc["spec"]["utc_offset"], "+02:00");
    assert_eq!(doc["spec"]["windows"][1]["from_anchor"], "2d");
    assert_eq!(doc["spec"]["windows"][2]["from_anchor"], "-3d");
    assert_eq!(doc["spec"]["windows"][3]["from"], "2024-03-18T00:00:00+02:00");
    assert_eq!(doc["windows"][0]["all"]["excluded_ends_after_end"], 1);
    assert_eq!(doc["windows"][2]["by_group"]["south"]["excluded_starts_before_start"], 1);
    assert_eq!(doc["units"]["never_exposed"], 1);
    let series_path = dir.path().join("series.csv");
    output::write_series(&series_path, out.series.as_ref().unwrap()).unwrap();
    let s = std::fs::read_to_string(&series_path).unwrap();
    assert!(s.starts_with("group,day,units,orders_total,orders_events,orders_per_unit,revenue_total"));
    assert!(s.contains("\nnorth,2024-03-05,2,11,3,5.5,0,0,0\n"), "{s}");
}

#[test]
fn fixture_weekly_series_keeps_full_monday_weeks() {
    use Aggregation::*;
    let spec = WindowSpec::params()
        .window(WindowKind::parse("7d").unwrap())
        .metric("orders", &[Sum])
        .offset(plus2())
        .from(ts("2024-02-01T00:00:00"))
        .until(ts("2024-03-20T00:00:00"))
        .series(SeriesFrequency::Weekly)
        .check()
        .unwrap();
    let ex = exposures(&spec);
    let out = run(&EventSource::new(fixture("events.csv"), spec.columns().clone()), &ex, &spec, 2).unwrap();
    let s = out.series.unwrap();
    // 2024-02-01 is a Thursday and 2024-03-20 a Wednesday: the full weeks start on the Mondays
    // 02-05, 02-12, 02-19, 02-26, 03-04, 03-11 (the week of 03-18 ends after the end).
    let north: Vec<&SeriesRow> = s.rows.iter().filter(|r| r.group == "north").collect();
    let days: Vec<&str> = north.iter().map(|r| r.day.as_str()).collect();
    assert_eq!(days, ["2024-02-05", "2024-02-12", "2024-02-19", "2024-02-26", "2024-03-04", "2024-03-11"]);
    // Week of 02-26 (local 02-26 .. 03-03): a's #1, #2, #3, #6, #7 = 1+2+4+32+32 and b's #19 = 64.
    assert_eq!((north[3].total[0], north[3].events[0]), (135.0, 6));
    // Week of 03-04: b's #13, #14, #15, #16, #18, #21 = 1+2+4+8+32+128 and a's #4, #5 = 8+16.
    assert_eq!((north[4].total[0], north[4].events[0]), (199.0, 8));
    // Week of 03-11: b's #17 (16) and a's #10 (03-18) is in the incomplete week: 16.
    assert_eq!((north[5].total[0], north[5].events[0]), (16.0, 1));
}
