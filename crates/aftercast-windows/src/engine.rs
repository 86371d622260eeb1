//! The native engine: one streaming pass over the events into per-unit accumulators whose size
//! depends on the number of units, never on the number of events.
//!
//! Sums are kept exactly, in 128-bit fixed point with 60 fractional bits, so the order in which
//! events arrive (and hence the number of threads) cannot change any output bit; each sum is
//! rounded to the nearest `f64` once, at the end.

use crate::error::{Cell, WindowsError, WindowsResult};
use crate::exposure::Exposures;
use crate::params::{Aggregation, Incomplete, SeriesFrequency, ValueKind, WindowSpec, week_of, week_start};
use crate::source::EventSource;
use crate::time::{self, Offset};
use serde::Serialize;
use std::collections::BTreeMap;

/// Fixed-point scale of exact sums: 2^60.
const SCALE: f64 = 1_152_921_504_606_846_976.0;
/// Largest accepted |value| (2^62): keeps one scaled value well inside i128.
pub(crate) const MAX_ABS_VALUE: f64 = 4_611_686_018_427_387_904.0;

pub(crate) fn to_fixed(v: f64) -> i128 {
    (v * SCALE) as i128
}

pub(crate) fn from_fixed(x: i128) -> f64 {
    x as f64 / SCALE
}

/// Why event rows were skipped (policy `skip`), or how events were used.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct EventCounts {
    /// Data rows read.
    pub rows: u64,
    /// Rows of a tracked metric that were accumulated.
    pub used: u64,
    /// Rows of metrics the run does not use (not checked further).
    pub other_metric: u64,
    /// Skipped: a required cell is empty (or null).
    pub skipped_missing: u64,
    /// Skipped: unit not in the exposures file.
    pub skipped_unknown_unit: u64,
    /// Skipped: timestamp not ISO 8601.
    pub skipped_bad_timestamp: u64,
    /// Skipped: value not a finite number (or beyond +-2^62).
    pub skipped_bad_value: u64,
    /// Skipped: negative value of a metric that does not allow it.
    pub skipped_negative: u64,
    /// Skipped: row with the wrong number of fields or invalid UTF-8.
    pub skipped_malformed: u64,
}

impl EventCounts {
    fn merge(&mut self, o: &EventCounts) {
        self.rows += o.rows;
        self.used += o.used;
        self.other_metric += o.other_metric;
        self.skipped_missing += o.skipped_missing;
        self.skipped_unknown_unit += o.skipped_unknown_unit;
        self.skipped_bad_timestamp += o.skipped_bad_timestamp;
        self.skipped_bad_value += o.skipped_bad_value;
        self.skipped_negative += o.skipped_negative;
        self.skipped_malformed += o.skipped_malformed;
    }

    /// Total rows skipped.
    pub fn skipped(&self) -> u64 {
        self.skipped_missing
            + self.skipped_unknown_unit
            + self.skipped_bad_timestamp
            + self.skipped_bad_value
            + self.skipped_negative
            + self.skipped_malformed
    }
}

/// Read-only plan shared by the workers.
pub(crate) struct Plan<'a> {
    pub(crate) spec: &'a WindowSpec,
    pub(crate) exposures: &'a Exposures,
    pub(crate) anchors: Vec<i64>,
    n_windows: usize,
    n_metrics: usize,
    /// Per window: relative bounds, or None for calendar windows.
    rel: Vec<Option<(i64, i64)>>,
    /// Per window: absolute bounds of calendar windows.
    cal: Vec<(i64, i64)>,
    /// Per (metric, window): offset of its day words within a unit's day block, if needed.
    day_offset: Vec<Option<usize>>,
    day_stride: usize,
    offset: Offset,
    series: Option<(SeriesFrequency, i64, i64)>,
}

