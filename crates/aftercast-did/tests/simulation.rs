//! Simulated staggered panels with known effects: three waves plus never-adopted units, effects
//! that differ by wave and grow with exposure, unit effects, period shocks and AR(1) noise.
//! Analytic truth: the average of the generated effects over the adopted unit-periods.

use aftercast_core::Inference;
use aftercast_did::{Comparison, Method, Rollout, Spec, estimate};
use aftercast_resample::finish;
use aftercast_resample::rng::Stream;

/// 40 units, 24 periods; waves at periods 8, 13, 18 with 8 units each, 16 never adopt. Effect
/// of wave j at exposure e: (1 + 0.3 e) (1 + 0.6 j). Returns the rollout and the true ATT.
fn panel(seed: u64) -> (Rollout, f64) {
    panel_scaled(seed, 1.0)
}

/// [`panel`] with every effect multiplied by `scale`.
fn panel_scaled(seed: u64, scale: f64) -> (Rollout, f64) {
    let mut s = Stream::new(seed, 0);
    let (n, nt) = (40, 24);
    let starts = [Some(8), Some(13), Some(18), None];
    let mut y = vec![vec![0.0; nt]; n];
    let mut start = vec![None; n];
    let lambda: Vec<f64> = (0..nt).map(|t| 2.0 * (t as f64 / 4.0).sin() + 0.1 * t as f64).collect();
    let (mut sum, mut count) = (0.0, 0.0);
    for u in 0..n {
        let wave = if u < 8 {
            0
        } else if u < 16 {
            1
        } else if u < 24 {
            2
        } else {
            3
        };
        start[u] = starts[wave];
        let alpha = 20.0 + 3.0 * s.normal();
        let mut e = 0.0;
        for t in 0..nt {
            e = 0.5 * e + s.normal();
            let effect = match start[u] {
                Some(g) if t >= g => (1.0 + 0.3 * (t - g) as f64) * (1.0 + 0.6 * wave as f64) * scale,
                _ => 0.0,
            };
            if effect != 0.0 {
                sum += effect;
                count += 1.0;
            }
            y[u][t] = alpha + lambda[t] + effect + e;
        }
    }
    let data = Rollout {
        outcome: "y".into(),
        units: (0..n).map(|u| format!("u{u}")).collect(),
        times: (0..nt).map(|t| aftercast_core::TimePoint::Period(t as i64)).collect(),
        y,
        start,
        covariates: vec![],
        left_out: vec![],
    };
    (data, sum / count)
}

fn covers(method: Method, comparison: Comparison, runs: u64, draws: usize) -> (usize, f64) {
    let inf = Inference { draws, ..Inference::default() };
    let mut hits = 0;
    let mut bias = 0.0;
    for seed in 0..runs {
        let (data, truth) = panel(1000 + seed);
        let spec = Spec { method, comparison, placebo_shifts: 0, ..Spec::default() };
        let est = estimate(&data, &spec, &inf).unwrap();
        let f = finish(est, &inf, vec![]).unwrap();
        let a = &f.result.effect.average;
        if a.lower <= truth && truth <= a.upper {
            hits += 1;
        }
        bias += (a.estimate - truth) / runs as f64;
    }
    (hits, bias)
}

/// Coverage of the 90% interval of the true ATT over 100 seeded panels: at least 85 (the
/// issue's bar; a nominal 90% interval covers 90 on average, binomial sd 3).
#[test]
fn group_time_intervals_cover_the_truth() {
    let (hits, bias) = covers(Method::GroupTime, Comparison::NotYet, 100, 300);
    assert!(hits >= 85, "covered {hits} of 100");
    assert!(bias.abs() < 0.1, "mean error {bias}");
    let (hits, _) = covers(Method::GroupTime, Comparison::Never, 100, 300);
    assert!(hits >= 85, "never-adopted comparison covered {hits} of 100");
}

#[test]
fn imputation_intervals_cover_the_truth() {
    let (hits, bias) = covers(Method::Imputation, Comparison::NotYet, 100, 300);
    assert!(hits >= 85, "covered {hits} of 100");
    assert!(bias.abs() < 0.1, "mean error {bias}");
}

/// The two-way regression on the same panels: effects grow with exposure, so later waves
/// compared with already-adopted ones pull it down (Goodman-Bacon 2021). Its mean error is
/// several times the cohort estimators' bound above, and its interval misses the truth far
/// more often than a 90% interval should.
#[test]
fn twfe_is_visibly_biased_on_the_same_panels() {
    let (hits, bias) = covers(Method::Twfe, Comparison::NotYet, 100, 300);
    assert!(bias < -0.3, "mean error {bias}");
    assert!(hits < 70, "covered {hits} of 100");
}

