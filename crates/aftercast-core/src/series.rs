//! A dated series: one outcome and any number of control series on a regular time axis.

use crate::error::{DataError, DataResult, Location};
use crate::policy::{GapPolicy, MissingPolicy};
use crate::table::{InputInfo, Projection, RawTable};
use crate::time::{DateFormat, Frequency, TimeAxis, TimePoint, detect_frequency, parse_time, steps_between};
use std::collections::HashMap;

/// How to read a series from a table.
#[derive(Debug, Clone, Default)]
pub struct SeriesSpec {
    /// Name of the time column.
    pub time: String,
    /// Name of the outcome column.
    pub outcome: String,
    /// Names of control-series columns (regressors the change did not touch).
    pub controls: Vec<String>,
    /// How dates are written.
    pub date_format: DateFormat,
    /// Empty outcome cells.
    pub missing: MissingPolicy,
    /// Skipped periods.
    pub gaps: GapPolicy,
}

/// A regular series with controls. Missing observations of the outcome are `NaN`
/// (only when the missing or gap policy allows them); controls are always complete.
#[derive(Debug, Clone)]
pub struct Series {
    /// Outcome column name.
    pub name: String,
    /// The time axis.
    pub axis: TimeAxis,
    /// Outcome values, `NaN` where missing.
    pub outcome: Vec<f64>,
    /// Control series by name, complete.
    pub controls: Vec<(String, Vec<f64>)>,
    /// The file it came from.
    pub input: InputInfo,
    /// Plain-language notes about what the reader did (rows dropped, gaps filled).
    pub notes: Vec<String>,
}

impl SeriesSpec {
    /// The columns this series needs, as the reader should keep them.
    pub fn projection(&self) -> Projection {
        Projection::none().text(&self.time).number(&self.outcome).numbers(&self.controls)
    }
}

impl Series {
    /// Read a series from a file, keeping only the columns it needs.
    ///
    /// # Errors
    /// As [`RawTable::read_columns`] and [`Series::from_table`].
    pub fn read(path: impl AsRef<std::path::Path>, spec: &SeriesSpec) -> DataResult<Self> {
        Self::from_table(&RawTable::read_columns(path, &spec.projection())?, spec)
    }

