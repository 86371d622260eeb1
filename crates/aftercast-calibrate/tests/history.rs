//! The history summary on constructed histories whose coverage and inflation factor are known by hand.
mod common;
use aftercast_calibrate::history::{self, HistoryRecord, summarize};
use common::tol;

fn rec(method: &str, truth: f64, lower: f64, upper: f64, level: f64) -> HistoryRecord {
    HistoryRecord {
        method: method.into(),
        setting: format!("exp{truth}"),
        metric: "y".into(),
        truth,
        estimate: 0.5 * (lower + upper),
        lower,
        upper,
        level,
    }
}

#[test]
fn coverage_and_inflation_factor_by_hand() {
    let mut rs = Vec::new();
    // Method a: ten intervals [-1, 1], truths 0.1 .. 1.0: all covered (1.0 on the edge);
    // required factors 0.1 .. 1.0; k = ceil(0.9 * 10) = 9 -> factor 0.9 (the intervals could
    // shrink by 10% and still cover 90%).
    for i in 1..=10 {
        rs.push(rec("a", i as f64 / 10.0, -1.0, 1.0, 0.9));
    }
    // Method b: intervals [9, 11] (centre 10, half-width 1), truths 10.5, 11.5, 12, 13 at level 0.5:
    // one covered -> coverage 0.25; required factors 0.5, 1.5, 2, 3; k = ceil(0.5 * 4) = 2 -> 1.5.
    for t in [10.5, 11.5, 12.0, 13.0] {
        rs.push(rec("b", t, 9.0, 11.0, 0.5));
    }
    let s = summarize(&rs);
    assert_eq!(s.len(), 2);
    let a = &s[0];
    assert_eq!((a.method.as_str(), a.records), ("a", 10));
    assert!((a.coverage - 1.0).abs() < tol::ARITH);
    assert!((a.inflation_factor - 0.9).abs() < tol::ARITH, "{}", a.inflation_factor);
    // bias = 0 - truth: mean -0.55, RMSE sqrt(mean(i^2)/100) = sqrt(38.5/100)
    assert!((a.mean_bias + 0.55).abs() < tol::ARITH);
    assert!((a.rmse - (0.385f64).sqrt()).abs() < tol::ARITH);
    let b = &s[1];
    assert!((b.coverage - 0.25).abs() < tol::ARITH);
    assert!((b.inflation_factor - 1.5).abs() < tol::ARITH, "{}", b.inflation_factor);
    // widening b's intervals by the factor reaches the nominal 50%: 2 of 4
    let widened = rs[10..].iter().filter(|r| (r.truth - 10.0).abs() <= b.inflation_factor * 1.0).count();
    assert_eq!(widened, 2);
    // bias = 10 - truth: -0.5, -1.5, -2, -3 -> mean -1.75, RMSE sqrt((0.25+2.25+4+9)/4)
    assert!((b.mean_bias + 1.75).abs() < tol::ARITH);
    assert!((b.rmse - (15.5f64 / 4.0).sqrt()).abs() < tol::ARITH);
    assert_eq!(b.settings, 4);
}

#[test]
fn zero_width_interval_needs_infinite_factor() {
    let r = rec("c", 1.0, 0.0, 0.0, 0.9);
    assert!(r.required_factor().is_infinite());
    assert_eq!(rec("c", 0.0, 0.0, 0.0, 0.9).required_factor(), 0.0);
}

#[test]
fn append_read_round_trip_and_bad_lines() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("history.jsonl");
    let first = vec![rec("a", 1.0, 0.0, 2.0, 0.9)];
    let second = vec![rec("b", 3.0, 2.0, 5.0, 0.9), rec("a", 2.0, 1.0, 4.0, 0.9)];
    history::append(&p, &first).unwrap();
    history::append(&p, &second).unwrap();
    let back = history::read(&p).unwrap();
    assert_eq!(back.len(), 3);
    assert_eq!(back[0], first[0]);
    assert_eq!(back[2], second[1]);
    std::fs::write(&p, format!("{}\n\nnot json\n", serde_json::to_string(&first[0]).unwrap())).unwrap();
    let e = history::read(&p).unwrap_err().to_string();
    assert!(e.contains("line 3"), "{e}");
    std::fs::write(&p, serde_json::to_string(&rec("a", 1.0, 3.0, 2.0, 0.9)).unwrap()).unwrap();
    let e = history::read(&p).unwrap_err().to_string();
    assert!(e.contains("line 1") && e.contains("above upper"), "{e}");
}