impl<'a> Plan<'a> {
    pub(crate) fn new(spec: &'a WindowSpec, exposures: &'a Exposures) -> Self {
        let n_windows = spec.windows().len();
        let n_metrics = spec.tracked().len();
        let anchors = exposures.times().iter().map(|&t| spec.anchor_of(t)).collect();
        let mut rel = Vec::new();
        let mut cal = Vec::new();
        for (w, win) in spec.windows().iter().enumerate() {
            rel.push(win.kind.relative());
            cal.push(spec.bounds(w, 0));
        }
        // Metric-major layout: the windows of one unit and metric are adjacent in memory.
        let mut day_offset = Vec::with_capacity(n_windows * n_metrics);
        let mut stride = 0;
        for m in spec.tracked() {
            for w in 0..n_windows {
                if m.needs_days {
                    day_offset.push(Some(stride));
                    stride += spec.day_words(w);
                } else {
                    day_offset.push(None);
                }
            }
        }
        let series = spec.series().map(|f| {
            let (a, b) = spec.series_days();
            (f, a, b)
        });
        Self {
            spec,
            exposures,
            anchors,
            n_windows,
            n_metrics,
            rel,
            cal,
            day_offset,
            day_stride: stride,
            offset: spec.offset(),
            series,
        }
    }

    fn n_buckets(&self) -> usize {
        self.series.map(|(_, a, b)| (b - a) as usize).unwrap_or(0)
    }

    pub(crate) fn new_acc(&self) -> Acc {
        let n = self.exposures.len();
        let slots = n * self.n_windows * self.n_metrics;
        let series = self.n_buckets() * self.exposures.groups().len() * self.n_metrics;
        Acc {
            sums: vec![0; slots],
            counts: vec![0; slots],
            days: vec![0; n * self.day_stride],
            series_sums: vec![0; series],
            series_counts: vec![0; series],
            events: EventCounts::default(),
            overflow: None,
        }
    }
}

/// Per-worker accumulators.
pub(crate) struct Acc {
    sums: Vec<i128>,
    counts: Vec<u32>,
    days: Vec<u64>,
    series_sums: Vec<i128>,
    series_counts: Vec<u64>,
    pub(crate) events: EventCounts,
    overflow: Option<(usize, usize)>,
}

impl Acc {
    /// Add one good event: unit index, tracked-metric index, instant, value in fixed point.
    #[inline]
    pub(crate) fn add(&mut self, plan: &Plan<'_>, u: usize, m: usize, t: i64, v: i128) {
        self.events.used += 1;
        let anchor = plan.anchors[u];
        let base = (u * plan.n_metrics + m) * plan.n_windows;
        for w in 0..plan.n_windows {
            let (from, to) = match plan.rel[w] {
                Some((a, b)) => (anchor + a, anchor + b),
                None => plan.cal[w],
            };
            if t < from || t >= to {
                continue;
            }
            let slot = base + w;
            match self.sums[slot].checked_add(v) {
                Some(s) => self.sums[slot] = s,
                None => self.overflow = self.overflow.or(Some((u, m))),
            }
            match self.counts[slot].checked_add(1) {
                Some(c) => self.counts[slot] = c,
                None => self.overflow = self.overflow.or(Some((u, m))),
            }
            if let Some(off) = plan.day_offset[m * plan.n_windows + w] {
                let bit = (plan.offset.day_of(t) - plan.offset.day_of(from)) as usize;
                self.days[u * plan.day_stride + off + bit / 64] |= 1u64 << (bit % 64);
            }
        }
        if let Some((freq, b0, b1)) = plan.series {
            let day = plan.offset.day_of(t);
            let bucket = match freq {
                SeriesFrequency::Daily => day,
                SeriesFrequency::Weekly => week_of(day),
            };
            if bucket >= b0 && bucket < b1 {
                let g = plan.exposures.group_of()[u] as usize;
                let nb = (b1 - b0) as usize;
                let idx = (g * nb + (bucket - b0) as usize) * plan.n_metrics + m;
                match self.series_sums[idx].checked_add(v) {
                    Some(s) => self.series_sums[idx] = s,
                    None => self.overflow = self.overflow.or(Some((u, m))),
                }
                self.series_counts[idx] += 1;
            }
        }
    }

