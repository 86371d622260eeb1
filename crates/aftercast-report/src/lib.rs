//! aftercast-report: the plain terminal summary of a result and atomic JSON output.
//! Charts and the HTML report build on the same [`AnalysisResult`].

pub mod charts;
pub mod html;
pub mod numbers;

use aftercast_core::result::{AnalysisResult, RopeUnits};
use std::path::Path;

/// The caution printed beside every observational estimate.
pub const CAUTION: &str = "Caution: this is an observational estimate. It rests on assumptions that no data \
can prove (listed above); a randomized test is stronger evidence wherever one is possible.";

/// Errors of the output layer.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ReportError {
    /// A file could not be written.
    #[error("{}: cannot write", path.display())]
    Write {
        /// The target path.
        path: std::path::PathBuf,
        /// The cause.
        #[source]
        source: std::io::Error,
    },
    /// The result could not be serialised.
    #[error("cannot serialise the result: {0}")]
    Json(#[from] serde_json::Error),
    /// An output the user named cannot be written (an input, a link, a missing folder, ...).
    #[error(transparent)]
    Output(#[from] aftercast_core::DataError),
}

/// Write bytes to `path` atomically and safely (`aftercast_core::output`: never over an input,
/// never through a link, a temporary file renamed into place, ordinary permissions).
///
/// # Errors
/// [`ReportError::Output`] for what the user can fix.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), ReportError> {
    aftercast_core::output::write_atomic(path, bytes)?;
    Ok(())
}

/// Serialise any result document as pretty JSON and write it atomically.
///
/// # Errors
/// [`ReportError`].
pub fn write_json<T: serde::Serialize>(path: &Path, value: &T) -> Result<(), ReportError> {
    write_atomic(path, &json_bytes(value)?)
}

/// A result document as written to a file: pretty JSON ending in a newline.
///
/// # Errors
/// [`ReportError`] when the value cannot be serialised.
pub fn json_bytes<T: serde::Serialize>(value: &T) -> Result<Vec<u8>, ReportError> {
    let mut bytes = serde_json::to_vec_pretty(value)?;
    bytes.push(b'\n');
    Ok(bytes)
}

/// A small table a verb hands to the terminal summary and the report beside the effect rows
/// (the comparison with an experiment, a history summary, a planning table).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Table {
    /// Title.
    pub title: String,
    /// Column headers.
    pub headers: Vec<String>,
    /// Rows of cells, as shown.
    pub rows: Vec<Vec<String>>,
    /// A sentence under the table.
    pub note: Option<String>,
}

impl Table {
    /// Plain-text rendering with right-aligned columns after the first.
    pub fn to_text(&self, indent: &str) -> String {
        let n = self.headers.len();
        let mut width = vec![0usize; n];
        for row in std::iter::once(&self.headers).chain(&self.rows) {
            for (k, c) in row.iter().enumerate().take(n) {
                width[k] = width[k].max(c.chars().count());
            }
        }
        let line = |row: &[String]| {
            let cells: Vec<String> = row
                .iter()
                .enumerate()
                .take(n)
                .map(|(k, c)| if k == 0 { format!("{c:<w$}", w = width[k]) } else { format!("{c:>w$}", w = width[k]) })
                .collect();
            format!("{indent}{}", cells.join("  ")).trim_end().to_string()
        };
        let mut out = vec![format!("{indent}{}", self.title), line(&self.headers)];
        out.extend(self.rows.iter().map(|r| line(r)));
        if let Some(n) = &self.note {
            out.push(format!("{indent}{n}"));
        }
        out.join("\n")
    }
}

