//! Block bootstraps: the automatic block length against the `arch` package, block-length
//! distributions against their definitions.

mod tol;

use aftercast_resample::blocks::{
    BlockError, BlockScheme, Wrap, draw_blocks, optimal_block_length, replicates, resample_indices,
};
use aftercast_resample::rng::Stream;
use serde::Deserialize;
use std::collections::HashMap;
use std::path::Path;

#[derive(Deserialize)]
struct ArchReference {
    arch_version: String,
    series: HashMap<String, ArchValues>,
}

#[derive(Deserialize)]
struct ArchValues {
    n: usize,
    stationary: f64,
    circular: f64,
}

fn read_column(file: &str, column: &str) -> Vec<f64> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data").join(file);
    let text = std::fs::read_to_string(&path).expect("test data file");
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let col = header.iter().position(|h| *h == column).expect("column");
    lines.filter(|l| !l.is_empty()).map(|l| l.split(',').nth(col).expect("cell").parse().expect("number")).collect()
}

fn arch_reference() -> ArchReference {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/block_length_arch.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference json")).expect("parse")
}

/// Politis & White (2004) + Patton, Politis & White (2009) block lengths vs
/// `arch.bootstrap.optimal_block_length` (arch 8.0.0; script tests/reference/block_length_reference.py).
/// arch does not floor at one period; we do, so the white-noise case compares with max(1, arch).
#[test]
fn automatic_block_length_matches_arch() {
    let reference = arch_reference();
    assert_eq!(reference.arch_version, "8.0.0");
    let cases = [
        ("nile", "nile.csv", "volume"),
        ("ar1_phi06", "ar1_phi06.csv", "value"),
        ("ar1_phi09", "ar1_phi09.csv", "value"),
        ("ma2", "ma2.csv", "value"),
        ("white_noise", "white_noise.csv", "value"),
    ];
    for (name, file, column) in cases {
        let x = read_column(file, column);
        let want = &reference.series[name];
        assert_eq!(x.len(), want.n, "{name}: series length");
        let got = optimal_block_length(&x).expect("block length");
        for (what, g, w) in [("stationary", got.stationary, want.stationary), ("circular", got.circular, want.circular)]
        {
            let w = w.max(1.0);
            let rel = ((g - w) / w).abs();
            assert!(rel <= tol::ARCH_BLOCK_LENGTH_REL, "{name} {what}: ours {g}, arch {w} (rel {rel:e}); {got:?}");
        }
    }
}

/// Politis & White (2004): b_max = ceil(min(3 sqrt(N), N/3)); Nile N = 100 gives 30.
#[test]
fn block_length_cap_is_published_formula() {
    let x = read_column("nile.csv", "volume");
    let b = optimal_block_length(&x).expect("block length");
    assert_eq!(b.b_max, 30.0);
    assert!(b.bandwidth <= 15, "M <= m_max = ceil(sqrt 100) + 5");
    // D_CB / D_SB = (4/3) / 2 => b_CB / b_SB = (3/2)^(1/3) whenever neither is capped.
    assert!((b.circular / b.stationary - 1.5f64.powf(1.0 / 3.0)).abs() < 1e-12);
}

/// Politis & Romano (1994): block lengths are geometric with mean b. Complete blocks (all but
/// the last, which is cut) must average b.
#[test]
fn stationary_mean_block_length_matches_parameter() {
    for b in [1.0, 2.5, 7.5, 20.0] {
        let mut rng = Stream::new(2024, b as u64);
        let blocks =
            draw_blocks(&BlockScheme::Stationary { mean_length: b }, 1000, 1_000_000, &mut rng).expect("blocks");
        let complete = &blocks[..blocks.len() - 1];
        let mean = complete.iter().map(|bl| bl.len as f64).sum::<f64>() / complete.len() as f64;
        // tolerance scales with the geometric sd, sqrt(1-p)/p <= b
        assert!((mean - b).abs() <= tol::MEAN_BLOCK_ABS * (b / 7.5).max(0.2), "b = {b}: mean {mean}");
        assert_eq!(blocks.iter().map(|bl| bl.len).sum::<usize>(), 1_000_000);
        assert!(blocks.iter().all(|bl| bl.start < 1000 && bl.len >= 1));
    }
}

