//! Parameters: an unchecked builder ([`WindowParams`]) and the validated [`WindowSpec`].
//!
//! | parameter | default | meaning | allowed |
//! |---|---|---|---|
//! | `window` | none (at least one) | a window relative to each unit's anchor, or ending at the data end (`until`) | lengths > 0, delay >= 0, names `[A-Za-z_][A-Za-z0-9_]*`, unique |
//! | `metric` | none (at least one metric or ratio) | a metric name of the event log and its aggregations | names `[A-Za-z0-9_]+`; aggregations non-empty, no repeats |
//! | `ratio` | none | sum of one metric over sum of another, kept as `_num` and `_den` columns | names as metrics |
//! | `until` | required | data end, exclusive; windows ending after it are incomplete | an instant |
//! | `from` | none | data start, inclusive; windows starting before it are incomplete | before `until` |
//! | `offset` | UTC | fixed UTC offset of day boundaries and of timestamps written without a zone | +-18:00 |
//! | `anchoring` | exact | windows start at the exposure instant, or at the start of its local day | `exact`, `day-start` |
//! | `bad_rows` | error | stop with a located error at the first bad event row, or skip and count | `error`, `skip` |
//! | `allow_negative` | none | metrics whose values may be negative | metric names |
//! | `series` | none | per-group daily or weekly series over `[from, until)` | needs `from` |
//! | `population` | exposures | which units the table has: the exposures file, or also units first seen in the events | `exposures`, `exposures-and-events` |
//! | `event columns` | `unit`, `time`, `metric`, `value` | column names of the event log | |

use crate::error::{WindowsError, WindowsResult};
use crate::time::{self, DAY, Offset};
use serde::{Deserialize, Serialize};
use std::collections::BTreeSet;

/// The shape of a window. All intervals are half-open `[from, to)`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum WindowKind {
    /// `[0, length)` after the anchor.
    Forward {
        /// Length in microseconds.
        length: i64,
    },
    /// `[delay, delay + length)` after the anchor (skips a novelty period).
    Deferred {
        /// Delay in microseconds.
        delay: i64,
        /// Length in microseconds.
        length: i64,
    },
    /// `[-length, 0)` before the anchor.
    Pre {
        /// Length in microseconds.
        length: i64,
    },
    /// `[until - length, until)`: the same calendar interval for every unit, ending at the data end.
    Calendar {
        /// Length in microseconds.
        length: i64,
    },
}

impl WindowKind {
    /// Offsets `[from, to)` relative to the anchor, or `None` for calendar windows.
    pub fn relative(self) -> Option<(i64, i64)> {
        match self {
            WindowKind::Forward { length } => Some((0, length)),
            WindowKind::Deferred { delay, length } => Some((delay, delay + length)),
            WindowKind::Pre { length } => Some((-length, 0)),
            WindowKind::Calendar { .. } => None,
        }
    }

    /// The window's length.
    pub fn length(self) -> i64 {
        match self {
            WindowKind::Forward { length }
            | WindowKind::Deferred { length, .. }
            | WindowKind::Pre { length }
            | WindowKind::Calendar { length } => length,
        }
    }

    /// The default column prefix: `fwd_14d`, `def_7d_14d`, `pre_28d`, `cal_28d`.
    pub fn default_name(self) -> String {
        match self {
            WindowKind::Forward { length } => format!("fwd_{}", time::format_duration(length)),
            WindowKind::Deferred { delay, length } => {
                format!("def_{}_{}", time::format_duration(delay), time::format_duration(length))
            }
            WindowKind::Pre { length } => format!("pre_{}", time::format_duration(length)),
            WindowKind::Calendar { length } => format!("cal_{}", time::format_duration(length)),
        }
    }

    /// Parse `14d` (forward), `forward:14d`, `deferred:7d+14d`, `pre:28d`, `calendar:28d`.
    ///
    /// # Errors
    /// [`WindowsError::BadParameter`].
    pub fn parse(text: &str) -> WindowsResult<Self> {
        let bad = |detail: &str| WindowsError::bad_param("window", text, detail);
        let dur = |s: &str| time::parse_duration(s).ok_or_else(|| bad("durations are like 7d, 36h, 2w"));
        let (kind, rest) = match text.split_once(':') {
            Some((k, r)) => (k.trim(), r.trim()),
            None => ("forward", text.trim()),
        };
        Ok(match kind {
            "forward" | "fwd" => WindowKind::Forward { length: dur(rest)? },
            "pre" => WindowKind::Pre { length: dur(rest)? },
            "calendar" | "cal" => WindowKind::Calendar { length: dur(rest)? },
            "deferred" | "def" => {
                let (d, w) = rest
                    .split_once('+')
                    .ok_or_else(|| bad("a deferred window is deferred:DELAY+LENGTH, e.g. deferred:7d+14d"))?;
                WindowKind::Deferred { delay: dur(d)?, length: dur(w)? }
            }
            _ => return Err(bad("kinds are forward, deferred, pre, calendar")),
        })
    }
}

