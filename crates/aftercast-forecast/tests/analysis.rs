//! The whole forecasting analysis: every model family, the options (log scale, events,
//! washout, end date), the control-break warning, auto choice, bad input as errors, and
//! reproducibility across thread counts. Plus the Ljung-Box statistic against statsmodels.

mod common;
use aftercast_core::series::{Series, SeriesSpec};
use aftercast_core::table::RawTable;
use aftercast_forecast::diagnostics::ljung_box;
use aftercast_forecast::events::EventCalendar;
use aftercast_forecast::{ForecastError, ForecastParams, ModelKind, Season, analyse};
use aftercast_resample::rng::Stream;
use common::tol;
use rand::RngExt;
use rand_distr::StandardNormal;

/// Daily series: trend + weekly pattern + control-driven part + noise, with `lift` (relative)
/// added from day `start` on. Control `c2` is shifted at `start` when `touched`.
fn daily_csv(n: usize, start: usize, lift: f64, touched: bool) -> String {
    let mut rng = Stream::new(99, 0);
    let mut s = String::from("date,y,c1,c2\n");
    let d0 = chrono::NaiveDate::from_ymd_opt(2024, 1, 1).unwrap();
    let mut c1 = 50.0;
    for t in 0..n {
        let e: f64 = rng.sample(StandardNormal);
        let u: f64 = rng.sample(StandardNormal);
        let w: f64 = rng.sample(StandardNormal);
        c1 += 0.3 * u;
        let c2 = 10.0 + w + if touched && t >= start { 8.0 } else { 0.0 };
        let weekly = [0.0, 4.0, 6.0, 5.0, 3.0, -8.0, -10.0][t % 7];
        let base =
            200.0 + 0.1 * t as f64 + weekly + 2.0 * c1 + 1.5 * (c2 - if touched && t >= start { 8.0 } else { 0.0 });
        let y = (base + 2.0 * e) * if t >= start { 1.0 + lift } else { 1.0 };
        let d = d0 + chrono::Duration::days(t as i64);
        s.push_str(&format!("{},{y},{c1},{c2}\n", d.format("%Y-%m-%d")));
    }
    s
}

fn load(csv: &str, controls: &[&str]) -> Series {
    let table = RawTable::from_csv_bytes(std::path::Path::new("daily.csv"), csv.as_bytes()).unwrap();
    let spec = SeriesSpec {
        time: "date".into(),
        outcome: "y".into(),
        controls: controls.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    };
    Series::from_table(&table, &spec).unwrap()
}

fn params(model: ModelKind) -> ForecastParams {
    ForecastParams::builder().model(model).season(Season { period: 7.0, harmonics: None }).draws(300).backtest_folds(2)
}

/// statsmodels 0.15.0 acorr_ljungbox(x, lags=[5, 10]) on the stored vector
/// (tests/reference/make_reference.py -> tests/data/uc_reference.json).
#[test]
fn ljung_box_matches_statsmodels() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/uc_reference.json")).unwrap();
    let r: serde_json::Value = serde_json::from_str(&text).unwrap();
    let x: Vec<f64> = r["ljung_box"]["x"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    for (i, lag) in [5usize, 10].into_iter().enumerate() {
        let lb = ljung_box(&x, lag);
        let want = r["ljung_box"]["stat"][i].as_f64().unwrap();
        let want_p = r["ljung_box"]["pvalue"][i].as_f64().unwrap();
        assert!((lb.statistic - want).abs() / want < tol::LJUNG_BOX_REL, "Q({lag}) {} vs {want}", lb.statistic);
        assert!((lb.p_value - want_p).abs() < 1e-8, "p({lag}) {} vs {want_p}", lb.p_value);
    }
}

/// A +10% lift on a daily series with two controls is found by every model family: the 90%
/// interval of the relative effect covers 10% and excludes 0.
#[test]
fn every_model_finds_a_ten_percent_lift() {
    let s = load(&daily_csv(280, 250, 0.10, false), &["c1", "c2"]);
    let split = s.split("2024-09-06", None, 0, 30).unwrap();
    assert_eq!(split.pre_end, 249);
    for model in [ModelKind::Structural, ModelKind::HoltWinters, ModelKind::Harmonic] {
        let p = params(model).check().unwrap();
        let run = analyse(&s, split, &p, None).unwrap();
        let rel = run.summarize(vec![]).unwrap().result.effect.relative.unwrap();
        assert!(rel.lower > 0.0, "{model:?}: relative interval {:?}", (rel.lower, rel.upper));
        if model != ModelKind::HoltWinters {
            // Holt-Winters ignores the controls, so its counterfactual misses their moves
            assert!(rel.lower < 0.10 && 0.10 < rel.upper, "{model:?}: relative interval {:?}", (rel.lower, rel.upper));
        }
        assert_eq!(run.counterfactual.draws.len(), 300);
        assert!(run.diagnostics.fit.r_squared > 0.5, "{model:?} R^2 {}", run.diagnostics.fit.r_squared);
        let res = run.summarize(vec![s.input.clone()]).unwrap().result;
        let json = serde_json::to_value(&res).unwrap();
        assert_eq!(json["verb"], "forecast");
        assert!(json["path"].as_array().unwrap().len() > 30);
        assert!(json["diagnostics"]["ljung_box"]["statistic"].as_f64().is_some());
    }
}

