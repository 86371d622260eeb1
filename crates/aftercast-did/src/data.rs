//! A rollout: a balanced panel of units and periods, and for each unit the first period it
//! adopted the change (or none).

use crate::error::{DidError, DidResult};
use aftercast_core::panel::Panel;
use aftercast_core::table::RawTable;
use aftercast_core::time::{DateFormat, TimePoint, parse_time};
use std::collections::HashMap;

/// A panel with staggered adoption. `y[u][t]` is unit `u` at period `t`; `start[u]` is the
/// index of its first adopted period, `None` for a unit that never adopts inside the data.
#[derive(Debug, Clone)]
pub struct Rollout {
    /// Outcome name.
    pub outcome: String,
    /// Unit names.
    pub units: Vec<String>,
    /// Periods.
    pub times: Vec<TimePoint>,
    /// Outcome, one row per unit.
    pub y: Vec<Vec<f64>>,
    /// First adopted period of each unit.
    pub start: Vec<Option<usize>>,
    /// Pre-period covariates, one value per unit: the mean over the periods before the first
    /// adoption of any unit.
    pub covariates: Vec<(String, Vec<f64>)>,
    /// Units left out because they had adopted by the first period (no period before adoption).
    pub left_out: Vec<String>,
}

/// One wave: units that adopt in the same period.
#[derive(Debug, Clone, PartialEq)]
pub struct Wave {
    /// Index of the first adopted period.
    pub start: usize,
    /// The units (indices into the rollout).
    pub units: Vec<usize>,
}

impl Rollout {
    /// Build a rollout from a panel and the first adopted period of each panel unit. Units that
    /// adopted by the first period are left out (they have no period before adoption) and listed
    /// in `left_out`. Covariates are named panel covariates, averaged per unit over the periods
    /// before the first adoption.
    ///
    /// # Errors
    /// [`DidError::NoAdopters`] when no unit adopts after the first period; a covariate that is
    /// not in the panel.
    pub fn new(panel: &Panel, start: &[Option<usize>], covariates: &[String]) -> DidResult<Rollout> {
        let keep: Vec<usize> = (0..panel.units.len()).filter(|&u| start[u] != Some(0)).collect();
        let left_out: Vec<String> =
            (0..panel.units.len()).filter(|&u| start[u] == Some(0)).map(|u| panel.units[u].clone()).collect();
        let first_adoption = keep.iter().filter_map(|&u| start[u]).min().ok_or(DidError::NoAdopters)?;
        let mut covs = Vec::new();
        for name in covariates {
            let m = panel.covariates.iter().find(|(n, _)| n == name).ok_or_else(|| DidError::BadOption {
                what: "--covariates".into(),
                detail: format!("'{name}' is not a column of the panel"),
            })?;
            let vals =
                keep.iter().map(|&u| m.1[u][..first_adoption].iter().sum::<f64>() / first_adoption as f64).collect();
            covs.push((name.clone(), vals));
        }
        Ok(Rollout {
            outcome: panel.name.clone(),
            units: keep.iter().map(|&u| panel.units[u].clone()).collect(),
            times: panel.axis.points().to_vec(),
            y: keep.iter().map(|&u| panel.outcome[u].clone()).collect(),
            start: keep.iter().map(|&u| start[u]).collect(),
            covariates: covs,
            left_out,
        })
    }

    /// Number of units.
    pub fn n_units(&self) -> usize {
        self.units.len()
    }

    /// Number of periods.
    pub fn n_times(&self) -> usize {
        self.times.len()
    }

    /// Whether unit `u` has adopted by period `t`.
    pub fn treated(&self, u: usize, t: usize) -> bool {
        self.start[u].is_some_and(|s| t >= s)
    }

    /// The waves in order of start.
    pub fn waves(&self) -> Vec<Wave> {
        let mut by: std::collections::BTreeMap<usize, Vec<usize>> = std::collections::BTreeMap::new();
        for (u, s) in self.start.iter().enumerate() {
            if let Some(s) = s {
                by.entry(*s).or_default().push(u);
            }
        }
        by.into_iter().map(|(start, units)| Wave { start, units }).collect()
    }

    /// Units that never adopt inside the data.
    pub fn never(&self) -> Vec<usize> {
        (0..self.n_units()).filter(|&u| self.start[u].is_none()).collect()
    }

    /// The rollout restricted to some units (in the given order).
    pub fn subset(&self, units: &[usize]) -> Rollout {
        Rollout {
            outcome: self.outcome.clone(),
            units: units.iter().map(|&u| self.units[u].clone()).collect(),
            times: self.times.clone(),
            y: units.iter().map(|&u| self.y[u].clone()).collect(),
            start: units.iter().map(|&u| self.start[u]).collect(),
            covariates: self
                .covariates
                .iter()
                .map(|(n, v)| (n.clone(), units.iter().map(|&u| v[u]).collect()))
                .collect(),
            left_out: Vec::new(),
        }
    }

    /// The same units over the first `periods` periods, with other starts: a placebo set-up.
    /// Starts at or after the cut become `None`.
    pub fn with_starts(&self, start: Vec<Option<usize>>, periods: usize) -> Rollout {
        Rollout {
            outcome: self.outcome.clone(),
            units: self.units.clone(),
            times: self.times[..periods].to_vec(),
            y: self.y.iter().map(|r| r[..periods].to_vec()).collect(),
            start: start.into_iter().map(|s| s.filter(|&s| s < periods)).collect(),
            covariates: self.covariates.clone(),
            left_out: Vec::new(),
        }
    }
}