    /// Read a series from a table.
    ///
    /// # Errors
    /// Every [`DataError`] that names a location: missing column, bad number or date,
    /// NaN/inf, duplicate or out-of-order dates, irregular spacing, gaps (policy `Error`),
    /// missing values (policy `Error`), missing control values (always).
    pub fn from_table(table: &RawTable, spec: &SeriesSpec) -> DataResult<Self> {
        let path = table.path().to_path_buf();
        // a control is a series the change did not touch: the outcome itself (or the time)
        // as its own control would explain the effect away
        for (i, c) in spec.controls.iter().enumerate() {
            let role = if *c == spec.outcome {
                "the outcome"
            } else if *c == spec.time {
                "the time column"
            } else if spec.controls[..i].contains(c) {
                "named twice among the controls"
            } else {
                continue;
            };
            return Err(DataError::Invalid {
                at: Location { column_name: Some(c.clone()), ..Location::file(&path) },
                message: format!(
                    "--controls: '{}' is {role}; a control must be another series the change did not touch",
                    crate::error::shown(c)
                ),
            });
        }
        let tcol = table.column(&spec.time)?;
        let ycol = table.column(&spec.outcome)?;
        let ccols: Vec<usize> = spec.controls.iter().map(|c| table.column(c)).collect::<DataResult<_>>()?;
        let mut times: Vec<(TimePoint, usize)> = Vec::with_capacity(table.row_count());
        let mut values = Vec::with_capacity(table.row_count());
        let mut controls: Vec<Vec<f64>> = vec![Vec::new(); ccols.len()];
        let mut seen: HashMap<TimePoint, u64> = HashMap::new();
        let mut dropped = 0usize;
        for r in 0..table.row_count() {
            let text = table.text(r, tcol);
            let t = parse_time(&text, &spec.date_format, || table.at(r, tcol))?;
            if let Some(first) = seen.get(&t) {
                return Err(DataError::Duplicate {
                    at: table.at(r, tcol),
                    what: "time",
                    key: text.into_owned(),
                    first_line: *first,
                });
            }
            seen.insert(t, table.line(r));
            if let Some(&(prev, pr)) = times.last() {
                if std::mem::discriminant(&prev) != std::mem::discriminant(&t) {
                    return Err(DataError::Invalid {
                        at: table.at(r, tcol),
                        message: format!(
                            "'{}' mixes dates and integer periods (line {} has '{}')",
                            text,
                            table.line(pr),
                            table.text(pr, tcol)
                        ),
                    });
                }
                if t < prev {
                    return Err(DataError::NonMonotone {
                        at: table.at(r, tcol),
                        text: text.into_owned(),
                        previous: table.text(pr, tcol).into_owned(),
                    });
                }
            }
            let y = table.parse_number(r, ycol)?;
            let mut crow = Vec::with_capacity(ccols.len());
            for &c in &ccols {
                match table.parse_number(r, c)? {
                    Some(v) => crow.push(v),
                    None if spec.missing == MissingPolicy::DropRow => {
                        crow.clear();
                        break;
                    }
                    None => return Err(DataError::MissingValue { at: table.at(r, c) }),
                }
            }
            if crow.len() != ccols.len() {
                dropped += 1;
                continue;
            }
            let y = match (y, spec.missing) {
                (Some(v), _) => v,
                (None, MissingPolicy::Error) => return Err(DataError::MissingValue { at: table.at(r, ycol) }),
                (None, MissingPolicy::Keep) => f64::NAN,
                (None, MissingPolicy::DropRow) => {
                    dropped += 1;
                    continue;
                }
            };
            times.push((t, r));
            values.push(y);
            for (k, v) in crow.into_iter().enumerate() {
                controls[k].push(v);
            }
        }
        if times.is_empty() {
            return Err(DataError::NoRows { path });
        }
        let points: Vec<TimePoint> = times.iter().map(|(t, _)| *t).collect();
        let freq = detect_frequency(&points).ok_or_else(|| {
            let (t1, r1) = times[1];
            let (t0, _) = times[0];
            let r1 = &r1;
            DataError::Irregular {
                at: table.at(*r1, tcol),
                text: t1.to_string(),
                previous: t0.to_string(),
                detail: "spacing is not daily, weekly, monthly or quarterly".into(),
            }
        })?;
        let mut notes = Vec::new();
        if dropped > 0 {
            notes.push(format!(
                "{dropped} row(s) with empty values dropped (missing-value policy drop-row), so the model learns nothing from those periods: if that is many, fill the values in the data"
            ));
        }
        // Check regularity; fill gaps if allowed.
        let mut axis_points = vec![points[0]];
        let mut out_y = vec![values[0]];
        let mut out_c: Vec<Vec<f64>> = controls.iter().map(|c| vec![c[0]]).collect();
        let mut filled = 0usize;
        for i in 1..points.len() {
            let (t, row) = times[i];
            let prev = points[i - 1];
            let steps = steps_between(freq, prev, t).filter(|s| *s >= 1).ok_or_else(|| DataError::Irregular {
                at: table.at(row, tcol),
                text: t.to_string(),
                previous: prev.to_string(),
                detail: format!("not on the {freq:?} grid").to_lowercase(),
            })?;
            if steps > 1 {
                if spec.gaps == GapPolicy::Error {
                    return Err(DataError::Irregular {
                        at: table.at(row, tcol),
                        text: t.to_string(),
                        previous: prev.to_string(),
                        detail: format!(
                            "{} {} period(s) missing; use --gaps fill to insert them as missing",
                            steps - 1,
                            format!("{freq:?}").to_lowercase()
                        ),
                    });
                }
                if !ccols.is_empty() {
                    return Err(DataError::Irregular {
                        at: table.at(row, tcol),
                        text: t.to_string(),
                        previous: prev.to_string(),
                        detail: "periods are missing and control series cannot be filled".into(),
                    });
                }
                // a gap longer than the whole file is a mistyped time, not missing data (and
                // filling it could take gigabytes)
                if steps - 1 > points.len() as i64 {
                    return Err(DataError::Irregular {
                        at: table.at(row, tcol),
                        text: t.to_string(),
                        previous: prev.to_string(),
                        detail: format!(
                            "{} periods would be inserted, more than the file's {} rows: is this time mistyped?",
                            steps - 1,
                            points.len()
                        ),
                    });
                }
                for s in 1..steps {
                    let p = crate::time::step_forward(freq, prev, s).ok_or_else(|| DataError::Invalid {
                        at: table.at(row, tcol),
                        message: "date arithmetic out of range".into(),
                    })?;
                    axis_points.push(p);
                    out_y.push(f64::NAN);
                    filled += 1;
                }
            }
            axis_points.push(t);
            out_y.push(values[i]);
            for (k, c) in controls.iter().enumerate() {
                out_c[k].push(c[i]);
            }
        }
        if filled > 0 {
            notes.push(format!(
                "{filled} skipped period(s) inserted as missing (gap policy fill), so the model has no data for them: check that the data really has no values there"
            ));
        }
        let axis = TimeAxis::from_regular_points(freq, axis_points);
        Ok(Series {
            name: spec.outcome.clone(),
            axis,
            outcome: out_y,
            controls: spec.controls.iter().cloned().zip(out_c).collect(),
            input: table.info(),
            notes,
        })
    }

