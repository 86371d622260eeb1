//! The command-line program's verbs as a library. The binary (`aftercast`) and the Python
//! package (crate aftercast-py) both parse flags with [`Cli`] and run an analysis verb with
//! [`analyze`], so every option, default, check and message is defined once, and an estimate
//! reaches the terminal, result.json, the report and Python by one path.
//!
//! Exit codes of the binary: 0 success, 2 bad input or usage, 1 internal failure
//! ([`exit_code`]).

#[macro_use]
mod say;
mod common;
mod failure;
mod progress;
mod study;
mod verbs;

pub use aftercast_resample::Finished;
pub use common::{report_analysis, single_report};
pub use failure::exit_code;
pub use progress::{handle_ctrl_c, show_stages};
pub use verbs::Outcome;

use clap::{Parser, Subcommand};

/// Estimate what a change did when nobody kept a randomized control group.
#[derive(Debug, Parser)]
#[command(name = "aftercast", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// The verb and its flags.
    #[command(subcommand)]
    pub verb: Verb,
}

/// The verbs of the command line, each with its flags.
#[derive(Debug, Subcommand)]
pub enum Verb {
    /// Read and validate an input file the way the analyses do, and describe it.
    Inspect(verbs::inspect::Args),
    /// Write the invented demo scenario and a study of it, and run every analysis.
    Demo(verbs::demo::Args),
    /// Run every analysis a study file lists; write result.json, charts and report.html.
    Run(verbs::run::Args),
    /// Propensity-score matching and weighting on a unit table (changes units opted into).
    Match(verbs::match_::Args),
    /// Counterfactual of one series from its own past and control series (seasonal forecast).
    Forecast(verbs::forecast::Args),
    /// Synthetic control: a weighted mix of untouched units as the counterfactual of treated units.
    Synthetic(verbs::synthetic::Args),
    /// A change adopted in waves: group-time effects, imputation, synthetic difference-in-differences per wave.
    Rollout(verbs::rollout::Args),
    /// Observational estimates against a randomized experiment's answer; history of comparisons.
    Compare(verbs::compare::Args),
    /// How long to wait (or how many units to have) to see a change of a given size: placebo
    /// runs of the analysis's own set-up (power, minimum detectable effect, false positives).
    #[command(visible_alias = "backtest")]
    Plan(verbs::plan::Args),
    /// Turn an event log into per-unit metric windows and per-group series (native or Spark).
    Windows(verbs::windows::Args),
}

/// The `--threads` of a verb, when it takes one.
pub fn threads_of(verb: &Verb) -> Option<u64> {
    match verb {
        Verb::Windows(a) => a.threads,
        Verb::Forecast(a) => a.common.threads,
        Verb::Inspect(_) => None,
        Verb::Run(a) => a.output.threads,
        Verb::Demo(a) => a.output.threads,
        Verb::Match(a) => a.common.threads,
        Verb::Synthetic(a) => a.common.threads,
        Verb::Rollout(a) => a.common.threads,
        Verb::Compare(a) => a.common.threads,
        Verb::Plan(a) => verbs::plan::common(a).and_then(|c| c.threads),
    }
}

/// Whether a verb was asked to print nothing.
pub fn quiet_of(verb: &Verb) -> bool {
    match verb {
        Verb::Windows(a) => a.quiet,
        Verb::Forecast(a) => a.common.quiet,
        Verb::Inspect(a) => a.quiet,
        Verb::Run(a) => a.output.quiet,
        Verb::Demo(a) => a.output.quiet,
        Verb::Match(a) => a.common.quiet,
        Verb::Synthetic(a) => a.common.quiet,
        Verb::Rollout(a) => a.common.quiet,
        Verb::Compare(a) => a.common.quiet,
        Verb::Plan(a) => verbs::plan::quiet(a),
    }
}

/// Run an analysis verb and hand back its result (None for verbs that are not analyses).
pub fn analyze(verb: &Verb) -> Option<anyhow::Result<verbs::Outcome>> {
    match verb {
        Verb::Windows(_) => None,
        Verb::Forecast(a) => Some(verbs::forecast::run(a).map(|o| o.labelled(&a.common))),
        Verb::Inspect(_) | Verb::Run(_) | Verb::Demo(_) => None,
        Verb::Match(a) => Some(verbs::match_::run(a).map(|o| o.labelled(&a.common))),
        Verb::Synthetic(a) => Some(verbs::synthetic::run(a).map(|o| o.labelled(&a.common))),
        Verb::Rollout(a) => Some(verbs::rollout::run(a).map(|o| o.labelled(&a.common))),
        Verb::Compare(a) => Some(verbs::compare::run(a).map(|o| o.labelled(&a.common))),
        Verb::Plan(a) => Some(verbs::plan::run(a)),
    }
}

/// Run any verb as the command line does: outputs written, summary printed.
///
/// # Errors
/// The verb's failures, classified by [`exit_code`].
pub fn dispatch(verb: &Verb) -> anyhow::Result<()> {
    match verb {
        Verb::Windows(a) => verbs::windows::run_verb(a),
        Verb::Forecast(a) => verbs::finish(&a.common, verbs::forecast::run(a)?),
        Verb::Inspect(a) => verbs::inspect::run(a),
        Verb::Run(a) => verbs::run::run(a),
        Verb::Demo(a) => verbs::demo::run(a),
        Verb::Match(a) => verbs::finish(&a.common, verbs::match_::run(a)?),
        Verb::Synthetic(a) => verbs::finish(&a.common, verbs::synthetic::run(a)?),
        Verb::Rollout(a) => verbs::finish(&a.common, verbs::rollout::run(a)?),
        Verb::Compare(a) => verbs::finish(&a.common, verbs::compare::run(a)?),
        Verb::Plan(a) => verbs::plan::run_verb(a),
    }
}

/// Whether a flag (its long name, `"pool"`) takes an input table: a file path on the command
/// line, a table handed over in memory by an embedding program.
pub fn takes_table(long: &str) -> bool {
    study::PATH_FLAGS.contains(&long)
}

/// A usage error of the flags in one line, without the "error: " prefix: the offending value
/// escaped and cut as every error shows user text, the list of missing arguments kept.
pub fn usage_line(e: &clap::Error) -> String {
    // the offending value as every error shows user text: escaped and cut to 80 characters
    let mut text = e.render().to_string();
    if let Some(clap::error::ContextValue::String(v)) = e.get(clap::error::ContextKind::InvalidValue)
        && !v.is_empty()
    {
        text = text.replace(v.as_str(), &aftercast_core::error::shown(v));
    }
    // the number parsers' own words, said for the person who typed the value
    text = text
        .replace("invalid digit found in string", "not a whole number (0, 1, 2, ...)")
        .replace("invalid float literal", "not a number");
    // a first line ending in ':' announces a list (the missing arguments): keep it
    let first = study::one_line(&text);
    let first = if first.ends_with(':') {
        let rest: Vec<&str> = text
            .lines()
            .map(str::trim)
            .filter(|l| !l.is_empty())
            .skip(1)
            .take_while(|l| !l.starts_with("Usage:") && !l.starts_with("For more information"))
            .collect();
        format!("{first} {}", rest.join(", "))
    } else {
        first
    };
    let line: String = first
        .chars()
        .flat_map(|c| {
            let bidi = matches!(c, '\u{200E}' | '\u{200F}' | '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}');
            if c.is_control() || bidi { c.escape_default().collect::<Vec<_>>() } else { vec![c] }
        })
        .collect();
    line.trim_start_matches("error: ").to_string()
}
