//! From a [`Panel`] and the caller's choices to the matrices the estimators work on.

use crate::error::{SynthError, SynthResult};
use crate::params::SynthParams;
use aftercast_core::panel::Panel;
use aftercast_core::time::TimePoint;

/// Largest outcome magnitude the weight solver takes (its sums of squares must stay finite).
pub const MAX_MAGNITUDE: f64 = 1e150;

/// The panel cut to the periods in use, with treated and donor positions resolved.
#[derive(Debug, Clone)]
pub(crate) struct Prepared {
    /// All unit names of the panel.
    pub units: Vec<String>,
    /// Periods in use.
    pub times: Vec<TimePoint>,
    /// Outcome, one row per unit of the panel, periods in use.
    pub y: Vec<Vec<f64>>,
    /// Number of pre-periods (index of the first post-period).
    pub t0: usize,
    /// Positions of the treated units, in the caller's order.
    pub treated: Vec<usize>,
    /// Positions of the donor units, in panel order.
    pub donors: Vec<usize>,
    /// Covariates (name, units x periods in use).
    pub covariates: Vec<(String, Vec<Vec<f64>>)>,
}

impl Prepared {
    pub fn n_periods(&self) -> usize {
        self.times.len()
    }
}

/// Resolve names and periods; check sizes and values.
pub(crate) fn prepare(panel: &Panel, treated: &[String], start: TimePoint, p: &SynthParams) -> SynthResult<Prepared> {
    if treated.is_empty() {
        return Err(SynthError::NoTreated);
    }
    let points = panel.axis.points();
    let last = points.last().map(|t| t.to_string()).unwrap_or_default();
    let t0 = panel.axis.first_at_or_after(start);
    if t0 >= points.len() {
        return Err(SynthError::NoPostPeriod { start: start.to_string(), last });
    }
    let t_end = match p.end {
        Some(e) => panel.axis.end_at_or_before(e),
        None => points.len(),
    };
    if t_end <= t0 {
        return Err(match p.end {
            Some(end) => SynthError::EndBeforeStart { start: start.to_string(), end: end.to_string() },
            None => SynthError::NoPostPeriod { start: start.to_string(), last },
        });
    }
    if t0 < p.min_pre_periods {
        return Err(SynthError::TooFewPrePeriods { start: start.to_string(), found: t0, needed: p.min_pre_periods });
    }
    let mut tpos = Vec::with_capacity(treated.len());
    for name in treated {
        let Some(i) = panel.units.iter().position(|u| u == name) else {
            let examples = panel.units.iter().take(5).cloned().collect::<Vec<_>>().join(", ");
            return Err(SynthError::TreatedNotFound { unit: name.clone(), n_units: panel.units.len(), examples });
        };
        if tpos.contains(&i) {
            return Err(SynthError::DuplicateTreated { unit: name.clone() });
        }
        tpos.push(i);
    }
    for name in &p.exclude {
        if !panel.units.iter().any(|u| u == name) {
            let examples = panel.units.iter().take(5).cloned().collect::<Vec<_>>().join(", ");
            return Err(SynthError::TreatedNotFound { unit: name.clone(), n_units: panel.units.len(), examples });
        }
    }
    let donors: Vec<usize> = (0..panel.units.len())
        .filter(|i| !tpos.contains(i) && !p.exclude.iter().any(|e| e == &panel.units[*i]))
        .collect();
    if donors.len() < p.min_donors {
        return Err(SynthError::TooFewDonors { found: donors.len(), needed: p.min_donors });
    }
    let times: Vec<TimePoint> = points[..t_end].to_vec();
    let mut y = Vec::with_capacity(panel.units.len());
    for (u, row) in panel.outcome.iter().enumerate() {
        let r: Vec<f64> = row[..t_end].to_vec();
        if let Some((t, v)) = r.iter().enumerate().find(|(_, v)| !v.is_finite())
            && (tpos.contains(&u) || donors.contains(&u))
        {
            return Err(SynthError::NonFinite {
                unit: panel.units[u].clone(),
                period: times[t].to_string(),
                value: *v,
            });
        }
        // squares of larger values overflow in the weight solver
        if let Some((t, v)) = r.iter().enumerate().find(|(_, v)| v.abs() > MAX_MAGNITUDE)
            && (tpos.contains(&u) || donors.contains(&u))
        {
            return Err(SynthError::TooLarge { unit: panel.units[u].clone(), period: times[t].to_string(), value: *v });
        }
        y.push(r);
    }
    for &u in &tpos {
        let pre = &y[u][..t0];
        let first = pre[0];
        if pre.iter().all(|v| *v == first) {
            return Err(SynthError::ConstantSeries {
                unit: panel.units[u].clone(),
                value: first,
                last_pre: times[t0 - 1].to_string(),
            });
        }
    }
    let covariates =
        panel.covariates.iter().map(|(n, m)| (n.clone(), m.iter().map(|r| r[..t_end].to_vec()).collect())).collect();
    Ok(Prepared { units: panel.units.clone(), times, y, t0, treated: tpos, donors, covariates })
}
