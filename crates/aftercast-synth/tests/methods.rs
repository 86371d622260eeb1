//! Checks of the other methods against analytic results and simulated known effects.

mod common;
use aftercast_core::time::TimePoint;
use aftercast_synth::inference::{conformal, fit_staggered, leave_one_out, placebo_in_time};
use aftercast_synth::{Aggregation, Method, SynthParams};
use common::Sim;

#[allow(clippy::too_many_arguments)]
/// y_it = a_i + b_t + l_i f_t + noise·e_it + effect·D_it for the last `treated` units.
fn twfe_panel(
    seed: u64,
    units: usize,
    treated: usize,
    periods: usize,
    t0: usize,
    effect: f64,
    factor: f64,
    noise: f64,
) -> (Vec<String>, aftercast_core::panel::Panel) {
    let mut sim = Sim(seed);
    let b: Vec<f64> = (0..periods).map(|t| 0.3 * t as f64 + sim.normal()).collect();
    let f: Vec<f64> = (0..periods).map(|t| (t as f64 / 3.0).sin()).collect();
    let names: Vec<String> = (0..units).map(|i| format!("r{i:02}")).collect();
    let y: Vec<Vec<f64>> = (0..units)
        .map(|i| {
            let a = 50.0 + 5.0 * sim.normal();
            let l = 1.0 + 0.5 * sim.normal();
            (0..periods)
                .map(|t| {
                    let d = if i >= units - treated && t >= t0 { effect } else { 0.0 };
                    a + b[t] + factor * l * f[t] + noise * sim.normal() + d
                })
                .collect()
        })
        .collect();
    let panel = common::panel_from_matrix(&names, &y);
    (names[units - treated..].to_vec(), panel)
}

#[test]
fn sdid_is_exact_under_two_way_fixed_effects() {
    // Analytic: if y = a_i + b_t + τ D_it exactly, the weighted double difference equals τ for
    // any unit and time weights on the simplex (Arkhangelsky et al. 2021, section 2).
    for (treated, tau) in [(1usize, 4.0), (3, -2.5)] {
        let (tr, panel) = twfe_panel(7, 15, treated, 20, 14, tau, 0.0, 0.0);
        let fit =
            SynthParams::new().method(Method::Sdid).check().unwrap().fit(&panel, &tr, TimePoint::Period(14)).unwrap();
        let s = fit.sdid.as_ref().unwrap();
        assert!((s.tau - tau).abs() < 1e-9, "tau {}", s.tau);
        for v in &s.tau_path {
            assert!((v - tau).abs() < 1e-9);
        }
        let ws: f64 = s.unit_weights.iter().map(|w| w.weight).sum();
        let ts: f64 = s.time_weights.iter().map(|w| w.1).sum();
        assert!((ws - 1.0).abs() < 1e-12 && (ts - 1.0).abs() < 1e-12);
        assert_eq!(s.variance_method, if treated == 1 { "placebo" } else { "jackknife" });
    }
}

#[test]
fn sdid_recovers_a_simulated_effect_with_factors() {
    // Simulated known effect τ = 3 with an interactive factor and noise: the estimate lies within
    // 3 standard errors, and across 30 seeds the mean error is small relative to the se.
    let mut errs = Vec::new();
    let mut covered = 0;
    for seed in 0..30 {
        let (tr, panel) = twfe_panel(100 + seed, 30, 1, 30, 22, 3.0, 4.0, 1.0);
        let fit = SynthParams::new()
            .method(Method::Sdid)
            .sdid_placebo_reps(50)
            .check()
            .unwrap()
            .fit(&panel, &tr, TimePoint::Period(22))
            .unwrap();
        let s = fit.sdid.unwrap();
        assert!(s.se > 0.0 && s.se.is_finite());
        errs.push(s.tau - 3.0);
        if (s.tau - 3.0).abs() <= 1.645 * s.se {
            covered += 1;
        }
    }
    let mean_err = errs.iter().sum::<f64>() / errs.len() as f64;
    assert!(mean_err.abs() < 0.5, "mean error {mean_err}");
    // Nominal 90%; with 30 runs accept 70%-100%.
    assert!(covered >= 21, "covered {covered}/30");
}

#[test]
fn ridge_with_huge_penalty_equals_plain_weights_and_cv_improves_an_outside_unit() {
    let (tr, panel) = twfe_panel(3, 12, 1, 24, 18, 0.0, 3.0, 0.5);
    let plain = SynthParams::new().placebo(false).check().unwrap().fit(&panel, &tr, TimePoint::Period(18)).unwrap();
    let huge = SynthParams::new()
        .method(Method::Ridge)
        .ridge_lambda(Some(1e12))
        .placebo(false)
        .check()
        .unwrap()
        .fit(&panel, &tr, TimePoint::Period(18))
        .unwrap();
    for (a, b) in plain.units[0].weights.iter().zip(&huge.units[0].weights) {
        assert!((a.weight - b.weight).abs() < 1e-6);
    }
    let cv = SynthParams::new().method(Method::Ridge).check().unwrap().fit(&panel, &tr, TimePoint::Period(18)).unwrap();
    let u = &cv.units[0];
    let s: f64 = u.weights.iter().map(|w| w.weight).sum();
    assert!((s - 1.0).abs() < 1e-9, "augmented weights sum to one");
    assert!(u.ridge_lambda.unwrap() > 0.0);
    assert!(u.pre_rmspe <= plain.units[0].pre_rmspe + 1e-12, "augmentation cannot worsen the pre-fit");
}

