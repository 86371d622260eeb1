//! A balanced panel: units x periods of one outcome, with optional per-unit-period covariates.

use crate::error::{DataError, DataResult};
use crate::table::{InputInfo, Projection, RawTable};
use crate::time::{DateFormat, TimeAxis, TimePoint, detect_frequency, parse_time, steps_between};
use std::collections::{BTreeSet, HashMap};

/// How to read a panel in long format (`unit,period,outcome,...`).
#[derive(Debug, Clone, Default)]
pub struct LongPanelSpec {
    /// Unit column.
    pub unit: String,
    /// Time column.
    pub time: String,
    /// Outcome column.
    pub outcome: String,
    /// Covariate columns (numeric, one value per unit and period).
    pub covariates: Vec<String>,
    /// How dates are written.
    pub date_format: DateFormat,
}

/// A balanced panel. `outcome[u][t]` is unit `u` at period `t`.
#[derive(Debug, Clone)]
pub struct Panel {
    /// Outcome name.
    pub name: String,
    /// Unit names, in order of first appearance.
    pub units: Vec<String>,
    /// Regular time axis shared by all units.
    pub axis: TimeAxis,
    /// Outcome matrix, one row per unit.
    pub outcome: Vec<Vec<f64>>,
    /// Covariates by name, each a units x periods matrix.
    pub covariates: Vec<(String, Vec<Vec<f64>>)>,
    /// The file it came from.
    pub input: InputInfo,
}

impl LongPanelSpec {
    /// The columns this panel needs, as the reader should keep them.
    pub fn projection(&self) -> Projection {
        Projection::none().text(&self.unit).text(&self.time).number(&self.outcome).numbers(&self.covariates)
    }
}

impl Panel {
    /// The columns a wide panel needs: the time column as text, every other (or the named
    /// unit columns) as numbers.
    pub fn wide_projection(time: &str, units: Option<&[String]>) -> Projection {
        match units {
            Some(us) => Projection::none().text(time).numbers(us),
            None => Projection::all(crate::column::ColumnKind::Number).text(time),
        }
    }

    /// Read a long-format panel. Every unit must have every period exactly once.
    ///
    /// # Errors
    /// Missing column, bad number or date, NaN/inf, missing value, duplicate unit and period,
    /// unbalanced panel, irregular period spacing.
    pub fn from_long(table: &RawTable, spec: &LongPanelSpec) -> DataResult<Self> {
        let ucol = table.column(&spec.unit)?;
        let tcol = table.column(&spec.time)?;
        let ycol = table.column(&spec.outcome)?;
        let xcols: Vec<usize> = spec.covariates.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let mut unit_index: HashMap<String, usize> = HashMap::new();
        let mut units: Vec<String> = Vec::new();
        let mut times: BTreeSet<TimePoint> = BTreeSet::new();
        let mut cells: HashMap<(usize, TimePoint), (u64, f64, Vec<f64>)> = HashMap::new();
        // times are parsed once per distinct text (a panel repeats every period for every unit)
        let mut parsed: HashMap<String, TimePoint> = HashMap::new();
        for r in 0..table.row_count() {
            let u = table.text(r, ucol);
            if u.is_empty() {
                return Err(DataError::MissingValue { at: table.at(r, ucol) });
            }
            let ttext = table.text(r, tcol);
            let t = match parsed.get(ttext.as_ref()) {
                Some(t) => *t,
                None => {
                    let t = parse_time(&ttext, &spec.date_format, || table.at(r, tcol))?;
                    parsed.insert(ttext.to_string(), t);
                    t
                }
            };
            let y = table.parse_number(r, ycol)?.ok_or_else(|| DataError::MissingValue { at: table.at(r, ycol) })?;
            let mut xs = Vec::with_capacity(xcols.len());
            for &c in &xcols {
                xs.push(table.parse_number(r, c)?.ok_or_else(|| DataError::MissingValue { at: table.at(r, c) })?);
            }
            let next = units.len();
            let ui = *unit_index.entry(u.to_string()).or_insert(next);
            if ui == next {
                units.push(u.to_string());
            }
            if let Some(first) = times.first()
                && std::mem::discriminant(first) != std::mem::discriminant(&t)
            {
                return Err(DataError::Invalid {
                    at: table.at(r, tcol),
                    message: format!("'{}' mixes dates and integer periods", ttext),
                });
            }
            times.insert(t);
            if let Some((first_line, _, _)) = cells.get(&(ui, t)) {
                return Err(DataError::Duplicate {
                    at: table.at(r, tcol),
                    what: "unit and period",
                    key: format!("{u} / {}", ttext),
                    first_line: *first_line,
                });
            }
            cells.insert((ui, t), (table.line(r), y, xs));
        }
        let points: Vec<TimePoint> = times.into_iter().collect();
        let axis = regular_axis(table, &points)?;
        let nt = points.len();
        let mut outcome = vec![vec![0.0; nt]; units.len()];
        let mut covs = vec![vec![vec![0.0; nt]; units.len()]; xcols.len()];
        for (ui, u) in units.iter().enumerate() {
            for (ti, t) in points.iter().enumerate() {
                let (_, y, xs) = cells.get(&(ui, *t)).ok_or_else(|| DataError::UnbalancedPanel {
                    path: table.path().to_path_buf(),
                    unit: u.clone(),
                    period: t.to_string(),
                })?;
                outcome[ui][ti] = *y;
                for (k, x) in xs.iter().enumerate() {
                    covs[k][ui][ti] = *x;
                }
            }
        }
        Ok(Panel {
            name: spec.outcome.clone(),
            units,
            axis,
            outcome,
            covariates: spec.covariates.iter().cloned().zip(covs).collect(),
            input: table.info(),
        })
    }

