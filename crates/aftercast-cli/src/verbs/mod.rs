//! One module per verb. See README.md in this folder for the pattern a verb follows.

pub mod compare;
pub mod demo;
pub mod forecast;
pub mod inspect;
pub mod match_;
pub mod plan;
pub mod plan_panel;
pub mod rollout;
pub mod run;
pub mod synthetic;
pub mod windows;

use crate::common::{Common, write_outputs};
use aftercast_resample::Finished;

/// What an analysis verb hands back to `main`: the estimate through the one summary path, a
/// headline, and the verb's own tables.
#[derive(Debug)]
pub struct Outcome {
    /// The result document, the kept draws and the figure data.
    pub finished: Finished,
    /// One line saying what was estimated on what (for the terminal summary).
    pub headline: String,
    /// The verb's own tables (comparison, history summary, planning), shown in the terminal
    /// and the report.
    pub tables: Vec<aftercast_report::Table>,
    /// Set when the user stopped the run: the outputs are written from what was done, then
    /// the program exits 130 with this message.
    pub interrupted: Option<String>,
}

impl Outcome {
    /// An estimate through the one summary path.
    ///
    /// # Errors
    /// The summary path's errors (internal).
    pub fn new<D: serde::Serialize>(
        est: aftercast_core::Estimate<D>,
        inf: &aftercast_core::Inference,
        inputs: Vec<aftercast_core::InputInfo>,
        headline: String,
    ) -> anyhow::Result<Outcome> {
        let finished = aftercast_resample::finish(est, inf, inputs)?;
        Ok(Outcome { finished, headline, tables: Vec::new(), interrupted: None })
    }

    /// The outcome's unit label of the run (`--outcome-unit`) set on the result.
    pub fn labelled(mut self, common: &Common) -> Outcome {
        self.finished.result.outcome_unit.clone_from(&common.outcome_unit);
        self
    }
}

/// Print the terminal summary (unless quiet) and write `--json` / `--out` outputs.
///
/// # Errors
/// Output failures.
pub fn finish(common: &Common, outcome: Outcome) -> anyhow::Result<()> {
    let outcome = outcome.labelled(common);
    write_outputs(common, &outcome)?;
    if !common.quiet {
        say!("{}", aftercast_report::terminal_summary(&outcome.finished.result, &outcome.headline, &outcome.tables));
    }
    if let Some(msg) = outcome.interrupted {
        return Err(anyhow::Error::new(crate::failure::Interrupted(msg)));
    }
    Ok(())
}