/// The comparison table of a `compare` result: every method against the experiment.
pub fn comparison_table(r: &AnalysisResult) -> Option<Table> {
    r.truth.as_ref()?;
    let est = r.estimates.as_ref()?;
    let hdi = numbers::interval_name(r.level);
    let d = numbers::decimals_for(
        &est.iter().flat_map(|e| [e.summary.estimate, e.summary.hdi_lower, e.summary.hdi_upper]).collect::<Vec<_>>(),
    );
    let rows = est
        .iter()
        .map(|e| {
            vec![
                format!("{} ({})", e.method, e.setting),
                numbers::signed(e.summary.estimate, d),
                format!("[{}, {}]", numbers::signed(e.summary.hdi_lower, d), numbers::signed(e.summary.hdi_upper, d)),
                numbers::signed(e.bias, d),
                if e.covers_truth { "yes" } else { "no" }.into(),
                e.verdict.word().into(),
                if e.verdict_agrees { "yes" } else { "no" }.into(),
            ]
        })
        .collect();
    Some(Table {
        title: "Observational methods against the experiment".into(),
        headers: vec![
            "method (pool)".into(),
            "estimate".into(),
            hdi,
            "bias".into(),
            "covers truth".into(),
            "verdict".into(),
            "verdict agrees".into(),
        ],
        rows,
        note: Some(format!(
            "Bias = estimate minus the experiment's answer; verdicts are judged on the {} of the {}.",
            numbers::interval_name(r.level),
            match r.rope.units {
                RopeUnits::Percent => "relative effect",
                RopeUnits::Outcome => "average effect",
            }
        )),
    })
}

fn rope_words(r: &AnalysisResult) -> String {
    match r.rope.units {
        RopeUnits::Percent => {
            format!("{} to {} of the counterfactual", numbers::percent(r.rope.low), numbers::percent(r.rope.high))
        }
        RopeUnits::Outcome => {
            let d = numbers::decimals_for(&[r.rope.low, r.rope.high]);
            format!("{} to {} in outcome units", numbers::signed(r.rope.low, d), numbers::signed(r.rope.high, d))
        }
    }
}

/// The effect rows as a table (the same rows and numbers as the report's).
pub fn effect_table(r: &AnalysisResult) -> Table {
    let rows = numbers::effect_lines(r)
        .iter()
        .map(|l| {
            let (p, i) = numbers::line_numbers(r, l);
            let chance = if l.summary.prob_positive.is_finite() {
                format!("{:.0}%", l.summary.prob_positive * 100.0)
            } else {
                "n/a".into()
            };
            vec![format!("{}{}", if l.judged { "* " } else { "  " }, l.label), p, i, chance]
        })
        .collect();
    Table {
        title: "Effect".into(),
        headers: vec!["  quantity".into(), "estimate".into(), numbers::interval_name(r.level), "chance above 0".into()],
        rows,
        note: Some(format!(
            "* the verdict is judged on this row's {}; effects from {} are too small to matter (ROPE).",
            numbers::interval_name(r.level),
            rope_words(r)
        )),
    }
}

/// The sentence of a breakdown's joint test, if it has one.
pub fn joint_sentence(b: &aftercast_core::result::Breakdown) -> Option<String> {
    let t = b.test.as_ref()?;
    let p = if t.p_value < 0.001 { "p < 0.001".to_string() } else { format!("p = {:.3}", t.p_value) };
    let reference = match t.df_denominator {
        Some(d) => format!("Wald, F({}, {d})", t.df),
        None => format!("Wald, {} df", t.df),
    };
    Some(match (t.question, b.by.as_str()) {
        (aftercast_core::estimate::JointQuestion::AllZero, "event-time") => format!(
            "Periods before adoption tested together against zero: {p} ({reference}). A small p says adopters and comparison units already drifted apart before adoption."
        ),
        (aftercast_core::estimate::JointQuestion::AllZero, _) => format!(
            "Tested together against zero: {p} ({reference}). A small p says effects appear where nothing happened."
        ),
        (aftercast_core::estimate::JointQuestion::AllEqual, _) => {
            let hi = b.rows.iter().max_by(|a, b| a.summary.estimate.total_cmp(&b.summary.estimate));
            let lo = b.rows.iter().min_by(|a, b| a.summary.estimate.total_cmp(&b.summary.estimate));
            let order = match (hi, lo, t.prob_order) {
                (Some(h), Some(l), Some(q)) => {
                    format!(
                        " '{}' (highest) is above '{}' (lowest) in {:.0}% of the draws; the two were picked as the extremes, so this overstates how sure the order is: the equality test is the guarded answer.",
                        h.label,
                        l.label,
                        q * 100.0
                    )
                }
                _ => String::new(),
            };
            format!("Equal effects tested: {p} ({reference}); a small p says the effects differ.{order}")
        }
    })
}

