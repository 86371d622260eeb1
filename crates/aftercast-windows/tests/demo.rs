//! The demo's event log (demo-data/events.csv, exposures.csv) -> the unit table of the demo's
//! match analysis, with the windows demo-data/README.md section 5 prescribes: anchor
//! `exposed_at`, never-exposed customers at 2026-03-02T09:00:00Z; covariates from `[-56d, 0)`
//! (visits, orders count and sum, active days); outcome `[0, 28d)` sum of `order`.
//!
//! The reference values are the README's, read from its text (written by the demo generator's
//! author from the generator's own bookkeeping, not by this crate): "E of N customers were
//! exposed", "Exposed customers' mean 28-day order value is $X", "never-exposed customers' is
//! $Y", and no customer excluded. The README rounds to cents, hence the 0.005 tolerance.

use aftercast_windows::time::{Offset, parse_timestamp};
use aftercast_windows::*;
use std::path::{Path, PathBuf};

const CENTS: f64 = 0.005;

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data").join(name)
}

/// The README's published figures: (exposed, customers, exposed mean, never-exposed mean).
fn readme_truth() -> (usize, usize, f64, f64) {
    let text = std::fs::read_to_string(demo("README.md")).unwrap();
    let section = text.find("(`events.csv`, `exposures.csv`)").expect("demo-data/README.md has the events section");
    let flat: String = text[section..].split_whitespace().collect::<Vec<_>>().join(" ");
    let after = |key: &str| -> &str {
        let i = flat.find(key).unwrap_or_else(|| panic!("demo-data/README.md no longer says '{key}'"));
        &flat[i + key.len()..]
    };
    let num = |s: &str| -> f64 {
        let t: String = s.trim_start_matches('$').chars().take_while(|c| c.is_ascii_digit() || *c == '.').collect();
        t.trim_end_matches('.').parse().unwrap()
    };
    let head = after("**True effect.** ");
    let mut words = head.split(' ');
    let exposed = num(words.next().unwrap()) as usize;
    assert_eq!(words.next(), Some("of"));
    let customers = num(words.next().unwrap()) as usize;
    let x = num(after("Exposed customers' mean 28-day order value is "));
    let y = num(after("never-exposed customers' is "));
    (exposed, customers, x, y)
}

#[test]
fn demo_events_to_the_match_unit_table() {
    let (n_exposed, n_customers, exposed_mean, never_mean) = readme_truth();
    assert!(n_customers < 10_000, "customer ids have four digits");
    let log = std::fs::read_to_string(demo("events.csv")).unwrap();
    let rows = log.lines().skip(1).filter(|l| !l.is_empty()).count() as u64;
    let refunds = log.lines().filter(|l| l.contains(",refund,")).count() as u64;
    use Aggregation::*;
    let t = |s: &str| parse_timestamp(s, Offset::UTC).unwrap();
    let spec = WindowSpec::params()
        .named_window("pre", WindowKind::parse("pre:56d").unwrap())
        .named_window("outcome", WindowKind::parse("forward:28d").unwrap())
        .metric("visit", &[Count, ActiveDays])
        .metric("order", &[Count, Sum, ActiveDays])
        .from(t("2026-01-01T00:00:00Z"))
        .until(t("2026-04-20T00:00:00Z"))
        .event_columns(EventColumns {
            unit: "customer_id".into(),
            time: "ts".into(),
            metric: "metric".into(),
            value: "value".into(),
        })
        .check()
        .unwrap();
    let opts = ExposureOptions {
        unit: "customer_id".into(),
        time: Some("exposed_at".into()),
        group: None,
        launch: None,
        reference: Some(t("2026-03-02T09:00:00Z")),
    };
    let mut ex = Exposures::read(&demo("exposures.csv"), &opts, &spec).unwrap();
    assert_eq!(ex.len(), n_exposed);
    // The README's customer range (`A0001` to `A{N}`): customers without any event are units
    // too (their windows are zero), so the unit list comes from it, not from the log; every
    // event must then name a listed customer (an unknown one would fail the run).
    let all: Vec<String> = (1..=n_customers).map(|i| format!("A{i:04}")).collect();
    assert_eq!(ex.add_unlisted(all).unwrap(), n_customers - n_exposed);
    let out = run(&EventSource::new(demo("events.csv"), spec.columns().clone()), &ex, &spec, 2).unwrap();
    assert_eq!(out.units.units.len(), n_customers);
    assert_eq!(out.exposed_units as usize, n_exposed);
    assert_eq!(out.never_exposed_units as usize, n_customers - n_exposed);
    for w in &out.windows {
        assert_eq!(w.all.included as usize, n_customers, "window {} excludes no customer", w.window);
    }
    assert_eq!(out.events.rows, rows);
    assert_eq!(out.events.other_metric, refunds, "refund rows are not used by these windows");
    assert_eq!(out.events.skipped(), 0);
    let col = |name: &str| out.units.columns.iter().find(|c| c.name == name).unwrap();
    let ColumnValues::Float(outcome) = &col("outcome_order_sum").values else { panic!("sum is a real column") };
    let mean = |exposed: bool| {
        let v: Vec<f64> =
            (0..n_customers).filter(|&u| out.units.exposed[u] == exposed).map(|u| outcome[u].unwrap()).collect();
        v.iter().sum::<f64>() / v.len() as f64
    };
    // demo-data/README.md section 5.
    assert!((mean(true) - exposed_mean).abs() < CENTS, "exposed mean {} vs README {exposed_mean}", mean(true));
    assert!((mean(false) - never_mean).abs() < CENTS, "never-exposed mean {} vs README {never_mean}", mean(false));

    // The written table is a unit table the match analysis can read.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("units.csv");
    output::write_units(&path, &out.units, &spec).unwrap();
    let table = aftercast_core::RawTable::read(&path).unwrap();
    let units = aftercast_core::units::UnitTable::from_table(
        &table,
        &aftercast_core::units::UnitSpec {
            id: Some("unit".into()),
            treatment: "exposed".into(),
            outcomes: vec!["outcome_order_sum".into()],
            numeric: vec![
                "pre_visit_count".into(),
                "pre_order_count".into(),
                "pre_order_sum".into(),
                "pre_visit_active_days".into(),
            ],
            categorical: vec![],
            missing: Default::default(),
        },
    )
    .unwrap();
    assert_eq!(units.treated.iter().filter(|t| **t).count(), n_exposed);
    assert_eq!(units.ids.len(), n_customers);
}