/// A named window.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct WindowDef {
    /// Column prefix of the window.
    pub name: String,
    /// Its shape.
    #[serde(flatten)]
    pub kind: WindowKind,
}

/// What is computed per unit, window and metric.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Aggregation {
    /// Sum of the values.
    Sum,
    /// Number of events.
    Count,
    /// Number of distinct local days with at least one event.
    ActiveDays,
    /// Sum divided by active days (empty when there are no active days).
    MeanPerActiveDay,
    /// 1 if at least one event, else 0 (its complement is "none").
    Any,
}

impl Aggregation {
    /// Column suffix.
    pub fn suffix(self) -> &'static str {
        match self {
            Aggregation::Sum => "sum",
            Aggregation::Count => "count",
            Aggregation::ActiveDays => "active_days",
            Aggregation::MeanPerActiveDay => "mean_per_active_day",
            Aggregation::Any => "any",
        }
    }

    /// Whether the aggregation needs the set of active days.
    pub fn needs_days(self) -> bool {
        matches!(self, Aggregation::ActiveDays | Aggregation::MeanPerActiveDay)
    }
}

impl std::str::FromStr for Aggregation {
    type Err = WindowsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Ok(match s.trim() {
            "sum" => Aggregation::Sum,
            "count" => Aggregation::Count,
            "active_days" | "days" => Aggregation::ActiveDays,
            "mean_per_active_day" | "mean_per_day" => Aggregation::MeanPerActiveDay,
            "any" => Aggregation::Any,
            other => {
                return Err(WindowsError::bad_param(
                    "aggregation",
                    other,
                    "aggregations are sum, count, active_days, mean_per_active_day, any",
                ));
            }
        })
    }
}

/// A metric and its aggregations.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct MetricSpec {
    /// The metric's name in the event log.
    pub name: String,
    /// What to compute for it in every window.
    pub aggregations: Vec<Aggregation>,
}

/// A ratio metric: sum of `numerator` over sum of `denominator`, kept as two columns.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct RatioSpec {
    /// Column stem.
    pub name: String,
    /// Metric summed in the numerator.
    pub numerator: String,
    /// Metric summed in the denominator.
    pub denominator: String,
}

/// What to do with an event row that cannot be used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BadRowPolicy {
    /// Stop at the first bad row, naming file, line and column (default).
    #[default]
    Error,
    /// Skip bad rows and report how many were skipped, by reason.
    Skip,
}

impl std::str::FromStr for BadRowPolicy {
    type Err = WindowsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "error" => Ok(Self::Error),
            "skip" => Ok(Self::Skip),
            other => Err(WindowsError::bad_param("bad-row policy", other, "error or skip")),
        }
    }
}

impl std::fmt::Display for BadRowPolicy {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Self::Error => "error",
            Self::Skip => "skip",
        })
    }
}

/// Where a unit's windows are anchored.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Anchoring {
    /// At the exposure instant itself (default).
    #[default]
    Exact,
    /// At the start of the local day that contains the exposure (day 0 = exposure day).
    DayStart,
}

impl std::str::FromStr for Anchoring {
    type Err = WindowsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "exact" => Ok(Self::Exact),
            "day-start" => Ok(Self::DayStart),
            other => Err(WindowsError::bad_param("anchoring", other, "exact or day-start")),
        }
    }
}

/// Which units the unit table has (the population).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Population {
    /// Exactly the units of the exposures file; events of other units are bad rows
    /// ("unknown unit") (default).
    #[default]
    Exposures,
    /// The units of the exposures file, then every other unit id found in the events (sorted
    /// by id), as never-exposed units of the group `unlisted` (or `all` without a group column).
    ExposuresAndEvents,
}

