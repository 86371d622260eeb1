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

/// Whether this process handles Ctrl-C itself (the binary does; a program embedding the verbs,
/// such as the Python package, keeps the signal and stops runs through `aftercast_core::stop`).
static HANDLE_CTRL_C: AtomicBool = AtomicBool::new(false);

/// Let [`stop_flag`] install the Ctrl-C handler (called by the binary).
pub fn handle_ctrl_c() {
    HANDLE_CTRL_C.store(true, Ordering::SeqCst);
}

/// The process-wide stop flag raised by Ctrl-C (never raised when the process does not handle
/// Ctrl-C itself: [`handle_ctrl_c`]).
///
/// # Errors
/// The handler could not be installed (another handler owns the signal); the message says why.
pub fn stop_flag() -> Result<Arc<AtomicBool>, String> {
    if !HANDLE_CTRL_C.load(Ordering::SeqCst) {
        return Ok(Arc::new(AtomicBool::new(false)));
    }
    FLAG.get_or_init(|| {
        let flag = Arc::new(AtomicBool::new(false));
        let f2 = Arc::clone(&flag);
        ctrlc::set_handler(move || {
            if f2.swap(true, Ordering::SeqCst) {
                std::process::exit(130);
            }
            esayln!("\ninterrupted: finishing the placebo runs in progress, then writing what is done (Ctrl-C again to quit now)");
        })
        .map(|_| flag)
        .map_err(|e| e.to_string())
    })
    .clone()
}

/// How long a stage runs before it is shown (short steps never flicker on the screen).
const SHOW_AFTER: std::time::Duration = std::time::Duration::from_millis(800);

/// The reporter of the libraries' stages (reading, fitting, drawing, each analysis of a study):
/// one line on stderr, shown once a stage has run for a moment, only on a terminal. Stages are
/// followed only on the thread that installed it; stages begun inside parallel work on other
/// threads are declined, so their counts never mix into the line.
struct StderrReporter {
    owner: std::thread::ThreadId,
    state: std::sync::Mutex<ReporterState>,
}

#[derive(Default)]
struct ReporterState {
    stack: Vec<Frame>,
    bar: Option<ProgressBar>,
}

struct Frame {
    what: String,
    total: Option<u64>,
    done: u64,
    since: std::time::Instant,
}

impl ReporterState {
    /// Show the innermost stage (creating the line once the outermost has run long enough).
    fn show(&mut self) {
        let Some(top) = self.stack.last() else { return };
        let started = self.stack.first().map_or(top.since, |f| f.since);
        let mut created = false;
        if self.bar.is_none() {
            if started.elapsed() < SHOW_AFTER {
                return;
            }
            // drawn only once it is dressed
            self.bar = Some(ProgressBar::hidden());
            created = true;
        }
        let Some(bar) = &self.bar else { return };
        // the stages from the outside in: "analysis 3 of 8: loyalty-ipw · 1000 draws"
        let path: Vec<&str> = self.stack.iter().map(|f| f.what.as_str()).collect();
        bar.set_message(path.join(" · "));
        // fixed parts first; the message takes what is left of the line and is cut to fit, so
        // the line never wraps (a wrapped line could not be redrawn in place)
        let template = match top.total {
            Some(_) => "{spinner} [{bar:20}] {percent:>3}% {elapsed:>4} {wide_msg}",
            None => "{spinner} {elapsed:>4} {wide_msg}",
        };
        if let Ok(style) = ProgressStyle::with_template(template) {
            bar.set_style(style);
        }
        bar.set_length(top.total.unwrap_or(0));
        bar.set_position(top.done);
        if created {
            bar.set_draw_target(ProgressDrawTarget::stderr());
        }
        bar.tick();
    }
}

impl aftercast_core::progress::Reporter for StderrReporter {
    fn begin(&self, what: &str, total: Option<u64>) -> bool {
        if std::thread::current().id() != self.owner {
            return false;
        }
        let mut s = self.state.lock().unwrap_or_else(|e| e.into_inner());
        s.stack.push(Frame { what: what.to_string(), total, done: 0, since: std::time::Instant::now() });
        s.show();
        true
    }

    fn advance(&self, n: u64) {
        let mut s = self.state.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(top) = s.stack.last_mut() {
            top.done += n;
        }
        s.show();
    }

    fn end(&self) {
        let mut s = self.state.lock().unwrap_or_else(|e| e.into_inner());
        s.stack.pop();
        if s.stack.is_empty() {
            if let Some(bar) = s.bar.take() {
                bar.finish_and_clear();
            }
        } else {
            s.show();
        }
    }
}

/// Follow the libraries' stages on stderr when it is a terminal (a ticker thread keeps the
/// line alive during stages that report no counts, such as a model fit).
pub fn show_stages() {
    if !std::io::stderr().is_terminal() {
        return;
    }
    let reporter = Box::new(StderrReporter { owner: std::thread::current().id(), state: Default::default() });
    if aftercast_core::progress::install(reporter) {
        std::thread::spawn(|| {
            loop {
                std::thread::sleep(std::time::Duration::from_millis(250));
                aftercast_core::progress::tick();
            }
        });
    }
}
