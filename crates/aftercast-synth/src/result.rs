//! From a [`Fitted`] synthetic control to the one estimate ([`Estimate`]) with typed
//! diagnostics ([`SynthDiagnostics`]).

use crate::fit::{Fitted, Placebo, UnitFit};
use crate::inference::{Conformal, LeaveOneOut, PlaceboInTime};
use crate::params::Method;
use crate::sdid::SdidFit;
use aftercast_core::estimate::{Estimate, NamedCurve, Per, Point, Scope, TotalRule};
use aftercast_core::result::{EffectDraws, PathPoint, PlaceboSummary};
use serde::Serialize;

/// Where the draws of a synthetic control come from, and how many.
#[derive(Debug, Clone, Serialize)]
pub struct DrawSource {
    /// Placebo prediction errors, sdid placebo or jackknife, ...
    pub source: String,
    /// Number of counterfactual paths.
    pub count: usize,
}

/// The typed diagnostics of a synthetic control (the `diagnostics` object of its result).
#[derive(Debug, Clone, Serialize)]
pub struct SynthDiagnostics {
    /// One fit per treated unit.
    pub treated: Vec<UnitFit>,
    /// Size of the donor pool.
    pub donors: usize,
    /// Share of each treated unit in the combined path.
    pub unit_shares: Vec<f64>,
    /// Pre-periods.
    pub pre_periods: usize,
    /// Post-periods.
    pub post_periods: usize,
    /// Source and count of the draws.
    pub draws: DrawSource,
    /// Pre-period RMSPE of the combined path (for one treated unit: that unit's).
    pub pre_rmspe: f64,
    /// Pre-period R² of the combined path.
    pub r2_pre: f64,
    /// Donors with non-zero weight in the combined weights.
    pub nonzero_donors: usize,
    /// Placebo-in-space runs and ranks.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub placebo_runs: Option<Placebo>,
    /// Synthetic difference-in-differences details.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sdid: Option<SdidFit>,
    /// Conformal inference (one treated unit, weights or intercept).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub conformal: Option<Conformal>,
    /// Placebo in time.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub placebo_in_time: Option<PlaceboInTime>,
    /// Leave-one-out over the donors with weight.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub leave_one_out: Option<LeaveOneOut>,
}

/// The robustness checks run beside the fit.
#[derive(Debug, Clone, Default)]
pub struct Robustness {
    /// Conformal inference.
    pub conformal: Option<Conformal>,
    /// Placebo in time.
    pub placebo_in_time: Option<PlaceboInTime>,
    /// Leave-one-out.
    pub leave_one_out: Option<LeaveOneOut>,
    /// Checks that could not run, as warnings.
    pub warnings: Vec<String>,
}

impl Fitted {
    /// The counterfactual draws in the shared form (post-period paths of the aggregate).
    pub fn effect_draws(&self) -> EffectDraws {
        EffectDraws::Path {
            times: self.post_times().to_vec(),
            observed: self.post_observed().to_vec(),
            counterfactual: self.draws.counterfactual.clone(),
        }
    }
}

fn sentence_assumptions(method: Method) -> Vec<String> {
    let mut a = vec![
        "No donor unit was affected by the change (no spill-over into the donor pool).".to_string(),
        "Without the change, the treated outcome would have kept following the same combination of donors as before the start.".to_string(),
        "Nothing else that affects only the treated units happened at the start (no coincident shock).".to_string(),
    ];
    match method {
        Method::Intercept => a.push("The treated unit may differ from the synthetic control by a constant level, and only by that.".into()),
        Method::Ridge => a.push("The outcome is close to linear in the pre-period outcomes, so the ridge model's bias correction is valid (it may extrapolate: weights can be negative).".into()),
        Method::Predictors => a.push("Matching the chosen predictors with the selected importance weights reproduces the treated unit's untreated outcome.".into()),
        Method::Sdid => a.push("After unit and time weighting, treated and control units would have moved in parallel (weighted parallel trends).".into()),
        Method::Weights => {}
    }
    a.push("Intervals come from placebo runs on the donors (see docs/synthetic.md): they describe how far a synthetic control misses when nothing happened, not a sampling distribution.".into());
    a
}

