//! The analytic score (forward differentiation of the augmented filter) against central
//! differences of the log-likelihood, on each model family the verb builds. Source of the check:
//! the definition of the derivative (a central difference has error O(h^2)); the tolerance is
//! 1e-5 relative to the largest entry of the gradient.

mod common;
#[path = "../benches/shared/job.rs"]
mod job;
use aftercast_forecast::structural::{Initialisation, SeasonKind, StructuralSpec, Trend, score_at};

fn spec(trend: Trend, seasons: Vec<SeasonKind>, n_regressors: usize, ar: bool) -> StructuralSpec {
    StructuralSpec {
        trend,
        seasons,
        n_regressors,
        ar,
        control_scales: vec![],
        absent: vec![],
        init: Initialisation::ExactDiffuse,
    }
}

fn check(name: &str, s: &StructuralSpec, theta: &[f64], y: &[f64], x: &[Vec<f64>]) {
    let (ll, g) = score_at(s, theta, y, x);
    assert!(ll.is_finite(), "{name}: loglik {ll}");
    let h = 1e-5;
    let num: Vec<f64> = (0..theta.len())
        .map(|i| {
            let (mut a, mut b) = (theta.to_vec(), theta.to_vec());
            a[i] += h;
            b[i] -= h;
            (score_at(s, &a, y, x).0 - score_at(s, &b, y, x).0) / (2.0 * h)
        })
        .collect();
    let top = num.iter().fold(1.0_f64, |m, v| m.max(v.abs()));
    for (i, (a, n)) in g.iter().zip(&num).enumerate() {
        assert!(
            (a - n).abs() / top < 1e-5,
            "{name}: d/dtheta[{i}] analytic {a} vs central difference {n} (all: {g:?} vs {num:?})"
        );
    }
}

fn uc() -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let s = common::read_csv(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/uc_series.csv"));
    (common::col(&s, "y"), common::col(&s, "x"), common::col(&s, "y2"))
}

#[test]
fn score_local_level_nile() {
    let y = common::col(&common::read_csv(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/nile.csv")), "volume");
    check("level", &spec(Trend::Level, vec![], 0, false), &[9.5, 7.0], &y, &[]);
    check("level + AR(1)", &spec(Trend::Level, vec![], 0, true), &[9.0, 6.5, 8.0, 0.4], &y, &[]);
}

#[test]
fn score_trend_dummy_season_regressor_with_missing_values() {
    let (y, x, _) = uc();
    let s = spec(Trend::LinearTrend, vec![SeasonKind::Dummy { period: 7 }], 1, false);
    check("trend + dummy(7) + regressor", &s, &[1.2, -0.5, -3.9, -1.9], &y, std::slice::from_ref(&x));
    let s = spec(Trend::DampedTrend, vec![SeasonKind::Dummy { period: 7 }], 1, true);
    check("damped + dummy(7) + regressor + AR(1)", &s, &[1.0, -0.5, -3.0, -1.9, -0.5, 1.5, -0.6], &y, &[x]);
}

#[test]
fn score_trigonometric_season() {
    let (_, _, y2) = uc();
    let s = spec(Trend::Level, vec![SeasonKind::Trig { period: 12.0, harmonics: 2 }], 0, false);
    check("level + trig(12:2)", &s, &[-0.1, -2.1, -4.2], &y2, &[]);
    let s = spec(Trend::LinearTrend, vec![SeasonKind::Trig { period: 12.0, harmonics: 6 }], 0, true);
    check("trend + trig(12:6) + AR(1)", &s, &[-0.5, -2.1, -6.0, -4.2, -1.0, 0.3], &y2, &[]);
}

/// The 18-state benchmark model (trend, weekly dummy, yearly 365.25:4, two controls), where the
/// diffuse part is collapsed late.
#[test]
fn score_eighteen_states() {
    let (y, x) = job::pre_period();
    let s = job::spec(Initialisation::ExactDiffuse);
    check("18 states", &s, &[2.7, 0.1, -6.0, -5.0, -8.0], &y, &x);
}
