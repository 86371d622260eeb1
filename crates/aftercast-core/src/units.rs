//! A unit table: one row per unit (customer, store), a treatment or arm, outcomes, covariates.

use crate::error::{DataError, DataResult};
use crate::policy::MissingPolicy;
use crate::table::{InputInfo, RawTable};
use std::collections::HashMap;

/// How to read a unit table.
#[derive(Debug, Clone, Default)]
pub struct UnitSpec {
    /// Optional unit id column (checked for duplicates when given).
    pub id: Option<String>,
    /// Treatment (or randomized arm) column: 1/0, true/false, yes/no, treated/control.
    pub treatment: String,
    /// Outcome columns.
    pub outcomes: Vec<String>,
    /// Numeric covariates.
    pub numeric: Vec<String>,
    /// Categorical covariates (any text; one-hot encoded by the estimators).
    pub categorical: Vec<String>,
    /// Empty cells: `Error` refuses the file, `DropRow` drops the unit and counts it.
    pub missing: MissingPolicy,
}

/// A categorical covariate: level names and each unit's level.
#[derive(Debug, Clone)]
pub struct Categorical {
    /// Column name.
    pub name: String,
    /// Levels in order of first appearance.
    pub levels: Vec<String>,
    /// Level index of each unit.
    pub codes: Vec<usize>,
}

/// A validated unit table.
#[derive(Debug, Clone)]
pub struct UnitTable {
    /// Unit ids (row numbers as text when no id column is given).
    pub ids: Vec<String>,
    /// Source line of each unit, for messages.
    pub lines: Vec<u64>,
    /// Treatment indicator.
    pub treated: Vec<bool>,
    /// Outcomes by name.
    pub outcomes: Vec<(String, Vec<f64>)>,
    /// Numeric covariates by name.
    pub numeric: Vec<(String, Vec<f64>)>,
    /// Categorical covariates.
    pub categorical: Vec<Categorical>,
    /// The file it came from.
    pub input: InputInfo,
    /// Rows dropped under the missing-value policy.
    pub dropped_rows: usize,
}

/// Read a treatment cell. Accepted: 1/0, true/false, yes/no, treated/control, treatment/control.
pub fn parse_treatment(text: &str) -> Option<bool> {
    match text.trim().to_ascii_lowercase().as_str() {
        "1" | "1.0" | "true" | "t" | "yes" | "y" | "treated" | "treatment" | "test" => Some(true),
        "0" | "0.0" | "false" | "f" | "no" | "n" | "control" | "untreated" | "holdout" => Some(false),
        _ => None,
    }
}