#[test]
fn predictors_v_is_a_simplex_and_never_beats_direct_outcome_fit() {
    // The `weights` method minimises the pre-period MSPE over the simplex, so any V gives an
    // MSPE at least as large (optimality of the QP).
    let panel = common::grunfeld();
    let tr = vec!["Westinghouse".to_string()];
    let direct = SynthParams::new().placebo(false).check().unwrap().fit(&panel, &tr, TimePoint::Period(1950)).unwrap();
    let fit = SynthParams::new()
        .method(Method::Predictors)
        .predictors(vec!["value".into(), "capital".into()])
        .placebo(false)
        .check()
        .unwrap()
        .fit(&panel, &tr, TimePoint::Period(1950))
        .unwrap();
    let u = &fit.units[0];
    let v: Vec<f64> = u.balance.iter().map(|b| b.v.unwrap()).collect();
    assert_eq!(v.len(), 5);
    assert!(v.iter().all(|x| *x >= 0.0) && (v.iter().sum::<f64>() - 1.0).abs() < 1e-9);
    let mspe = u.pre_rmspe.powi(2);
    assert!(mspe >= direct.units[0].pre_rmspe.powi(2) * (1.0 - 1e-9));
    assert!((u.v_objective.unwrap() - mspe).abs() < 1e-9 * mspe.max(1.0));
    let ws: f64 = u.weights.iter().map(|w| w.weight).sum();
    assert!((ws - 1.0).abs() < 1e-12);
}

#[test]
fn conformal_p_values_lie_on_k_over_t_and_the_set_covers_the_effect() {
    // Chernozhukov, Wüthrich & Zhu (2021): moving-block permutation p-values lie on k/T.
    let (tr, panel) = twfe_panel(11, 16, 1, 30, 24, 6.0, 0.0, 0.5);
    let params = SynthParams::new().method(Method::Intercept).check().unwrap();
    let c = conformal(&params, &panel, &tr[0], TimePoint::Period(24)).unwrap();
    assert_eq!(c.periods, 30);
    let k = c.p_value_zero * 30.0;
    assert!((k - k.round()).abs() < 1e-9);
    assert!(c.p_value_zero <= 2.0 / 30.0, "a 6-unit shift against noise 0.5 must be rejected: {}", c.p_value_zero);
    assert!(c.interval.0 < 6.0 && 6.0 < c.interval.1, "{:?}", c.interval);
    assert!(!c.open_ended);
}

#[test]
fn placebo_in_time_and_leave_one_out_on_a_no_effect_panel() {
    let (tr, panel) = twfe_panel(5, 14, 1, 30, 24, 0.0, 2.0, 0.3);
    let params = SynthParams::new().method(Method::Intercept).check().unwrap();
    let pit = placebo_in_time(&params, &panel, &tr, TimePoint::Period(24), None).unwrap();
    assert_eq!(pit.shift, 6);
    assert_eq!(pit.fake_start, TimePoint::Period(18));
    assert!(pit.average_gap.abs() < 1.0, "{}", pit.average_gap);
    let fit = params.fit(&panel, &tr, TimePoint::Period(24)).unwrap();
    let loo = leave_one_out(&params, &panel, &tr, TimePoint::Period(24), &fit).unwrap();
    assert_eq!(loo.runs.len(), fit.units[0].nonzero_donors);
    assert!(loo.range.0 <= loo.full && loo.full <= loo.range.1);
}

#[test]
fn several_treated_units_aggregate_and_staggered_starts_align() {
    let (tr, panel) = twfe_panel(21, 20, 3, 30, 24, 5.0, 0.0, 0.2);
    // TWFE data with small noise: intercept SC recovers the effect for every treated unit.
    let params = SynthParams::new().method(Method::Intercept).check().unwrap();
    let fit = params.fit(&panel, &tr, TimePoint::Period(24)).unwrap();
    assert_eq!(fit.units.len(), 3);
    assert!((fit.average_effect() - 5.0).abs() < 0.3, "{}", fit.average_effect());
    let pl = fit.placebo.as_ref().unwrap();
    assert!(pl.joint_p_value.unwrap() < 0.01);
    let w = SynthParams::new()
        .method(Method::Intercept)
        .aggregate(Aggregation::Weighted(vec![1.0, 2.0, 3.0]))
        .check()
        .unwrap();
    let fw = w.fit(&panel, &tr, TimePoint::Period(24)).unwrap();
    assert!((fw.unit_shares[2] - 0.5).abs() < 1e-12);
    // Staggered: same units, starts 20, 22, 24 (effect only from 24 in the data, so event
    // times 0..=3 of the first two units are partly untreated; check alignment arithmetic).
    let st = fit_staggered(
        &params,
        &panel,
        &[
            (tr[0].clone(), TimePoint::Period(20)),
            (tr[1].clone(), TimePoint::Period(22)),
            (tr[2].clone(), TimePoint::Period(24)),
        ],
    )
    .unwrap();
    assert_eq!(*st.event_time.last().unwrap(), 5);
    assert_eq!(st.event_time[0], -20);
    let k0 = st.event_time.iter().position(|k| *k == 0).unwrap();
    // At event time 0: unit 0 is at period 20 (gap 0), unit 1 at 22 (0), unit 2 at 24 (5).
    assert!((st.gap[k0] - 5.0 / 3.0).abs() < 0.5, "{}", st.gap[k0]);
    // At event time 4: periods 24, 26, 28: all treated.
    assert!((st.gap[k0 + 4] - 5.0).abs() < 0.5, "{}", st.gap[k0 + 4]);
}
