//! Charts of aftercast results, drawn with plotters into PNG (embedded DejaVu Sans) and SVG.
//!
//! Two layers:
//! - constructors that take plain data (slices of times, values, bands) and return a [`Chart`]
//!   ([`counterfactual_chart`], [`effect_chart`], [`running_total_chart`], [`placebo_gap_chart`],
//!   [`weights_chart`], [`propensity_chart`], [`balance_chart`], [`rosenbaum_chart`],
//!   [`posterior_chart`], [`estimates_chart`], [`power_chart`], [`mde_chart`],
//!   [`event_time_chart`], [`breakdown_chart`]);
//! - [`charts_for`] / [`write_all`], which pick what to draw from an [`AnalysisResult`](aftercast_core::result::AnalysisResult) plus the
//!   kept draws and typed figure data (`aftercast_core::estimate::Figures`).
//!
//! A chart is written with [`Chart::to_png`], [`Chart::to_svg`] or [`Chart::write`]. Odd data
//! (empty paths, NaN summaries, a single draw) never panics: the chart draws a note instead.

mod glyphs;
mod pick;
mod render;
pub mod theme;

pub use pick::{charts_for, write_all};

use crate::{ReportError, write_atomic};
use aftercast_core::result::Summary;
use aftercast_core::time::TimePoint;
use plotters::style::RGBColor;
use std::path::{Path, PathBuf};
use theme::ValueFormat;

/// Errors of chart drawing and encoding.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ChartError {
    /// The embedded font could not be registered with plotters.
    #[error("chart '{chart}': the embedded font could not be registered")]
    Font {
        /// The chart's name.
        chart: String,
    },
    /// plotters failed while drawing.
    #[error("chart '{chart}': drawing failed: {message}")]
    Draw {
        /// The chart's name.
        chart: String,
        /// plotters' message.
        message: String,
    },
    /// The PNG encoder failed.
    #[error("chart '{chart}': PNG encoding failed: {message}")]
    Encode {
        /// The chart's name.
        chart: String,
        /// The encoder's message.
        message: String,
    },
    /// The requested size cannot be drawn.
    #[error("chart '{chart}': size {width}x{height} is outside 200..=4000 pixels")]
    Size {
        /// The chart's name.
        chart: String,
        /// Requested width.
        width: u32,
        /// Requested height.
        height: u32,
    },
}

/// How x values are read: days since 1970-01-01 (calendar dates) or plain numbers.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum XKind {
    /// Days since 1970-01-01, labelled as dates.
    Dates,
    /// Plain numbers (integer periods, years, effect sizes).
    Numbers,
}

/// Convert time points to chart x values: dates become days since 1970-01-01, periods stay.
/// The kind is `Dates` when any point is a date.
pub fn x_values(times: &[TimePoint]) -> (Vec<f64>, XKind) {
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    let kind = if times.iter().any(|t| matches!(t, TimePoint::Date(_))) { XKind::Dates } else { XKind::Numbers };
    let xs = times
        .iter()
        .map(|t| match t {
            TimePoint::Date(d) => (*d - epoch).num_days() as f64,
            TimePoint::Period(p) => *p as f64,
        })
        .collect();
    (xs, kind)
}

/// One drawn line.
#[derive(Debug, Clone)]
pub(crate) struct Line {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub color: RGBColor,
    pub alpha: f64,
    pub width: u32,
    pub dashed: bool,
    pub points: bool,
}

/// A shaded band between two curves.
#[derive(Debug, Clone)]
pub(crate) struct Band {
    pub x: Vec<f64>,
    pub lo: Vec<f64>,
    pub hi: Vec<f64>,
    pub color: RGBColor,
    pub alpha: f64,
}

/// A horizontal reference line with a label.
#[derive(Debug, Clone)]
pub(crate) struct RefLine {
    pub value: f64,
    pub label: String,
    pub color: RGBColor,
}

