//! `aftercast`: estimate what a change did when nobody kept a randomized control group.
//!
//! This binary is glue: it parses flags, loads inputs, calls the libraries and writes outputs
//! (the verbs live in the library, shared with the Python package). Exit codes: 0 success, 2
//! bad input or usage, 1 internal failure.

use aftercast_cli::{Cli, dispatch, exit_code, handle_ctrl_c, quiet_of, show_stages, threads_of, usage_line};
use clap::Parser;
use std::io::Write;

fn esayln(text: &str) {
    let mut e = std::io::stderr().lock();
    let _ = e.write_all(text.as_bytes()).and_then(|()| e.write_all(b"\n")).and_then(|()| e.flush());
}

fn say(text: &str) {
    let mut o = std::io::stdout().lock();
    let _ = o.write_all(text.as_bytes()).and_then(|()| o.flush());
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
        esayln(&format!("aftercast: internal error{at}: {}", panic_text(info.payload())));
    }));
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) if !e.use_stderr() => {
            // --help and --version: printed in full, exit 0
            say(&format!("{e}"));
            std::process::exit(0);
        }
        Err(e) => {
            // usage errors in one line, as every other error (the usage text is one --help away)
            esayln(&format!("aftercast: error: {}", usage_line(&e)));
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
            show_stages();
        }
        // Ctrl-C stops a plan gracefully (the Python package leaves the signal to Python)
        handle_ctrl_c();
        dispatch(&cli.verb)
    }) {
        Ok(Ok(())) => 0,
        Ok(Err(e)) => {
            let code = exit_code(&e);
            if code == 130 {
                // the user stopped it: what was done is written; the message says so
                esayln(&format!("aftercast: {e:#}"));
            } else {
                let kind = if code == 2 { "error" } else { "internal error" };
                esayln(&format!("aftercast: {kind}: {e:#}"));
            }
            code
        }
        Err(_) => {
            esayln(
                "aftercast: internal error: the program stopped unexpectedly (a bug; please report it with the command line)",
            );
            1
        }
    };
    std::process::exit(code);
}
