//! Reading an experiment and a non-experimental pool, and joining the experiment's treated
//! arm with the pool into the observational sample the estimators see.

use crate::error::{CalibrateError, CalibrateResult};
use aftercast_core::policy::MissingPolicy;
use aftercast_core::table::{InputInfo, RawTable};
use aftercast_core::units::{UnitSpec, UnitTable};
use serde::{Deserialize, Serialize};

/// Columns of a unit-level comparison.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct UnitCompareSpec {
    /// Randomized arm column of the experiment (treated / control, 1 / 0, ...).
    pub arm: String,
    /// Outcome column (in the experiment and in every pool).
    pub outcome: String,
    /// Numeric covariates (in the experiment and in every pool).
    pub covariates: Vec<String>,
    /// Empty cells: refuse the file, or drop the unit and count it.
    pub missing: MissingPolicy,
}

/// A non-experimental pool of untreated units.
#[derive(Debug, Clone)]
pub struct Pool {
    /// Label of the pool (the file stem unless given).
    pub name: String,
    /// The file it came from.
    pub input: InputInfo,
    /// Source line of each unit.
    pub lines: Vec<u64>,
    /// Outcome per unit.
    pub outcome: Vec<f64>,
    /// Covariates by name.
    pub numeric: Vec<(String, Vec<f64>)>,
    /// Rows dropped under the missing-value policy.
    pub dropped_rows: usize,
}

impl UnitCompareSpec {
    /// The columns of the experiment's file: arm as text, outcome and covariates as numbers.
    pub fn experiment_projection(&self) -> aftercast_core::Projection {
        aftercast_core::Projection::none().text(&self.arm).number(&self.outcome).numbers(&self.covariates)
    }

    /// The columns of a pool's file: outcome and covariates.
    pub fn pool_projection(&self) -> aftercast_core::Projection {
        aftercast_core::Projection::none().number(&self.outcome).numbers(&self.covariates)
    }
}

/// Read the experiment: arm, outcome and covariates.
///
/// # Errors
/// The core reader's [`aftercast_core::DataError`]s (missing column, bad number, constant arm).
pub fn read_experiment(table: &RawTable, spec: &UnitCompareSpec) -> CalibrateResult<UnitTable> {
    let us = UnitSpec {
        treatment: spec.arm.clone(),
        outcomes: vec![spec.outcome.clone()],
        numeric: spec.covariates.clone(),
        missing: spec.missing,
        ..Default::default()
    };
    Ok(UnitTable::from_table(table, &us)?)
}

/// Read a pool: outcome and covariates of every row (all rows are taken as untreated; an arm
/// or treatment column in the pool is ignored).
///
/// # Errors
/// [`aftercast_core::DataError`] for a missing column, bad number or missing value (policy
/// `Error`); [`CalibrateError::EmptyGroup`] when no row is left.
pub fn read_pool(table: &RawTable, spec: &UnitCompareSpec, name: Option<&str>) -> CalibrateResult<Pool> {
    let mut cols = vec![table.number_column(&spec.outcome, spec.missing)?];
    for c in &spec.covariates {
        cols.push(table.number_column(c, spec.missing)?);
    }
    let mut lines = Vec::new();
    let mut vals: Vec<Vec<f64>> = vec![Vec::new(); cols.len()];
    let mut dropped = 0;
    for r in 0..table.row_count() {
        let cells: Option<Vec<f64>> = cols.iter().map(|c| c[r]).collect();
        match cells {
            Some(v) => {
                lines.push(table.line(r));
                for (k, x) in v.into_iter().enumerate() {
                    vals[k].push(x);
                }
            }
            None => dropped += 1,
        }
    }
    if lines.is_empty() {
        return Err(CalibrateError::EmptyGroup { what: "pool", path: table.path().to_path_buf() });
    }
    let outcome = vals.remove(0);
    let name = name
        .map(str::to_string)
        .unwrap_or_else(|| Some(table.short_name()).filter(|s| !s.is_empty()).unwrap_or_else(|| "pool".into()));
    Ok(Pool {
        name,
        input: table.info(),
        lines,
        outcome,
        numeric: spec.covariates.iter().cloned().zip(vals).collect(),
        dropped_rows: dropped,
    })
}

/// The observational sample: the experiment's treated arm (treated) followed by the pool
/// (untreated); the experiment's own control arm is left out, as if it had never existed.
///
/// # Errors
/// [`CalibrateError::MissingColumn`] when the experiment lacks the outcome or a covariate the
/// pool has been read with.
pub fn observational_sample(experiment: &UnitTable, pool: &Pool, outcome: &str) -> CalibrateResult<UnitTable> {
    let exp_path: std::path::PathBuf = experiment.input.path.clone().into();
    let y = experiment.outcome(outcome).or_else(|| experiment.numeric(outcome)).ok_or_else(|| {
        CalibrateError::MissingColumn { path: exp_path.clone(), name: outcome.into(), what: "outcome" }
    })?;
    let rows: Vec<usize> = (0..experiment.len()).filter(|&i| experiment.treated[i]).collect();
    let n = rows.len() + pool.outcome.len();
    let mut ids = Vec::with_capacity(n);
    let mut lines = Vec::with_capacity(n);
    for &i in &rows {
        ids.push(format!("experiment {}", experiment.id(i)));
        lines.push(experiment.lines[i]);
    }
    for &l in &pool.lines {
        ids.push(format!("{} line {l}", pool.name));
        lines.push(l);
    }
    let mut treated = vec![true; rows.len()];
    treated.extend(std::iter::repeat_n(false, pool.outcome.len()));
    let mut yy: Vec<f64> = rows.iter().map(|&i| y[i]).collect();
    yy.extend_from_slice(&pool.outcome);
    let mut numeric = Vec::with_capacity(pool.numeric.len());
    for (name, pv) in &pool.numeric {
        let ev = experiment.numeric(name).ok_or_else(|| CalibrateError::MissingColumn {
            path: exp_path.clone(),
            name: name.clone(),
            what: "covariate",
        })?;
        let mut v: Vec<f64> = rows.iter().map(|&i| ev[i]).collect();
        v.extend_from_slice(pv);
        numeric.push((name.clone(), v));
    }
    Ok(UnitTable {
        ids,
        lines,
        treated,
        outcomes: vec![(outcome.to_string(), yy)],
        numeric,
        categorical: Vec::new(),
        input: InputInfo {
            path: format!("{} (treated arm) + {}", experiment.input.path, pool.input.path),
            sha256: String::new(),
            rows: n,
        },
        dropped_rows: pool.dropped_rows,
    })
}
