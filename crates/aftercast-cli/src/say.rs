//! Printing that never aborts the program. A closed stdout (`aftercast run ... | head -1`, or
//! stdout on a full device) ends the printing quietly: the files already promised are still
//! written and the exit code says whether the work succeeded. Errors writing to stderr are
//! ignored the same way.

use std::io::Write;

/// Write text to stdout; failures (a closed pipe, a full device) are ignored.
pub fn out(text: &str) {
    let mut o = std::io::stdout().lock();
    let _ = o.write_all(text.as_bytes()).and_then(|()| o.flush());
}

/// Write text to stderr; failures are ignored.
pub fn err(text: &str) {
    let mut e = std::io::stderr().lock();
    let _ = e.write_all(text.as_bytes()).and_then(|()| e.flush());
}

/// `print!` that never panics.
macro_rules! say {
    ($($t:tt)*) => { $crate::say::out(&format!($($t)*)) };
}

/// `println!` that never panics.
macro_rules! sayln {
    ($($t:tt)*) => { $crate::say::out(&(format!($($t)*) + "\n")) };
}

/// `eprintln!` that never panics.
macro_rules! esayln {
    ($($t:tt)*) => { $crate::say::err(&(format!($($t)*) + "\n")) };
}