impl std::str::FromStr for Population {
    type Err = WindowsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "exposures" => Ok(Self::Exposures),
            "exposures-and-events" => Ok(Self::ExposuresAndEvents),
            other => Err(WindowsError::bad_param("population", other, "exposures or exposures-and-events")),
        }
    }
}

impl std::fmt::Display for Population {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Self::Exposures => "exposures",
            Self::ExposuresAndEvents => "exposures-and-events",
        })
    }
}

/// Bucket size of the per-group series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SeriesFrequency {
    /// Local days.
    Daily,
    /// Local weeks starting on Monday, labelled by their Monday.
    Weekly,
}

impl std::str::FromStr for SeriesFrequency {
    type Err = WindowsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "daily" | "day" => Ok(Self::Daily),
            "weekly" | "week" => Ok(Self::Weekly),
            other => Err(WindowsError::bad_param("series", other, "daily or weekly")),
        }
    }
}

/// Column names of the event log.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct EventColumns {
    /// Unit id column.
    pub unit: String,
    /// Timestamp column.
    pub time: String,
    /// Metric name column.
    pub metric: String,
    /// Value column.
    pub value: String,
}

impl Default for EventColumns {
    fn default() -> Self {
        Self { unit: "unit".into(), time: "time".into(), metric: "metric".into(), value: "value".into() }
    }
}

/// Unchecked parameters; [`WindowParams::check`] turns them into a [`WindowSpec`].
#[derive(Debug, Clone, Default)]
pub struct WindowParams {
    windows: Vec<(Option<String>, WindowKind)>,
    metrics: Vec<MetricSpec>,
    ratios: Vec<RatioSpec>,
    until: Option<i64>,
    from: Option<i64>,
    offset: Offset,
    anchoring: Anchoring,
    bad_rows: BadRowPolicy,
    allow_negative: BTreeSet<String>,
    series: Option<SeriesFrequency>,
    columns: EventColumns,
    population: Population,
}

impl WindowParams {
    /// Empty parameters (UTC, exact anchoring, stop at the first bad row).
    pub fn new() -> Self {
        Self::default()
    }

    /// Add a window with its default name.
    pub fn window(mut self, kind: WindowKind) -> Self {
        self.windows.push((None, kind));
        self
    }

    /// Add a window with a chosen column prefix.
    pub fn named_window(mut self, name: &str, kind: WindowKind) -> Self {
        self.windows.push((Some(name.to_string()), kind));
        self
    }

    /// Add a metric with its aggregations.
    pub fn metric(mut self, name: &str, aggregations: &[Aggregation]) -> Self {
        self.metrics.push(MetricSpec { name: name.to_string(), aggregations: aggregations.to_vec() });
        self
    }

    /// Add a ratio metric `numerator / denominator`.
    pub fn ratio(mut self, name: &str, numerator: &str, denominator: &str) -> Self {
        self.ratios.push(RatioSpec {
            name: name.to_string(),
            numerator: numerator.to_string(),
            denominator: denominator.to_string(),
        });
        self
    }

    /// Data end (exclusive), microseconds since the epoch: windows ending after it are
    /// incomplete.
    pub fn until(mut self, until: i64) -> Self {
        self.until = Some(until);
        self
    }

    /// Data start (inclusive), microseconds since the epoch: windows starting before it are
    /// incomplete.
    pub fn from(mut self, from: i64) -> Self {
        self.from = Some(from);
        self
    }

    /// Fixed UTC offset of day boundaries.
    pub fn offset(mut self, offset: Offset) -> Self {
        self.offset = offset;
        self
    }

    /// Anchoring of windows.
    pub fn anchoring(mut self, anchoring: Anchoring) -> Self {
        self.anchoring = anchoring;
        self
    }

    /// Bad-row policy.
    pub fn bad_rows(mut self, policy: BadRowPolicy) -> Self {
        self.bad_rows = policy;
        self
    }

    /// Allow negative values for a metric.
    pub fn allow_negative(mut self, metric: &str) -> Self {
        self.allow_negative.insert(metric.to_string());
        self
    }

    /// Also build the per-group series.
    pub fn series(mut self, frequency: SeriesFrequency) -> Self {
        self.series = Some(frequency);
        self
    }

    /// Column names of the event log.
    pub fn event_columns(mut self, columns: EventColumns) -> Self {
        self.columns = columns;
        self
    }

    /// Which units the unit table has.
    pub fn population(mut self, population: Population) -> Self {
        self.population = population;
        self
    }

