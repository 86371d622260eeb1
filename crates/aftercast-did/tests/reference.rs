//! Reference checks of the rollout estimators against things this project did not write.
//!
//! - statsmodels 0.15.0 OLS with unit and period dummies on a stored panel
//!   (tests/reference/rollout_statsmodels.py; values in rollout_statsmodels.json; numpy 2.4.6,
//!   pandas 3.1.1, Python 3.11.7): the two-way static coefficient, the event-study
//!   coefficients, and the imputation estimator's first stage (imputed untreated outcomes).
//! - The decomposition identity of Goodman-Bacon (2021, Theorem 1): the static coefficient is
//!   the weighted sum of the two-by-two estimates, with weights summing to one.
//! - Analytic: with one wave and never-adopted units, group-time effects are the plain
//!   two-period difference in differences computed by hand.

use aftercast_core::RawTable;
use aftercast_core::panel::{LongPanelSpec, Panel};
use aftercast_did::fit::{self, twfe_event_times};
use aftercast_did::twoway::TwoWay;
use aftercast_did::{Comparison, Method, Rollout, Spec};
use serde_json::Value;
use std::path::PathBuf;

/// Tolerance against statsmodels (both solve the same least squares exactly).
const TOL_OLS: f64 = 1e-8;

fn reference_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference")
}

fn stored_panel() -> Rollout {
    let path = reference_dir().join("rollout_panel.csv");
    let table = RawTable::read(&path).unwrap();
    let spec = LongPanelSpec {
        unit: "unit".into(),
        time: "period".into(),
        outcome: "y".into(),
        covariates: vec![],
        date_format: Default::default(),
    };
    let panel = Panel::from_long(&table, &spec).unwrap();
    let text = std::fs::read_to_string(&path).unwrap();
    let mut start = vec![None; panel.units.len()];
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let u = panel.units.iter().position(|x| x == f[0]).unwrap();
        if !f[3].trim().is_empty() {
            let s: i64 = f[3].trim().parse().unwrap();
            start[u] = Some((s - 1) as usize); // periods are 1..20
        }
    }
    Rollout::new(&panel, &start, &[]).unwrap()
}

fn reference() -> Value {
    serde_json::from_str(&std::fs::read_to_string(reference_dir().join("rollout_statsmodels.json")).unwrap()).unwrap()
}

#[test]
fn twfe_static_and_event_study_equal_statsmodels_ols_with_dummies() {
    let data = stored_panel();
    let r = reference();
    let ones = vec![1.0; data.n_units()];
    let spec = Spec { method: Method::Twfe, leads: 100, ..Spec::default() };
    let f = fit::fit(&data, &spec, &ones).unwrap();
    let coef = r["twfe_static"]["coef"].as_f64().unwrap();
    assert!((f.overall - coef).abs() < TOL_OLS, "{} vs statsmodels {coef}", f.overall);
    let ks = twfe_event_times(&data);
    let es = r["event_study"].as_array().unwrap();
    assert_eq!(ks.len(), es.len());
    for row in es {
        let k = row["k"].as_i64().unwrap();
        let c = row["coef"].as_f64().unwrap();
        let ours = f.event[&k].0;
        assert!((ours - c).abs() < TOL_OLS, "event time {k}: {ours} vs statsmodels {c}");
    }
}

