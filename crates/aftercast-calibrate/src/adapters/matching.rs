//! Every `aftercast-match` method as a [`UnitEstimator`].

use crate::error::{CalibrateError, CalibrateResult};
use crate::estimators::{MethodEstimate, UnitEstimator};
use aftercast_core::estimate::Inference;
use aftercast_core::units::UnitTable;
use aftercast_match::design::Term;
use aftercast_match::{Caliper, Estimand, MatchParams, Method};
use aftercast_resample::rng::child_seed;
use serde_json::{Map, Value, json};

/// A propensity-score method of `aftercast-match` with its parameters.
#[derive(Debug, Clone)]
pub struct MatchEstimator {
    /// The parameters (covariates, terms, method, ...). An empty covariate list means "use
    /// the comparison's covariates"; `draws` and `seed` are taken from the comparison options.
    pub params: MatchParams,
}

impl MatchEstimator {
    /// One method with the comparison's covariates and the given derived terms. Nearest
    /// matching is 1:1 with replacement within 0.2 SD of the logit (Austin 2011, common
    /// practice), choosing among the candidates within the caliper by Mahalanobis distance on
    /// the covariates (the setting aftercast-match checks against Dehejia & Wahba 1999); the
    /// ATT is targeted (overlap weights target the ATO by construction).
    pub fn new(method: Method, terms: Vec<Term>) -> Self {
        let mut params = MatchParams::new(Vec::<String>::new()).method(method).estimand(Estimand::Att).terms(terms);
        if method == Method::Nearest {
            params = params.replace(true).caliper(Caliper::SdOfLogit(0.2)).mahalanobis(true);
        }
        MatchEstimator { params }
    }

    /// All five methods (nearest, strata, ipw, overlap, aipw) with the same terms.
    pub fn all(terms: &[Term]) -> Vec<MatchEstimator> {
        [Method::Nearest, Method::Strata, Method::Ipw, Method::Overlap, Method::Aipw]
            .into_iter()
            .map(|m| MatchEstimator::new(m, terms.to_vec()))
            .collect()
    }
}

impl UnitEstimator for MatchEstimator {
    fn name(&self) -> String {
        format!("match:{}", self.params.method.name())
    }

    fn estimate(
        &self,
        s: &UnitTable,
        outcome: &str,
        covariates: &[String],
        opts: &Inference,
    ) -> CalibrateResult<MethodEstimate> {
        let mut p = self.params.clone();
        if p.covariates.is_empty() {
            p.covariates = covariates.to_vec();
        }
        // The propensity-weighting methods share one seed, so they are judged on the same
        // bootstrap replicates (and the propensity re-fits of a replicate are made once).
        let tag = match p.method {
            Method::Nearest => self.name(),
            _ => "match:propensity-weighting".to_string(),
        };
        p = p.draws(opts.draws).seed(child_seed(opts.seed, &tag));
        let wrap = |e: aftercast_match::MatchError| CalibrateError::Method {
            method: self.name(),
            setting: s.input.path.clone(),
            source: Box::new(e),
        };
        let fitted = p.clone().check().map_err(wrap)?.fit(s, outcome).map_err(wrap)?;
        let mut d = Map::new();
        d.insert("standard_error".into(), json!(fitted.se));
        d.insert("treated_used".into(), json!(fitted.counts.treated_used));
        d.insert("treated_dropped".into(), json!(fitted.counts.treated_unmatched + fitted.counts.treated_trimmed));
        d.insert("controls_used".into(), json!(fitted.counts.controls_used));
        d.insert("ess_controls".into(), json!(fitted.counts.ess_controls));
        let worst = fitted.balance.iter().map(|b| b.row().smd_after.abs()).fold(0.0, f64::max);
        d.insert("max_abs_smd_after".into(), json!(worst));
        d.insert("terms".into(), Value::from(p.terms.iter().map(|t| Value::from(t.label())).collect::<Vec<_>>()));
        Ok(MethodEstimate {
            point: fitted.estimate,
            draws: fitted.draws,
            baseline: fitted.baseline_draws,
            estimand: fitted.estimand,
            diagnostics: d,
            warnings: fitted.warnings,
        })
    }
}
