//! Flags shared by every analysis verb, and the code that writes a verb's outputs.

use crate::failure::{bad_input, bad_input_msg};
use aftercast_core::estimate::{DEFAULT_DRAWS, DEFAULT_SEED, Inference};
use aftercast_core::policy::{GapPolicy, MissingPolicy};
use aftercast_core::result::Rope;
use aftercast_core::time::DateFormat;
use aftercast_core::{DataError, RawTable};
use std::path::{Path, PathBuf};

/// Flags every analysis verb takes.
#[derive(Debug, Clone, clap::Args)]
pub struct Common {
    /// Interval level (0 < level < 1).
    #[arg(long, default_value_t = 0.9, value_parser = parse_level)]
    pub level: f64,
    /// Region of practical equivalence: `1%` (of the counterfactual), `25` (outcome units),
    /// or asymmetric `-2%:1%`.
    #[arg(long, default_value = "1%", allow_hyphen_values = true)]
    pub rope: Rope,
    /// The label of the outcome's units, shown beside every number in outcome units: a
    /// currency sign goes before the number ("$" -> +$1,250), a word after it ("orders").
    #[arg(long, value_parser = parse_unit_label)]
    pub outcome_unit: Option<String>,
    /// Report also the chance that the average effect exceeds this value (outcome units).
    #[arg(long, allow_negative_numbers = true, value_parser = parse_finite)]
    pub threshold: Option<f64>,
    /// Number of draws (posterior, bootstrap or simulation).
    #[arg(long, default_value_t = DEFAULT_DRAWS as u64, value_parser = clap::value_parser!(u64).range(10..=10_000_000))]
    pub draws: u64,
    /// Seed; the same seed reproduces the run exactly, for any number of threads.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Write the full result as JSON to this file.
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Write result.json (and, where available, charts and report.html) into this folder.
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Allow --out to write into a folder that is not empty.
    #[arg(long)]
    pub force: bool,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    pub threads: Option<u64>,
    /// Print nothing on success.
    #[arg(long)]
    pub quiet: bool,
}

impl Common {
    /// The inference options of the run (one definition for every verb).
    pub fn inference(&self) -> Inference {
        Inference {
            level: self.level,
            draws: usize::try_from(self.draws).unwrap_or(usize::MAX),
            seed: self.seed,
            rope: self.rope,
            threshold: self.threshold,
        }
    }
}

fn parse_unit_label(s: &str) -> Result<String, String> {
    let t = s.trim();
    if t.is_empty() || t.chars().count() > 24 || t.chars().any(char::is_control) {
        return Err(format!("'{s}' is not a unit label (1 to 24 printable characters, e.g. $ or orders)"));
    }
    Ok(t.to_string())
}

fn parse_finite(s: &str) -> Result<f64, String> {
    let v: f64 = s.trim().parse().map_err(|_| format!("'{s}' is not a number"))?;
    if v.is_finite() { Ok(v) } else { Err(format!("'{s}' is not a finite number")) }
}

/// Output flags of the verbs that write a whole study (`run`, `demo`).
#[derive(Debug, Clone, clap::Args)]
pub struct StudyOutput {
    /// Folder for the results, charts and report.html.
    #[arg(long)]
    pub out: PathBuf,
    /// Allow writing into a folder that is not empty.
    #[arg(long)]
    pub force: bool,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    pub threads: Option<u64>,
    /// Print nothing on success.
    #[arg(long)]
    pub quiet: bool,
}

/// How input files are read.
#[derive(Debug, Clone, clap::Args)]
pub struct DataOptions {
    /// Date format of the time column as a strftime pattern (default ISO 8601 YYYY-MM-DD).
    #[arg(long)]
    pub date_format: Option<String>,
    /// Empty cells: error (default), keep (as missing, where the method allows), drop-row.
    #[arg(long, default_value = "error")]
    pub missing: MissingPolicy,
    /// Skipped periods in a dated series: error (default) or fill (as missing).
    #[arg(long, default_value = "error")]
    pub gaps: GapPolicy,
}

impl DataOptions {
    /// The date format.
    pub fn date_format(&self) -> DateFormat {
        match &self.date_format {
            Some(p) => DateFormat::Pattern(p.clone()),
            None => DateFormat::Iso,
        }
    }
}

