//! Estimates by segment, pooled: each segment of a categorical column is estimated on its own
//! units (its own models, its own random stream), and the overall estimate is the weighted mean
//! of the segment estimates, draw by draw. Because the segments hold different units, their
//! draws are independent and pooling them index by index is a draw of the pooled estimate.

use aftercast_core::estimate::{BreakdownInput, Estimate, JointQuestion, PartInput, Point, Scope};
use aftercast_core::result::{BalanceRow, EffectDraws, SampleCounts};
use serde::Serialize;

/// One segment's estimate and its weight in the pooled estimate (e.g. its treated units for
/// an effect on the treated).
#[derive(Debug)]
pub struct Segment<D> {
    /// The segment's value.
    pub name: String,
    /// Its estimate (scalar draws).
    pub estimate: Estimate<D>,
    /// Its weight in the overall estimate.
    pub weight: f64,
    /// Units behind it (shown beside the row).
    pub units: usize,
}

/// Diagnostics of a pooled estimate: the column, and each segment's own diagnostics.
#[derive(Debug, Clone, Serialize)]
pub struct Pooled<D> {
    /// The segment column.
    pub by: String,
    /// How the segments are weighted in the overall estimate.
    pub weighting: String,
    /// Each segment's name, weight and diagnostics.
    pub segments: Vec<PooledSegment<D>>,
    /// Segments left out, with the reason.
    pub left_out: Vec<(String, String)>,
}

/// One segment in the diagnostics.
#[derive(Debug, Clone, Serialize)]
pub struct PooledSegment<D> {
    /// Its value.
    pub segment: String,
    /// Its weight in the overall estimate (shares sum to one).
    pub share: f64,
    /// Its own diagnostics.
    pub diagnostics: D,
}

/// Why pooling failed.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum PoolError {
    /// No segment could be estimated.
    #[error("no segment of '{by}' could be estimated: {detail}")]
    Empty {
        /// The column.
        by: String,
        /// The reasons, joined.
        detail: String,
    },
    /// A segment's estimate is not a scalar (series estimates are not pooled here).
    #[error("segment '{segment}' has a series estimate; only unit-level estimates are pooled by segment")]
    NotScalar {
        /// The segment.
        segment: String,
    },
}

/// Whether draws do not vary (their finite values' sd is zero up to rounding): an estimate
/// whose resamples cannot move it has no interval to report.
pub fn is_flat(draws: &[f64]) -> bool {
    let v: Vec<f64> = draws.iter().copied().filter(|x| x.is_finite()).collect();
    let m = v.iter().sum::<f64>() / v.len().max(1) as f64;
    let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len().max(1) as f64).sqrt();
    v.len() > 1 && sd <= 1e-12 * m.abs().max(1.0)
}

