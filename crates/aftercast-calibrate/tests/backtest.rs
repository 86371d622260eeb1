//! Placebo backtests on simulated series with no effect, with an honest forecaster whose
//! predictive intervals are exact (Student-t), so the false-positive rate must sit near 1 - level.
mod common;
use aftercast_calibrate::backtest::{self, BacktestData, BacktestSpec, ModelError, PathModel, RunControl};
use common::{NormalPredictive, iid_series, tol};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

fn spec() -> BacktestSpec {
    BacktestSpec {
        placebos: 120,
        lifts: vec![-0.05, 0.01, 0.02, 0.03, 0.05, 0.10],
        draws: 400,
        seed: 7,
        ..BacktestSpec::new(vec![7, 14, 28], 40)
    }
}

#[test]
fn no_effect_series_false_positive_rate_power_and_mde() {
    let y = iid_series(500, 100.0, 5.0, 11);
    let data = BacktestData { name: "iid", y: &y, controls: &[], times: None };
    let model = NormalPredictive { window: 40 };
    let r = backtest::run(&model, &data, &spec(), &RunControl::default()).unwrap();
    assert_eq!(r.origins_completed, 120);
    assert!(!r.interrupted);
    let fpr = r.planning.false_positive_rate.rate;
    eprintln!("fpr {fpr} window cov {} pointwise {} rmse {}", r.window_coverage, r.pointwise_coverage, r.rmse);
    // Nominal 10% at level 0.9 (exact predictive intervals): within 4%-16% over 120 placebo dates.
    assert!(fpr >= tol::FPR_RANGE.0 && fpr <= tol::FPR_RANGE.1, "false-positive rate {fpr}");
    let f = &r.planning.false_positive_rate;
    assert!(f.lower <= fpr && fpr <= f.upper && f.placebos == 120);
    assert!(r.pointwise_coverage > 0.85 && r.pointwise_coverage < 0.95, "{}", r.pointwise_coverage);
    // RMSE of a mean forecast of N(100, 5^2): about 5 * sqrt(1 + 1/40)
    assert!((r.rmse - 5.0).abs() < 0.6, "{}", r.rmse);
    let power =
        |len: usize, lift: f64| r.planning.power.iter().find(|p| p.wait == len && p.lift == lift).unwrap().power;
    for p in &r.planning.power {
        eprintln!("wait {:2} lift {:+.2}: power {:.3}", p.wait, p.lift, p.power);
    }
    let ups = [0.01, 0.02, 0.03, 0.05, 0.10];
    for len in [7, 14, 28] {
        // power rises with the size of the lift
        for w in ups.windows(2) {
            assert!(power(len, w[1]) >= power(len, w[0]), "length {len}: {w:?}");
        }
        assert!(power(len, 0.10) > 0.95);
    }
    // and with the length of the post-period, strictly where it is not saturated
    for &lift in &ups {
        assert!(power(14, lift) >= power(7, lift) && power(28, lift) >= power(14, lift), "lift {lift}");
    }
    assert!(power(7, 0.02) < power(14, 0.02) && power(14, 0.02) < power(28, 0.02));
    // MDE at 80% power: the ceil(0.8 K)-th smallest per-origin threshold; it must lie where the
    // power curve crosses 0.8, and fall with the length.
    let mde: Vec<f64> = r.planning.mde.iter().map(|m| m.mde.unwrap()).collect();
    eprintln!("mde {mde:?}");
    assert!(mde[0] > mde[1] && mde[1] > mde[2]);
    for (m, len) in mde.iter().zip([7, 14, 28]) {
        let d = r
            .origins
            .iter()
            .filter(|o| backtest::detected(o.windows.iter().find(|w| w.wait == len).unwrap(), m * 1.000001))
            .count();
        assert!(d as f64 / 120.0 >= 0.8, "power just above the MDE {m} at {len}: {d}");
        let d = r
            .origins
            .iter()
            .filter(|o| backtest::detected(o.windows.iter().find(|w| w.wait == len).unwrap(), m * 0.999))
            .count();
        assert!((d as f64 / 120.0) < 0.8, "power just below the MDE {m} at {len}: {d}");
    }
    // Analytic check of the scale: sd of a 28-day relative mean error ~ 5/100 * sqrt(1/28 + 1/40),
    // so the 80%-power MDE is near (z_0.95 + z_0.8) * sd = (1.645 + 0.842) * 0.0124 = 3.1%.
    assert!(mde[2] > 0.02 && mde[2] < 0.045, "{}", mde[2]);
    // the shortest wait reaching 80% power lies between the grid waits where the power
    // crosses 0.8 (computed on every wait from 1 to 28)
    let w2 = r.planning.wait_for.iter().find(|w| w.lift == 0.02).unwrap().wait;
    let w10 = r.planning.wait_for.iter().find(|w| w.lift == 0.10).unwrap().wait.unwrap();
    assert!(w10 <= 7, "{w10}");
    match w2 {
        Some(w) => assert!(power(28, 0.02) >= 0.8 && w <= 28, "{w}"),
        None => assert!(power(28, 0.02) < 0.8, "not reached, yet {} at the last wait", power(28, 0.02)),
    }
}

