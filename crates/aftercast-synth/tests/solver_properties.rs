//! Invariants of the simplex QP solver (proptest): feasibility, certified optimality, and no
//! feasible point doing better, including degenerate problems with more donors than periods.

use aftercast_synth::simplex::{SimplexOptions, solve};
use nalgebra::{DMatrix, DVector};
use proptest::prelude::*;

fn problem(t: usize, j: usize, vals: &[f64], shift: f64) -> (DMatrix<f64>, DVector<f64>) {
    let x = DMatrix::from_fn(t, j, |r, c| vals[(r * j + c) % vals.len()] + 0.01 * ((r * 7 + c * 13) % 11) as f64);
    let y = DVector::from_fn(t, |r, _| vals[(r * 3 + 1) % vals.len()] + shift);
    (x, y)
}

fn sse(x: &DMatrix<f64>, y: &DVector<f64>, w: &[f64]) -> f64 {
    (y - x * DVector::from_column_slice(w)).norm_squared()
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    #[test]
    fn weights_are_feasible_optimal_and_certified(
        t in 2usize..30,
        j in 1usize..40,
        vals in prop::collection::vec(-50.0f64..50.0, 8..64),
        shift in -20.0f64..20.0,
        probe in prop::collection::vec(0.0f64..1.0, 40),
    ) {
        let (x, y) = problem(t, j, &vals, shift);
        let h = x.tr_mul(&x);
        let b = x.tr_mul(&y);
        let s = solve(&h, b.as_slice(), &SimplexOptions::default()).unwrap();
        prop_assert!(s.converged(), "stop {:?} kkt {}", s.stop, s.kkt_residual / s.kkt_scale);
        prop_assert!(s.weights.iter().all(|w| *w >= 0.0));
        prop_assert!((s.weights.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        // The duality gap bounds the distance to the optimum of ½‖y − Xw‖² − ½‖y‖².
        prop_assert!(s.duality_gap <= 1e-9 * s.kkt_scale);
        let best = sse(&x, &y, &s.weights);
        // No random feasible point and no vertex does better (beyond rounding).
        let tot: f64 = probe[..j].iter().sum::<f64>().max(1e-12);
        let q: Vec<f64> = probe[..j].iter().map(|v| v / tot).collect();
        prop_assert!(best <= sse(&x, &y, &q) * (1.0 + 1e-9) + 1e-9);
        for k in 0..j {
            let mut e = vec![0.0; j];
            e[k] = 1.0;
            prop_assert!(best <= sse(&x, &y, &e) * (1.0 + 1e-9) + 1e-9);
        }
    }
}
