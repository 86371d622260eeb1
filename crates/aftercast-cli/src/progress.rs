//! Ctrl-C and progress bars for long runs (the libraries report progress through
//! `aftercast_calibrate::backtest::Progress` and stop on a flag; drawing and signals are the
//! binary's business).
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
            esayln!("\ninterrupted: finishing the placebo origins in progress (Ctrl-C again to quit now)");
        })
        .map(|_| flag)
        .map_err(|e| e.to_string())
    })
    .clone()
}

/// A progress bar on stderr, drawn only when it is wanted and stderr is a terminal.
pub struct Bar {
    bar: OnceLock<ProgressBar>,
    show: bool,
}

impl Bar {
    /// A bar that draws when `show` is set and stderr is a terminal.
    pub fn new(show: bool) -> Bar {
        Bar { bar: OnceLock::new(), show: show && std::io::stderr().is_terminal() }
    }
}

impl aftercast_calibrate::backtest::Progress for Bar {
    fn start(&self, total: u64, what: &str) {
        if !self.show {
            return;
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        if let Ok(style) = ProgressStyle::with_template("{bar:30} {pos}/{len} {msg} ({elapsed}, about {eta} left)") {
            bar.set_style(style);
        }
        bar.set_message(what.to_string());
        let _ = self.bar.set(bar);
    }

    fn step(&self) {
        if let Some(b) = self.bar.get() {
            b.inc(1);
        }
    }

    fn finish(&self) {
        if let Some(b) = self.bar.get() {
            b.finish_and_clear();
        }
    }
}
