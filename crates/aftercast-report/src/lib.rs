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
    let mut bytes = serde_json::to_vec_pretty(value)?;
    bytes.push(b'\n');
    write_atomic(path, &bytes)
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
