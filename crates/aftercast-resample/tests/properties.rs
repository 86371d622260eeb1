//! Invariants that must hold for any data (proptest).

mod tol;

use aftercast_resample::bayes::{BayesBootstrap, Sample, TieAggregation, dirichlet_weights};
use aftercast_resample::blocks::{BlockScheme, Wrap, resample_indices};
use aftercast_resample::rng::Stream;
use proptest::prelude::*;

/// Values with plenty of ties (small integers) mixed with continuous ones.
fn values() -> impl Strategy<Value = Vec<f64>> {
    prop::collection::vec(prop_oneof![(0i32..4).prop_map(f64::from), -1e6f64..1e6], 1..200)
}

fn policy() -> impl Strategy<Value = TieAggregation> {
    prop_oneof![Just(TieAggregation::Auto), Just(TieAggregation::Always), Just(TieAggregation::Never)]
}

proptest! {
    /// Dirichlet weights are non-negative and sum to one, per unit and per atom.
    #[test]
    fn dirichlet_weights_are_a_distribution(x in values(), ties in policy(), seed in any::<u64>()) {
        let mut rng = Stream::new(seed, 0);
        let w = dirichlet_weights(x.len(), &mut rng);
        prop_assert!(w.iter().all(|&v| v >= 0.0 && v.is_finite()));
        prop_assert!((w.iter().sum::<f64>() - 1.0).abs() < tol::WEIGHT_SUM_ABS);
        let s = Sample::new(&x, ties).expect("sample");
        let wa = s.draw_weights(&mut rng);
        prop_assert_eq!(wa.len(), s.atoms());
        prop_assert!(wa.iter().all(|&v| v >= 0.0 && v.is_finite()));
        prop_assert!((wa.iter().sum::<f64>() - 1.0).abs() < tol::WEIGHT_SUM_ABS);
        prop_assert_eq!(s.counts().iter().sum::<u64>() as usize, x.len());
    }

    /// A weighted mean (and any weighted quantile) lies within [min, max] of the data.
    #[test]
    fn weighted_mean_and_quantiles_within_range(x in values(), ties in policy(), seed in any::<u64>(), p in 0.0f64..=1.0) {
        let (lo, hi) = x.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| (l.min(*v), h.max(*v)));
        let boot = BayesBootstrap::new(20, seed).with_ties(ties);
        for m in boot.mean(&x).expect("mean") {
            prop_assert!(m >= lo && m <= hi, "mean {} outside [{}, {}]", m, lo, hi);
        }
        for q in boot.quantile(&x, p).expect("quantile") {
            prop_assert!(x.contains(&q), "a weighted quantile is one of the values");
        }
    }

    /// Resampled indices are valid periods, and fixed blocks are consecutive (mod n).
    #[test]
    fn block_indices_valid(n in 1usize..300, b in 1.0f64..40.0, l in 1usize..50, seed in any::<u64>()) {
        let mut rng = Stream::new(seed, 1);
        let idx = resample_indices(&BlockScheme::Stationary { mean_length: b }, n, &mut rng).expect("indices");
        prop_assert_eq!(idx.len(), n);
        prop_assert!(idx.iter().all(|&i| i < n));
        let l = l.min(n);
        for wrap in [Wrap::Circular, Wrap::Clipped] {
            let idx = resample_indices(&BlockScheme::Moving { length: l, wrap }, n, &mut rng).expect("indices");
            prop_assert_eq!(idx.len(), n);
            for chunk in idx.chunks(l) {
                for w in chunk.windows(2) {
                    prop_assert_eq!(w[1], (w[0] + 1) % n);
                    if wrap == Wrap::Clipped { prop_assert!(w[1] > w[0]); }
                }
            }
        }
    }
}