    pub(crate) fn merge(&mut self, other: Acc) {
        for (a, b) in self.sums.iter_mut().zip(other.sums) {
            match a.checked_add(b) {
                Some(s) => *a = s,
                None => self.overflow = self.overflow.or(Some((usize::MAX, 0))),
            }
        }
        for (a, b) in self.counts.iter_mut().zip(other.counts) {
            match a.checked_add(b) {
                Some(c) => *a = c,
                None => self.overflow = self.overflow.or(Some((usize::MAX, 0))),
            }
        }
        for (a, b) in self.days.iter_mut().zip(other.days) {
            *a |= b;
        }
        for (a, b) in self.series_sums.iter_mut().zip(other.series_sums) {
            match a.checked_add(b) {
                Some(s) => *a = s,
                None => self.overflow = self.overflow.or(Some((usize::MAX, 0))),
            }
        }
        for (a, b) in self.series_counts.iter_mut().zip(other.series_counts) {
            *a += b;
        }
        self.events.merge(&other.events);
        self.overflow = self.overflow.or(other.overflow);
    }
}

/// Values of one output column; `None` = the unit's window is incomplete (or, for
/// `mean_per_active_day`, the unit had no active day).
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnValues {
    /// Integer column (count, active days, any).
    Int(Vec<Option<i64>>),
    /// Real column (sum, mean per active day, ratio parts).
    Float(Vec<Option<f64>>),
}

/// One value column of the unit table.
#[derive(Debug, Clone, PartialEq)]
pub struct OutColumn {
    /// Column name.
    pub name: String,
    /// Index of its window in the spec.
    pub window: usize,
    /// The values, one per unit.
    pub values: ColumnValues,
}

/// The per-unit analysis table.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitTable {
    /// Unit ids, in exposures-file order.
    pub units: Vec<String>,
    /// Group of each unit.
    pub groups: Vec<String>,
    /// Whether each unit was exposed.
    pub exposed: Vec<bool>,
    /// Anchor instant of each unit.
    pub anchors: Vec<i64>,
    /// Value columns.
    pub columns: Vec<OutColumn>,
}

/// The per-group daily or weekly series (wide: one row per group and bucket).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupSeries {
    /// Bucket size.
    pub frequency: SeriesFrequency,
    /// Metric names, in column order.
    pub metrics: Vec<String>,
    /// Rows in group order, then time order.
    pub rows: Vec<SeriesRow>,
}

/// One group and day (or week).
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesRow {
    /// Group name.
    pub group: String,
    /// Local date of the bucket's first day, `YYYY-MM-DD`.
    pub day: String,
    /// Units in the group.
    pub units: u64,
    /// Per metric: sum of values.
    pub total: Vec<f64>,
    /// Per metric: number of events.
    pub events: Vec<u64>,
    /// Per metric: total divided by the group's units.
    pub per_unit: Vec<f64>,
}

/// Inclusion counts of one window, overall or in one group.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct InclusionCounts {
    /// Units.
    pub units: u64,
    /// Units whose window is complete (their cells are filled).
    pub included: u64,
    /// Units excluded because the window ends after the data end (`until`).
    pub excluded_ends_after_end: u64,
    /// Units excluded because the window starts before the data start (`from`).
    pub excluded_starts_before_start: u64,
}

/// Counts of one window.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WindowCounts {
    /// Window name.
    pub window: String,
    /// Over all units.
    pub all: InclusionCounts,
    /// Per group, by group name.
    pub by_group: BTreeMap<String, InclusionCounts>,
}

