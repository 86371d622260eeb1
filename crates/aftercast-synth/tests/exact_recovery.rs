//! Exact recovery (issue 4): a treated unit built as a known convex combination of donors gets
//! those weights back to 1e-6 and a zero effect. Analytic: the combination is the unique
//! minimiser with zero misfit when the donors' pre-period paths are affinely independent.

mod common;
use aftercast_core::time::TimePoint;
use aftercast_synth::{Method, SynthParams};
use common::{Sim, tol};

fn build(seed: u64, j: usize, periods: usize, truth: &[f64]) -> aftercast_core::panel::Panel {
    let mut sim = Sim(seed);
    let (mut names, mut y) = common::factor_panel(&mut sim, j, periods, 1.0);
    let treated: Vec<f64> = (0..periods).map(|t| truth.iter().zip(&y).map(|(w, r)| w * r[t]).sum()).collect();
    names.push("treated".into());
    y.push(treated);
    common::panel_from_matrix(&names, &y)
}

#[test]
fn convex_combination_is_recovered_with_zero_effect() {
    let truth = [0.0, 0.35, 0.0, 0.15, 0.5, 0.0, 0.0, 0.0];
    for seed in [1_u64, 2, 3] {
        let panel = build(seed, truth.len(), 40, &truth);
        let fit = SynthParams::new().check().unwrap().fit(&panel, &["treated".into()], TimePoint::Period(30)).unwrap();
        let u = &fit.units[0];
        for (w, t) in u.weights.iter().zip(&truth) {
            assert!((w.weight - t).abs() < tol::EXACT_WEIGHTS, "seed {seed}: {} {} vs {}", w.unit, w.weight, t);
        }
        assert_eq!(u.nonzero_donors, 3);
        assert!(fit.average_effect().abs() < tol::EXACT_EFFECT, "effect {}", fit.average_effect());
        for g in &u.gap {
            assert!(g.abs() < tol::EXACT_EFFECT);
        }
        assert!(u.solver.duality_gap <= 1e-9 * u.solver.kkt_residual.max(1.0));
        assert!(!u.outside_hull);
    }
}

#[test]
fn intercept_method_recovers_shifted_combination() {
    // A convex combination plus a constant level shift of +40 lies outside the donors' hull;
    // the demeaned synthetic control recovers the weights and the shift exactly.
    let truth = [0.6, 0.0, 0.0, 0.4, 0.0, 0.0];
    let mut sim = Sim(9);
    let (mut names, mut y) = common::factor_panel(&mut sim, truth.len(), 36, 1.0);
    let tr: Vec<f64> = (0..36).map(|t| 40.0 + truth.iter().zip(&y).map(|(w, r)| w * r[t]).sum::<f64>()).collect();
    names.push("treated".into());
    y.push(tr);
    let panel = common::panel_from_matrix(&names, &y);
    let plain = SynthParams::new()
        .placebo(false)
        .check()
        .unwrap()
        .fit(&panel, &["treated".into()], TimePoint::Period(30))
        .unwrap();
    assert!(plain.units[0].outside_hull, "a +40 shift must trigger the convex-hull warning");
    assert!(!plain.warnings.is_empty());
    let fit = SynthParams::new()
        .method(Method::Intercept)
        .check()
        .unwrap()
        .fit(&panel, &["treated".into()], TimePoint::Period(30))
        .unwrap();
    let u = &fit.units[0];
    for (w, t) in u.weights.iter().zip(&truth) {
        assert!((w.weight - t).abs() < tol::EXACT_WEIGHTS, "{} {} vs {}", w.unit, w.weight, t);
    }
    assert!((u.intercept - 40.0).abs() < 1e-6, "intercept {}", u.intercept);
    assert!(fit.average_effect().abs() < tol::EXACT_EFFECT);
}