/// Index of a start in the panel's periods: the first period at or after it.
fn start_index(panel: &Panel, unit: &str, t: TimePoint) -> DidResult<usize> {
    let points = panel.axis.points();
    let outside = || DidError::StartOutside {
        unit: unit.to_string(),
        start: t.to_string(),
        first: points.first().map(|p| p.to_string()).unwrap_or_default(),
        last: points.last().map(|p| p.to_string()).unwrap_or_default(),
    };
    match (points.first(), points.last()) {
        (Some(first), Some(last)) if t >= *first && t <= *last => Ok(panel.axis.first_at_or_after(t)),
        _ => Err(outside()),
    }
}

/// First adopted period of each panel unit from a starts table (`unit` column, `start` column;
/// an empty start, or a unit not in the table, means never adopted), and a note for each start
/// that falls between two periods (taken as the first period after it).
///
/// # Errors
/// Located errors for a missing column, an unreadable date, a unit that is not in the panel, a
/// unit listed twice, a start outside the panel.
pub fn starts_from_table(
    panel: &Panel,
    table: &RawTable,
    unit_col: &str,
    start_col: &str,
    date_format: &DateFormat,
) -> DidResult<(Vec<Option<usize>>, Vec<String>)> {
    let uc = table.column(unit_col)?;
    let mut notes = Vec::new();
    let sc = table.column(start_col)?;
    let index: HashMap<&str, usize> = panel.units.iter().enumerate().map(|(i, u)| (u.as_str(), i)).collect();
    let mut start: Vec<Option<usize>> = vec![None; panel.units.len()];
    let mut seen: HashMap<usize, u64> = HashMap::new();
    for r in 0..table.row_count() {
        let name = table.text(r, uc);
        let u = *index.get(name.as_ref()).ok_or_else(|| aftercast_core::DataError::Invalid {
            at: table.at(r, uc),
            message: format!("unit '{name}' is not in the panel {}", panel.input.path),
        })?;
        if let Some(first) = seen.insert(u, table.line(r)) {
            return Err(aftercast_core::DataError::Duplicate {
                at: table.at(r, uc),
                what: "unit",
                key: name.to_string(),
                first_line: first,
            }
            .into());
        }
        let text = table.text(r, sc);
        if text.trim().is_empty() {
            continue;
        }
        let t = parse_time(text.trim(), date_format, || table.at(r, sc))?;
        let same_kind = matches!(
            (t, panel.axis.points().first()),
            (TimePoint::Date(_), Some(TimePoint::Date(_))) | (TimePoint::Period(_), Some(TimePoint::Period(_)))
        );
        if !same_kind {
            return Err(aftercast_core::DataError::Invalid {
                at: table.at(r, sc),
                message: format!(
                    "'{text}' is not of the same kind (date or integer period) as the panel's time column"
                ),
            }
            .into());
        }
        let i = start_index(panel, &name, t).map_err(|e| match e {
            DidError::StartOutside { .. } => DidError::Data(Box::new(aftercast_core::DataError::Invalid {
                at: table.at(r, sc),
                message: e.to_string(),
            })),
            other => other,
        })?;
        let at = panel.axis.points()[i];
        if at != t {
            notes.push(format!(
                "{}: the start {t} of unit '{name}' is not a period of the data; it is taken as the first period after it, {at}",
                table.at(r, sc)
            ));
        }
        start[u] = Some(i);
    }
    Ok((start, notes))
}

/// First adopted period of each panel unit from a 0/1 adoption column of the panel (0 before
/// adoption, 1 from the first adopted period on).
///
/// # Errors
/// [`DidError::AdoptsTwice`] for a unit whose column goes back to 0; [`DidError::BadOption`]
/// for a value other than 0 or 1, or a column not in the panel.
pub fn starts_from_column(panel: &Panel, column: &str) -> DidResult<Vec<Option<usize>>> {
    let m = panel.covariates.iter().find(|(n, _)| n == column).ok_or_else(|| DidError::BadOption {
        what: "--adopted".into(),
        detail: format!("'{column}' is not a column of the panel"),
    })?;
    let points = panel.axis.points();
    let mut out = Vec::with_capacity(panel.units.len());
    for (u, row) in m.1.iter().enumerate() {
        let mut first: Option<usize> = None;
        for (t, &v) in row.iter().enumerate() {
            if v != 0.0 && v != 1.0 {
                return Err(DidError::BadOption {
                    what: format!("{}: --adopted {column}", panel.input.path),
                    detail: format!("unit '{}' at {} has {v}; the column must be 0 or 1", panel.units[u], points[t]),
                });
            }
            match (first, v == 1.0) {
                (None, true) => first = Some(t),
                (Some(f), false) => {
                    return Err(DidError::AdoptsTwice {
                        unit: panel.units[u].clone(),
                        adopted: points[f].to_string(),
                        back: points[t].to_string(),
                    });
                }
                _ => {}
            }
        }
        out.push(first);
    }
    Ok(out)
}