/// Pool segment estimates. The overall point and every draw are the weighted means of the
/// segments' (the relative effect's baseline likewise); the balance rows are kept per segment
/// (`segment · covariate`), sample counts summed, warnings prefixed with the segment, and a
/// `segment` breakdown added with an equality test. `left_out` lists segments that could not
/// be estimated (each becomes a warning).
///
/// # Errors
/// [`PoolError`] when nothing is left or a segment is a series.
pub fn pool<D: Serialize + Clone>(
    by: &str,
    weighting: &str,
    parts: Vec<Segment<D>>,
    left_out: Vec<(String, String)>,
) -> Result<Estimate<Pooled<D>>, PoolError> {
    // a segment whose draws do not vary has no interval to pool (a single unit on one side)
    let mut left_out = left_out;
    let parts: Vec<Segment<D>> = parts
        .into_iter()
        .filter(|p| {
            let flat = match &p.estimate.draws {
                EffectDraws::Scalar { effect, .. } => is_flat(effect),
                EffectDraws::Path { .. } => false,
            };
            if flat {
                left_out.push((
                    p.name.clone(),
                    "its draws do not vary, so it has no interval (too few units on one side)".into(),
                ));
            }
            !flat
        })
        .collect();
    if parts.is_empty() {
        return Err(PoolError::Empty {
            by: by.to_string(),
            detail: left_out.iter().map(|(s, w)| format!("'{s}': {w}")).collect::<Vec<_>>().join("; "),
        });
    }
    let mut rows = Vec::new();
    let mut scalars = Vec::new();
    for p in &parts {
        match (&p.estimate.point, &p.estimate.draws) {
            (Point::Scalar { effect, baseline }, EffectDraws::Scalar { effect: draws, baseline: bd }) => {
                scalars.push((*effect, *baseline, draws.clone(), bd.clone()));
                rows.push(PartInput {
                    label: p.name.clone(),
                    key: None,
                    point: *effect,
                    draws: draws.clone(),
                    units: p.units,
                    note: None,
                });
            }
            _ => return Err(PoolError::NotScalar { segment: p.name.clone() }),
        }
    }
    let total: f64 = parts.iter().map(|p| p.weight).sum();
    let shares: Vec<f64> = parts.iter().map(|p| p.weight / total).collect();
    let nd = scalars.iter().map(|s| s.2.len()).min().unwrap_or(0);
    let point: f64 = scalars.iter().zip(&shares).map(|(s, w)| w * s.0).sum();
    let has_baseline = scalars.iter().all(|s| s.1.is_some() && s.3.is_some());
    let baseline = has_baseline.then(|| scalars.iter().zip(&shares).map(|(s, w)| w * s.1.unwrap_or(f64::NAN)).sum());
    let effect: Vec<f64> = (0..nd).map(|d| scalars.iter().zip(&shares).map(|(s, w)| w * s.2[d]).sum()).collect();
    let base_draws = has_baseline.then(|| {
        (0..nd)
            .map(|d| scalars.iter().zip(&shares).map(|(s, w)| w * s.3.as_ref().map_or(f64::NAN, |b| b[d])).sum())
            .collect()
    });
    let first = &parts[0].estimate;
    let units: usize = parts.iter().map(|p| p.estimate.scope.units).sum();
    let diagnostics = Pooled {
        by: by.to_string(),
        weighting: weighting.to_string(),
        segments: parts
            .iter()
            .zip(&shares)
            .map(|(p, s)| PooledSegment {
                segment: p.name.clone(),
                share: *s,
                diagnostics: p.estimate.diagnostics.clone(),
            })
            .collect(),
        left_out: left_out.clone(),
    };
    let mut est = Estimate::new(
        &first.verb,
        &first.method,
        &format!("{} (pooled over the segments of '{by}', {weighting})", first.estimand),
        Point::Scalar { effect: point, baseline },
        EffectDraws::Scalar { effect, baseline: base_draws },
        Scope { per: first.scope.per, units },
        diagnostics,
    );
    let mut balance: Vec<BalanceRow> = Vec::new();
    let mut sample: Option<SampleCounts> = None;
    for p in &parts {
        if let Some(b) = &p.estimate.sections.balance {
            balance.extend(
                b.iter().map(|r| BalanceRow { covariate: format!("{} · {}", p.name, r.covariate), ..r.clone() }),
            );
        }
        if let Some(s) = &p.estimate.sections.sample {
            let acc = sample.get_or_insert(SampleCounts { treated: 0, controls_used: 0, treated_dropped: 0 });
            acc.treated += s.treated;
            acc.controls_used += s.controls_used;
            acc.treated_dropped += s.treated_dropped;
        }
        for w in &p.estimate.warnings {
            est.warn(format!("segment '{}': {w}", p.name));
        }
    }
    est.sections.balance = (!balance.is_empty()).then_some(balance);
    est.sections.sample = sample;
    for (s, why) in &left_out {
        est.warn(format!("segment '{s}' is left out: {why}"));
    }
    for p in &parts {
        if p.units < 10 {
            est.warn(format!(
                "segment '{}' has only {} units behind its estimate: its interval is wide and its diagnostics say little",
                p.name, p.units
            ));
        }
    }
    est.assumptions.clone_from(&first.assumptions);
    est.assumptions.push(format!(
        "Each segment of '{by}' is estimated on its own units; the overall effect is their weighted mean ({weighting})."
    ));
    let all: Vec<usize> = (0..rows.len()).collect();
    est.sections.breakdowns.push(BreakdownInput {
        by: "segment".into(),
        title: format!("Effect by segment of '{by}' (each fitted on its own units)"),
        joint: (rows.len() >= 2).then_some((JointQuestion::AllEqual, all)),
        rows,
        clusters: None,
    });
    Ok(est)
}

#[cfg(test)]
mod tests {
    use super::*;
    use aftercast_core::estimate::Per;

    fn seg(name: &str, effect: f64, draws: Vec<f64>, weight: f64) -> Segment<()> {
        let n = draws.len();
        Segment {
            name: name.into(),
            estimate: Estimate::new(
                "match",
                "ipw",
                "ATT",
                Point::Scalar { effect, baseline: Some(10.0) },
                EffectDraws::Scalar { effect: draws, baseline: Some(vec![10.0; n]) },
                Scope { per: Per::Unit, units: weight as usize },
                (),
            ),
            weight,
            units: weight as usize,
        }
    }

    /// Analytic: the pooled point and each pooled draw are the weighted means of the segments'.
    #[test]
    fn pooled_point_and_draws_are_weighted_means() {
        let e = pool(
            "plan",
            "treated units",
            vec![
                seg("a", 1.0, vec![0.0, 2.0], 30.0),
                seg("b", 4.0, vec![3.0, 5.0], 10.0),
                seg("c", 0.0, vec![0.0, 1.0], 0.0),
                seg("d", 2.0, vec![2.0, 2.0], 5.0),
            ],
            vec![],
        )
        .unwrap();
        let Point::Scalar { effect, .. } = e.point else { panic!() };
        assert!((effect - 1.75).abs() < 1e-12);
        let EffectDraws::Scalar { effect: d, .. } = &e.draws else { panic!() };
        // a segment of weight zero counts for nothing but is still shown and flagged; one whose
        // draws do not vary has no interval and is left out, with the reason
        assert!((d[0] - 0.75).abs() < 1e-12 && (d[1] - 2.75).abs() < 1e-12);
        assert_eq!(e.sections.breakdowns[0].rows.len(), 3);
        assert!(e.warnings.iter().any(|w| w.contains("segment 'c' has only 0 units")));
        assert!(e.warnings.iter().any(|w| w.contains("segment 'd' is left out: its draws do not vary")));
        assert!(!e.warnings.iter().any(|w| w.contains("segment 'b' has only")));
    }

    #[test]
    fn nothing_to_pool_is_an_error_naming_the_reasons() {
        let e = pool::<()>("plan", "treated units", vec![], vec![("x".into(), "one unit".into())]);
        assert!(e.unwrap_err().to_string().contains("'x': one unit"));
    }
}