/// Everything a run produces.
#[derive(Debug, Clone, PartialEq)]
pub struct WindowsOutput {
    /// The per-unit table.
    pub units: UnitTable,
    /// The per-group series, if requested.
    pub series: Option<GroupSeries>,
    /// Per-window inclusion counts.
    pub windows: Vec<WindowCounts>,
    /// Event-row counts.
    pub events: EventCounts,
    /// Units exposed / never exposed (anchored at the reference time).
    pub exposed_units: u64,
    /// Units never exposed.
    pub never_exposed_units: u64,
}

/// Build the windows: one pass over `events`, parallel over chunks (CSV) or row groups
/// (Parquet) with `threads` workers (0 = all cores). The output does not depend on `threads`.
///
/// # Errors
/// Read errors of the event source; with [`crate::BadRowPolicy::Error`] the first bad row (by
/// line) as [`WindowsError::BadTimestamp`], [`WindowsError::UnknownUnit`],
/// [`WindowsError::BadValue`], [`WindowsError::NegativeValue`], [`WindowsError::MissingCell`]
/// or [`WindowsError::Malformed`]; [`WindowsError::Overflow`].
///
/// # Examples
/// ```
/// use aftercast_windows::*;
/// let dir = tempfile::tempdir()?;
/// let path = dir.path().join("events.csv");
/// std::fs::write(&path, "unit,time,metric,value\na,2024-03-01T10:00:00Z,orders,2\na,2024-03-09T00:00:00Z,orders,5\n")?;
/// let t = |s: &str| time::parse_timestamp(s, time::Offset::UTC).unwrap();
/// let spec = WindowSpec::params()
///     .window(WindowKind::parse("7d")?)
///     .metric("orders", &[Aggregation::Sum, Aggregation::Count])
///     .until(t("2024-04-01"))
///     .check()?;
/// let units = Exposures::from_rows(vec![UnitRow { unit: "a".into(), exposure: Some(t("2024-03-01")), group: "all".into() }], None, None)?;
/// let out = run(&EventSource::new(&path, spec.columns().clone()), &units, &spec, 1)?;
/// assert_eq!(out.units.columns[0].values, ColumnValues::Float(vec![Some(2.0)]));
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn run(
    events: &EventSource,
    exposures: &Exposures,
    spec: &WindowSpec,
    threads: usize,
) -> WindowsResult<WindowsOutput> {
    let widened;
    let exposures = match spec.population() {
        crate::params::Population::Exposures => exposures,
        crate::params::Population::ExposuresAndEvents => {
            let mut all = exposures.clone();
            all.add_unlisted(crate::source::event_unit_ids(events)?)?;
            widened = all;
            &widened
        }
    };
    let plan = Plan::new(spec, exposures);
    let threads =
        if threads == 0 { std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1) } else { threads };
    let acc = crate::source::read_events(events, &plan, threads)?;
    finish(&plan, acc)
}