/// Segments with known, different effects (the second twice the first): each segment's 90%
/// interval covers its own truth in 85 to 95 of 100 runs (nominal 90, binomial sd 3), the
/// equality test sees the difference, and the overall estimate is the covered-unit-period
/// weighted average of the segments.
#[test]
fn segment_intervals_cover_their_truths_and_pool_to_the_overall() {
    let inf = Inference { draws: 300, ..Inference::default() };
    let spec = Spec { placebo_shifts: 0, ..Spec::default() };
    let mut hits = [0usize; 2];
    let mut differ = 0;
    for seed in 0..100 {
        let (a, ta) = panel_scaled(5000 + seed, 1.0);
        let (b, tb) = panel_scaled(9000 + seed, 2.0);
        let mut data = a.clone();
        data.units.extend(b.units.iter().map(|u| format!("b{u}")));
        data.y.extend(b.y.clone());
        data.start.extend(b.start.clone());
        let segments = vec![("a".to_string(), (0..40).collect()), ("b".to_string(), (40..80).collect())];
        let est = aftercast_did::estimate_by(&data, "half", &segments, &spec, &inf).unwrap();
        let f = finish(est, &inf, vec![]).unwrap();
        let seg = f.result.breakdowns.iter().find(|b| b.by == "segment").unwrap();
        for (i, truth) in [ta, tb].iter().enumerate() {
            let s = &seg.rows[i].summary;
            if s.lower <= *truth && *truth <= s.upper {
                hits[i] += 1;
            }
        }
        // equal covered unit-periods: the overall is the plain mean of the two segments
        let pooled = 0.5 * (seg.rows[0].summary.estimate + seg.rows[1].summary.estimate);
        assert!((f.result.effect.average.estimate - pooled).abs() < 1e-9);
        if seg.test.as_ref().is_some_and(|t| t.p_value < 0.05) {
            differ += 1;
        }
    }
    for h in hits {
        assert!((85..=95).contains(&h), "segment covered {h} of 100");
    }
    assert!(differ >= 90, "difference found in {differ} of 100");
}

/// Fake adoption dates where nothing happened, and the leads before adoption: with 40 units the
/// joint tests reject more often than their 5% level (measured: 10 and 10 of 100 for group-time,
/// 12 and 16 for imputation; unit-level resampling with few units runs narrow, and the F
/// reference corrects only part of it). Asserted: at most 20 of 100, so a test that had lost its
/// calibration (rejecting most of the time) fails; docs/rollout.md states the measured rates.
#[test]
fn placebo_dates_and_leads_reject_at_about_the_nominal_rate() {
    let inf = Inference { draws: 300, ..Inference::default() };
    for method in [Method::GroupTime, Method::Imputation] {
        let spec = Spec { method, ..Spec::default() };
        let (mut placebo, mut leads, mut runs) = (0, 0, 0);
        for seed in 0..100 {
            let (data, _) = panel(20_000 + seed);
            let f = finish(estimate(&data, &spec, &inf).unwrap(), &inf, vec![]).unwrap();
            let p = |by: &str| {
                f.result.breakdowns.iter().find(|b| b.by == by).and_then(|b| b.test.as_ref()).map(|t| t.p_value)
            };
            runs += 1;
            if p("placebo-date").is_some_and(|p| p < 0.05) {
                placebo += 1;
            }
            if p("event-time").is_some_and(|p| p < 0.05) {
                leads += 1;
            }
        }
        eprintln!("{method:?}: placebo-date rejections {placebo}/{runs}, lead rejections {leads}/{runs}");
        assert!(placebo <= 20, "{method:?}: fake dates rejected in {placebo} of {runs}");
        assert!(leads <= 20, "{method:?}: leads rejected in {leads} of {runs}");
    }
}

/// Trends that depend on a pre-period covariate, and adoption that depends on it too: the
/// unadjusted group-time effect is biased; the doubly robust one (Sant'Anna & Zhao 2020) removes
/// the bias. And with a covariate constant across units the doubly robust effect equals the
/// unadjusted one (analytic: intercept-only models).
#[test]
fn doubly_robust_group_time_removes_covariate_driven_trends() {
    let runs = 60;
    let (mut plain_err, mut dr_err) = (0.0, 0.0);
    for seed in 0..runs {
        let mut s = Stream::new(30_000 + seed, 0);
        let (n, nt, g) = (120, 16, 8);
        let mut y = vec![vec![0.0; nt]; n];
        let mut start = vec![None; n];
        let mut x = vec![vec![0.0; nt]; n];
        for u in 0..n {
            let xi = s.normal();
            // units with a high covariate adopt more often and grow faster
            let adopt = s.uniform() < 1.0 / (1.0 + (-1.5 * xi).exp());
            start[u] = adopt.then_some(g);
            let alpha = 10.0 + s.normal();
            for t in 0..nt {
                x[u][t] = xi;
                let effect = if adopt && t >= g { 2.0 } else { 0.0 };
                y[u][t] = alpha + 0.3 * xi * t as f64 + effect + 0.5 * s.normal();
            }
        }
        let data = |covariates: Vec<(String, Vec<f64>)>| Rollout {
            outcome: "y".into(),
            units: (0..n).map(|u| format!("u{u}")).collect(),
            times: (0..nt).map(|t| aftercast_core::TimePoint::Period(t as i64)).collect(),
            y: y.clone(),
            start: start.clone(),
            covariates,
            left_out: vec![],
        };
        let ones = vec![1.0; n];
        let spec = Spec { comparison: Comparison::Never, ..Spec::default() };
        let plain = aftercast_did::fit::fit(&data(vec![]), &spec, &ones).unwrap().overall;
        let xs: Vec<f64> = x.iter().map(|r| r[0]).collect();
        let dr = aftercast_did::fit::fit(&data(vec![("x".into(), xs)]), &spec, &ones).unwrap().overall;
        plain_err += (plain - 2.0) / runs as f64;
        dr_err += (dr - 2.0) / runs as f64;
        if seed == 0 {
            let flat = aftercast_did::fit::fit(&data(vec![("c".into(), vec![3.0; n])]), &spec, &ones).unwrap().overall;
            assert!((flat - plain).abs() < 1e-9, "constant covariate: {flat} vs {plain}");
        }
    }
    // the covariate-driven trend adds about 0.3 x (mean x of adopters − of the rest) x 4 periods
    assert!(plain_err > 0.5, "unadjusted mean error {plain_err}");
    assert!(dr_err.abs() < 0.15, "doubly robust mean error {dr_err}");
}