/// The breakdowns of a result as tables (event time, wave, calendar period, segment, fake
/// adoption dates), each with its joint test under it. `max_rows` caps long tables (the rest
/// is counted in the note); `calendar` includes the calendar-period table.
pub fn breakdown_tables(r: &AnalysisResult, max_rows: usize, calendar: bool) -> Vec<Table> {
    let unit = r.outcome_unit.as_deref();
    r.breakdowns
        .iter()
        .filter(|b| calendar || b.by != "calendar")
        .map(|b| {
            let first = match b.by.as_str() {
                "event-time" => "periods since adoption",
                "wave" => "wave (first adopted period)",
                "calendar" => "period",
                "segment" => "segment",
                "placebo-date" => "fake adoption date",
                _ => "",
            };
            let shown: Vec<&aftercast_core::result::BreakdownRow> = if b.rows.len() > max_rows {
                // keep every row before adoption and the first periods after it
                b.rows.iter().take(max_rows).collect()
            } else {
                b.rows.iter().collect()
            };
            let all: Vec<f64> =
                shown.iter().flat_map(|x| [x.summary.estimate, x.summary.hdi_lower, x.summary.hdi_upper]).collect();
            let d = numbers::decimals_for(&all);
            let rows = shown
                .iter()
                .map(|x| {
                    let (p, i) = numbers::summary_numbers_at(&x.summary, d, unit);
                    let i = if x.note.as_deref() == Some("reference period") { "reference".into() } else { i };
                    vec![x.label.clone(), p, i, x.units.to_string()]
                })
                .collect();
            let mut note = joint_sentence(b);
            if b.rows.len() > shown.len() {
                let more = format!("{} more rows in result.json and the report.", b.rows.len() - shown.len());
                note = Some(note.map_or(more.clone(), |n| format!("{n} {more}")));
            }
            Table {
                title: b.title.clone(),
                headers: vec![
                    first.into(),
                    "estimate".into(),
                    numbers::interval_name(r.level),
                    if b.by == "segment" && r.verb == "forecast" { "groups" } else { "treated units" }.into(),
                ],
                rows,
                note,
            }
        })
        .collect()
}

/// The terminal summary: one sentence with the answer, then a compact table, the verb's own
/// tables, warnings, assumptions and the caution. `compare` leads with its comparison table and
/// `backtest` with its planning tables instead of a verdict about placebo effects.
pub fn terminal_summary(r: &AnalysisResult, headline: &str, tables: &[Table]) -> String {
    let mut out = Vec::new();
    out.push(format!("aftercast {} ({}): {headline}", r.verb, r.method));
    out.push(format!("  {}", numbers::headline(r)));
    match numbers::kind(r) {
        numbers::Kind::Effect => {
            out.push(effect_table(r).to_text("  "));
            if let Some(p) = r.effect.average.prob_above_threshold
                && let Some(t) = r.threshold
            {
                out.push(format!(
                    "  chance the average effect is above {}: {:.0}%",
                    numbers::signed(t, numbers::decimals_for(&[t])),
                    p * 100.0
                ));
            }
        }
        numbers::Kind::Comparison => {
            if let Some(t) = comparison_table(r) {
                out.push(t.to_text("  "));
            }
        }
        numbers::Kind::Plan => {
            let line = numbers::judged_line(r);
            let (p, i) = numbers::point_and_interval(&line.summary, line.percent);
            out.push(format!(
                "  placebo effect where nothing happened (median over placebo runs): {p}, {} {i}",
                numbers::interval_name(r.level)
            ));
        }
        _ => {}
    }
    for t in breakdown_tables(r, 16, false) {
        out.push(t.to_text("  "));
    }
    for t in tables {
        out.push(t.to_text("  "));
    }
    for w in &r.warnings {
        out.push(format!("  warning: {w}"));
    }
    if !r.assumptions.is_empty() {
        out.push("  this rests on:".into());
        for a in &r.assumptions {
            out.push(format!("    - {a}"));
        }
    }
    out.push(format!("  {CAUTION}"));
    out.join("\n") + "\n"
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_replaces_whole_file() {
        let dir = tempfile::tempdir().expect("tempdir");
        let p = dir.path().join("r.json");
        write_atomic(&p, b"first").expect("write");
        write_atomic(&p, b"second").expect("write");
        assert_eq!(std::fs::read(&p).expect("read"), b"second");
        let leftovers = std::fs::read_dir(dir.path()).expect("dir").count();
        assert_eq!(leftovers, 1);
    }
}