#[derive(Debug, Clone)]
pub(crate) struct LinePlot {
    pub xkind: XKind,
    pub bands: Vec<Band>,
    pub lines: Vec<Line>,
    pub refs: Vec<RefLine>,
    /// The change date: a vertical marker and a tint over the period after it.
    pub change: Option<f64>,
    /// The marker's label.
    pub change_label: &'static str,
    pub x_label: String,
    pub y_label: String,
    pub y_format: ValueFormat,
    pub x_format: ValueFormat,
    /// Fixed y range (e.g. [0, 1] for probabilities).
    pub y_range: Option<(f64, f64)>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum RowKind {
    /// Point with an interval whisker.
    Interval,
    /// Two points per row joined by a segment (before -> after).
    Dumbbell,
    /// Horizontal bar from zero.
    Bar,
}

#[derive(Debug, Clone)]
pub(crate) struct Row {
    pub label: String,
    pub value: f64,
    pub lo: f64,
    pub hi: f64,
    /// Second value of a dumbbell (the "before" point).
    pub before: f64,
    pub color: RGBColor,
    /// Text written at the right end of the row.
    pub note: String,
}

/// A reference value, its optional band and its label.
pub(crate) type Reference = (f64, Option<(f64, f64)>, String);

#[derive(Debug, Clone)]
pub(crate) struct RowPlot {
    pub kind: RowKind,
    pub rows: Vec<Row>,
    /// A reference value with an optional band (truth, zero).
    pub reference: Option<Reference>,
    /// A dashed threshold (e.g. |SMD| = 0.1).
    pub threshold: Option<(f64, String)>,
    pub x_label: String,
    pub x_format: ValueFormat,
    /// Lower end of the x range, when it must include a value (0 for bars and |SMD|).
    pub x_floor: Option<f64>,
}

#[derive(Debug, Clone)]
pub(crate) struct MirrorPanel {
    pub title: String,
    pub up: Vec<f64>,
    pub down: Vec<f64>,
}

#[derive(Debug, Clone)]
pub(crate) struct MirrorPlot {
    pub edges: Vec<f64>,
    pub panels: Vec<MirrorPanel>,
    pub up_color: RGBColor,
    pub down_color: RGBColor,
    pub x_label: String,
}

#[derive(Debug, Clone)]
pub(crate) struct PosteriorPlot {
    /// Histogram of the draws: edges (bins + 1) and shares per bin; None = summary only.
    pub histogram: Option<(Vec<f64>, Vec<f64>)>,
    pub summary: Summary,
    pub rope: Option<(f64, f64)>,
    pub threshold: Option<f64>,
    pub x_label: String,
    pub x_format: ValueFormat,
}

#[derive(Debug, Clone)]
pub(crate) enum Body {
    Lines(LinePlot),
    Rows(RowPlot),
    Mirror(MirrorPlot),
    Posterior(PosteriorPlot),
    Note(String),
}

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Swatch {
    Line,
    Dashed,
    Band,
    Dot,
    Hollow,
}

/// One chart, ready to be drawn to PNG or SVG.
#[derive(Debug, Clone)]
pub struct Chart {
    /// File stem (without extension), e.g. `forecast-counterfactual`.
    pub name: String,
    /// Short title.
    pub title: String,
    /// One sentence saying what the chart shows.
    pub caption: String,
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    pub(crate) legend: Vec<(String, RGBColor, Swatch)>,
    pub(crate) body: Body,
}

/// Default chart width (px).
pub const WIDTH: u32 = 1000;
/// Default height of time-series charts (px).
pub const HEIGHT: u32 = 480;

impl Chart {
    fn new(name: &str, title: &str, caption: &str, body: Body) -> Chart {
        Chart {
            name: name.to_string(),
            title: title.to_string(),
            caption: caption.to_string(),
            width: WIDTH,
            height: HEIGHT,
            legend: Vec::new(),
            body,
        }
    }

    /// A chart that only shows a message (used when there is nothing to draw).
    pub fn note(name: &str, title: &str, message: &str) -> Chart {
        Chart::new(name, title, message, Body::Note(message.to_string()))
    }

    /// Whether the chart only carries a note (no data could be drawn).
    pub fn is_note(&self) -> bool {
        matches!(self.body, Body::Note(_))
    }

    /// The bar shares of a distribution chart's histogram (they sum to one), if it has one.
    pub fn histogram_shares(&self) -> Option<&[f64]> {
        match &self.body {
            Body::Posterior(p) => p.histogram.as_ref().map(|(_, shares)| shares.as_slice()),
            _ => None,
        }
    }

    /// Change the pixel size.
    pub fn with_size(mut self, width: u32, height: u32) -> Chart {
        self.width = width;
        self.height = height;
        self
    }

    fn legend(mut self, items: &[(&str, RGBColor, Swatch)]) -> Chart {
        self.legend = items.iter().map(|(l, c, s)| (l.to_string(), *c, *s)).collect();
        self
    }

    /// Draw as SVG. `header` draws the title and caption into the picture (standalone files);
    /// without it they are left to the surrounding page (the HTML report).
    ///
    /// # Errors
    /// [`ChartError`].
    pub fn to_svg(&self, header: bool) -> Result<String, ChartError> {
        render::svg(self, header)
    }

    /// Draw as PNG (RGB, 8 bit), title and caption included.
    ///
    /// # Errors
    /// [`ChartError`].
    pub fn to_png(&self) -> Result<Vec<u8>, ChartError> {
        render::png(self)
    }

    /// Write `DIR/<name>.png` and `DIR/<name>.svg` atomically; returns both paths.
    ///
    /// # Errors
    /// [`ReportError::Write`] naming the file (drawing errors are carried as its cause).
    pub fn write(&self, dir: &Path) -> Result<Vec<PathBuf>, ReportError> {
        let png_path = dir.join(format!("{}.png", self.name));
        let svg_path = dir.join(format!("{}.svg", self.name));
        let as_write = |path: &Path, e: ChartError| ReportError::Write {
            path: path.to_path_buf(),
            source: std::io::Error::other(e),
        };
        let png = self.to_png().map_err(|e| as_write(&png_path, e))?;
        write_atomic(&png_path, &png)?;
        let svg = self.to_svg(true).map_err(|e| as_write(&svg_path, e))?;
        write_atomic(&svg_path, svg.as_bytes())?;
        Ok(vec![png_path, svg_path])
    }
}

/// Axis limits that a few far outliers cannot stretch: the full range of the finite values,
/// except that a side reaching more than the central 98%'s span beyond it is cut to a
/// tenth of that span past it. Returns (low, high, values outside); None without finite values.
/// Fewer than 20 values are never cut.
pub fn robust_extent(values: &[f64]) -> Option<(f64, f64, usize)> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let (lo, hi) = (v[0], v[n - 1]);
    if n < 20 {
        return Some((lo, hi, 0));
    }
    let q = |p: f64| v[((n - 1) as f64 * p).round() as usize];
    let (a, b) = (q(0.01), q(0.99));
    let core = (b - a).max(f64::EPSILON * a.abs().max(b.abs()).max(1.0));
    let lo2 = if a - lo > core { a - 0.1 * core } else { lo };
    let hi2 = if hi - b > core { b + 0.1 * core } else { hi };
    let outside = v.iter().filter(|x| **x < lo2 || **x > hi2).count();
    Some((lo2, hi2, outside))
}

