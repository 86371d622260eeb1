//! The simplex QP on a real panel against scipy.optimize (issue 4): Grunfeld investment panel
//! (statsmodels.datasets.grunfeld), each firm in turn treated at 1950, the other ten firms as
//! donors, 15 pre-periods. Reference weights and MSPE from scipy 1.17.1 SLSQP (ftol 1e-16, best
//! of 11 starts, cross-checked with trust-constr), script tests/reference/grunfeld_weights.py.

mod common;
use aftercast_core::time::TimePoint;
use aftercast_synth::SynthParams;
use common::tol;

#[derive(serde::Deserialize)]
struct Ref {
    versions: serde_json::Value,
    fits: Vec<RefFit>,
}

#[derive(serde::Deserialize)]
struct RefFit {
    treated: String,
    donors: Vec<String>,
    weights: Vec<f64>,
    mspe: f64,
}

#[test]
fn grunfeld_weights_match_scipy_slsqp() {
    let text = std::fs::read_to_string(common::test_path("reference/grunfeld_weights.json")).unwrap();
    let r: Ref = serde_json::from_str(&text).unwrap();
    assert_eq!(r.versions["scipy"], "1.17.1");
    let panel = common::grunfeld();
    let params = SynthParams::new().placebo(false).check().unwrap();
    assert_eq!(r.fits.len(), 11);
    let (mut max_w, mut max_rel) = (0.0_f64, 0.0_f64);
    for f in &r.fits {
        let fit = params.fit(&panel, std::slice::from_ref(&f.treated), TimePoint::Period(1950)).unwrap();
        let u = &fit.units[0];
        let names: Vec<&str> = u.weights.iter().map(|w| w.unit.as_str()).collect();
        assert_eq!(names, f.donors.iter().map(String::as_str).collect::<Vec<_>>());
        for (w, rw) in u.weights.iter().zip(&f.weights) {
            assert!(
                (w.weight - rw).abs() < tol::SCIPY_WEIGHTS,
                "{}: {} {} vs scipy {}",
                f.treated,
                w.unit,
                w.weight,
                rw
            );
        }
        let mspe = u.pre_rmspe * u.pre_rmspe;
        for (w, rw) in u.weights.iter().zip(&f.weights) {
            max_w = max_w.max((w.weight - rw).abs());
        }
        max_rel = max_rel.max((mspe - f.mspe).abs() / f.mspe);
        assert!(
            (mspe - f.mspe).abs() <= tol::SCIPY_OBJECTIVE_REL * f.mspe,
            "{}: mspe {mspe} vs scipy {}",
            f.treated,
            f.mspe
        );
        // Ours must be no worse than scipy's (it is the exact optimum up to rounding).
        assert!(mspe <= f.mspe * (1.0 + 1e-9), "{}: {mspe} > {}", f.treated, f.mspe);
        assert!(u.solver.kkt_relative < tol::KKT_REL, "{}: kkt {}", f.treated, u.solver.kkt_relative);
        assert_eq!(u.solver.stop, "optimal");
    }
    eprintln!("largest weight difference to scipy {max_w:.2e}, largest relative MSPE difference {max_rel:.2e}");
}
