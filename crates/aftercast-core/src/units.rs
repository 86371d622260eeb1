//! A unit table: one row per unit (customer, store), a treatment or arm, outcomes, covariates.

use crate::error::{DataError, DataResult};
use crate::policy::MissingPolicy;
use crate::table::{InputInfo, Projection, RawTable};
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
    /// Unit ids from the id column; empty when no id column is given (then a unit is named by
    /// its line, see [`UnitTable::id`]).
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

impl UnitSpec {
    /// The columns this table needs, as the reader should keep them.
    pub fn projection(&self) -> Projection {
        let mut p = Projection::none().text(&self.treatment).numbers(&self.outcomes).numbers(&self.numeric);
        for c in &self.categorical {
            p = p.text(c);
        }
        if let Some(id) = &self.id {
            p = p.text(id);
        }
        p
    }
}

impl UnitTable {
    /// Read a unit table from a file, keeping only the columns it needs; the numeric columns
    /// become the table's columns without a copy.
    ///
    /// # Errors
    /// As [`RawTable::read_columns`] and [`UnitTable::from_table`].
    pub fn read(path: impl AsRef<std::path::Path>, spec: &UnitSpec) -> DataResult<Self> {
        let mut table = RawTable::read_columns(path, &spec.projection())?;
        let (mut units, kept) = Self::check(&table, spec)?;
        // each file column is moved out once; a column named twice (as an outcome and as a
        // covariate) is copied from the first
        let mut columns: Vec<(usize, Vec<f64>)> = Vec::new();
        for name in spec.outcomes.iter().chain(&spec.numeric) {
            let c = table.column(name)?;
            let v = match columns.iter().find(|(k, _)| *k == c) {
                Some((_, v)) => v.clone(),
                None => match table.take_numbers(c) {
                    Some(v) => keep_rows(v, kept.as_deref()),
                    None => numbers(&table, c, kept.as_deref())?,
                },
            };
            columns.push((c, v));
        }
        let mut values = columns.into_iter().map(|(_, v)| v);
        units.outcomes = spec.outcomes.iter().map(|n| (n.clone(), values.next().unwrap_or_default())).collect();
        units.numeric = spec.numeric.iter().map(|n| (n.clone(), values.next().unwrap_or_default())).collect();
        Ok(units)
    }

    /// Read a unit table.
    ///
    /// # Errors
    /// Missing column, bad number, NaN/inf, missing value (policy `Error`), bad treatment value,
    /// duplicate unit id, constant treatment column.
    pub fn from_table(table: &RawTable, spec: &UnitSpec) -> DataResult<Self> {
        let (mut units, kept) = Self::check(table, spec)?;
        let column = |name: &String| -> DataResult<(String, Vec<f64>)> {
            Ok((name.clone(), numbers(table, table.column(name)?, kept.as_deref())?))
        };
        units.outcomes = spec.outcomes.iter().map(column).collect::<DataResult<_>>()?;
        units.numeric = spec.numeric.iter().map(column).collect::<DataResult<_>>()?;
        Ok(units)
    }

