//! Time points and regular time axes: daily, weekly, monthly or quarterly dates, or plain
//! integer periods such as years.

use crate::error::{DataError, DataResult, Location};
use chrono::{Datelike, NaiveDate};
use serde::{Deserialize, Serialize};
use std::fmt;

/// One point on a time axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(untagged)]
pub enum TimePoint {
    /// A calendar date.
    Date(NaiveDate),
    /// An integer period (a year, a week number, a sequence number).
    Period(i64),
}

impl fmt::Display for TimePoint {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            TimePoint::Date(d) => write!(f, "{}", d.format("%Y-%m-%d")),
            TimePoint::Period(p) => write!(f, "{p}"),
        }
    }
}

/// The spacing of a regular axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Frequency {
    /// One day apart.
    Daily,
    /// Seven days apart.
    Weekly,
    /// One calendar month apart, same day of month.
    Monthly,
    /// Three calendar months apart.
    Quarterly,
    /// Integer periods one apart.
    Period,
}

impl Frequency {
    /// The natural seasonal periods for this frequency (used when no season is given):
    /// daily data: 7 and 365.25; weekly: 52.18; monthly: 12; quarterly: 4; integer: none.
    pub fn default_seasons(self) -> Vec<f64> {
        match self {
            Frequency::Daily => vec![7.0, 365.25],
            Frequency::Weekly => vec![365.25 / 7.0],
            Frequency::Monthly => vec![12.0],
            Frequency::Quarterly => vec![4.0],
            Frequency::Period => vec![],
        }
    }

    /// Periods per year (None for integer periods).
    pub fn per_year(self) -> Option<f64> {
        match self {
            Frequency::Daily => Some(365.25),
            Frequency::Weekly => Some(365.25 / 7.0),
            Frequency::Monthly => Some(12.0),
            Frequency::Quarterly => Some(4.0),
            Frequency::Period => None,
        }
    }
}

/// How date text is read.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub enum DateFormat {
    /// ISO 8601 calendar date `YYYY-MM-DD` (default); integers are read as periods.
    #[default]
    Iso,
    /// A chrono `strftime` pattern such as `%d/%m/%Y`.
    Pattern(String),
}

impl DateFormat {
    fn describe(&self) -> String {
        match self {
            DateFormat::Iso => "ISO 8601 (YYYY-MM-DD)".into(),
            DateFormat::Pattern(p) => format!("the given format '{p}'"),
        }
    }
}

/// Parse a time cell. Integers (optionally signed) are periods unless a pattern is given;
/// otherwise an ISO date. A midnight after it is allowed: `T00:00:00`, `T00:00:00Z`, a space
/// instead of the `T`, or a UTC offset (`T00:00:00+01:00`: midnight where the time was written is
/// that date, as a zoned timestamp of a Parquet file or data frame is read).
///
/// # Errors
/// [`DataError::BadDate`] at `at`.
pub fn parse_time(text: &str, format: &DateFormat, at: impl FnOnce() -> Location) -> DataResult<TimePoint> {
    let t = text.trim();
    if t.is_empty() {
        return Err(DataError::MissingDate { at: at() });
    }
    let bad = |at: Location| DataError::BadDate { at, text: text.to_string(), expected: format.describe() };
    match format {
        DateFormat::Iso => {
            if !t.is_empty() && t.trim_start_matches('-').chars().all(|c| c.is_ascii_digit()) && t.len() <= 9 {
                return t.parse::<i64>().map(TimePoint::Period).map_err(|_| bad(at()));
            }
            let date_part = strip_midnight(t);
            if date_part.len() != 10 {
                return Err(bad(at()));
            }
            NaiveDate::parse_from_str(date_part, "%Y-%m-%d").map(TimePoint::Date).map_err(|_| bad(at()))
        }
        DateFormat::Pattern(p) => NaiveDate::parse_from_str(t, p).map(TimePoint::Date).map_err(|_| bad(at())),
    }
}

/// `t` without a trailing midnight (`T00:00:00`, with `Z` or a `+HH:MM` / `-HH:MM` offset, or
/// ` 00:00:00`) after its first ten characters.
fn strip_midnight(t: &str) -> &str {
    let Some((date, rest)) = t.split_at_checked(10) else { return t };
    let zone = rest.strip_prefix("T00:00:00").or_else(|| rest.strip_prefix(" 00:00:00"));
    let Some(zone) = zone else { return t };
    let b = zone.as_bytes();
    let offset = b.len() == 6
        && matches!(b[0], b'+' | b'-')
        && b[1].is_ascii_digit()
        && b[2].is_ascii_digit()
        && b[3] == b':'
        && b[4].is_ascii_digit()
        && b[5].is_ascii_digit();
    if zone.is_empty() || zone == "Z" || offset { date } else { t }
}

fn month_index(d: NaiveDate) -> i64 {
    i64::from(d.year()) * 12 + i64::from(d.month0())
}

/// Number of steps of `freq` from `a` to `b`, if `b` lies on `a`'s grid.
pub fn steps_between(freq: Frequency, a: TimePoint, b: TimePoint) -> Option<i64> {
    match (freq, a, b) {
        (Frequency::Period, TimePoint::Period(x), TimePoint::Period(y)) => Some(y - x),
        (Frequency::Daily, TimePoint::Date(x), TimePoint::Date(y)) => Some((y - x).num_days()),
        (Frequency::Weekly, TimePoint::Date(x), TimePoint::Date(y)) => {
            let d = (y - x).num_days();
            (d % 7 == 0).then_some(d / 7)
        }
        (Frequency::Monthly, TimePoint::Date(x), TimePoint::Date(y)) => {
            (x.day() == y.day()).then(|| month_index(y) - month_index(x))
        }
        (Frequency::Quarterly, TimePoint::Date(x), TimePoint::Date(y)) => {
            let m = month_index(y) - month_index(x);
            (x.day() == y.day() && m % 3 == 0).then_some(m / 3)
        }
        _ => None,
    }
}