    /// Read a wide-format panel: one time column and one column per unit (all other columns,
    /// or the ones named in `units`).
    ///
    /// # Errors
    /// As [`Panel::from_long`].
    pub fn from_wide(
        table: &RawTable,
        time: &str,
        units: Option<&[String]>,
        date_format: &DateFormat,
        name: &str,
    ) -> DataResult<Self> {
        let tcol = table.column(time)?;
        let ucols: Vec<usize> = match units {
            Some(us) => us.iter().map(|u| table.column(u)).collect::<DataResult<_>>()?,
            None => (0..table.header().len()).filter(|&c| c != tcol).collect(),
        };
        if ucols.is_empty() {
            return Err(DataError::TooFew {
                path: table.path().to_path_buf(),
                what: "unit columns in a wide panel".into(),
                found: 0,
                needed: 1,
            });
        }
        let mut points = Vec::with_capacity(table.row_count());
        let mut seen: HashMap<TimePoint, u64> = HashMap::new();
        let mut outcome = vec![Vec::with_capacity(table.row_count()); ucols.len()];
        for r in 0..table.row_count() {
            let t = parse_time(&table.text(r, tcol), date_format, || table.at(r, tcol))?;
            if let Some(first) = seen.insert(t, table.line(r)) {
                return Err(DataError::Duplicate {
                    at: table.at(r, tcol),
                    what: "time",
                    key: t.to_string(),
                    first_line: first,
                });
            }
            if let Some(prev) = points.last()
                && t < *prev
            {
                return Err(DataError::NonMonotone {
                    at: table.at(r, tcol),
                    text: t.to_string(),
                    previous: prev.to_string(),
                });
            }
            points.push(t);
            for (k, &c) in ucols.iter().enumerate() {
                let v = table.parse_number(r, c)?.ok_or_else(|| DataError::MissingValue { at: table.at(r, c) })?;
                outcome[k].push(v);
            }
        }
        let axis = regular_axis(table, &points)?;
        Ok(Panel {
            name: name.to_string(),
            units: ucols.iter().map(|&c| table.header()[c].clone()).collect(),
            axis,
            outcome,
            covariates: Vec::new(),
            input: table.info(),
        })
    }

    /// Position of a unit.
    ///
    /// # Errors
    /// [`DataError::UnitNotFound`].
    pub fn unit_index(&self, unit: &str, column: &str) -> DataResult<usize> {
        self.units.iter().position(|u| u == unit).ok_or_else(|| DataError::UnitNotFound {
            path: self.input.path.clone().into(),
            unit: unit.to_string(),
            column: column.to_string(),
        })
    }

    /// Number of periods.
    pub fn periods(&self) -> usize {
        self.axis.len()
    }
}

fn regular_axis(table: &RawTable, points: &[TimePoint]) -> DataResult<TimeAxis> {
    let freq = detect_frequency(points).ok_or_else(|| DataError::Invalid {
        at: crate::error::Location::file(table.path()),
        message: "time spacing is not daily, weekly, monthly, quarterly or integer".into(),
    })?;
    for w in points.windows(2) {
        if steps_between(freq, w[0], w[1]) != Some(1) {
            let wanted = w[1].to_string();
            let line = (0..table.row_count())
                .find(|&r| table.header().iter().enumerate().any(|(c, _)| table.kept(c) && table.text(r, c) == wanted))
                .map(|r| table.line(r));
            return Err(DataError::Irregular {
                at: crate::error::Location {
                    file: table.path().to_path_buf(),
                    line,
                    column: None,
                    column_name: None,
                    rows: table.in_memory(),
                },
                text: w[1].to_string(),
                previous: w[0].to_string(),
                detail: format!("periods missing from the panel's {freq:?} grid").to_lowercase(),
            });
        }
    }
    Ok(TimeAxis::from_regular_points(freq, points.to_vec()))
}
