//! The shared result document of the `synthetic` verb.

mod common;
use aftercast_core::result::AnalysisResult;
use aftercast_core::time::TimePoint;
use aftercast_synth::SynthParams;
use aftercast_synth::result::{Robustness, estimate};

#[test]
fn result_document_round_trips_and_centres_on_the_synthetic_estimate() {
    let panel = common::grunfeld();
    let params = SynthParams::new().check().unwrap();
    let fit = params.fit(&panel, &["General Electric".into()], TimePoint::Period(1950)).unwrap();
    let doc = aftercast_resample::finish(
        estimate(&fit, Robustness::default()),
        &params.get().inference,
        vec![panel.input.clone()],
    )
    .unwrap()
    .result;
    let text = serde_json::to_string(&doc).unwrap();
    let back: AnalysisResult = serde_json::from_str(&text).unwrap();
    assert_eq!(back.verb, "synthetic");
    assert_eq!(back.method, "weights");
    assert_eq!(back.path.as_ref().unwrap().len(), 20);
    assert_eq!(back.weights.as_ref().unwrap().len(), 10);
    let pl = back.placebo.unwrap();
    assert_eq!(pl.units, 11);
    // Placebo draws are centred: the mean average effect is the synthetic control's estimate.
    assert!((back.effect.average.mean - fit.average_effect()).abs() < 1e-9 * fit.average_effect().abs().max(1.0));
    assert_eq!(fit.draws.counterfactual.len(), 10);
    // The point answer is the actual synthetic gap, not a summary of the draws.
    assert!((back.effect.average.estimate - fit.average_effect()).abs() < 1e-9 * fit.average_effect().abs().max(1.0));
    assert!(back.effect.average.lower <= back.effect.average.upper);
    assert!(back.diagnostics.contains_key("placebo_runs"));
    assert!(!back.assumptions.is_empty());
}
