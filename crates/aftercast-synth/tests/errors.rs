//! Bad input is an error value naming what and where, never a panic.

mod common;
use aftercast_core::time::TimePoint;
use aftercast_synth::{Method, SynthError, SynthParams};

#[test]
fn located_errors_for_bad_input() {
    let panel = common::grunfeld();
    let p = SynthParams::new().check().unwrap();
    let e = p.fit(&panel, &["Acme".into()], TimePoint::Period(1950)).unwrap_err();
    assert!(matches!(&e, SynthError::TreatedNotFound { unit, n_units: 11, .. } if unit == "Acme"), "{e}");
    let e = p.fit(&panel, &["IBM".into(), "IBM".into()], TimePoint::Period(1950)).unwrap_err();
    assert!(matches!(&e, SynthError::DuplicateTreated { unit } if unit == "IBM"));
    assert!(matches!(p.fit(&panel, &[], TimePoint::Period(1950)), Err(SynthError::NoTreated)));
    let e = p.fit(&panel, &["IBM".into()], TimePoint::Period(1960)).unwrap_err();
    assert!(matches!(&e, SynthError::NoPostPeriod { last, .. } if last == "1954"), "{e}");
    let before = SynthParams { end: Some(TimePoint::Period(1948)), ..SynthParams::new() }.check().unwrap();
    let e = before.fit(&panel, &["IBM".into()], TimePoint::Period(1950)).unwrap_err();
    assert!(matches!(&e, SynthError::EndBeforeStart { end, .. } if end == "1948"), "{e}");
    let e = p.fit(&panel, &["IBM".into()], TimePoint::Period(1936)).unwrap_err();
    assert!(matches!(e, SynthError::TooFewPrePeriods { found: 1, needed: 3, .. }));
    let others: Vec<String> = panel.units.iter().filter(|u| *u != "IBM" && *u != "Chrysler").cloned().collect();
    let e = SynthParams::new()
        .exclude(others)
        .check()
        .unwrap()
        .fit(&panel, &["IBM".into()], TimePoint::Period(1950))
        .unwrap_err();
    assert!(matches!(e, SynthError::TooFewDonors { found: 1, needed: 2 }));
    let e = SynthParams::new()
        .method(Method::Predictors)
        .predictors(vec!["profit".into()])
        .check()
        .unwrap()
        .fit(&panel, &["IBM".into()], TimePoint::Period(1950))
        .unwrap_err();
    assert!(
        matches!(&e, SynthError::UnknownPredictor { predictor, available } if predictor == "profit" && available.contains("capital"))
    );
    for bad in [
        SynthParams::new().level(1.0).check(),
        SynthParams::new().placebo_exclude_factor(Some(-1.0)).check(),
        SynthParams::new().ridge_lambda(Some(f64::NAN)).check(),
        SynthParams::new().min_donors(1).check(),
        SynthParams::new().sdid_placebo_reps(5).check(),
    ] {
        assert!(matches!(bad, Err(SynthError::BadParameter { .. })));
    }
    assert!("lasso".parse::<Method>().is_err());
}

#[test]
fn constant_treated_series_is_refused() {
    let names: Vec<String> = ["a", "b", "c", "flat"].iter().map(|s| s.to_string()).collect();
    let y: Vec<Vec<f64>> = vec![
        (0..10).map(|t| t as f64).collect(),
        (0..10).map(|t| 10.0 - t as f64).collect(),
        (0..10).map(|t| (t % 3) as f64).collect(),
        vec![5.0; 10],
    ];
    let panel = common::panel_from_matrix(&names, &y);
    let e = SynthParams::new().check().unwrap().fit(&panel, &["flat".into()], TimePoint::Period(7)).unwrap_err();
    assert!(
        matches!(&e, SynthError::ConstantSeries { unit, value, last_pre } if unit == "flat" && *value == 5.0 && last_pre == "6"),
        "{e}"
    );
    assert!(e.to_string().contains("flat"));
}