/// `auto` backtests the structural model with a local level and with a linear trend,
/// Holt-Winters and harmonic regression, reports the table and uses the winner.
#[test]
fn auto_reports_backtest_and_winner() {
    let s = load(&daily_csv(280, 250, 0.0, false), &["c1", "c2"]);
    let split = s.split("2024-09-06", None, 0, 30).unwrap();
    let p = params(ModelKind::Auto).check().unwrap();
    let run = analyse(&s, split, &p, None).unwrap();
    let bt = run.backtest.as_ref().unwrap();
    let names: Vec<&str> = bt.summary.iter().map(|s| s.model.as_str()).collect();
    assert_eq!(names, ["structural", "structural-trend", "holt-winters", "harmonic"]);
    let chosen = bt.chosen.clone().unwrap();
    assert_eq!(chosen, run.chosen);
    assert!(chosen.starts_with(run.fitted.model.name()), "{chosen} vs {}", run.fitted.model.name());
    let best = bt.summary.iter().filter(|s| s.folds > 0).map(|s| s.crps).fold(f64::INFINITY, f64::min);
    let won = bt.summary.iter().find(|s| s.model == chosen).unwrap();
    assert_eq!(won.crps, best);
    assert!(
        bt.rows.iter().all(|r| r.horizon == split.post_len() && (0.0..=1.0).contains(&r.coverage)),
        "{:?}",
        bt.rows
    );
    let json = serde_json::to_value(run.summarize(vec![]).unwrap().result).unwrap();
    assert!(json["diagnostics"]["backtest"]["summary"].as_array().unwrap().len() == 4);
}

/// A control that jumps at the intervention triggers the break warning; untouched ones do not.
#[test]
fn touched_control_is_flagged() {
    let s = load(&daily_csv(280, 250, 0.0, true), &["c1", "c2"]);
    let split = s.split("2024-09-06", None, 0, 30).unwrap();
    let run = analyse(&s, split, &params(ModelKind::Structural).backtest_folds(0).check().unwrap(), None).unwrap();
    let flagged: Vec<&str> =
        run.diagnostics.control_breaks.iter().filter(|b| b.flagged).map(|b| b.control.as_str()).collect();
    assert_eq!(flagged, vec!["c2"]);
    assert!(run.warnings.iter().any(|w| w.contains("control 'c2' shifts")));
}

/// Log scale, washout and end date: the post-period is shortened and moved, and the
/// multiplicative lift is recovered.
#[test]
fn log_scale_washout_and_end_date() {
    let s = load(&daily_csv(300, 250, 0.10, false), &["c1", "c2"]);
    let split = s.split("2024-09-06", Some("2024-09-25"), 5, 30).unwrap();
    assert_eq!((split.pre_end, split.post_start, split.post_end), (244, 249, 269));
    let p = params(ModelKind::Structural).log(true).backtest_folds(0).check().unwrap();
    let run = analyse(&s, split, &p, None).unwrap();
    assert_eq!(run.counterfactual.times.len(), 20);
    assert!(run.diagnostics.log_scale);
    assert_eq!(run.diagnostics.washout_periods, 5);
    // the simulated outcome is linear in the controls, so the log-scale model is only roughly
    // right: the lift is found, within a band around the true 10%
    let rel = run.summarize(vec![]).unwrap().result.effect.relative.unwrap();
    assert!(rel.lower > 0.05 && rel.upper < 0.15 && rel.lower > 0.0, "{rel:?}");
}

/// An event calendar adds one indicator per name; an event absent from the pre-period is
/// left out with a warning.
#[test]
fn events_calendar_becomes_indicators() {
    let mut csv = daily_csv(280, 250, 0.0, false);
    // make every 1st and 15th of a month a "promo" day with +30
    let mut out = String::new();
    let mut cal = String::from("date,name\n");
    for (i, line) in csv.lines().enumerate() {
        if i == 0 {
            out.push_str(line);
            out.push('\n');
            continue;
        }
        let f: Vec<&str> = line.split(',').collect();
        let day = &f[0][8..10];
        let mut y: f64 = f[1].parse().unwrap();
        if day == "01" || day == "15" {
            y += 30.0;
            cal.push_str(&format!("{},promo\n", f[0]));
        }
        out.push_str(&format!("{},{y},{},{}\n", f[0], f[2], f[3]));
    }
    cal.push_str("2030-01-01,future-launch\n");
    csv = out;
    let s = load(&csv, &["c1", "c2"]);
    let table = RawTable::from_csv_bytes(std::path::Path::new("events.csv"), cal.as_bytes()).unwrap();
    let events = EventCalendar::from_table(&table).unwrap();
    let split = s.split("2024-09-06", None, 0, 30).unwrap();
    for model in [ModelKind::Structural, ModelKind::Harmonic] {
        let run = analyse(&s, split, &params(model).backtest_folds(0).check().unwrap(), Some(&events)).unwrap();
        assert!(run.diagnostics.regressors.contains(&"event:promo".to_string()));
        assert!(run.warnings.iter().any(|w| w.contains("future-launch")));
        let rel = run.summarize(vec![]).unwrap().result.effect.relative.unwrap();
        assert!(rel.lower < 0.0 && 0.0 < rel.upper, "{model:?}: {rel:?}");
        if let Some(sd) = &run.diagnostics.structural {
            let w = sd.coefficients.iter().find(|c| c.name == "event:promo").unwrap();
            let (coef, se) = (w.coefficient, w.sd);
            assert!((coef - 30.0).abs() < 4.0 * se + 1.0, "promo coefficient {coef} +- {se}");
        }
    }
}