    /// Validate.
    ///
    /// # Errors
    /// [`WindowsError::BadParameter`] naming the parameter and why.
    pub fn check(self) -> WindowsResult<WindowSpec> {
        let until = self.until.ok_or_else(|| WindowsError::bad_param("data end (until)", "", "it is required"))?;
        if let Some(s) = self.from
            && s >= until
        {
            return Err(WindowsError::bad_param(
                "data start (from)",
                time::format_timestamp(s, self.offset),
                "it must be before the data end (until)",
            ));
        }
        if self.windows.is_empty() {
            return Err(WindowsError::bad_param("window", "", "give at least one window"));
        }
        let mut windows = Vec::new();
        for (name, kind) in self.windows {
            let name = name.unwrap_or_else(|| kind.default_name());
            if !is_identifier(&name) {
                return Err(WindowsError::bad_param(
                    "window name",
                    &name,
                    "use letters, digits and _ and start with a letter or _",
                ));
            }
            if kind.length() <= 0 {
                return Err(WindowsError::bad_param("window", &name, "the length must be positive"));
            }
            if let WindowKind::Deferred { delay, .. } = kind
                && delay < 0
            {
                return Err(WindowsError::bad_param("window", &name, "the delay must not be negative"));
            }
            if windows.iter().any(|w: &WindowDef| w.name == name) {
                return Err(WindowsError::bad_param(
                    "window name",
                    &name,
                    "two windows have this name; name them apart",
                ));
            }
            windows.push(WindowDef { name, kind });
        }
        if self.metrics.is_empty() && self.ratios.is_empty() {
            return Err(WindowsError::bad_param("metric", "", "give at least one metric or ratio"));
        }
        for m in &self.metrics {
            if !is_metric_name(&m.name) {
                return Err(WindowsError::bad_param("metric", &m.name, "metric names use letters, digits and _"));
            }
            if m.aggregations.is_empty() {
                return Err(WindowsError::bad_param("metric", &m.name, "give at least one aggregation"));
            }
            let set: BTreeSet<_> = m.aggregations.iter().collect();
            if set.len() != m.aggregations.len() {
                return Err(WindowsError::bad_param("metric", &m.name, "an aggregation is repeated"));
            }
        }
        let mut names = BTreeSet::new();
        for m in &self.metrics {
            if !names.insert(m.name.clone()) {
                return Err(WindowsError::bad_param(
                    "metric",
                    &m.name,
                    "the metric is listed twice; list its aggregations once",
                ));
            }
        }
        for r in &self.ratios {
            for n in [&r.name, &r.numerator, &r.denominator] {
                if !is_metric_name(n) {
                    return Err(WindowsError::bad_param("ratio", n, "names use letters, digits and _"));
                }
            }
        }
        for m in &self.allow_negative {
            if !is_metric_name(m) {
                return Err(WindowsError::bad_param("allow-negative", m, "metric names use letters, digits and _"));
            }
        }
        if self.series.is_some() && self.from.is_none() {
            return Err(WindowsError::bad_param("series", "", "the per-group series needs a data start (from)"));
        }
        // Tracked metrics: those with aggregations, then ratio parts, in first-seen order.
        let mut tracked: Vec<TrackedMetric> = Vec::new();
        for m in &self.metrics {
            tracked.push(TrackedMetric {
                name: m.name.clone(),
                needs_days: m.aggregations.iter().any(|a| a.needs_days()),
                allow_negative: self.allow_negative.contains(&m.name),
            });
        }
        for r in &self.ratios {
            for n in [&r.numerator, &r.denominator] {
                if !tracked.iter().any(|t| &t.name == n) {
                    tracked.push(TrackedMetric {
                        name: n.clone(),
                        needs_days: false,
                        allow_negative: self.allow_negative.contains(n),
                    });
                }
            }
        }
        let spec = WindowSpec {
            windows,
            metrics: self.metrics,
            ratios: self.ratios,
            until,
            from: self.from,
            offset: self.offset,
            anchoring: self.anchoring,
            bad_rows: self.bad_rows,
            allow_negative: self.allow_negative,
            series: self.series,
            columns: self.columns,
            tracked,
            population: self.population,
        };
        let mut cols = BTreeSet::new();
        for c in ["unit", "group", "exposed", "anchor"] {
            cols.insert(c.to_string());
        }
        for c in spec.value_columns() {
            if !cols.insert(c.name.clone()) {
                return Err(WindowsError::bad_param(
                    "output column",
                    &c.name,
                    "two windows/metrics produce this column name; rename a window",
                ));
            }
        }
        if let Some(freq) = spec.series {
            let (d0, d1) = spec.series_days();
            if d1 <= d0 {
                return Err(WindowsError::bad_param(
                    "series",
                    format!("{freq:?}"),
                    "no complete day/week lies between the data start (from) and the data end (until)",
                ));
            }
        }
        Ok(spec)
    }
}