/// Donor weights of the combined path: the unit's own for one treated unit, the share-weighted
/// mean of the units' weights for several.
fn weights_of(fit: &Fitted) -> Vec<aftercast_core::result::UnitWeight> {
    if fit.units.len() == 1 {
        return fit.units[0].weights.clone();
    }
    (0..fit.donors.len())
        .map(|j| aftercast_core::result::UnitWeight {
            unit: fit.donors[j].clone(),
            weight: fit.units.iter().zip(&fit.unit_shares).map(|(u, s)| s * u.weights[j].weight).sum(),
        })
        .collect()
}

/// The one estimate of a synthetic control: the actual synthetic path as the point
/// counterfactual, the placebo-based path draws, typed diagnostics and the placebo gaps.
/// With several treated units the numbers are per treated unit (of the combined path) and the
/// total over all treated units is the sum of their own gaps.
pub fn estimate(fit: &Fitted, robustness: Robustness) -> Estimate<SynthDiagnostics> {
    let p0 = fit.first_post;
    let gap: Vec<f64> = (0..p0).map(|t| fit.observed[t] - fit.synthetic[t]).collect();
    let ybar = fit.observed[..p0].iter().sum::<f64>() / p0 as f64;
    let sst: f64 = fit.observed[..p0].iter().map(|y| (y - ybar).powi(2)).sum();
    let weights = weights_of(fit);
    let nonzero = weights.iter().filter(|w| w.weight.abs() > crate::fit::WEIGHT_ZERO).count();
    let diagnostics = SynthDiagnostics {
        treated: fit.units.clone(),
        donors: fit.donors.len(),
        unit_shares: fit.unit_shares.clone(),
        pre_periods: p0,
        post_periods: fit.times.len() - p0,
        draws: DrawSource { source: fit.draws.source.clone(), count: fit.draws.counterfactual.len() },
        pre_rmspe: crate::fit::rmspe(&gap),
        r2_pre: 1.0 - gap.iter().map(|g| g * g).sum::<f64>() / sst,
        nonzero_donors: nonzero,
        placebo_runs: fit.placebo.clone(),
        sdid: fit.sdid.clone(),
        conformal: robustness.conformal,
        placebo_in_time: robustness.placebo_in_time,
        leave_one_out: robustness.leave_one_out,
    };
    // sdid fits the combined treated path as one unit; the shares still count the treated units
    let n_units = fit.unit_shares.len().max(fit.units.len());
    let scope = Scope { per: Per::Period, units: n_units };
    let estimand = if n_units > 1 || fit.method == Method::Sdid {
        "ATT (average over treated units and post-periods)"
    } else {
        "effect on the treated unit, per post-period"
    };
    let mut est = Estimate::new(
        "synthetic",
        fit.method.name(),
        estimand,
        Point::Path(fit.synthetic[p0..].to_vec()),
        fit.effect_draws(),
        scope,
        diagnostics,
    );
    if n_units > 1 {
        let post_sum = |gap: &[f64]| gap[p0..].iter().filter(|g| g.is_finite()).sum::<f64>();
        let point = if fit.units.len() == n_units {
            fit.units.iter().map(|u| post_sum(&u.gap)).sum()
        } else {
            // one combined fit: n times its gap (exact when the units are combined by a plain mean)
            let combined: Vec<f64> = fit.observed.iter().zip(&fit.synthetic).map(|(y, s)| y - s).collect();
            n_units as f64 * post_sum(&combined)
        };
        est.total = Some(TotalRule { units: n_units, point });
    }
    // The pre-period fit is exact arithmetic (no draws): the band is the synthetic path itself.
    est.sections.pre_path = (0..p0)
        .map(|t| PathPoint {
            time: fit.times[t],
            observed: fit.observed[t].is_finite().then_some(fit.observed[t]),
            counterfactual: fit.synthetic[t],
            lower: fit.synthetic[t],
            upper: fit.synthetic[t],
            post: false,
            effect: None,
            cumulative: None,
        })
        .collect();
    est.sections.weights = Some(weights);
    est.sections.placebo = fit.placebo.as_ref().map(|pl| {
        if pl.ranks.len() == 1 {
            let r = &pl.ranks[0];
            PlaceboSummary { p_value: r.p_value, rank: r.rank, units: r.units }
        } else {
            PlaceboSummary {
                p_value: pl.joint_p_value.unwrap_or(f64::NAN),
                rank: 0,
                units: pl.runs.len() + pl.ranks.len(),
            }
        }
    });
    est.figures.placebo_gaps = fit
        .placebo
        .iter()
        .flat_map(|pl| pl.runs.iter().filter(|r| r.kept))
        .map(|r| NamedCurve { name: r.unit.clone(), values: r.gap.clone() })
        .collect();
    for w in fit.warnings.iter().chain(&robustness.warnings) {
        est.warn(w.clone());
    }
    for u in fit.units.iter().filter(|u| u.solver.stop != "optimal") {
        est.warn(format!(
            "the weight solver for '{}' stopped just short of its tolerance (KKT residual {:.1e} of the problem's scale, {}): the weights are optimal to that precision, far finer than the intervals, so no action is needed",
            u.unit, u.solver.kkt_relative, u.solver.stop
        ));
    }
    est.assumptions = sentence_assumptions(fit.method);
    est
}