fn finish(plan: &Plan<'_>, acc: Acc) -> WindowsResult<WindowsOutput> {
    let spec = plan.spec;
    let ex = plan.exposures;
    if let Some((u, m)) = acc.overflow {
        return Err(WindowsError::Overflow {
            metric: spec.tracked()[m].name.clone(),
            unit: ex.units().get(u).cloned().unwrap_or_default(),
        });
    }
    let n = ex.len();
    let nw = plan.n_windows;
    let nm = plan.n_metrics;
    // Completeness per unit and window.
    let mut complete = vec![false; n * nw];
    let mut counts = Vec::with_capacity(nw);
    for (w, win) in spec.windows().iter().enumerate() {
        let mut all = InclusionCounts::default();
        let mut by_group: BTreeMap<String, InclusionCounts> = BTreeMap::new();
        for u in 0..n {
            let (from, to) = spec.bounds(w, plan.anchors[u]);
            let g = by_group.entry(ex.groups()[ex.group_of()[u] as usize].clone()).or_default();
            all.units += 1;
            g.units += 1;
            match spec.incomplete(from, to) {
                None => {
                    complete[u * nw + w] = true;
                    all.included += 1;
                    g.included += 1;
                }
                Some(Incomplete::EndsAfterEnd) => {
                    all.excluded_ends_after_end += 1;
                    g.excluded_ends_after_end += 1;
                }
                Some(Incomplete::StartsBeforeStart) => {
                    all.excluded_starts_before_start += 1;
                    g.excluded_starts_before_start += 1;
                }
            }
        }
        counts.push(WindowCounts { window: win.name.clone(), all, by_group });
    }
    let mut columns = Vec::new();
    for vc in spec.value_columns() {
        let w = vc.window;
        let slot = |u: usize, m: usize| (u * nm + m) * nw + w;
        let days = |u: usize, m: usize| -> i64 {
            match plan.day_offset[m * nw + w] {
                Some(off) => {
                    let s = u * plan.day_stride + off;
                    acc.days[s..s + spec.day_words(w)].iter().map(|x| i64::from(x.count_ones())).sum()
                }
                None => 0,
            }
        };
        let values = match vc.kind {
            ValueKind::Agg { metric: m, agg } => match agg {
                Aggregation::Sum => ColumnValues::Float(
                    (0..n).map(|u| complete[u * nw + w].then(|| from_fixed(acc.sums[slot(u, m)]))).collect(),
                ),
                Aggregation::Count => ColumnValues::Int(
                    (0..n).map(|u| complete[u * nw + w].then(|| i64::from(acc.counts[slot(u, m)]))).collect(),
                ),
                Aggregation::Any => ColumnValues::Int(
                    (0..n).map(|u| complete[u * nw + w].then(|| i64::from(acc.counts[slot(u, m)] > 0))).collect(),
                ),
                Aggregation::ActiveDays => {
                    ColumnValues::Int((0..n).map(|u| complete[u * nw + w].then(|| days(u, m))).collect())
                }
                Aggregation::MeanPerActiveDay => ColumnValues::Float(
                    (0..n)
                        .map(|u| {
                            if !complete[u * nw + w] {
                                return None;
                            }
                            let d = days(u, m);
                            (d > 0).then(|| from_fixed(acc.sums[slot(u, m)]) / d as f64)
                        })
                        .collect(),
                ),
            },
            ValueKind::RatioNum { metric: m } | ValueKind::RatioDen { metric: m } => ColumnValues::Float(
                (0..n).map(|u| complete[u * nw + w].then(|| from_fixed(acc.sums[slot(u, m)]))).collect(),
            ),
        };
        columns.push(OutColumn { name: vc.name, window: w, values });
    }
    let series = plan.series.map(|(freq, b0, b1)| {
        let nb = (b1 - b0) as usize;
        let mut group_units = vec![0u64; ex.groups().len()];
        for &g in ex.group_of() {
            group_units[g as usize] += 1;
        }
        let mut rows = Vec::with_capacity(ex.groups().len() * nb);
        for (g, name) in ex.groups().iter().enumerate() {
            for b in 0..nb {
                let bucket = b0 + b as i64;
                let day = match freq {
                    SeriesFrequency::Daily => bucket,
                    SeriesFrequency::Weekly => week_start(bucket),
                };
                let idx = |m: usize| (g * nb + b) * nm + m;
                let total: Vec<f64> = (0..nm).map(|m| from_fixed(acc.series_sums[idx(m)])).collect();
                let events: Vec<u64> = (0..nm).map(|m| acc.series_counts[idx(m)]).collect();
                let per_unit = total.iter().map(|t| t / group_units[g] as f64).collect();
                rows.push(SeriesRow {
                    group: name.clone(),
                    day: time::format_day(day),
                    units: group_units[g],
                    total,
                    events,
                    per_unit,
                });
            }
        }
        GroupSeries { frequency: freq, metrics: spec.tracked().iter().map(|t| t.name.clone()).collect(), rows }
    });
    let exposed_units = ex.exposed().iter().filter(|e| **e).count() as u64;
    Ok(WindowsOutput {
        units: UnitTable {
            units: ex.units().to_vec(),
            groups: ex.group_of().iter().map(|&g| ex.groups()[g as usize].clone()).collect(),
            exposed: ex.exposed().to_vec(),
            anchors: plan.anchors.clone(),
            columns,
        },
        series,
        windows: counts,
        events: acc.events,
        exposed_units,
        never_exposed_units: n as u64 - exposed_units,
    })
}