fn is_identifier(s: &str) -> bool {
    let mut c = s.chars();
    matches!(c.next(), Some(ch) if ch.is_ascii_alphabetic() || ch == '_')
        && c.all(|ch| ch.is_ascii_alphanumeric() || ch == '_')
}

fn is_metric_name(s: &str) -> bool {
    !s.is_empty() && s.chars().all(|ch| ch.is_ascii_alphanumeric() || ch == '_')
}

/// A metric the engine accumulates (named in an aggregation or a ratio).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrackedMetric {
    /// Its name.
    pub name: String,
    /// Whether active days are needed.
    pub needs_days: bool,
    /// Whether negative values are allowed.
    pub allow_negative: bool,
}

/// What one output value column holds.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ValueKind {
    /// An aggregation of a tracked metric.
    Agg {
        /// Index into [`WindowSpec::tracked`].
        metric: usize,
        /// Which aggregation.
        agg: Aggregation,
    },
    /// Numerator sum of a ratio.
    RatioNum {
        /// Index into [`WindowSpec::tracked`].
        metric: usize,
    },
    /// Denominator sum of a ratio.
    RatioDen {
        /// Index into [`WindowSpec::tracked`].
        metric: usize,
    },
}

impl ValueKind {
    /// Whether the column holds integers (count, active days, any).
    pub fn is_integer(&self) -> bool {
        matches!(self, ValueKind::Agg { agg: Aggregation::Count | Aggregation::ActiveDays | Aggregation::Any, .. })
    }
}

/// One output value column of the unit table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ValueColumn {
    /// Column name: `{window}_{metric}_{aggregation}` or `{window}_{ratio}_num` / `_den`.
    pub name: String,
    /// Index into [`WindowSpec::windows`].
    pub window: usize,
    /// What it holds.
    pub kind: ValueKind,
}

/// Validated parameters of a windows run.
#[derive(Debug, Clone)]
pub struct WindowSpec {
    windows: Vec<WindowDef>,
    metrics: Vec<MetricSpec>,
    ratios: Vec<RatioSpec>,
    until: i64,
    from: Option<i64>,
    offset: Offset,
    anchoring: Anchoring,
    bad_rows: BadRowPolicy,
    allow_negative: BTreeSet<String>,
    series: Option<SeriesFrequency>,
    columns: EventColumns,
    tracked: Vec<TrackedMetric>,
    population: Population,
}

impl WindowSpec {
    /// Start building parameters.
    pub fn params() -> WindowParams {
        WindowParams::new()
    }

    /// The windows, in the order given.
    pub fn windows(&self) -> &[WindowDef] {
        &self.windows
    }
    /// The metrics with aggregations.
    pub fn metrics(&self) -> &[MetricSpec] {
        &self.metrics
    }
    /// The ratio metrics.
    pub fn ratios(&self) -> &[RatioSpec] {
        &self.ratios
    }
    /// Data end (exclusive).
    pub fn until(&self) -> i64 {
        self.until
    }
    /// Data start (inclusive), if given.
    pub fn from(&self) -> Option<i64> {
        self.from
    }
    /// The UTC offset of day boundaries.
    pub fn offset(&self) -> Offset {
        self.offset
    }
    /// Anchoring of windows.
    pub fn anchoring(&self) -> Anchoring {
        self.anchoring
    }
    /// Bad-row policy.
    pub fn bad_rows(&self) -> BadRowPolicy {
        self.bad_rows
    }
    /// Metrics allowed to be negative.
    pub fn allow_negative(&self) -> &BTreeSet<String> {
        &self.allow_negative
    }
    /// Per-group series frequency, if requested.
    pub fn series(&self) -> Option<SeriesFrequency> {
        self.series
    }
    /// Event-log column names.
    pub fn columns(&self) -> &EventColumns {
        &self.columns
    }
    /// Which units the unit table has.
    pub fn population(&self) -> Population {
        self.population
    }
    /// The metrics the engine accumulates.
    pub fn tracked(&self) -> &[TrackedMetric] {
        &self.tracked
    }

