//! `aftercast run STUDY.toml --out DIR`: run every analysis a study file lists and write
//! DIR/result.json (all results), DIR/analyses/<name>.json, and the report.

use crate::common::OutDir;
use crate::failure::bad_input_msg;
use crate::study::{Study, shell_line};
use aftercast_core::result::{AnalysisResult, TOOL_VERSION};
use clap::Parser;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Arguments of `run`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The study file (TOML; schema in docs/study.md).
    pub study: PathBuf,
    /// Output folder and run options.
    #[command(flatten)]
    pub output: crate::common::StudyOutput,
}

/// One analysis as recorded in a study's result.json.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StudyEntry {
    /// Analysis name.
    pub name: String,
    /// Question key (analyses sharing it are compared).
    pub question: Option<String>,
    /// One-line description.
    pub describe: Option<String>,
    /// The command that reproduces this analysis alone.
    pub command: String,
    /// The true effect, when the study states one.
    pub truth: Option<f64>,
    /// Which summary the truth refers to.
    pub truth_of: Option<String>,
    /// Headline printed with the terminal summary.
    pub headline: String,
    /// The analysis result.
    pub result: AnalysisResult,
}

/// The whole study result (DIR/result.json).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct StudyResult {
    /// Version of aftercast.
    pub tool_version: String,
    /// Study title.
    pub title: String,
    /// Study summary paragraph.
    pub summary: Option<String>,
    /// The study file as run (its text), so the report can reproduce it.
    pub study_file: String,
    /// The command that reproduces the whole run.
    pub command: String,
    /// The analyses in order.
    pub analyses: Vec<StudyEntry>,
    /// The tables the run built (a `windows` step: an event log to a per-unit table).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub tables: Vec<aftercast_report::html::TableStep>,
}

/// Run a study file into `out`; returns the result document.
///
/// # Errors
/// Bad input for a malformed study or any analysis whose inputs are bad; internal errors
/// otherwise. The first failing analysis stops the run, naming it.
pub fn run_study(study_path: &Path, out: &Path, force: bool, quiet: bool) -> anyhow::Result<StudyResult> {
    let study = Study::read(study_path)?;
    let dir = OutDir::prepare(out, force)?;
    let doc = write_study_parsed(study_path, &study, &dir, quiet)?;
    dir.finish();
    Ok(doc)
}

/// Run a study file into a prepared output folder.
///
/// # Errors
/// As [`run_study`].
pub fn write_study(study_path: &Path, out: &OutDir, quiet: bool) -> anyhow::Result<StudyResult> {
    let study = Study::read(study_path)?;
    write_study_parsed(study_path, &study, out, quiet)
}

