//! Progress of long steps (reading a file, fitting, drawing), reported to whoever wants it.
//!
//! The libraries open a [`Stage`] around work that may take a while and advance it as they go;
//! by default nothing is reported and a stage costs an atomic add. The command-line program
//! installs a [`Reporter`] that draws on stderr when stderr is a terminal (see the binary's
//! `progress` module); the libraries never draw anything themselves.

use std::sync::OnceLock;

/// Receives the progress of stages. Stages nest (a fit inside an analysis). A reporter may
/// decline a stage (`begin` returns `false`: e.g. one begun on a worker thread inside parallel
/// work); a declined stage reports nothing more. `end` comes from the thread that began the
/// stage; `advance` from any thread.
pub trait Reporter: Send + Sync {
    /// A stage begins: what it is, and how many units of work it has when known. Returns
    /// whether the stage is followed.
    fn begin(&self, what: &str, total: Option<u64>) -> bool;
    /// `n` units of the innermost stage are done.
    fn advance(&self, n: u64);
    /// The innermost stage has ended.
    fn end(&self);
    /// Time passes (called a few times a second by whoever keeps the display alive).
    fn tick(&self) {
        self.advance(0);
    }
}

static REPORTER: OnceLock<Box<dyn Reporter>> = OnceLock::new();

/// Install the process's reporter (once; later calls are ignored and return `false`).
pub fn install(reporter: Box<dyn Reporter>) -> bool {
    REPORTER.set(reporter).is_ok()
}

/// Let the reporter refresh its display.
pub fn tick() {
    if let Some(r) = REPORTER.get() {
        r.tick();
    }
}

/// A step of work being reported; it ends when dropped.
#[must_use = "a stage ends when it is dropped"]
pub struct Stage {
    active: bool,
}

/// Begin a stage (a run asked to stop unwinds here: [`crate::stop`]).
pub fn stage(what: impl AsRef<str>, total: Option<u64>) -> Stage {
    crate::stop::check();
    match REPORTER.get() {
        Some(r) => Stage { active: r.begin(what.as_ref(), total) },
        None => Stage { active: false },
    }
}

impl Stage {
    /// `n` more units of this stage are done (a run asked to stop unwinds here).
    pub fn advance(&self, n: u64) {
        crate::stop::check();
        if self.active
            && let Some(r) = REPORTER.get()
        {
            r.advance(n);
        }
    }
}

impl Drop for Stage {
    fn drop(&mut self) {
        if self.active
            && let Some(r) = REPORTER.get()
        {
            r.end();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Mutex;

    /// Records the events of one thread's stages; declines stages of every other thread.
    struct Recorder {
        owner: std::thread::ThreadId,
        events: Mutex<Vec<String>>,
    }

    impl Reporter for Recorder {
        fn begin(&self, what: &str, total: Option<u64>) -> bool {
            if std::thread::current().id() != self.owner {
                return false;
            }
            self.events.lock().unwrap().push(format!("begin {what} {total:?}"));
            true
        }
        fn advance(&self, n: u64) {
            self.events.lock().unwrap().push(format!("advance {n}"));
        }
        fn end(&self) {
            self.events.lock().unwrap().push("end".into());
        }
    }

    #[test]
    fn stages_nest_report_counts_and_end_when_dropped() {
        let recorder: &'static Recorder =
            Box::leak(Box::new(Recorder { owner: std::thread::current().id(), events: Mutex::new(Vec::new()) }));
        struct Forward(&'static Recorder);
        impl Reporter for Forward {
            fn begin(&self, what: &str, total: Option<u64>) -> bool {
                self.0.begin(what, total)
            }
            fn advance(&self, n: u64) {
                self.0.advance(n)
            }
            fn end(&self) {
                self.0.end()
            }
        }
        assert!(install(Box::new(Forward(recorder))));
        {
            let outer = stage("outer", None);
            {
                let inner = stage("inner", Some(3));
                inner.advance(2);
                // a stage begun on another thread is declined and reports nothing
                std::thread::scope(|s| {
                    s.spawn(|| {
                        let other = stage("elsewhere", Some(1));
                        other.advance(1);
                    });
                });
            }
            outer.advance(1);
        }
        let events = recorder.events.lock().unwrap().clone();
        assert_eq!(events, ["begin outer None", "begin inner Some(3)", "advance 2", "end", "advance 1", "end"]);
    }
}