/// The point `n` steps after `a`.
pub fn step_forward(freq: Frequency, a: TimePoint, n: i64) -> Option<TimePoint> {
    match (freq, a) {
        (Frequency::Period, TimePoint::Period(x)) => Some(TimePoint::Period(x + n)),
        (Frequency::Daily, TimePoint::Date(x)) => x.checked_add_signed(chrono::Duration::days(n)).map(TimePoint::Date),
        (Frequency::Weekly, TimePoint::Date(x)) => {
            x.checked_add_signed(chrono::Duration::days(7 * n)).map(TimePoint::Date)
        }
        (Frequency::Monthly | Frequency::Quarterly, TimePoint::Date(x)) => {
            let months = if freq == Frequency::Monthly { n } else { 3 * n };
            let total = month_index(x) + months;
            let year = i32::try_from(total.div_euclid(12)).ok()?;
            let month = u32::try_from(total.rem_euclid(12)).ok()? + 1;
            NaiveDate::from_ymd_opt(year, month, x.day()).map(TimePoint::Date)
        }
        _ => None,
    }
}

/// Guess the frequency from the median step between consecutive, strictly increasing points:
/// 1 day daily, 7 days weekly, a calendar month (same day of month) monthly, three months
/// quarterly. Gaps and off-grid points are then found by the caller against that grid.
pub fn detect_frequency(points: &[TimePoint]) -> Option<Frequency> {
    let first = *points.first()?;
    match first {
        TimePoint::Period(_) => Some(Frequency::Period),
        TimePoint::Date(_) => {
            if points.len() < 2 {
                return Some(Frequency::Daily);
            }
            let mut diffs: Vec<i64> = points
                .windows(2)
                .filter_map(|w| match (w[0], w[1]) {
                    (TimePoint::Date(a), TimePoint::Date(b)) => Some((b - a).num_days()),
                    _ => None,
                })
                .collect();
            if diffs.iter().any(|d| *d <= 0) {
                return None;
            }
            diffs.sort_unstable();
            let median = diffs[diffs.len() / 2];
            let same_day = points
                .iter()
                .all(|p| matches!((p, first), (TimePoint::Date(a), TimePoint::Date(b)) if a.day() == b.day()));
            match median {
                1 => Some(Frequency::Daily),
                7 => Some(Frequency::Weekly),
                28..=31 if same_day => Some(Frequency::Monthly),
                89..=92 if same_day => Some(Frequency::Quarterly),
                _ => None,
            }
        }
    }
}

/// A regular, strictly increasing time axis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TimeAxis {
    frequency: Frequency,
    points: Vec<TimePoint>,
}

impl TimeAxis {
    /// Build a regular axis of `len` points from `start`.
    ///
    /// # Errors
    /// [`DataError::BadArgument`] if the points run out of the calendar or the kinds differ.
    pub fn regular(frequency: Frequency, start: TimePoint, len: usize) -> DataResult<Self> {
        let mut points = Vec::with_capacity(len);
        for i in 0..len {
            let p = step_forward(frequency, start, i as i64).ok_or_else(|| DataError::BadArgument {
                what: "time axis".into(),
                text: start.to_string(),
                detail: format!("cannot step {i} {frequency:?} periods from it"),
            })?;
            points.push(p);
        }
        Ok(Self { frequency, points })
    }

    /// Wrap points already known to be regular (checked in debug builds only).
    pub fn from_regular_points(frequency: Frequency, points: Vec<TimePoint>) -> Self {
        debug_assert!(points.windows(2).all(|w| steps_between(frequency, w[0], w[1]) == Some(1)));
        Self { frequency, points }
    }

    /// The spacing.
    pub fn frequency(&self) -> Frequency {
        self.frequency
    }

    /// The points.
    pub fn points(&self) -> &[TimePoint] {
        &self.points
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// Whether the axis has no points.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// Parse a user-given time (`--start`, `--end`) in the axis's own kind.
    ///
    /// # Errors
    /// [`DataError::BadArgument`] when the text is not a date (or period) of the axis's kind.
    pub fn parse_user_time(&self, what: &str, text: &str) -> DataResult<TimePoint> {
        let p = parse_time(text, &DateFormat::Iso, || Location::file("<command line>")).map_err(|_| {
            DataError::BadArgument {
                what: what.to_string(),
                text: text.to_string(),
                detail: "expected an ISO 8601 date (YYYY-MM-DD) or an integer period".into(),
            }
        })?;
        let same_kind = matches!(
            (p, self.points.first()),
            (TimePoint::Date(_), Some(TimePoint::Date(_))) | (TimePoint::Period(_), Some(TimePoint::Period(_)))
        );
        if !same_kind {
            return Err(DataError::BadArgument {
                what: what.to_string(),
                text: text.to_string(),
                detail: format!(
                    "the data's time column holds {}",
                    if matches!(self.points.first(), Some(TimePoint::Date(_))) { "dates" } else { "integer periods" }
                ),
            });
        }
        Ok(p)
    }

    /// Index of the first point at or after `t` (len if none).
    pub fn first_at_or_after(&self, t: TimePoint) -> usize {
        self.points.partition_point(|p| *p < t)
    }

    /// Index of the last point at or before `t`, plus one (0 if none).
    pub fn end_at_or_before(&self, t: TimePoint) -> usize {
        self.points.partition_point(|p| *p <= t)
    }
}
