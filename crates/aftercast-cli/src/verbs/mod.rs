//! One module per verb. See README.md in this folder for the pattern a verb follows.

pub mod backtest;
pub mod compare;
pub mod demo;
pub mod forecast;
pub mod inspect;
pub mod match_;
pub mod run;
pub mod synthetic;
pub mod windows;

use crate::common::{Common, write_outputs};
use aftercast_core::result::AnalysisResult;

/// What an analysis verb hands back to `main`.
#[derive(Debug)]
pub struct Outcome {
    /// The full result document.
    pub result: AnalysisResult,
    /// One line saying what was estimated on what (for the terminal summary).
    pub headline: String,
}

/// Print the terminal summary (unless quiet) and write `--json` / `--out` outputs.
///
/// # Errors
/// Output failures.
pub fn finish(common: &Common, outcome: Outcome) -> anyhow::Result<()> {
    write_outputs(common, &outcome.result, &outcome.headline)?;
    if !common.quiet {
        print!("{}", aftercast_report::terminal_summary(&outcome.result, &outcome.headline));
    }
    Ok(())
}