/// Fails at one placebo date: the one whose prefix has `.1` values.
struct FailsOnce(NormalPredictive, usize);

impl PathModel for FailsOnce {
    fn name(&self) -> String {
        "fails-once".into()
    }
    fn paths(&self, y: &[f64], c: &[Vec<f64>], h: usize, d: usize, s: u64) -> Result<Vec<Vec<f64>>, ModelError> {
        if y.len() == self.1 {
            return Err("the optimiser did not converge".into());
        }
        self.0.paths(y, c, h, d, s)
    }
}

#[test]
fn a_failed_placebo_fit_is_reported_and_left_out() {
    let y = iid_series(300, 100.0, 5.0, 8);
    let data = BacktestData { name: "iid", y: &y, controls: &[], times: None };
    let s = BacktestSpec { placebos: 12, ..BacktestSpec::new(vec![7, 14], 40) };
    let bad = backtest::placebo_origins(300, 40, 14, 12)[3];
    let r = backtest::run(&FailsOnce(NormalPredictive { window: 40 }, bad), &data, &s, &RunControl::default()).unwrap();
    assert_eq!(r.origins_completed, 11);
    assert_eq!(r.failures.len(), 1);
    assert_eq!(r.failures[0].job.origin, bad);
    assert!(r.origins.iter().all(|o| o.job.origin != bad));
    // every rate is over the 11 finished dates only
    assert_eq!(r.planning.false_positive_rate.placebos, 11);
    let w = r.warnings.iter().find(|w| w.contains("failed")).expect("a warning names the failure");
    assert!(w.contains("1 of 12") && w.contains(&format!("position {bad}")) && w.contains("did not converge"), "{w}");
}

#[test]
fn results_do_not_depend_on_threads() {
    let y = iid_series(200, 50.0, 3.0, 3);
    let data = BacktestData { name: "iid", y: &y, controls: &[], times: None };
    let s = BacktestSpec { placebos: 20, ..spec() };
    let run = |threads| {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
        pool.install(|| backtest::run(&NormalPredictive { window: 40 }, &data, &s, &RunControl::default()).unwrap())
    };
    assert_eq!(run(1), run(2));
}

/// Raises the stop flag after a few fits, as Ctrl-C would.
struct StopsAfter<'a> {
    inner: NormalPredictive,
    calls: AtomicUsize,
    after: usize,
    flag: &'a AtomicBool,
}

impl PathModel for StopsAfter<'_> {
    fn name(&self) -> String {
        "stops-after".into()
    }
    fn paths(&self, y: &[f64], c: &[Vec<f64>], h: usize, d: usize, s: u64) -> Result<Vec<Vec<f64>>, ModelError> {
        if self.calls.fetch_add(1, Ordering::SeqCst) + 1 >= self.after {
            self.flag.store(true, Ordering::SeqCst);
        }
        self.inner.paths(y, c, h, d, s)
    }
}

#[test]
fn interruption_keeps_finished_origins_in_the_partial_file() {
    let y = iid_series(500, 100.0, 5.0, 5);
    let data = BacktestData { name: "iid", y: &y, controls: &[], times: None };
    let dir = tempfile::tempdir().unwrap();
    let partial = dir.path().join("partial.jsonl");
    let flag = AtomicBool::new(false);
    let model =
        StopsAfter { inner: NormalPredictive { window: 40 }, calls: AtomicUsize::new(0), after: 5, flag: &flag };
    let control = RunControl { stop: Some(&flag), partial: Some(&partial), progress: None };
    let r = backtest::run(&model, &data, &spec(), &control).unwrap();
    assert!(r.interrupted);
    assert!(r.origins_completed >= 5 && r.origins_completed < 120, "{}", r.origins_completed);
    let text = std::fs::read_to_string(&partial).unwrap();
    let lines: Vec<serde_json::Value> = text.lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert_eq!(lines[0]["record"], "header");
    let origins = lines.iter().filter(|l| l["record"] == "origin").count();
    assert_eq!(origins, r.origins_completed);
    assert_eq!(lines.last().unwrap()["record"], "summary");
    assert_eq!(lines.last().unwrap()["interrupted"], true);
    // stopped before anything ran: an error, not an empty report
    let flag = AtomicBool::new(true);
    let control = RunControl { stop: Some(&flag), partial: None, progress: None };
    let e = backtest::run(&NormalPredictive { window: 40 }, &data, &spec(), &control).unwrap_err();
    assert!(e.to_string().contains("interrupted"));
}

#[test]
fn too_short_series_is_an_error_value() {
    let y = iid_series(30, 1.0, 1.0, 1);
    let data = BacktestData { name: "short", y: &y, controls: &[], times: None };
    let e = backtest::run(&NormalPredictive { window: 40 }, &data, &spec(), &RunControl::default()).unwrap_err();
    assert!(e.to_string().contains("30 periods"), "{e}");
    let bad = BacktestSpec { lifts: vec![0.0], ..spec() };
    assert!(backtest::run(&NormalPredictive { window: 40 }, &data, &bad, &RunControl::default()).is_err());
}
