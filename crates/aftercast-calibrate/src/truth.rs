//! The experimental truth: the effect a randomized experiment measured, with a Bayesian
//! bootstrap interval (Rubin 1981), each arm resampled with its own Dirichlet weights.
//!
//! Two metrics:
//! - [`Metric::Mean`]: difference in arm means of one outcome column;
//! - [`Metric::Ratio`]: difference in arm ratios `sum numerator / sum denominator` (e.g.
//!   revenue per session), resampled as a ratio of weighted sums per draw.
//!
//! The relative effect is computed per draw, `(treated - control) / control`.

use crate::error::{CalibrateError, CalibrateResult};
use aftercast_core::estimate::Inference;
use aftercast_core::result::{EffectBlock, Summary, Verdict};
use aftercast_core::units::UnitTable;
use aftercast_resample::bayes::{BayesBootstrap, PairSample, TieAggregation};
use aftercast_resample::rng::{child_seed, par_draws};
use aftercast_resample::{judge, scalar_block};
use serde::{Deserialize, Serialize};

/// The metric an experiment is judged on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Metric {
    /// Mean of an outcome column per unit.
    Mean {
        /// Outcome column.
        outcome: String,
    },
    /// Ratio of sums, e.g. revenue / sessions, per arm.
    Ratio {
        /// Numerator column.
        numerator: String,
        /// Denominator column.
        denominator: String,
    },
}

impl Metric {
    /// A short label: the outcome, or `numerator/denominator`.
    pub fn label(&self) -> String {
        match self {
            Metric::Mean { outcome } => outcome.clone(),
            Metric::Ratio { numerator, denominator } => format!("{numerator}/{denominator}"),
        }
    }
}

/// The truth of one experiment.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Truth {
    /// The metric.
    pub metric: Metric,
    /// Metric in the treated arm.
    pub treated_value: f64,
    /// Metric in the control arm.
    pub control_value: f64,
    /// Treated minus control (the truth every method is measured against).
    pub point: f64,
    /// Units in the treated arm.
    pub n_treated: usize,
    /// Units in the control arm.
    pub n_control: usize,
    /// Summary of the effect draws (absolute).
    pub summary: Summary,
    /// Effect block (average, cumulative over the treated arm, relative).
    pub effect: EffectBlock,
    /// Verdict of the experiment.
    pub verdict: Verdict,
    /// Effect draws.
    #[serde(skip)]
    pub draws: Vec<f64>,
    /// Control-arm metric per draw.
    #[serde(skip)]
    pub baseline: Vec<f64>,
}

fn column<'a>(units: &'a UnitTable, name: &str) -> CalibrateResult<&'a [f64]> {
    units.outcome(name).or_else(|| units.numeric(name)).ok_or_else(|| CalibrateError::MissingColumn {
        path: units.input.path.clone().into(),
        name: name.into(),
        what: "experiment metric",
    })
}

fn split(units: &UnitTable, v: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let mut t = Vec::new();
    let mut c = Vec::new();
    for (x, &tr) in v.iter().zip(&units.treated) {
        if tr { t.push(*x) } else { c.push(*x) }
    }
    (t, c)
}

/// The truth of a randomized experiment whose arm is `units.treated`.
///
/// # Errors
/// [`CalibrateError::MissingColumn`] for an unknown metric column, [`CalibrateError::EmptyGroup`]
/// when an arm is empty, [`CalibrateError::ZeroDenominator`] for a ratio whose denominator sums
/// to zero in an arm, [`CalibrateError::Bootstrap`] for bootstrap failures, and
/// [`CalibrateError::BadParameter`] for bad options.
///
/// # Examples
/// ```
/// use aftercast_core::table::RawTable;
/// use aftercast_core::units::{UnitSpec, UnitTable};
/// use aftercast_calibrate::truth::{experiment_truth, Metric};
/// use aftercast_core::Inference;
/// let csv = b"arm,y\ntreated,5\ntreated,7\ncontrol,4\ncontrol,2\n";
/// let t = RawTable::from_csv_bytes(std::path::Path::new("x.csv"), csv)?;
/// let spec = UnitSpec { treatment: "arm".into(), outcomes: vec!["y".into()], ..Default::default() };
/// let units = UnitTable::from_table(&t, &spec)?;
/// let truth = experiment_truth(&units, &Metric::Mean { outcome: "y".into() }, &Inference::default())?;
/// assert_eq!(truth.point, 3.0);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn experiment_truth(units: &UnitTable, metric: &Metric, opts: &Inference) -> CalibrateResult<Truth> {
    opts.check()?;
    let path: std::path::PathBuf = units.input.path.clone().into();
    let n_treated = units.n_treated();
    let n_control = units.len() - n_treated;
    if n_treated == 0 {
        return Err(CalibrateError::EmptyGroup { what: "treated arm", path });
    }
    if n_control == 0 {
        return Err(CalibrateError::EmptyGroup { what: "control arm", path });
    }
    let seed = child_seed(opts.seed, "experiment-truth");
    let boot_err = |what: &str| {
        let what = what.to_string();
        move |source| CalibrateError::Bootstrap { what: what.clone(), source }
    };
    let (treated_value, control_value, draws, baseline) = match metric {
        Metric::Mean { outcome } => {
            let y = column(units, outcome)?;
            let (t, c) = split(units, y);
            let tv = t.iter().sum::<f64>() / t.len() as f64;
            let cv = c.iter().sum::<f64>() / c.len() as f64;
            let d = BayesBootstrap::new(opts.draws, seed).two_groups(&t, &c).map_err(boot_err("experiment arms"))?;
            (tv, cv, d.difference, d.control_mean)
        }
        Metric::Ratio { numerator, denominator } => {
            let a = column(units, numerator)?;
            let b = column(units, denominator)?;
            let (ta, ca) = split(units, a);
            let (tb, cb) = split(units, b);
            let sum = |v: &[f64]| v.iter().sum::<f64>();
            for (group, den) in [("treated arm", &tb), ("control arm", &cb)] {
                if sum(den) == 0.0 {
                    return Err(CalibrateError::ZeroDenominator { column: denominator.clone(), group, path });
                }
            }
            let tv = sum(&ta) / sum(&tb);
            let cv = sum(&ca) / sum(&cb);
            let ts = PairSample::for_group(&ta, &tb, TieAggregation::Auto, 0).map_err(boot_err("treated arm ratio"))?;
            let cs = PairSample::for_group(&ca, &cb, TieAggregation::Auto, 1).map_err(boot_err("control arm ratio"))?;
            let pairs = par_draws(seed, opts.draws, |_, rng| {
                let rt = ts.draw_ratio(rng);
                let rc = cs.draw_ratio(rng);
                (rt - rc, rc)
            });
            let (d, base): (Vec<f64>, Vec<f64>) = pairs.into_iter().unzip();
            (tv, cv, d, base)
        }
    };
    let point = treated_value - control_value;
    let (effect, _) = scalar_block(point, Some(control_value), &draws, Some(&baseline), Some(n_treated), opts);
    let (verdict, _) = judge(&effect, &opts.rope);
    Ok(Truth {
        metric: metric.clone(),
        treated_value,
        control_value,
        point,
        n_treated,
        n_control,
        summary: effect.average,
        effect,
        verdict,
        draws,
        baseline,
    })
}
