//! Stopping a run from outside: a program that embeds aftercast (the Python package, on
//! KeyboardInterrupt) raises [`abort`]; long loops of the libraries call [`check`], which then
//! unwinds the run at once. The embedding program catches the unwinding with
//! [`std::panic::catch_unwind`] and recognises it with [`is_stop`]; nothing is printed (no panic
//! message: [`std::panic::resume_unwind`] skips the panic hook), and no partial result escapes.
//!
//! The command-line program never raises it: Ctrl-C there keeps its own graceful path (a plan
//! finishes the runs in flight and writes what is done).

use std::sync::atomic::{AtomicBool, Ordering};

static ABORT: AtomicBool = AtomicBool::new(false);

/// The payload a stopped run unwinds with.
#[derive(Debug, Clone, Copy)]
pub struct Stopped;

/// Ask every run of this process to stop at its next [`check`].
pub fn abort() {
    ABORT.store(true, Ordering::SeqCst);
}

/// Clear the request (before a new run starts).
pub fn reset() {
    ABORT.store(false, Ordering::SeqCst);
}

/// Whether a stop was asked for.
pub fn requested() -> bool {
    ABORT.load(Ordering::Relaxed)
}

/// Unwind the run when a stop was asked for (a relaxed load otherwise: cheap enough for every
/// draw of a loop).
pub fn check() {
    check_flag(&ABORT);
}

fn check_flag(flag: &AtomicBool) {
    if flag.load(Ordering::Relaxed) {
        std::panic::resume_unwind(Box::new(Stopped));
    }
}

/// Whether an unwinding payload is a stop.
pub fn is_stop(payload: &(dyn std::any::Any + Send)) -> bool {
    payload.is::<Stopped>()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_raised_flag_unwinds_with_the_stop_payload() {
        // a flag of the test's own: the process-wide one would stop other tests running at once
        let flag = AtomicBool::new(false);
        check_flag(&flag);
        let stopped = std::panic::catch_unwind(|| {
            flag.store(true, Ordering::SeqCst);
            check_flag(&flag);
            unreachable!("check returns only without a stop");
        });
        let payload = stopped.expect_err("the run unwinds");
        assert!(is_stop(payload.as_ref()));
        assert!(!is_stop(&"another panic"));
    }
}
