//! A calendar of known events or holidays (CSV with columns `date` and `name`), turned into one
//! 0/1 indicator regressor per event name.

use crate::error::{ForecastError, ForecastResult};
use aftercast_core::table::RawTable;
use aftercast_core::time::{DateFormat, TimeAxis, TimePoint, parse_time};
use std::collections::BTreeMap;

/// Indicator columns `(name, values)`.
pub type Indicators = Vec<(String, Vec<f64>)>;

/// Event dates by name.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct EventCalendar {
    /// `(name, dates)` in first-seen order of names.
    pub events: Vec<(String, Vec<TimePoint>)>,
    /// Path of the calendar file.
    pub path: String,
}

impl EventCalendar {
    /// The columns a calendar file needs.
    pub fn projection() -> aftercast_core::Projection {
        aftercast_core::Projection::none().text("date").text("name")
    }

    /// Read a calendar from a table with columns `date` and `name`.
    ///
    /// # Errors
    /// [`ForecastError::Data`] for a missing column or a cell that is not a date.
    pub fn from_table(table: &RawTable) -> ForecastResult<Self> {
        let dcol = table.column("date")?;
        let ncol = table.column("name")?;
        let mut order: Vec<String> = Vec::new();
        let mut map: BTreeMap<String, Vec<TimePoint>> = BTreeMap::new();
        for r in 0..table.row_count() {
            let t = parse_time(&table.text(r, dcol), &DateFormat::Iso, || table.at(r, dcol))?;
            let name = table.text(r, ncol).trim().to_string();
            if name.is_empty() {
                return Err(aftercast_core::error::DataError::MissingValue { at: table.at(r, ncol) }.into());
            }
            if !map.contains_key(&name) {
                order.push(name.clone());
            }
            map.entry(name).or_default().push(t);
        }
        let events = order
            .into_iter()
            .map(|n| {
                let v = map.remove(&n).unwrap_or_default();
                (n, v)
            })
            .collect();
        Ok(EventCalendar { events, path: table.info().path })
    }

    /// Read a calendar file (CSV or Parquet).
    ///
    /// # Errors
    /// As [`EventCalendar::from_table`], plus read errors.
    pub fn read(path: impl AsRef<std::path::Path>) -> ForecastResult<Self> {
        Self::from_table(&RawTable::read_columns(path, &Self::projection())?)
    }

    /// One indicator per event over `axis`: 1 on the event's dates, 0 elsewhere. Dates off the
    /// axis are ignored. The second value lists events with no date on the axis.
    ///
    /// # Errors
    /// [`ForecastError::BadEventDate`] when the calendar's dates are of a different kind
    /// (dates vs integer periods) than the axis.
    pub fn indicators(&self, axis: &TimeAxis) -> ForecastResult<(Indicators, Vec<String>)> {
        let pts = axis.points();
        let mut out = Vec::new();
        let mut unused = Vec::new();
        for (name, dates) in &self.events {
            let mut v = vec![0.0; pts.len()];
            let mut hit = false;
            for d in dates {
                let same_kind = matches!(
                    (d, pts.first()),
                    (TimePoint::Date(_), Some(TimePoint::Date(_))) | (TimePoint::Period(_), Some(TimePoint::Period(_)))
                );
                if !same_kind {
                    return Err(ForecastError::BadEventDate {
                        at: Box::new(aftercast_core::error::Location::file(&self.path)),
                        name: name.clone(),
                        text: d.to_string(),
                    });
                }
                if let Ok(i) = pts.binary_search(d) {
                    v[i] = 1.0;
                    hit = true;
                }
            }
            if hit {
                out.push((format!("event:{name}"), v));
            } else {
                unused.push(name.clone());
            }
        }
        Ok((out, unused))
    }
}
