//! `aftercast`: estimate what a change did when nobody kept a randomized control group.
//!
//! This binary is glue: it parses flags, loads inputs, calls the libraries and writes outputs.
//! Exit codes: 0 success, 2 bad input or usage, 1 internal failure.

#[macro_use]
mod say;
mod common;
mod failure;
mod progress;
mod study;
mod verbs;

use clap::{Parser, Subcommand};

/// Estimate what a change did when nobody kept a randomized control group.
#[derive(Debug, Parser)]
#[command(name = "aftercast", version, about, long_about = None, propagate_version = true)]
pub(crate) struct Cli {
    #[command(subcommand)]
    pub(crate) verb: Verb,
}

#[derive(Debug, Subcommand)]
pub(crate) enum Verb {
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

fn threads_of(verb: &Verb) -> Option<u64> {
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

fn quiet_of(verb: &Verb) -> bool {
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
pub(crate) fn analyze(verb: &Verb) -> Option<anyhow::Result<verbs::Outcome>> {
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

fn dispatch(verb: &Verb) -> anyhow::Result<()> {
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

fn panic_text(payload: &(dyn std::any::Any + Send)) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unexpected failure".into())
}

fn main() {
    // A panic is a bug, never the user's doing: print one line instead of Rust's panic report
    // (the catch below turns it into exit code 1).
    std::panic::set_hook(Box::new(|info| {
        let at = info.location().map(|l| format!(" at {}:{}", l.file(), l.line())).unwrap_or_default();
        esayln!("aftercast: internal error{at}: {}", panic_text(info.payload()));
    }));
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) if !e.use_stderr() => {
            // --help and --version: printed in full, exit 0
            say!("{e}");
            std::process::exit(0);
        }
        Err(e) => {
            // usage errors in one line, as every other error (the usage text is one --help away)
            // the offending value as every error shows user text: escaped and cut to 80 characters
            let mut text = e.render().to_string();
            if let Some(clap::error::ContextValue::String(v)) = e.get(clap::error::ContextKind::InvalidValue)
                && !v.is_empty()
            {
                text = text.replace(v.as_str(), &aftercast_core::error::shown(v));
            }
            // a first line ending in ':' announces a list (the missing arguments): keep it
            let first = crate::study::one_line(&text);
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
            esayln!("aftercast: error: {}", line.trim_start_matches("error: "));
            std::process::exit(2);
        }
    };
    let code = match std::panic::catch_unwind(|| {
        if let Some(n) = threads_of(&cli.verb) {
            // A second initialisation can only fail if a pool exists already; results never
            // depend on the thread count, so that is harmless.
            let _ = rayon::ThreadPoolBuilder::new().num_threads(n as usize).build_global();
        }
        // the libraries' stages on one line of stderr (a plan's runs are counted as they finish)
        if !quiet_of(&cli.verb) {
            progress::show_stages();
        }
        dispatch(&cli.verb)
    }) {
        Ok(Ok(())) => 0,
        Ok(Err(e)) => {
            let code = failure::exit_code(&e);
            if code == 130 {
                // the user stopped it: what was done is written; the message says so
                esayln!("aftercast: {e:#}");
            } else {
                let kind = if code == 2 { "error" } else { "internal error" };
                esayln!("aftercast: {kind}: {e:#}");
            }
            code
        }
        Err(_) => {
            esayln!(
                "aftercast: internal error: the program stopped unexpectedly (a bug; please report it with the command line)"
            );
            1
        }
    };
    std::process::exit(code);
}