/// Same seed, different thread counts: identical draws.
#[test]
fn identical_results_for_any_thread_count() {
    let s = load(&daily_csv(200, 180, 0.05, false), &["c1"]);
    let split = s.split("2024-06-29", None, 0, 30).unwrap();
    let p = params(ModelKind::Structural).backtest_folds(0).check().unwrap();
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap();
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build().unwrap();
    let a = one.install(|| analyse(&s, split, &p, None).unwrap());
    let b = two.install(|| analyse(&s, split, &p, None).unwrap());
    assert_eq!(a.counterfactual.draws, b.counterfactual.draws);
}

/// Bad input is an error value naming what is wrong.
#[test]
fn bad_input_is_an_error() {
    let s = load(&daily_csv(120, 100, 0.0, false), &[]);
    let split = s.split("2024-04-10", None, 0, 10).unwrap();
    assert!(matches!("x:3".parse::<Season>(), Err(ForecastError::BadSeason { .. })));
    assert!(matches!("7:4".parse::<Season>(), Err(ForecastError::BadSeason { .. })));
    assert!(matches!(
        ForecastParams::builder().level(1.5).check(),
        Err(ForecastError::BadParameter { name: "level", .. })
    ));
    assert!(matches!("arima".parse::<ModelKind>(), Err(ForecastError::BadParameter { name: "model", .. })));
    // log of a non-positive value
    let mut neg = s.clone();
    neg.outcome[3] = -1.0;
    let p = params(ModelKind::Structural).log(true).backtest_folds(0).check().unwrap();
    assert!(matches!(analyse(&neg, split, &p, None), Err(ForecastError::NonPositiveForLog { .. })));
    // a season longer than the pre-period cannot be learned
    let tiny = s.split("2024-01-06", None, 0, 3).unwrap();
    let p = params(ModelKind::Structural).backtest_folds(0).check().unwrap();
    assert!(matches!(analyse(&s, tiny, &p, None), Err(ForecastError::BadSeason { .. })));
    // too short a pre-period for the model
    let tinier = s.split("2024-01-04", None, 0, 3).unwrap();
    let p = params(ModelKind::Structural).no_seasons().backtest_folds(0).check().unwrap();
    assert!(matches!(analyse(&s, tinier, &p, None), Err(ForecastError::TooShort { .. })));
    // events file without the needed column
    let t = RawTable::from_csv_bytes(std::path::Path::new("ev.csv"), b"day,name\n2024-01-01,x\n").unwrap();
    assert!(matches!(EventCalendar::from_table(&t), Err(ForecastError::Data(_))));
}

/// The control-break threshold splits the 3-sigma tail over the controls checked (Bonferroni):
/// scipy 1.x `norm.isf(norm.sf(3) / k)` gives 3.0000000000000004 for k = 1 and
/// 3.8171724833936995 for k = 20.
#[test]
fn break_threshold_matches_scipy() {
    use aftercast_forecast::diagnostics::break_threshold;
    assert!((break_threshold(1) - 3.0).abs() < 1e-9, "{}", break_threshold(1));
    assert!((break_threshold(20) - 3.8171724833936995).abs() < 1e-9, "{}", break_threshold(20));
}

/// An event that occurs only after the backtest folds' origins cannot be learned in those folds:
/// its coefficient is fixed at zero there (it stays out of the fold's forecast), so every fold is
/// still scored instead of failing as not identified.
#[test]
fn event_after_the_fold_origins_does_not_fail_the_backtest() {
    let s = load(&daily_csv(280, 250, 0.0, false), &["c1", "c2"]);
    let cal = "date,name\n2024-08-28,late-event\n";
    let table = RawTable::from_csv_bytes(std::path::Path::new("events.csv"), cal.as_bytes()).unwrap();
    let events = EventCalendar::from_table(&table).unwrap();
    let split = s.split("2024-09-06", None, 0, 30).unwrap();
    let p = params(ModelKind::Structural).backtest_folds(3).check().unwrap();
    let run = analyse(&s, split, &p, Some(&events)).unwrap();
    assert!(run.diagnostics.regressors.contains(&"event:late-event".to_string()));
    let bt = run.backtest.as_ref().unwrap();
    for row in bt.summary.iter().filter(|r| r.model.starts_with("structural")) {
        assert!(row.failed.is_none() && row.folds == 3, "{row:?}");
    }
}