fn finite_count(v: &[f64]) -> usize {
    v.iter().filter(|x| x.is_finite()).count()
}

fn pad_to(v: &[f64], n: usize) -> Vec<f64> {
    (0..n).map(|i| v.get(i).copied().unwrap_or(f64::NAN)).collect()
}

/// Names shown for the two series of a counterfactual chart.
#[derive(Debug, Clone, Copy)]
pub struct SeriesNames<'a> {
    /// The observed series (e.g. "observed", "treated").
    pub observed: &'a str,
    /// The counterfactual (e.g. "counterfactual", "synthetic").
    pub counterfactual: &'a str,
}

impl Default for SeriesNames<'_> {
    fn default() -> Self {
        SeriesNames { observed: "observed", counterfactual: "counterfactual" }
    }
}

/// Observed series against the point counterfactual with its band, across the pre- and
/// post-periods, the change marked by a vertical rule and a tint over the post-period.
/// Missing values are NaN; slices shorter than `x` are padded with NaN.
#[allow(clippy::too_many_arguments)]
pub fn counterfactual_chart(
    name: &str,
    x: &[f64],
    xkind: XKind,
    observed: &[f64],
    counterfactual: (&[f64], &[f64], &[f64]),
    change: Option<f64>,
    names: SeriesNames<'_>,
    level: f64,
) -> Chart {
    let n = x.len();
    let (mid, lo, hi) = counterfactual;
    if n == 0 || finite_count(observed) + finite_count(mid) == 0 {
        return Chart::note(name, "Observed and counterfactual", "No periods to draw: the result has an empty path.");
    }
    let band_label = format!("{:.0}% band", level * 100.0);
    // dashes break up on long, wiggly series: dashed only while the periods are few
    let dashed = n <= 150;
    let caption = format!(
        "The {} line against the {} the model expects without the change, with its {:.0}% band; the green area between them after the change is the effect.",
        names.observed,
        names.counterfactual,
        level * 100.0
    );
    // the effect itself: the area between the two lines after the change
    let after = |v: &[f64]| -> Vec<f64> {
        x.iter().zip(pad_to(v, n)).map(|(t, y)| if change.is_some_and(|c| *t >= c) { y } else { f64::NAN }).collect()
    };
    let body = Body::Lines(LinePlot {
        xkind,
        bands: vec![
            Band { x: x.to_vec(), lo: pad_to(lo, n), hi: pad_to(hi, n), color: theme::CLAY, alpha: 0.18 },
            Band { x: x.to_vec(), lo: after(mid), hi: after(observed), color: theme::TEAL, alpha: 0.45 },
        ],
        lines: vec![
            Line { x: x.to_vec(), y: pad_to(mid, n), color: theme::CLAY, alpha: 1.0, width: 2, dashed, points: false },
            Line {
                x: x.to_vec(),
                y: pad_to(observed, n),
                color: theme::INK,
                alpha: 1.0,
                width: 2,
                dashed: false,
                points: false,
            },
        ],
        refs: vec![],
        change,
        change_label: "change",
        x_label: String::new(),
        y_label: String::new(),
        y_format: ValueFormat::Number,
        x_format: ValueFormat::Number,
        y_range: None,
    });
    let title = format!("{} vs {}", capitalise(names.observed), names.counterfactual);
    Chart::new(name, &title, &caption, body).legend(&[
        (names.observed, theme::INK, Swatch::Line),
        (names.counterfactual, theme::CLAY, if dashed { Swatch::Dashed } else { Swatch::Line }),
        (&band_label, theme::CLAY, Swatch::Band),
        ("effect (the gap after the change)", theme::TEAL, Swatch::Band),
    ])
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

/// Effect per period (observed minus counterfactual) with its band. Points before `change`
/// are drawn in grey: there the gap is the model's fitting error and should hover around zero.
pub fn effect_chart(
    name: &str,
    x: &[f64],
    xkind: XKind,
    effect: (&[f64], &[f64], &[f64]),
    change: Option<f64>,
    level: f64,
) -> Chart {
    let n = x.len();
    let (mid, lo, hi) = effect;
    if n == 0 || finite_count(mid) == 0 {
        return Chart::note(name, "Effect per period", "No effect per period to draw.");
    }
    let (mid, lo, hi) = (pad_to(mid, n), pad_to(lo, n), pad_to(hi, n));
    let split = |keep_post: bool, v: &[f64]| -> Vec<f64> {
        x.iter()
            .zip(v)
            .map(|(t, y)| {
                let post = change.is_none_or(|c| *t >= c);
                if post == keep_post { *y } else { f64::NAN }
            })
            .collect()
    };
    let mut bands = Vec::new();
    let mut lines = Vec::new();
    if change.is_some() {
        bands.push(Band {
            x: x.to_vec(),
            lo: split(false, &lo),
            hi: split(false, &hi),
            color: theme::MUTED,
            alpha: 0.16,
        });
        lines.push(Line {
            x: x.to_vec(),
            y: split(false, &mid),
            color: theme::MUTED,
            alpha: 1.0,
            width: 1,
            dashed: false,
            points: false,
        });
    }
    bands.push(Band { x: x.to_vec(), lo: split(true, &lo), hi: split(true, &hi), color: theme::TEAL, alpha: 0.2 });
    lines.push(Line {
        x: x.to_vec(),
        y: split(true, &mid),
        color: theme::TEAL,
        alpha: 1.0,
        width: 2,
        dashed: false,
        points: false,
    });
    let body = Body::Lines(LinePlot {
        xkind,
        bands,
        lines,
        refs: vec![RefLine { value: 0.0, label: "no effect".into(), color: theme::INK }],
        change,
        change_label: "change",
        x_label: String::new(),
        y_label: "observed − counterfactual".into(),
        y_format: ValueFormat::Number,
        x_format: ValueFormat::Number,
        y_range: None,
    });
    let band_label = format!("{:.0}% band", level * 100.0);
    let caption = "How far the observed series sits from the counterfactual in each period; before the change the gap shows the model's usual error.";
    Chart::new(name, "Effect per period", caption, body).legend(&[
        ("effect after the change", theme::TEAL, Swatch::Line),
        (&band_label, theme::TEAL, Swatch::Band),
        ("fit error before the change", theme::MUTED, Swatch::Line),
    ])
}

/// Effects by periods since adoption: before adoption in grey (they should sit on zero; a
/// reference period is drawn hollow at zero), from adoption on in teal, each with its band; the
/// tint starts at adoption.
pub fn event_time_chart(name: &str, k: &[f64], effect: (&[f64], &[f64], &[f64]), level: f64) -> Chart {
    let (mid, lo, hi) = effect;
    if k.is_empty() || finite_count(mid) == 0 {
        return Chart::note(name, "Effect by periods since adoption", "No event-time effects to draw.");
    }
    let side = |post: bool, v: &[f64]| -> Vec<f64> {
        k.iter().zip(v).map(|(x, y)| if (*x >= 0.0) == post { *y } else { f64::NAN }).collect()
    };
    let mut bands = Vec::new();
    let mut lines = Vec::new();
    for (post, color, width) in [(false, theme::MUTED, 1), (true, theme::TEAL, 2)] {
        bands.push(Band { x: k.to_vec(), lo: side(post, lo), hi: side(post, hi), color, alpha: 0.18 });
        lines.push(Line { x: k.to_vec(), y: side(post, mid), color, alpha: 1.0, width, dashed: false, points: true });
    }
    let body = Body::Lines(LinePlot {
        xkind: XKind::Numbers,
        bands,
        lines,
        refs: vec![RefLine { value: 0.0, label: String::new(), color: theme::INK }],
        change: Some(-0.5),
        change_label: "adoption",
        x_label: "periods since adoption".into(),
        y_label: "effect".into(),
        y_format: ValueFormat::Number,
        x_format: ValueFormat::Number,
        y_range: None,
    });
    let band_label = format!("{:.0}% band", level * 100.0);
    Chart::new(
        name,
        "Effect by periods since adoption",
        "Each point averages the waves at that many periods since they adopted; before adoption the points test the comparison (they should sit on zero).",
        body,
    )
    .legend(&if k.iter().any(|x| *x < 0.0) {
        vec![
            ("after adoption", theme::TEAL, Swatch::Dot),
            ("before adoption", theme::MUTED, Swatch::Dot),
            (band_label.as_str(), theme::TEAL, Swatch::Band),
        ]
    } else {
        vec![("after adoption", theme::TEAL, Swatch::Dot), (band_label.as_str(), theme::TEAL, Swatch::Band)]
    })
}

/// Rows of a breakdown (waves, segments, fake dates) with their intervals against zero.
pub fn breakdown_chart(name: &str, title: &str, caption: &str, rows: &[EstimateBar], quantity: &str) -> Chart {
    let mut c = estimates_chart(name, rows, None, 0.9, quantity, ValueFormat::Number);
    if !c.is_note() {
        c.title = title.to_string();
        c.caption = caption.to_string();
    }
    c
}

/// Running total of the effect over the post-period with its band.
pub fn running_total_chart(name: &str, x: &[f64], xkind: XKind, total: (&[f64], &[f64], &[f64]), level: f64) -> Chart {
    let n = x.len();
    let (mid, lo, hi) = total;
    if n == 0 || finite_count(mid) == 0 {
        return Chart::note(name, "Running total", "No post-period running total to draw.");
    }
    let body = Body::Lines(LinePlot {
        xkind,
        bands: vec![Band { x: x.to_vec(), lo: pad_to(lo, n), hi: pad_to(hi, n), color: theme::SLATE, alpha: 0.2 }],
        lines: vec![Line {
            x: x.to_vec(),
            y: pad_to(mid, n),
            color: theme::SLATE,
            alpha: 1.0,
            width: 3,
            dashed: false,
            points: n <= 40,
        }],
        refs: vec![RefLine { value: 0.0, label: "no effect".into(), color: theme::INK }],
        change: None,
        change_label: "change",
        x_label: String::new(),
        y_label: "effect added up since the change".into(),
        y_format: ValueFormat::Number,
        x_format: ValueFormat::Number,
        y_range: None,
    });
    let band_label = format!("{:.0}% band", level * 100.0);
    Chart::new(
        name,
        "Accumulated effect since the change",
        "The effect added up period by period from the change onwards; the band is where the total lies with the stated probability.",
        body,
    )
    .legend(&[("running total", theme::SLATE, Swatch::Line), (&band_label, theme::SLATE, Swatch::Band)])
}

/// The treated unit's gap (treated minus synthetic) drawn over the gaps of placebo runs, each
/// donor treated as if it had been treated.
pub fn placebo_gap_chart(
    name: &str,
    x: &[f64],
    xkind: XKind,
    treated_gap: &[f64],
    placebos: &[(String, Vec<f64>)],
    change: Option<f64>,
) -> Chart {
    let n = x.len();
    if n == 0 || finite_count(treated_gap) == 0 {
        return Chart::note(name, "Gap among placebo gaps", "No gap path to draw.");
    }
    let mut lines: Vec<Line> = placebos
        .iter()
        .filter(|(_, g)| finite_count(g) > 0)
        .map(|(_, g)| Line {
            x: x.to_vec(),
            y: pad_to(g, n),
            color: theme::MUTED,
            alpha: 0.35,
            width: 1,
            dashed: false,
            points: false,
        })
        .collect();
    let shown = lines.len();
    lines.push(Line {
        x: x.to_vec(),
        y: pad_to(treated_gap, n),
        color: theme::INK,
        alpha: 1.0,
        width: 3,
        dashed: false,
        points: false,
    });
    let body = Body::Lines(LinePlot {
        xkind,
        bands: vec![],
        lines,
        refs: vec![RefLine { value: 0.0, label: String::new(), color: theme::INK }],
        change,
        change_label: "change",
        x_label: String::new(),
        y_label: "unit − its synthetic".into(),
        y_format: ValueFormat::Number,
        x_format: ValueFormat::Number,
        y_range: None,
    });
    let caption = if shown == 0 {
        "The treated unit's gap to its synthetic control; no placebo runs were supplied, so there is nothing to compare it with.".to_string()
    } else {
        format!(
            "The treated unit's gap to its synthetic control (dark) among {shown} placebo gaps of donors treated as if they had been treated (grey); an effect stands out of the grey bundle after the change."
        )
    };
    Chart::new(name, "Treated gap among placebo gaps", &caption, body)
        .legend(&[("treated unit", theme::INK, Swatch::Line), ("placebo donors", theme::MUTED, Swatch::Line)])
}

fn rows_height(rows: usize) -> u32 {
    (150 + 30 * rows as u32).clamp(300, 1400)
}

/// Donor weights of a synthetic control as horizontal bars, largest first. At most `max_rows`
/// donors are named; the rest are summed into one row.
pub fn weights_chart(name: &str, weights: &[(String, f64)], max_rows: usize) -> Chart {
    let mut w: Vec<(String, f64)> = weights.iter().filter(|(_, v)| v.is_finite()).cloned().collect();
    if w.is_empty() {
        return Chart::note(name, "Donor weights", "No donor weights to draw.");
    }
    w.sort_by(|a, b| b.1.total_cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    let max_rows = max_rows.max(1);
    let summed = w.len() > max_rows;
    if summed {
        let rest: f64 = w[max_rows - 1..].iter().map(|(_, v)| v).sum();
        let count = w.len() - (max_rows - 1);
        w.truncate(max_rows - 1);
        w.push((format!("{count} other donors"), rest));
    }
    let shown = w.len();
    let rows: Vec<Row> = w
        .iter()
        .enumerate()
        .map(|(i, (u, v))| Row {
            label: u.clone(),
            // the remainder is a note, not a bar: summed, it would outgrow every donor named
            value: if summed && i + 1 == shown { f64::NAN } else { *v },
            lo: f64::NAN,
            hi: f64::NAN,
            before: f64::NAN,
            color: if summed && i + 1 == shown { theme::MUTED } else { theme::SLATE },
            note: if summed && i + 1 == shown {
                format!("{:.1}% together", v * 100.0)
            } else {
                format!("{:.1}%", v * 100.0)
            },
        })
        .collect();
    let h = rows_height(rows.len());
    Chart::new(
        name,
        "Donor weights",
        "How much each donor unit contributes to the synthetic control; the weights add up to one.",
        Body::Rows(RowPlot {
            kind: RowKind::Bar,
            rows,
            reference: None,
            threshold: None,
            x_label: "weight".into(),
            x_format: ValueFormat::Percent,
            x_floor: Some(0.0),
        }),
    )
    .with_size(WIDTH, h)
}

/// Propensity-score distributions of treated (above the axis) and control units (below), one
/// panel before and one after adjustment. `edges` has one more entry than each share vector.
pub fn propensity_chart(name: &str, edges: &[f64], before: (&[f64], &[f64]), after: (&[f64], &[f64])) -> Chart {
    let bins = edges.len().saturating_sub(1);
    let ok = |v: &[f64]| v.len() == bins && v.iter().all(|x| x.is_finite() && *x >= 0.0);
    if bins == 0
        || !edges.iter().all(|e| e.is_finite())
        || !(ok(before.0) && ok(before.1) && ok(after.0) && ok(after.1))
    {
        return Chart::note(name, "Propensity scores", "No usable propensity-score bins to draw.");
    }
    Chart::new(
        name,
        "Propensity scores before and after adjustment",
        "Share of treated units (above the axis) and of control units (below) in each band of the propensity score, before and after matching or weighting; overlapping shapes mean comparable groups.",
        Body::Mirror(MirrorPlot {
            edges: edges.to_vec(),
            panels: vec![
                MirrorPanel { title: "before adjustment".into(), up: before.0.to_vec(), down: before.1.to_vec() },
                MirrorPanel { title: "after adjustment".into(), up: after.0.to_vec(), down: after.1.to_vec() },
            ],
            up_color: theme::CLAY,
            down_color: theme::SLATE,
            x_label: "propensity score".into(),
        }),
    )
    .legend(&[("treated", theme::CLAY, Swatch::Band), ("control", theme::SLATE, Swatch::Band)])
}

/// Absolute standardised mean differences before (hollow) and after (filled) adjustment, one row
/// per covariate, with a dashed rule at `threshold` (0.1 is common practice, Austin 2009).
pub fn balance_chart(name: &str, rows: &[(String, f64, f64)], threshold: f64) -> Chart {
    let mut r: Vec<&(String, f64, f64)> = rows.iter().filter(|(_, b, a)| b.is_finite() || a.is_finite()).collect();
    if r.is_empty() {
        return Chart::note(name, "Covariate balance", "No balance rows to draw.");
    }
    r.sort_by(|a, b| b.1.abs().total_cmp(&a.1.abs()));
    let rows: Vec<Row> = r
        .iter()
        .map(|(c, b, a)| Row {
            label: c.clone(),
            value: a.abs(),
            lo: f64::NAN,
            hi: f64::NAN,
            before: b.abs(),
            color: if a.abs() > threshold { theme::BRICK } else { theme::INK },
            note: String::new(),
        })
        .collect();
    let h = rows_height(rows.len());
    Chart::new(
        name,
        "Covariate balance",
        &format!(
            "Absolute standardised mean difference of each covariate before (hollow) and after (filled) adjustment; points left of the dashed {threshold} line are commonly taken as balanced."
        ),
        Body::Rows(RowPlot {
            kind: RowKind::Dumbbell,
            rows,
            reference: None,
            threshold: Some((threshold, format!("{threshold}"))),
            x_label: "|standardised mean difference|".into(),
            x_format: ValueFormat::Number,
            x_floor: Some(0.0),
        }),
    )
    .with_size(WIDTH, h)
    .legend(&[("before", theme::MUTED, Swatch::Hollow), ("after", theme::INK, Swatch::Dot), ("after, above the line", theme::BRICK, Swatch::Dot)])
}

/// Rosenbaum sensitivity bound: the largest one-sided p-value against Gamma, the odds ratio of
/// hidden bias, with the significance level as a dashed rule.
pub fn rosenbaum_chart(name: &str, gamma: &[f64], p_upper: &[f64], alpha: f64) -> Chart {
    let pts: Vec<(f64, f64)> =
        gamma.iter().zip(p_upper).filter(|(g, p)| g.is_finite() && p.is_finite()).map(|(g, p)| (*g, *p)).collect();
    if pts.is_empty() {
        return Chart::note(name, "Sensitivity to hidden bias", "No Rosenbaum bounds to draw.");
    }
    let crossing = pts.iter().position(|(_, p)| *p > alpha);
    let caption = match crossing {
        Some(0) => format!(
            "The worst-case p-value if an unobserved trait made treated units up to Gamma times as likely to be treated; it is above {alpha} already at the smallest Gamma on the grid ({:.2}).",
            pts[0].0
        ),
        Some(i) => format!(
            "The worst-case p-value if an unobserved trait made treated units up to Gamma times as likely to be treated; the conclusion stops being significant at {alpha} once Gamma passes a value between {:.2} and {:.2}.",
            pts[i - 1].0,
            pts[i].0
        ),
        None => format!(
            "The worst-case p-value if an unobserved trait made treated units up to Gamma times as likely to be treated; it stays below {alpha} over the whole grid."
        ),
    };
    Chart::new(
        name,
        "Sensitivity to hidden bias",
        &caption,
        Body::Lines(LinePlot {
            xkind: XKind::Numbers,
            bands: vec![],
            lines: vec![Line {
                x: pts.iter().map(|p| p.0).collect(),
                y: pts.iter().map(|p| p.1).collect(),
                color: theme::INK,
                alpha: 1.0,
                width: 2,
                dashed: false,
                points: true,
            }],
            refs: vec![RefLine { value: alpha, label: format!("significance level {alpha}"), color: theme::BRICK }],
            change: None,
            change_label: "change",
            x_label: "Gamma (odds of hidden bias)".into(),
            y_label: "upper bound of the p-value".into(),
            y_format: ValueFormat::Share,
            x_format: ValueFormat::Number,
            y_range: Some((0.0, 1.0)),
        }),
    )
    .legend(&[("worst-case p-value", theme::INK, Swatch::Line), ("significance level", theme::BRICK, Swatch::Dashed)])
}

/// What the posterior chart is drawn from.
#[derive(Debug, Clone, Copy)]
pub enum PosteriorSource<'a> {
    /// Raw draws (a histogram is made from them).
    Draws(&'a [f64]),
    /// A ready histogram: bin edges (bins + 1) and counts or shares per bin.
    Histogram(&'a [f64], &'a [f64]),
}

fn histogram_of(draws: &[f64]) -> Option<(Vec<f64>, Vec<f64>)> {
    let mut d: Vec<f64> = draws.iter().copied().filter(|x| x.is_finite()).collect();
    if d.len() < 2 {
        return None;
    }
    d.sort_by(f64::total_cmp);
    let (lo, hi) = (d[0], d[d.len() - 1]);
    if hi - lo <= f64::EPSILON * lo.abs().max(1.0) {
        return None;
    }
    let bins = ((d.len() as f64).sqrt().round() as usize).clamp(10, 60);
    let w = (hi - lo) / bins as f64;
    let edges: Vec<f64> = (0..=bins).map(|i| lo + w * i as f64).collect();
    let mut counts = vec![0.0; bins];
    for v in &d {
        let b = (((v - lo) / w) as usize).min(bins - 1);
        counts[b] += 1.0;
    }
    Some((edges, counts))
}

/// Distribution of an effect over its draws with the point answer, the highest-density interval,
/// the ROPE and (when given) a threshold marked; when the draws do not vary (fewer than two
/// distinct values) only the intervals of the summary are drawn.
#[allow(clippy::too_many_arguments)]
pub fn posterior_chart(
    name: &str,
    source: PosteriorSource<'_>,
    summary: &Summary,
    level: f64,
    rope: Option<(f64, f64)>,
    threshold: Option<f64>,
    quantity: &str,
    format: ValueFormat,
) -> Chart {
    let values = [summary.estimate, summary.hdi_lower, summary.hdi_upper];
    let histogram = match source {
        PosteriorSource::Draws(d) => histogram_of(d),
        PosteriorSource::Histogram(e, c) => {
            let ok = e.len() == c.len() + 1
                && !c.is_empty()
                && e.iter().chain(c).all(|v| v.is_finite())
                && c.iter().sum::<f64>() > 0.0;
            ok.then(|| (e.to_vec(), c.to_vec()))
        }
    };
    if histogram.is_none() && values.iter().any(|v| !v.is_finite()) {
        return Chart::note(
            name,
            &format!("Distribution of the {quantity}"),
            "The summary holds no finite interval (NaN), so there is nothing to draw.",
        );
    }
    let histogram = histogram.map(|(e, c)| {
        let total: f64 = c.iter().sum();
        (e, c.iter().map(|v| v / total).collect::<Vec<f64>>())
    });
    let pct = format!("{:.0}%", level * 100.0);
    let rope_words = if rope.is_some() { "; the ochre strip is the range too small to matter (ROPE)" } else { "" };
    let caption = match &histogram {
        Some(_) => format!(
            "How the {quantity} is spread over the draws; the dark bars hold the {pct} highest-density interval, on which the verdict is judged{rope_words}."
        ),
        None => format!(
            "The draws of the {quantity} hardly vary, so only its {pct} highest-density interval (thick) and equal-tailed interval (thin) are drawn{rope_words}."
        ),
    };
    let v = |x: f64| theme::fmt_value(x, format);
    let mut point = format!("estimate {}", v(summary.estimate));
    if summary.prob_positive.is_finite() {
        point.push_str(&format!(", chance above 0: {:.0}%", summary.prob_positive * 100.0));
    }
    let mut legend = vec![
        (format!("{pct} HDI [{}, {}]", v(summary.hdi_lower), v(summary.hdi_upper)), theme::TEAL, Swatch::Band),
        (point, theme::INK, Swatch::Line),
    ];
    if let Some((a, b)) = rope {
        legend.push((format!("ROPE [{}, {}]", v(a), v(b)), theme::OCHRE, Swatch::Band));
    }
    if let (Some(t), Some(pa)) = (threshold, summary.prob_above_threshold) {
        legend.push((format!("threshold {}: chance above {:.0}%", v(t), pa * 100.0), theme::BRICK, Swatch::Dashed));
    }
    let mut c = Chart::new(
        name,
        &format!("Distribution of the {quantity}"),
        &caption,
        Body::Posterior(PosteriorPlot {
            histogram,
            summary: *summary,
            rope,
            threshold: threshold.filter(|_| summary.prob_above_threshold.is_some()),
            x_label: quantity.to_string(),
            x_format: format,
        }),
    );
    c.legend = legend;
    c.height = 420;
    c
}

/// One row of an estimates chart.
#[derive(Debug, Clone)]
pub struct EstimateBar {
    /// Method label.
    pub label: String,
    /// Its summary (the point `estimate` and the HDI are drawn, as in every table).
    pub summary: Summary,
}

/// Each method's estimate with its interval, against the experimental truth (a vertical line
/// with its band) when `truth` is given, otherwise against zero (triangulation).
pub fn estimates_chart(
    name: &str,
    rows: &[EstimateBar],
    truth: Option<&Summary>,
    level: f64,
    quantity: &str,
    format: ValueFormat,
) -> Chart {
    let rows: Vec<Row> = rows
        .iter()
        .filter(|r| r.summary.estimate.is_finite())
        .map(|r| {
            let point = r.summary.estimate;
            let covers = truth.is_none_or(|t| r.summary.hdi_lower <= t.estimate && t.estimate <= r.summary.hdi_upper);
            Row {
                label: r.label.clone(),
                value: point,
                lo: r.summary.hdi_lower,
                hi: r.summary.hdi_upper,
                before: f64::NAN,
                color: if covers { theme::INK } else { theme::BRICK },
                note: theme::fmt_value(point, format),
            }
        })
        .collect();
    if rows.is_empty() {
        return Chart::note(name, "Estimates side by side", "No finite estimates to draw.");
    }
    let pct = format!("{:.0}%", level * 100.0);
    let h = rows_height(rows.len());
    let (title, caption, reference, legend) = match truth {
        Some(t) if t.estimate.is_finite() => (
            "Observational estimates against the experiment",
            format!(
                "Each method's estimate of the {quantity} with its {pct} HDI, against the randomized experiment's answer (ochre line and band); red rows miss the experiment."
            ),
            Some((
                t.estimate,
                (t.hdi_lower.is_finite() && t.hdi_upper.is_finite()).then_some((t.hdi_lower, t.hdi_upper)),
                "experiment".to_string(),
            )),
            vec![
                ("covers the experiment", theme::INK, Swatch::Dot),
                ("misses it", theme::BRICK, Swatch::Dot),
                ("experiment", theme::OCHRE, Swatch::Band),
            ],
        ),
        _ => (
            "Estimates side by side",
            format!("Each method's estimate of the {quantity} with its {pct} HDI; the vertical rule marks no effect."),
            Some((0.0, None, "no effect".to_string())),
            vec![("estimate and interval", theme::INK, Swatch::Dot)],
        ),
    };
    let mut c = Chart::new(
        name,
        title,
        &caption,
        Body::Rows(RowPlot {
            kind: RowKind::Interval,
            rows,
            reference,
            threshold: None,
            x_label: quantity.to_string(),
            x_format: format,
            x_floor: None,
        }),
    )
    .with_size(WIDTH, h);
    c.legend = legend.into_iter().map(|(l, c, s)| (l.to_string(), c, s)).collect();
    c
}

/// Power against the wait, one line per lift, with a dashed rule at the target power (0.8 is
/// common practice): where a line crosses the rule is how long that lift needs.
pub fn power_chart(name: &str, curves: &[(String, Vec<f64>, Vec<f64>)], target: f64, wait_unit: &str) -> Chart {
    let drawn = |(_, (_, x, y)): &(usize, &(String, Vec<f64>, Vec<f64>))| {
        x.iter().zip(y).any(|(a, b)| a.is_finite() && b.is_finite())
    };
    let lines: Vec<Line> = curves
        .iter()
        .enumerate()
        .filter(drawn)
        .map(|(i, (_, x, y))| Line {
            x: x.clone(),
            y: pad_to(y, x.len()),
            color: theme::SEQUENCE[i % theme::SEQUENCE.len()],
            alpha: 1.0,
            width: 2,
            dashed: false,
            points: true,
        })
        .collect();
    if lines.is_empty() {
        return Chart::note(name, "Power", "No power estimates to draw.");
    }
    let target_pct = format!("{:.0}%", 100.0 * target);
    let mut c = Chart::new(
        name,
        "How soon each change would be seen",
        &format!(
            "Share of placebo runs in which a change of each size would be seen, by how long one waits; one line per size; the dashed rule marks the target power of {target_pct}."
        ),
        Body::Lines(LinePlot {
            xkind: XKind::Numbers,
            bands: vec![],
            lines,
            refs: vec![RefLine { value: target, label: format!("target {target_pct}"), color: theme::BRICK }],
            change: None,
            change_label: "change",
            x_label: wait_label(wait_unit),
            y_label: "power".into(),
            y_format: ValueFormat::Share,
            x_format: ValueFormat::Number,
            y_range: Some((0.0, 1.0)),
        }),
    );
    c.legend = curves
        .iter()
        .enumerate()
        .filter(drawn)
        .map(|(i, (l, _, _))| (l.clone(), theme::SEQUENCE[i % theme::SEQUENCE.len()], Swatch::Line))
        .collect();
    c
}

/// "wait (days)", or "units in the analysis" for a unit-table plan.
fn wait_label(unit: &str) -> String {
    if unit == "units" { "units in the analysis".into() } else { format!("wait ({unit})") }
}

/// The smallest change seen at the target power, by wait.
pub fn mde_chart(name: &str, waits: &[f64], mde: &[f64], target: f64, wait_unit: &str) -> Chart {
    if waits.iter().zip(mde).all(|(a, b)| !(a.is_finite() && b.is_finite())) {
        return Chart::note(
            name,
            "Smallest change seen",
            "No wait reaches the target power for any change, so there is no smallest change to draw.",
        );
    }
    Chart::new(
        name,
        "Smallest change seen, by wait",
        &format!(
            "The smallest increase the placebo runs see with {:.0}% power after each wait (the minimum detectable effect); smaller is better.",
            100.0 * target
        ),
        Body::Lines(LinePlot {
            xkind: XKind::Numbers,
            bands: vec![],
            lines: vec![Line {
                x: waits.to_vec(),
                y: pad_to(mde, waits.len()),
                color: theme::TEAL,
                alpha: 1.0,
                width: 3,
                dashed: false,
                points: true,
            }],
            refs: vec![],
            change: None,
            change_label: "change",
            x_label: wait_label(wait_unit),
            y_label: "minimum detectable effect".into(),
            y_format: ValueFormat::Percent,
            x_format: ValueFormat::Number,
            // from zero, so the fall with the wait is read at its true size
            y_range: Some(mde.iter().copied().filter(|v| v.is_finite()).fold(0.0, f64::max))
                .filter(|m| *m > 0.0)
                .map(|m| (0.0, 1.1 * m)),
        }),
    )
    .legend(&[("minimum detectable effect", theme::TEAL, Swatch::Line)])
}