/// In the index sequence a new block starts with probability p = 1/b at each period; a start
/// that happens to continue the previous block is invisible (probability 1/n), so the share of
/// visible breaks is p (1 - 1/n).
#[test]
fn stationary_break_rate_in_indices() {
    let (n, b) = (500usize, 5.0);
    let mut breaks = 0usize;
    let mut steps = 0usize;
    for r in 0..400u64 {
        let idx =
            resample_indices(&BlockScheme::Stationary { mean_length: b }, n, &mut Stream::new(77, r)).expect("indices");
        assert_eq!(idx.len(), n);
        breaks += idx.windows(2).filter(|w| w[1] != (w[0] + 1) % n).count();
        steps += n - 1;
    }
    let rate = breaks as f64 / steps as f64;
    let want = (1.0 / b) * (1.0 - 1.0 / n as f64);
    // binomial SE sqrt(p(1-p)/steps) ~ 0.0009; 0.005 is > 5 SE
    assert!((rate - want).abs() < 0.005, "break rate {rate}, want {want}");
}

/// Moving blocks: fixed length; clipped starts stay inside 0..=n-l (Künsch 1989); circular
/// starts cover every period (Politis & Romano 1992).
#[test]
fn moving_blocks_fixed_length_and_start_ranges() {
    let (n, l) = (50usize, 8usize);
    let mut seen_clipped = vec![false; n];
    let mut seen_circular = vec![false; n];
    for r in 0..2000u64 {
        let clipped =
            draw_blocks(&BlockScheme::Moving { length: l, wrap: Wrap::Clipped }, n, n, &mut Stream::new(5, r))
                .expect("blocks");
        let circular =
            draw_blocks(&BlockScheme::Moving { length: l, wrap: Wrap::Circular }, n, n, &mut Stream::new(6, r))
                .expect("blocks");
        for blocks in [&clipped, &circular] {
            assert_eq!(blocks.len(), n.div_ceil(l));
            assert!(blocks[..blocks.len() - 1].iter().all(|b| b.len == l));
            assert_eq!(blocks.last().expect("last").len, n - l * (n / l));
        }
        for b in &clipped {
            assert!(b.start + l <= n);
            seen_clipped[b.start] = true;
        }
        for b in &circular {
            seen_circular[b.start] = true;
        }
    }
    assert!(seen_clipped[..=n - l].iter().all(|&s| s) && !seen_clipped[n - l + 1..].iter().any(|&s| s));
    assert!(seen_circular.iter().all(|&s| s));
}

/// Stationary bootstrap of the mean of an AR(1) (phi = 0.6): the bootstrap variance of the mean
/// approximates the long-run variance / N = sigma^2 / ((1 - phi)^2 N) (analytic; Politis &
/// Romano 1994 show consistency). Loose band: a check of the scale, not of the bias.
#[test]
fn stationary_bootstrap_variance_of_mean_has_long_run_scale() {
    let x = read_column("ar1_phi06.csv", "value");
    let n = x.len() as f64;
    let b = optimal_block_length(&x).expect("block length");
    let means =
        replicates(&x, &BlockScheme::Stationary { mean_length: b.stationary }, 2000, 3, |s| s.iter().sum::<f64>() / n)
            .expect("replicates");
    let m = means.iter().sum::<f64>() / means.len() as f64;
    let var = means.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (means.len() as f64 - 1.0);
    let want = 1.0 / ((1.0f64 - 0.6).powi(2) * n);
    assert!(var > 0.6 * want && var < 1.4 * want, "bootstrap variance {var}, long-run / N {want}");
}

#[test]
fn bad_input_is_an_error() {
    assert_eq!(optimal_block_length(&[]), Err(BlockError::EmptySeries));
    assert!(matches!(optimal_block_length(&[1.0, f64::NAN, 2.0]), Err(BlockError::NonFinite { index: 1, .. })));
    assert!(matches!(optimal_block_length(&[1.0; 8]), Err(BlockError::TooShort { n: 8, .. })));
    assert!(matches!(optimal_block_length(&[3.0; 50]), Err(BlockError::ConstantSeries { value: 3.0 })));
    let mut rng = Stream::new(1, 0);
    assert!(matches!(
        draw_blocks(&BlockScheme::Stationary { mean_length: 0.5 }, 10, 10, &mut rng),
        Err(BlockError::InvalidMeanLength { .. })
    ));
    assert!(matches!(
        draw_blocks(&BlockScheme::Stationary { mean_length: f64::INFINITY }, 10, 10, &mut rng),
        Err(BlockError::InvalidMeanLength { .. })
    ));
    assert!(matches!(
        draw_blocks(&BlockScheme::Moving { length: 11, wrap: Wrap::Clipped }, 10, 10, &mut rng),
        Err(BlockError::InvalidLength { length: 11, n: 10 })
    ));
    assert!(matches!(
        replicates(&[1.0, 2.0], &BlockScheme::Stationary { mean_length: 1.0 }, 0, 1, |s| s[0]),
        Err(BlockError::NoDraws)
    ));
}