fn parse_level(s: &str) -> Result<f64, String> {
    let v: f64 = s.parse().map_err(|_| format!("'{s}' is not a number"))?;
    if v > 0.0 && v < 1.0 { Ok(v) } else { Err(format!("level must lie strictly between 0 and 1, got {v}")) }
}

/// Split a comma list (`a,b,c`), dropping empty entries.
pub fn comma_list(s: &str) -> Vec<String> {
    s.split(',').map(|x| x.trim().to_string()).filter(|x| !x.is_empty()).collect()
}

/// Read an input table; errors are bad input.
///
/// # Errors
/// The reader's [`DataError`].
pub fn read_table(path: &Path, projection: &aftercast_core::Projection) -> anyhow::Result<RawTable> {
    RawTable::read_columns(path, projection).map_err(anyhow::Error::new)
}

/// An output folder being written. It refuses a non-empty folder unless forced; forced, it
/// first removes what an earlier aftercast run wrote there (result.json, report.html,
/// draws.parquet, analyses/*.json and *.draws.parquet, charts/*.png and *.svg) so that no stale
/// analysis or chart survives, and sweeps temporary files a killed run left. A folder this run
/// created is removed again when the run fails before [`OutDir::finish`].
#[derive(Debug)]
pub struct OutDir {
    path: PathBuf,
    created: bool,
    finished: bool,
}

/// Top-level files aftercast writes into an output folder.
const OWNED_FILES: &[&str] = &["result.json", "report.html", "draws.parquet"];

impl OutDir {
    /// Check and create the folder.
    ///
    /// # Errors
    /// Bad input when it exists and is not a folder, or is not empty without `force`.
    pub fn prepare(dir: &Path, force: bool) -> anyhow::Result<OutDir> {
        let existed = dir.exists();
        if existed {
            if !dir.is_dir() {
                return Err(bad_input_msg(format!("--out {}: exists and is not a folder", dir.display())));
            }
            let non_empty = std::fs::read_dir(dir).map(|mut d| d.next().is_some()).unwrap_or(false);
            if non_empty && !force {
                return Err(bad_input_msg(format!(
                    "--out {}: the folder is not empty; pass --force to write into it",
                    dir.display()
                )));
            }
            clear_previous(dir);
        }
        aftercast_core::output::create_folder(dir)?;
        Ok(OutDir { path: dir.to_path_buf(), created: !existed, finished: false })
    }

    /// The folder.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Everything promised was written: keep the folder.
    pub fn finish(mut self) {
        self.finished = true;
    }
}

impl Drop for OutDir {
    fn drop(&mut self) {
        if !self.finished && self.created {
            let _ = std::fs::remove_dir_all(&self.path);
        }
    }
}

fn clear_previous(dir: &Path) {
    aftercast_core::output::sweep_stale(dir);
    for f in OWNED_FILES {
        let p = dir.join(f);
        if p.symlink_metadata().is_ok_and(|m| m.is_file()) {
            let _ = std::fs::remove_file(p);
        }
    }
    let ours = |sub: &str, ends: &[&str]| {
        let Ok(entries) = std::fs::read_dir(dir.join(sub)) else { return };
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if ends.iter().any(|x| name.ends_with(x)) && e.file_type().is_ok_and(|t| t.is_file()) {
                let _ = std::fs::remove_file(e.path());
            }
        }
        aftercast_core::output::sweep_stale(&dir.join(sub));
    };
    ours("analyses", &[".json", ".draws.parquet"]);
    ours("charts", &[".png", ".svg"]);
}

/// Write a verb's outputs: `--json FILE`, and with `--out DIR` the result, its draws, its charts
/// and a one-analysis report (DIR/result.json, DIR/draws.parquet, DIR/charts/, DIR/report.html).
///
/// # Errors
/// Write failures (internal) and a non-empty `--out` without `--force` (bad input).
pub fn write_outputs(common: &Common, outcome: &crate::verbs::Outcome) -> anyhow::Result<()> {
    let result = &outcome.finished.result;
    if let Some(p) = &common.json {
        aftercast_report::write_json(p, result)?;
    }
    if let Some(dir) = &common.out {
        let out = OutDir::prepare(dir, common.force)?;
        write_draws(&dir.join("draws.parquet"), &outcome.finished.draws)?;
        // rerun into the same folder: the reproduce command overwrites it
        let mut args: Vec<String> = std::env::args().collect();
        if !args.iter().any(|a| a == "--force") {
            args.push("--force".into());
        }
        let input = single_report(outcome, crate::study::shell_line(&args));
        let analysis = &input.analyses[0];
        aftercast_report::charts::write_all(
            &analysis.result,
            &analysis.draws,
            &analysis.figures,
            &dir.join("charts"),
            &analysis.stem,
        )?;
        aftercast_report::html::write(&input, &dir.join("report.html"))?;
        // result.json last: its presence says every other output is complete
        aftercast_report::write_json(&dir.join("result.json"), result)?;
        out.finish();
    }
    Ok(())
}