    /// Index of a tracked metric.
    pub fn tracked_index(&self, name: &str) -> Option<usize> {
        self.tracked.iter().position(|t| t.name == name)
    }

    /// The anchor of a unit exposed (or referenced) at `t`.
    pub fn anchor_of(&self, t: i64) -> i64 {
        match self.anchoring {
            Anchoring::Exact => t,
            Anchoring::DayStart => self.offset.day_start(self.offset.day_of(t)),
        }
    }

    /// Absolute bounds `[from, to)` of window `w` for a unit anchored at `anchor`.
    pub fn bounds(&self, w: usize, anchor: i64) -> (i64, i64) {
        match self.windows[w].kind.relative() {
            Some((a, b)) => (anchor + a, anchor + b),
            None => (self.until - self.windows[w].kind.length(), self.until),
        }
    }

    /// Why a window is incomplete, if it is: it ends after the data end (`until`), or it starts
    /// before the data start (`from`).
    pub fn incomplete(&self, from: i64, to: i64) -> Option<Incomplete> {
        if to > self.until {
            Some(Incomplete::EndsAfterEnd)
        } else if self.from.is_some_and(|s| from < s) {
            Some(Incomplete::StartsBeforeStart)
        } else {
            None
        }
    }

    /// Number of 64-bit words the active-day set of window `w` needs (local days a window of this
    /// length can touch).
    pub fn day_words(&self, w: usize) -> usize {
        let len = self.windows[w].kind.length();
        let days = (len + DAY - 1) / DAY + 1;
        usize::try_from(days).unwrap_or(usize::MAX).div_ceil(64)
    }

    /// The value columns of the unit table, in output order: per window, per metric the
    /// aggregations in the given order, then per ratio `_num`, `_den`.
    pub fn value_columns(&self) -> Vec<ValueColumn> {
        let mut out = Vec::new();
        for (w, win) in self.windows.iter().enumerate() {
            for m in &self.metrics {
                let metric = self.tracked_index(&m.name).unwrap_or(0);
                for &agg in &m.aggregations {
                    out.push(ValueColumn {
                        name: format!("{}_{}_{}", win.name, m.name, agg.suffix()),
                        window: w,
                        kind: ValueKind::Agg { metric, agg },
                    });
                }
            }
            for r in &self.ratios {
                out.push(ValueColumn {
                    name: format!("{}_{}_num", win.name, r.name),
                    window: w,
                    kind: ValueKind::RatioNum { metric: self.tracked_index(&r.numerator).unwrap_or(0) },
                });
                out.push(ValueColumn {
                    name: format!("{}_{}_den", win.name, r.name),
                    window: w,
                    kind: ValueKind::RatioDen { metric: self.tracked_index(&r.denominator).unwrap_or(0) },
                });
            }
        }
        out
    }

    /// The series buckets: local day numbers `[first, last)` of the fully covered days of
    /// `[from, until)`; for weekly series the range of Monday-based week numbers of fully
    /// covered weeks. Only meaningful when a series is requested.
    pub fn series_days(&self) -> (i64, i64) {
        let start = self.from.unwrap_or(self.until);
        let off = self.offset;
        // First day whose start is at or after `from`; last day whose end is at or before `until`.
        let mut d0 = off.day_of(start);
        if off.day_start(d0) < start {
            d0 += 1;
        }
        let d1 = off.day_of(self.until); // day containing until: its start <= until, so days < d1 are covered
        match self.series {
            Some(SeriesFrequency::Weekly) => {
                let mut w0 = week_of(d0);
                if week_start(w0) < d0 {
                    w0 += 1;
                }
                let w1 = (d1 + 3).div_euclid(7); // weeks < w1 end at or before day d1
                (w0, w1.max(w0))
            }
            _ => (d0, d1.max(d0)),
        }
    }
}

/// Monday-based week number of a local day (day 0 = 1970-01-01, a Thursday; week 0 starts on
/// Monday 1969-12-29).
pub fn week_of(day: i64) -> i64 {
    (day + 3).div_euclid(7)
}

/// First local day (a Monday) of week `week`.
pub fn week_start(week: i64) -> i64 {
    week * 7 - 3
}