impl UnitTable {
    /// Read a unit table.
    ///
    /// # Errors
    /// Missing column, bad number, NaN/inf, missing value (policy `Error`), bad treatment value,
    /// duplicate unit id, constant treatment column.
    pub fn from_table(table: &RawTable, spec: &UnitSpec) -> DataResult<Self> {
        let idcol = spec.id.as_deref().map(|c| table.column(c)).transpose()?;
        let trcol = table.column(&spec.treatment)?;
        let ocols: Vec<usize> = spec.outcomes.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let ncols: Vec<usize> = spec.numeric.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let ccols: Vec<usize> = spec.categorical.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let n = table.rows().len();
        let mut ids = Vec::with_capacity(n);
        let mut lines = Vec::with_capacity(n);
        let mut treated = Vec::with_capacity(n);
        let mut outs = vec![Vec::with_capacity(n); ocols.len()];
        let mut nums = vec![Vec::with_capacity(n); ncols.len()];
        let mut cats: Vec<Categorical> = spec
            .categorical
            .iter()
            .map(|c| Categorical { name: c.clone(), levels: Vec::new(), codes: Vec::with_capacity(n) })
            .collect();
        let mut cat_index: Vec<HashMap<String, usize>> = vec![HashMap::new(); ccols.len()];
        let mut seen_ids: HashMap<String, u64> = HashMap::new();
        let mut dropped = 0usize;
        'rows: for row in table.rows() {
            let tr_text = &row.cells[trcol];
            if tr_text.is_empty() {
                if spec.missing == MissingPolicy::DropRow {
                    dropped += 1;
                    continue;
                }
                return Err(DataError::MissingValue { at: table.at(row, trcol) });
            }
            let tr = parse_treatment(tr_text)
                .ok_or_else(|| DataError::BadTreatment { at: table.at(row, trcol), text: tr_text.clone() })?;
            let mut ovals = Vec::with_capacity(ocols.len());
            let mut nvals = Vec::with_capacity(ncols.len());
            for (cols, vals) in [(&ocols, &mut ovals), (&ncols, &mut nvals)] {
                for &c in cols.iter() {
                    match table.parse_number(row, c)? {
                        Some(v) => vals.push(v),
                        None if spec.missing == MissingPolicy::DropRow => {
                            dropped += 1;
                            continue 'rows;
                        }
                        None => return Err(DataError::MissingValue { at: table.at(row, c) }),
                    }
                }
            }
            let mut cvals = Vec::with_capacity(ccols.len());
            for &c in &ccols {
                let v = &row.cells[c];
                if v.is_empty() {
                    if spec.missing == MissingPolicy::DropRow {
                        dropped += 1;
                        continue 'rows;
                    }
                    return Err(DataError::MissingValue { at: table.at(row, c) });
                }
                cvals.push(v.clone());
            }
            let id = match idcol {
                Some(c) => {
                    let id = row.cells[c].clone();
                    if id.is_empty() {
                        return Err(DataError::MissingValue { at: table.at(row, c) });
                    }
                    if let Some(first) = seen_ids.insert(id.clone(), row.line) {
                        return Err(DataError::Duplicate {
                            at: table.at(row, c),
                            what: "unit id",
                            key: id,
                            first_line: first,
                        });
                    }
                    id
                }
                None => format!("line {}", row.line),
            };
            ids.push(id);
            lines.push(row.line);
            treated.push(tr);
            for (k, v) in ovals.into_iter().enumerate() {
                outs[k].push(v);
            }
            for (k, v) in nvals.into_iter().enumerate() {
                nums[k].push(v);
            }
            for (k, v) in cvals.into_iter().enumerate() {
                let next = cats[k].levels.len();
                let code = *cat_index[k].entry(v.clone()).or_insert(next);
                if code == next {
                    cats[k].levels.push(v);
                }
                cats[k].codes.push(code);
            }
        }
        if ids.is_empty() {
            return Err(DataError::NoRows { path: table.path().to_path_buf() });
        }
        let n_treated = treated.iter().filter(|t| **t).count();
        if n_treated == 0 || n_treated == treated.len() {
            return Err(DataError::ConstantTreatment {
                path: table.path().to_path_buf(),
                column: spec.treatment.clone(),
                value: if n_treated == 0 { "untreated".into() } else { "treated".into() },
            });
        }
        Ok(UnitTable {
            ids,
            lines,
            treated,
            outcomes: spec.outcomes.iter().cloned().zip(outs).collect(),
            numeric: spec.numeric.iter().cloned().zip(nums).collect(),
            categorical: cats,
            input: table.info(),
            dropped_rows: dropped,
        })
    }

    /// Number of units.
    pub fn len(&self) -> usize {
        self.ids.len()
    }

    /// Whether the table has no units.
    pub fn is_empty(&self) -> bool {
        self.ids.is_empty()
    }

    /// Number of treated units.
    pub fn n_treated(&self) -> usize {
        self.treated.iter().filter(|t| **t).count()
    }

    /// An outcome column by name.
    pub fn outcome(&self, name: &str) -> Option<&[f64]> {
        self.outcomes.iter().find(|(n, _)| n == name).map(|(_, v)| v.as_slice())
    }

    /// A numeric covariate by name.
    pub fn numeric(&self, name: &str) -> Option<&[f64]> {
        self.numeric.iter().find(|(n, _)| n == name).map(|(_, v)| v.as_slice())
    }
}