#[test]
fn imputation_first_stage_equals_statsmodels_on_the_untreated_cells() {
    let data = stored_panel();
    let r = reference();
    let ones = vec![1.0; data.n_units()];
    let tw = TwoWay::new(&fit::untreated_mask(&data), &ones).unwrap();
    let fe = tw.fit(&data.y);
    let treated = r["imputation"]["treated"].as_array().unwrap();
    assert_eq!(treated.len(), 203);
    for row in treated {
        let u = data.units.iter().position(|x| x == row["unit"].as_str().unwrap()).unwrap();
        let t = (row["period"].as_i64().unwrap() - 1) as usize;
        let want = row["y0_hat"].as_f64().unwrap();
        assert!((fe.fitted(u, t) - want).abs() < TOL_OLS, "{} at {}", data.units[u], t + 1);
    }
    for row in r["imputation"]["untreated_fitted_first5"].as_array().unwrap() {
        let u = data.units.iter().position(|x| x == row["unit"].as_str().unwrap()).unwrap();
        let t = (row["period"].as_i64().unwrap() - 1) as usize;
        assert!((fe.fitted(u, t) - row["fitted"].as_f64().unwrap()).abs() < TOL_OLS);
    }
    let spec = Spec { method: Method::Imputation, ..Spec::default() };
    let f = fit::fit(&data, &spec, &ones).unwrap();
    let att = r["imputation"]["att"].as_f64().unwrap();
    assert!((f.overall - att).abs() < TOL_OLS, "{} vs {att}", f.overall);
    for row in r["imputation"]["by_event_time"].as_array().unwrap() {
        let k = row["k"].as_i64().unwrap();
        assert!((f.event[&k].0 - row["mean_tau"].as_f64().unwrap()).abs() < TOL_OLS, "event time {k}");
    }
    // the generated effect grows with exposure; the imputation estimate is near the truth and
    // the static two-way coefficient well below it (statsmodels: 3.466 against a truth of 4.244)
    let truth = r["true_att"].as_f64().unwrap();
    assert!((f.overall - truth).abs() < 0.3);
    assert!(r["twfe_static"]["coef"].as_f64().unwrap() < truth - 0.5);
}

#[test]
fn decomposition_weights_sum_to_one_and_reproduce_the_coefficient() {
    let data = stored_panel();
    let d = aftercast_did::decompose::decompose(&data).unwrap();
    let r = reference();
    assert!((d.coefficient - r["twfe_static"]["coef"].as_f64().unwrap()).abs() < TOL_OLS);
    let total: f64 = d.pairs.iter().map(|p| p.weight).sum();
    assert!((total - 1.0).abs() < 1e-10, "weights sum to {total}");
    let rebuilt: f64 = d.pairs.iter().map(|p| p.weight * p.estimate).sum();
    assert!((rebuilt - d.coefficient).abs() < 1e-10, "{rebuilt} vs {}", d.coefficient);
    // three waves and never-adopted: 3 against never, 3 earlier-vs-later, 3 later-vs-adopted
    assert_eq!(d.pairs.len(), 9);
    assert!(d.weight_on_adopted_comparisons > 0.0);
    let cell_total: f64 = d.cells.iter().map(|c| c.weight).sum();
    assert!((cell_total - 1.0).abs() < 1e-10);
}

#[test]
fn one_wave_group_time_effects_equal_the_hand_computed_difference_in_differences() {
    let full = stored_panel();
    // keep the first wave (start period 8) and the never-adopted units
    let keep: Vec<usize> = (0..full.n_units()).filter(|&u| matches!(full.start[u], None | Some(7))).collect();
    let data = full.subset(&keep);
    let ones = vec![1.0; data.n_units()];
    for comparison in [Comparison::Never, Comparison::NotYet] {
        let cells = fit::group_time_cells(&data, comparison, &ones).unwrap();
        let treated: Vec<usize> = (0..data.n_units()).filter(|&u| data.start[u].is_some()).collect();
        let never: Vec<usize> = (0..data.n_units()).filter(|&u| data.start[u].is_none()).collect();
        let mean = |us: &[usize], t: usize| us.iter().map(|&u| data.y[u][t]).sum::<f64>() / us.len() as f64;
        let base = 6;
        let mut post = Vec::new();
        for c in &cells {
            let hand = (mean(&treated, c.t) - mean(&treated, base)) - (mean(&never, c.t) - mean(&never, base));
            assert!((c.effect - hand).abs() < 1e-12, "period {}", c.t + 1);
            if c.t >= 7 {
                post.push(hand);
            }
        }
        assert_eq!(post.len(), 13);
        let spec = Spec { comparison, ..Spec::default() };
        let f = fit::fit(&data, &spec, &ones).unwrap();
        assert!((f.overall - post.iter().sum::<f64>() / 13.0).abs() < 1e-12);
    }
}