    /// Check every row in file order (so the first problem is the one reported) and build all
    /// but the numeric columns; returns also which rows are kept when some were dropped.
    fn check(table: &RawTable, spec: &UnitSpec) -> DataResult<(Self, Option<Vec<bool>>)> {
        let idcol = spec.id.as_deref().map(|c| table.column(c)).transpose()?;
        let trcol = table.column(&spec.treatment)?;
        let ocols: Vec<usize> = spec.outcomes.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let ncols: Vec<usize> = spec.numeric.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        // a numeric column whose every cell is a finite number has nothing to check row by row
        let checked: Vec<usize> = ocols.iter().chain(&ncols).copied().filter(|&c| !table.all_numbers(c)).collect();
        let ccols: Vec<usize> = spec.categorical.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let n = table.row_count();
        let mut ids = Vec::with_capacity(if idcol.is_some() { n } else { 0 });
        let mut lines = Vec::with_capacity(n);
        let mut treated = Vec::with_capacity(n);
        let mut cats: Vec<Categorical> = spec
            .categorical
            .iter()
            .map(|c| Categorical { name: c.clone(), levels: Vec::new(), codes: Vec::with_capacity(n) })
            .collect();
        let mut cat_index: Vec<HashMap<String, usize>> = vec![HashMap::new(); ccols.len()];
        let mut seen_ids: HashMap<String, u64> = HashMap::new();
        let mut dropped = 0usize;
        let mut kept: Option<Vec<bool>> = None;
        let mut drop_row = |r: usize, dropped: &mut usize| {
            *dropped += 1;
            kept.get_or_insert_with(|| vec![true; n])[r] = false;
        };
        // a treatment label is read once per distinct text
        let labels: Option<(&[u32], Vec<Option<bool>>)> = table
            .text_codes(trcol)
            .map(|(codes, dict)| (codes, dict.levels().iter().map(|l| parse_treatment(l)).collect()));
        'rows: for r in 0..n {
            let known = labels.as_ref().and_then(|(codes, parsed)| parsed[codes[r] as usize]);
            let tr = match known {
                Some(t) => t,
                None => {
                    let tr_text = table.text(r, trcol);
                    if tr_text.is_empty() {
                        if spec.missing == MissingPolicy::DropRow {
                            drop_row(r, &mut dropped);
                            continue;
                        }
                        return Err(DataError::MissingValue { at: table.at(r, trcol) });
                    }
                    parse_treatment(&tr_text)
                        .ok_or_else(|| DataError::BadTreatment { at: table.at(r, trcol), text: tr_text.to_string() })?
                }
            };
            for &c in &checked {
                match table.parse_number(r, c)? {
                    Some(_) => {}
                    None if spec.missing == MissingPolicy::DropRow => {
                        drop_row(r, &mut dropped);
                        continue 'rows;
                    }
                    None => return Err(DataError::MissingValue { at: table.at(r, c) }),
                }
            }
            for &c in &ccols {
                if table.text(r, c).is_empty() {
                    if spec.missing == MissingPolicy::DropRow {
                        drop_row(r, &mut dropped);
                        continue 'rows;
                    }
                    return Err(DataError::MissingValue { at: table.at(r, c) });
                }
            }
            let line = table.line(r);
            let id = match idcol {
                Some(c) => {
                    let id = table.text(r, c).into_owned();
                    if id.is_empty() {
                        return Err(DataError::MissingValue { at: table.at(r, c) });
                    }
                    if let Some(first) = seen_ids.insert(id.clone(), line) {
                        return Err(DataError::Duplicate {
                            at: table.at(r, c),
                            what: "unit id",
                            key: id,
                            first_line: first,
                        });
                    }
                    id
                }
                None => String::new(),
            };
            if idcol.is_some() {
                ids.push(id);
            }
            lines.push(line);
            treated.push(tr);
            for (k, &c) in ccols.iter().enumerate() {
                let v = table.text(r, c);
                let next = cats[k].levels.len();
                let code = match cat_index[k].get(v.as_ref()) {
                    Some(&code) => code,
                    None => {
                        cat_index[k].insert(v.to_string(), next);
                        cats[k].levels.push(v.into_owned());
                        next
                    }
                };
                cats[k].codes.push(code);
            }
        }
        if treated.is_empty() {
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
        let units = UnitTable {
            ids,
            lines,
            treated,
            outcomes: Vec::new(),
            numeric: Vec::new(),
            categorical: cats,
            input: table.info(),
            dropped_rows: dropped,
        };
        Ok((units, kept))
    }

    /// Number of units.
    pub fn len(&self) -> usize {
        self.treated.len()
    }

    /// Whether the table has no units.
    pub fn is_empty(&self) -> bool {
        self.treated.is_empty()
    }

    /// The name of unit `i`: its id, or "line N" when the table has no id column.
    pub fn id(&self, i: usize) -> std::borrow::Cow<'_, str> {
        match self.ids.get(i) {
            Some(id) => std::borrow::Cow::Borrowed(id),
            None => std::borrow::Cow::Owned(format!("line {}", self.lines[i])),
        }
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

    /// The units at `rows` (repeats allowed, as in a resample), in that order.
    pub fn take(&self, rows: &[usize]) -> UnitTable {
        let pick = |v: &[f64]| rows.iter().map(|&r| v[r]).collect::<Vec<f64>>();
        UnitTable {
            ids: if self.ids.is_empty() { Vec::new() } else { rows.iter().map(|&r| self.ids[r].clone()).collect() },
            lines: rows.iter().map(|&r| self.lines[r]).collect(),
            treated: rows.iter().map(|&r| self.treated[r]).collect(),
            outcomes: self.outcomes.iter().map(|(n, v)| (n.clone(), pick(v))).collect(),
            numeric: self.numeric.iter().map(|(n, v)| (n.clone(), pick(v))).collect(),
            categorical: self
                .categorical
                .iter()
                .map(|c| Categorical {
                    name: c.name.clone(),
                    levels: c.levels.clone(),
                    codes: rows.iter().map(|&r| c.codes[r]).collect(),
                })
                .collect(),
            input: self.input.clone(),
            dropped_rows: 0,
        }
    }
}

/// A checked numeric column's values over the kept rows.
fn numbers(table: &RawTable, col: usize, kept: Option<&[bool]>) -> DataResult<Vec<f64>> {
    let mut out = Vec::with_capacity(table.row_count());
    for r in 0..table.row_count() {
        if kept.is_none_or(|k| k[r]) {
            out.push(table.parse_number(r, col)?.unwrap_or(f64::NAN));
        }
    }
    Ok(out)
}

fn keep_rows(mut values: Vec<f64>, kept: Option<&[bool]>) -> Vec<f64> {
    if let Some(k) = kept {
        let mut i = 0;
        values.retain(|_| {
            let keep = k[i];
            i += 1;
            keep
        });
    }
    values
}