    /// Number of periods.
    pub fn len(&self) -> usize {
        self.outcome.len()
    }

    /// Whether the series has no periods.
    pub fn is_empty(&self) -> bool {
        self.outcome.is_empty()
    }

    /// Number of missing outcome values.
    pub fn missing_count(&self) -> usize {
        self.outcome.iter().filter(|v| v.is_nan()).count()
    }

    /// Frequency of the axis.
    pub fn frequency(&self) -> Frequency {
        self.axis.frequency()
    }

    /// Split at an intervention: returns (pre_end, post_start, post_end) as indices, where the
    /// pre-period is `0..pre_end`, the washout `pre_end..post_start` and the post-period
    /// `post_start..post_end`. `gap` is the number of washout periods before `start`.
    ///
    /// # Errors
    /// [`DataError::BadArgument`] for unparsable times, [`DataError::TooFewPrePeriods`],
    /// [`DataError::NoPostPeriod`].
    pub fn split(&self, start: &str, end: Option<&str>, washout: usize, min_pre: usize) -> DataResult<Split> {
        split_axis(&self.axis, &self.input.path, start, end, washout, min_pre)
    }
}

/// Indices of the pre-period, washout and post-period on an axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Split {
    /// Pre-period is `0..pre_end`.
    pub pre_end: usize,
    /// Post-period starts here (after any washout).
    pub post_start: usize,
    /// Post-period ends here (exclusive).
    pub post_end: usize,
}

impl Split {
    /// Number of post-periods.
    pub fn post_len(&self) -> usize {
        self.post_end - self.post_start
    }
}

/// Split any axis at a user-given start (and optional end) with a washout before the start.
///
/// # Errors
/// As [`Series::split`].
pub fn split_axis(
    axis: &TimeAxis,
    path: &str,
    start: &str,
    end: Option<&str>,
    washout: usize,
    min_pre: usize,
) -> DataResult<Split> {
    let s = axis.parse_user_time("--start", start)?;
    let post_start = axis.first_at_or_after(s);
    let post_end = match end {
        Some(e) => {
            let e = axis.parse_user_time("--end", e)?;
            if e < s {
                return Err(DataError::BadArgument {
                    what: "--end".into(),
                    text: e.to_string(),
                    detail: format!("comes before --start {start}"),
                });
            }
            axis.end_at_or_before(e)
        }
        None => axis.len(),
    };
    if post_start >= post_end {
        return Err(DataError::NoPostPeriod { path: path.into(), start: start.to_string() });
    }
    let pre_end = post_start.saturating_sub(washout);
    if pre_end < min_pre {
        return Err(DataError::TooFewPrePeriods {
            path: path.into(),
            start: start.to_string(),
            found: pre_end,
            needed: min_pre,
        });
    }
    Ok(Split { pre_end, post_start, post_end })
}