/// Options of [`run`] beyond the estimator's parameters.
#[derive(Debug, Clone, Copy)]
pub struct RunOptions {
    /// Also run the robustness checks (conformal inference, placebo in time, leave-one-out)
    /// and put them into the diagnostics. A check that cannot run becomes a warning.
    pub robustness: bool,
}

/// Fit and build the estimate in one call (what the `synthetic` verb calls).
///
/// # Errors
/// As [`ValidParams::fit`](crate::ValidParams::fit); all of them are caused by the input.
pub fn run(
    panel: &aftercast_core::panel::Panel,
    treated: &[String],
    start: aftercast_core::time::TimePoint,
    params: &crate::ValidParams,
    opts: RunOptions,
) -> crate::SynthResult<(Fitted, Estimate<SynthDiagnostics>)> {
    let stage = aftercast_core::progress::stage("fitting the synthetic control", None);
    let fit = params.fit(panel, treated, start)?;
    drop(stage);
    let _stage = aftercast_core::progress::stage("placebo checks", None);
    let mut rb = Robustness::default();
    if opts.robustness && fit.method != Method::Sdid {
        if treated.len() == 1 && matches!(fit.method, Method::Weights | Method::Intercept) {
            match crate::inference::conformal(params, panel, &treated[0], start) {
                Ok(c) => rb.conformal = Some(c),
                Err(e) => rb.warnings.push(format!(
                    "conformal inference skipped ({e}), so the result lacks its p-value of no effect: rely on the placebo-unit rank instead"
                )),
            }
        }
        match crate::inference::placebo_in_time(params, panel, treated, start, None) {
            Ok(p) => rb.placebo_in_time = Some(p),
            Err(e) => rb.warnings.push(format!(
                "placebo in time skipped ({e}), so the result lacks the check that the method finds no effect at an earlier, fake start: a longer pre-period makes room for it"
            )),
        }
        match crate::inference::leave_one_out(params, panel, treated, start, &fit) {
            Ok(l) => rb.leave_one_out = Some(l),
            Err(e) => rb.warnings.push(format!(
                "leave-one-out skipped ({e}), so the result does not show whether a single donor drives the estimate: check the donor weights yourself"
            )),
        }
    }
    let est = estimate(&fit, rb);
    Ok((fit, est))
}
