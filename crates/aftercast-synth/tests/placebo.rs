//! Placebo in space (Abadie, Diamond & Hainmueller 2010, JASA 105:493-505): p = rank / (J+1).

mod common;
use aftercast_core::time::TimePoint;
use aftercast_synth::SynthParams;
use common::{Sim, tol};

#[test]
fn grunfeld_placebo_p_values_lie_on_the_grid() {
    // With J donors the p-value is k/(J+1) (ADH 2010; with 38 donors the smallest is 1/39).
    let panel = common::grunfeld();
    let params = SynthParams::new().check().unwrap();
    for firm in &panel.units {
        let fit = params.fit(&panel, std::slice::from_ref(firm), TimePoint::Period(1950)).unwrap();
        let pl = fit.placebo.as_ref().unwrap();
        assert_eq!(pl.runs.len(), 10);
        let r = &pl.ranks[0];
        assert_eq!(r.units, 11);
        let k = r.p_value * 11.0;
        assert!((k - k.round()).abs() < 1e-12 && (1.0..=11.0).contains(&k), "{firm}: p {}", r.p_value);
        assert_eq!(r.rank, k.round() as usize);
        // The rank counts the placebos with a ratio at least the treated unit's.
        let above = pl.runs.iter().filter(|p| p.ratio >= r.ratio).count();
        assert_eq!(r.rank, above + 1);
        for run in &pl.runs {
            assert_eq!(run.gap.len(), 20);
        }
    }
}

#[test]
fn exclusion_of_poorly_fitted_placebos_shrinks_the_grid() {
    let panel = common::grunfeld();
    let full =
        SynthParams::new().check().unwrap().fit(&panel, &["Westinghouse".into()], TimePoint::Period(1950)).unwrap();
    let cut = SynthParams::new()
        .placebo_exclude_factor(Some(2.0))
        .check()
        .unwrap()
        .fit(&panel, &["Westinghouse".into()], TimePoint::Period(1950))
        .unwrap();
    let pre = full.units[0].pre_rmspe;
    let kept = full.placebo.as_ref().unwrap().runs.iter().filter(|r| r.pre_rmspe <= 2.0 * pre).count();
    let r = &cut.placebo.as_ref().unwrap().ranks[0];
    assert_eq!(r.units, kept + 1);
    assert_eq!(r.excluded, 10 - kept);
    assert!(kept < 10, "the large firms fit far worse than Westinghouse and must be excluded");
    let k = r.p_value * r.units as f64;
    assert!((k - k.round()).abs() < 1e-12);
}

#[test]
fn no_effect_simulations_reject_at_about_the_nominal_rate() {
    // 100 seeded factor-model panels, 20 donors + 1 treated, 24 pre + 6 post periods, no effect.
    // Under exchangeability P(p < 0.1) = P(rank <= 2 of 21) = 2/21 = 9.5%; issue 4 accepts 4%-18%.
    let params = SynthParams::new().check().unwrap();
    let runs = 100;
    let mut hits = 0;
    for r in 0..runs {
        let mut sim = Sim(1000 + r);
        let (names, y) = common::factor_panel(&mut sim, 21, 30, 1.0);
        let panel = common::panel_from_matrix(&names, &y);
        let fit = params.fit(&panel, &[names[20].clone()], TimePoint::Period(24)).unwrap();
        let p = fit.placebo.as_ref().unwrap().ranks[0].p_value;
        if p < 0.1 {
            hits += 1;
        }
    }
    let share = f64::from(hits) / runs as f64;
    eprintln!("share of no-effect panels with placebo p < 0.1: {share}");
    assert!(share >= tol::PLACEBO_SIZE.0 && share <= tol::PLACEBO_SIZE.1, "share with p < 0.1: {share}");
}

#[test]
fn placebo_results_do_not_depend_on_thread_count() {
    let panel = common::grunfeld();
    let params = SynthParams::new().check().unwrap();
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap();
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build().unwrap();
    let a = one.install(|| params.fit(&panel, &["IBM".into()], TimePoint::Period(1950)).unwrap());
    let b = two.install(|| params.fit(&panel, &["IBM".into()], TimePoint::Period(1950)).unwrap());
    assert_eq!(serde_json::to_string(&a).unwrap(), serde_json::to_string(&b).unwrap());
}

#[test]
fn placebo_scaled_intervals_cover_zero_near_nominal_when_nothing_happened() {
    // Interval property of the placebo-based draws (docs/synthetic.md): on no-effect panels the
    // 90% interval of the average effect should cover zero in roughly 90% of runs. 100 seeded
    // panels, 30 donors; accept 78%-99% (binomial sd 3% around 90%, plus the coarseness of 30
    // draws).
    use aftercast_synth::result::{Robustness, estimate};
    let params = SynthParams::new().check().unwrap();
    let runs = 100;
    let mut covered = 0;
    for r in 0..runs {
        let mut sim = Sim(5000 + r);
        let (names, y) = common::factor_panel(&mut sim, 31, 30, 1.0);
        let panel = common::panel_from_matrix(&names, &y);
        let fit = params.fit(&panel, &[names[30].clone()], TimePoint::Period(24)).unwrap();
        let doc = aftercast_resample::finish(estimate(&fit, Robustness::default()), &params.get().inference, vec![])
            .unwrap()
            .result;
        if doc.effect.average.lower <= 0.0 && 0.0 <= doc.effect.average.upper {
            covered += 1;
        }
    }
    let share = f64::from(covered) / runs as f64;
    eprintln!("coverage of zero by the 90% interval of the average effect: {share}");
    assert!((0.78..=0.99).contains(&share), "coverage {share}");
}