/// Why a unit's window is excluded.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Incomplete {
    /// The window ends after the data end (`until`).
    EndsAfterEnd,
    /// The window starts before the data start (`from`).
    StartsBeforeStart,
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::parse_timestamp;

    fn ts(s: &str) -> i64 {
        parse_timestamp(s, Offset::UTC).unwrap()
    }

    #[test]
    fn window_text_forms() {
        assert_eq!(WindowKind::parse("14d").unwrap(), WindowKind::Forward { length: 14 * DAY });
        assert_eq!(
            WindowKind::parse("deferred:7d+14d").unwrap(),
            WindowKind::Deferred { delay: 7 * DAY, length: 14 * DAY }
        );
        assert_eq!(WindowKind::parse("pre:28d").unwrap().default_name(), "pre_28d");
        assert_eq!(WindowKind::parse("def:7d+14d").unwrap().default_name(), "def_7d_14d");
        assert!(WindowKind::parse("backward:3d").is_err());
        assert!(WindowKind::parse("deferred:7d").is_err());
    }

    #[test]
    fn validation_names_the_problem() {
        let base = || WindowSpec::params().until(ts("2024-04-01")).metric("orders", &[Aggregation::Sum]);
        assert!(base().check().is_err(), "no window");
        assert!(base().window(WindowKind::Forward { length: 0 }).check().is_err());
        let e = base().window(WindowKind::Forward { length: DAY }).window(WindowKind::Forward { length: DAY }).check();
        assert!(matches!(e, Err(WindowsError::BadParameter { .. })));
        assert!(
            WindowSpec::params()
                .window(WindowKind::Forward { length: DAY })
                .metric("x", &[Aggregation::Sum])
                .check()
                .is_err(),
            "no until"
        );
        assert!(
            base().window(WindowKind::Forward { length: DAY }).series(SeriesFrequency::Daily).check().is_err(),
            "series without from"
        );
        assert!(base().named_window("7x", WindowKind::Forward { length: DAY }).check().is_err());
        let s = base().window(WindowKind::Forward { length: DAY }).ratio("aov", "revenue", "orders").check().unwrap();
        let names: Vec<_> = s.value_columns().into_iter().map(|c| c.name).collect();
        assert_eq!(names, ["fwd_1d_orders_sum", "fwd_1d_aov_num", "fwd_1d_aov_den"]);
        assert_eq!(s.tracked().len(), 2);
    }

    #[test]
    fn policy_words_parse_print_and_serialise_alike() {
        assert_eq!("error".parse::<BadRowPolicy>().unwrap(), BadRowPolicy::Error);
        assert_eq!("skip".parse::<BadRowPolicy>().unwrap(), BadRowPolicy::Skip);
        assert!("fail".parse::<BadRowPolicy>().is_err(), "the old word is gone");
        assert_eq!(BadRowPolicy::default().to_string(), "error");
        assert_eq!(serde_json::to_value(BadRowPolicy::Error).unwrap(), "error");
        let p: Population = "exposures-and-events".parse().unwrap();
        assert_eq!(p.to_string(), "exposures-and-events");
        assert_eq!(serde_json::to_value(p).unwrap(), "exposures-and-events");
        let e = "units".parse::<Population>().unwrap_err().to_string();
        assert!(e.contains("population") && !e.contains('\n'), "{e}");
    }

    #[test]
    fn series_range_keeps_fully_covered_days_and_weeks() {
        let spec = WindowSpec::params()
            .window(WindowKind::Forward { length: DAY })
            .metric("x", &[Aggregation::Sum])
            .from(ts("2024-03-01T06:00:00Z"))
            .until(ts("2024-03-11T00:00:00Z"))
            .series(SeriesFrequency::Daily)
            .check()
            .unwrap();
        let (d0, d1) = spec.series_days();
        assert_eq!(crate::time::format_day(d0), "2024-03-02");
        assert_eq!(d1 - d0, 9); // 2024-03-02 .. 2024-03-10
        let weekly = WindowSpec::params()
            .window(WindowKind::Forward { length: DAY })
            .metric("x", &[Aggregation::Sum])
            .from(ts("2024-03-01T00:00:00Z"))
            .until(ts("2024-03-25T00:00:00Z"))
            .series(SeriesFrequency::Weekly)
            .check()
            .unwrap();
        let (w0, w1) = weekly.series_days();
        // 2024-03-04 and 2024-03-11 and 2024-03-18 are the Mondays of complete weeks.
        assert_eq!(crate::time::format_day(week_start(w0)), "2024-03-04");
        assert_eq!(w1 - w0, 3);
    }
}