/// The report of one analysis verb's outcome; `command` is how to reproduce it (a command
/// line, or the Python call).
pub fn single_report(outcome: &crate::verbs::Outcome, command: String) -> aftercast_report::html::ReportInput {
    let result = &outcome.finished.result;
    aftercast_report::html::ReportInput {
        title: format!("aftercast {}: {}", result.verb, outcome.headline),
        question: outcome.headline.clone(),
        analyses: vec![report_analysis(outcome, &outcome.headline, None, &result.verb, None)],
        tables: Vec::new(),
        command,
        study_file: None,
    }
}

/// Write the kept draws as Parquet (format in docs/results.md), atomically.
///
/// # Errors
/// Encoding or write failures (internal).
pub fn write_draws(path: &Path, draws: &aftercast_core::KeptDraws) -> anyhow::Result<()> {
    let bytes = aftercast_core::draws_file::to_parquet(draws, path).map_err(|e| anyhow::anyhow!("{e}"))?;
    aftercast_report::write_atomic(path, &bytes)?;
    Ok(())
}

/// One analysis as the report shows it.
pub fn report_analysis(
    outcome: &crate::verbs::Outcome,
    label: &str,
    question: Option<String>,
    stem: &str,
    truth: Option<aftercast_report::html::KnownTruth>,
) -> aftercast_report::html::ReportAnalysis {
    aftercast_report::html::ReportAnalysis {
        label: label.to_string(),
        question,
        result: outcome.finished.result.clone(),
        draws: outcome.finished.draws.clone(),
        figures: outcome.finished.figures.clone(),
        tables: outcome.tables.clone(),
        stem: stem.to_string(),
        truth,
    }
}

/// Parse a value or report it as bad input.
///
/// # Errors
/// Bad input naming the flag.
pub fn parse_arg<T: std::str::FromStr>(flag: &str, text: &str) -> anyhow::Result<T>
where
    T::Err: std::fmt::Display,
{
    text.parse::<T>().map_err(|e| {
        bad_input(DataError::BadArgument { what: flag.to_string(), text: text.to_string(), detail: e.to_string() })
    })
}

/// Segments in order: numerically when every name is a number, else alphabetically.
pub fn sort_segments<T>(groups: &mut [(String, T)]) {
    if groups.iter().all(|(n, _)| n.trim().parse::<f64>().is_ok()) {
        groups.sort_by(|a, b| {
            let (x, y) = (a.0.trim().parse::<f64>().unwrap_or(0.0), b.0.trim().parse::<f64>().unwrap_or(0.0));
            x.total_cmp(&y)
        });
    } else {
        groups.sort_by(|a, b| a.0.cmp(&b.0));
    }
}

/// The distinct segment values, in [`sort_segments`] order.
pub fn ordered_segments(values: &[String]) -> Vec<String> {
    let mut names: Vec<(String, ())> = values.iter().map(|v| (v.clone(), ())).collect();
    names.sort_by(|a, b| a.0.cmp(&b.0));
    names.dedup_by(|a, b| a.0 == b.0);
    sort_segments(&mut names);
    names.into_iter().map(|(n, _)| n).collect()
}

/// The segment of each row of a file (a column read as text), by source line.
///
/// # Errors
/// Bad input for a missing column or an empty cell (located).
pub fn segments_by_line(path: &Path, by: &str) -> anyhow::Result<std::collections::HashMap<u64, String>> {
    let table = read_table(path, &aftercast_core::Projection::none().text(by))?;
    let col = table.column(by).map_err(crate::failure::bad_input)?;
    let mut out = std::collections::HashMap::new();
    for r in 0..table.row_count() {
        let v = table.text(r, col).trim().to_string();
        if v.is_empty() {
            return Err(crate::failure::bad_input(aftercast_core::DataError::MissingValue { at: table.at(r, col) }));
        }
        out.insert(table.line(r), v);
    }
    Ok(out)
}
