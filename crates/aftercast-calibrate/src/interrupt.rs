//! Ctrl-C and progress for long runs.
//!
//! [`stop_flag`] installs (once per process) a Ctrl-C handler that raises a shared flag: the
//! backtest then starts no new placebo origin, finishes the ones in flight, writes what is
//! done and returns it marked `interrupted`. A second Ctrl-C ends the process at once with
//! exit code 130, leaving the partial-results file as written so far.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};

static FLAG: OnceLock<Result<Arc<AtomicBool>, String>> = OnceLock::new();

/// The process-wide stop flag raised by Ctrl-C.
///
/// # Errors
/// The handler could not be installed (another handler owns the signal); the message says why.
pub fn stop_flag() -> Result<Arc<AtomicBool>, String> {
    FLAG.get_or_init(|| {
        let flag = Arc::new(AtomicBool::new(false));
        let f2 = Arc::clone(&flag);
        ctrlc::set_handler(move || {
            if f2.swap(true, Ordering::SeqCst) {
                std::process::exit(130);
            }
            eprintln!("\ninterrupted: finishing the placebo origins in progress (Ctrl-C again to quit now)");
        })
        .map(|_| flag)
        .map_err(|e| e.to_string())
    })
    .clone()
}

/// A progress bar on stderr, drawn only when `show` is set and stderr is a terminal.
pub fn progress_bar(len: u64, show: bool, what: &str) -> ProgressBar {
    if !(show && std::io::stderr().is_terminal()) {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
    if let Ok(style) = ProgressStyle::with_template("{bar:30} {pos}/{len} {msg} ({elapsed}, about {eta} left)") {
        bar.set_style(style);
    }
    bar.set_message(what.to_string());
    bar
}