fn write_study_parsed(study_path: &Path, study: &Study, dir: &OutDir, quiet: bool) -> anyhow::Result<StudyResult> {
    let out = dir.path();
    let base = study_path.parent().map(Path::to_path_buf).unwrap_or_else(|| PathBuf::from("."));
    let mut entries = Vec::new();
    let mut outcomes = Vec::new();
    let mut tables = Vec::new();
    for (k, a) in study.analyses.iter().enumerate() {
        let _stage = aftercast_core::progress::stage(
            format!("analysis {} of {}: {}", k + 1, study.analyses.len(), a.name),
            None,
        );
        let argv = study.argv(a, &base, out).map_err(|e| e.context(study_path.display().to_string()))?;
        let cli = crate::Cli::try_parse_from(&argv).map_err(|e| {
            let text = e.render().to_string();
            let first = crate::study::one_line(&text);
            bad_input_msg(format!(
                "{}: analysis '{}': {}",
                study_path.display(),
                a.name,
                first.trim_start_matches("error: ")
            ))
        })?;
        if let crate::Verb::Windows(w) = &cli.verb {
            // a table-building step: its output is an input of a later analysis ("out:...")
            let mut w = w.clone();
            w.quiet = true;
            crate::verbs::windows::run_verb(&w)
                .map_err(|e| e.context(format!("analysis '{}' of {}", a.name, study_path.display())))?;
            let step = table_step(a, &argv, &w)?;
            if !quiet {
                sayln!("== {} ==", a.name);
                sayln!(
                    "aftercast windows: {} rows of {} columns written to {}",
                    aftercast_core::result::count_text(step.rows),
                    step.columns.len(),
                    step.output
                );
            }
            tables.push(step);
            continue;
        }
        let outcome = match crate::analyze(&cli.verb) {
            Some(r) => r.map_err(|e| e.context(format!("analysis '{}' of {}", a.name, study_path.display())))?,
            None => {
                return Err(bad_input_msg(format!(
                    "{}: analysis '{}': '{}' is not an analysis verb",
                    study_path.display(),
                    a.name,
                    a.verb
                )));
            }
        };
        if !quiet {
            sayln!("== {} ==", a.name);
            say!(
                "{}",
                aftercast_report::terminal_summary(&outcome.finished.result, &outcome.headline, &outcome.tables)
            );
        }
        let analyses_dir = out.join("analyses");
        aftercast_report::write_json(&analyses_dir.join(format!("{}.json", a.name)), &outcome.finished.result)?;
        crate::common::write_draws(&analyses_dir.join(format!("{}.draws.parquet", a.name)), &outcome.finished.draws)?;
        entries.push(StudyEntry {
            name: a.name.clone(),
            question: a.question.clone(),
            describe: a.describe.clone(),
            command: shell_line(&argv),
            truth: a.truth,
            truth_of: a.truth_of.clone(),
            headline: outcome.headline.clone(),
            result: outcome.finished.result.clone(),
        });
        outcomes.push(outcome);
    }
    let doc = StudyResult {
        tool_version: TOOL_VERSION.to_string(),
        title: study.title.clone(),
        summary: study.summary.clone(),
        study_file: std::fs::read_to_string(study_path).unwrap_or_default(),
        command: shell_line(&[
            "aftercast".into(),
            "run".into(),
            study_path.display().to_string(),
            "--out".into(),
            out.display().to_string(),
            "--force".into(),
        ]),
        analyses: entries,
        tables,
    };
    let charts = out.join("charts");
    let mut analyses = Vec::new();
    for (e, outcome) in doc.analyses.iter().zip(&outcomes) {
        let label = e.describe.clone().unwrap_or_else(|| e.headline.clone());
        // The report groups analyses by their question, shown in the study's own words.
        let question = e.question.as_ref().map(|k| study.questions.get(k).cloned().unwrap_or_else(|| k.clone()));
        let truth = e
            .truth
            .zip(e.truth_of.as_deref().and_then(aftercast_report::html::TruthOf::parse))
            .map(|(value, of)| aftercast_report::html::KnownTruth { value, of });
        let a = crate::common::report_analysis(outcome, &label, question, &e.name, truth);
        aftercast_report::charts::write_all(&a.result, &a.draws, &a.figures, &charts, &a.stem)?;
        analyses.push(a);
    }
    let input = aftercast_report::html::ReportInput {
        title: doc.title.clone(),
        question: doc.summary.clone().unwrap_or_else(|| doc.title.clone()),
        analyses,
        tables: doc.tables.clone(),
        command: doc.command.clone(),
        study_file: Some(aftercast_report::html::StudyFile {
            path: study_path.display().to_string(),
            contents: doc.study_file.clone(),
        }),
    };
    aftercast_report::html::write(&input, &out.join("report.html"))?;
    // result.json last: its presence says every other output is complete
    aftercast_report::write_json(&out.join("result.json"), &doc)?;
    Ok(doc)
}

/// What a `windows` step wrote: its output's rows and columns (read back from the CSV header;
/// a Parquet output reports its rows from the sidecar's count when present).
fn table_step(
    a: &crate::study::AnalysisSpec,
    argv: &[String],
    w: &crate::verbs::windows::Args,
) -> anyhow::Result<aftercast_report::html::TableStep> {
    let output = w
        .output
        .as_ref()
        .ok_or_else(|| bad_input_msg(format!("analysis '{}': a windows step needs 'output'", a.name)))?;
    let table = crate::common::read_table(output, &aftercast_core::Projection::none())?;
    Ok(aftercast_report::html::TableStep {
        name: a.name.clone(),
        describe: a.describe.clone(),
        command: shell_line(argv),
        output: output.file_name().map_or_else(|| output.display().to_string(), |f| f.to_string_lossy().into_owned()),
        rows: table.row_count(),
        columns: table.header().to_vec(),
    })
}

/// Run `run`.
///
/// # Errors
/// As [`run_study`].
pub fn run(a: &Args) -> anyhow::Result<()> {
    let doc = run_study(&a.study, &a.output.out, a.output.force, a.output.quiet)?;
    if !a.output.quiet {
        sayln!("wrote {} analyses to {}", doc.analyses.len(), a.output.out.display());
    }
    Ok(())
}