/// Parse one event's fields into the accumulator, applying the bad-row policy. Shared by the
/// CSV and Parquet readers so both formats follow one set of rules.
pub(crate) enum RowError {
    Missing(usize),
    UnknownUnit(usize),
    BadTimestamp(usize),
    BadValue(usize),
    Negative(usize),
}

impl RowError {
    pub(crate) fn count(&self, ev: &mut EventCounts) {
        match self {
            RowError::Missing(_) => ev.skipped_missing += 1,
            RowError::UnknownUnit(_) => ev.skipped_unknown_unit += 1,
            RowError::BadTimestamp(_) => ev.skipped_bad_timestamp += 1,
            RowError::BadValue(_) => ev.skipped_bad_value += 1,
            RowError::Negative(_) => ev.skipped_negative += 1,
        }
    }

    /// Turn into the user-facing error; `text` gives the cell text of a column, `metric` the
    /// row's metric.
    pub(crate) fn into_error(
        self,
        cell: impl Fn(usize) -> Cell,
        text: impl Fn(usize) -> String,
        metric: &str,
    ) -> WindowsError {
        match self {
            RowError::Missing(c) => WindowsError::MissingCell { at: cell(c) },
            RowError::UnknownUnit(c) => WindowsError::UnknownUnit { at: cell(c), unit: text(c) },
            RowError::BadTimestamp(c) => WindowsError::BadTimestamp { at: cell(c), text: text(c) },
            RowError::BadValue(c) => WindowsError::BadValue { at: cell(c), text: text(c) },
            RowError::Negative(c) => {
                WindowsError::NegativeValue { at: cell(c), text: text(c), metric: metric.to_string() }
            }
        }
    }
}

/// Check a parsed value: finite, within range, sign allowed.
#[inline]
pub(crate) fn check_value(plan: &Plan<'_>, m: usize, v: f64, col: usize) -> Result<i128, RowError> {
    if !v.is_finite() || v.abs() >= MAX_ABS_VALUE {
        return Err(RowError::BadValue(col));
    }
    if v < 0.0 && !plan.spec.tracked()[m].allow_negative {
        return Err(RowError::Negative(col));
    }
    Ok(to_fixed(v))
}

/// Index of a tracked metric by name.
#[inline]
pub(crate) fn metric_index(plan: &Plan<'_>, name: &[u8]) -> Option<usize> {
    // Length and first byte first: avoids a library call per event for the common mismatch.
    plan.spec.tracked().iter().position(|t| {
        let n = t.name.as_bytes();
        n.len() == name.len() && n.first() == name.first() && n == name
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fixed_point_round_trip_is_exact_for_ordinary_values() {
        for v in [0.0, 1.0, -3.5, 12.34, 1e-3, 123_456_789.125, 1e15] {
            let back = from_fixed(to_fixed(v));
            assert!((back - v).abs() <= v.abs() * 1e-15 + 1e-17, "{v} -> {back}");
        }
        assert_eq!(from_fixed(to_fixed(0.25) * 3), 0.75);
        // Order independence: a + b + c == c + a + b exactly.
        let (a, b, c) = (to_fixed(0.1), to_fixed(1e10), to_fixed(-1e10));
        assert_eq!(a + b + c, c + a + b);
        assert_eq!(from_fixed(a + b + c), 0.1);
    }
}
