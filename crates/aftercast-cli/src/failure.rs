//! How the program classifies failures into exit codes: 2 for bad input or usage, 1 for an
//! internal failure. A verb marks an error as the user's with [`bad_input`]; any
//! [`aftercast_core::DataError`] in the cause chain counts as bad input too.

use std::fmt;

/// An error caused by the user's input (files, flags, study file).
#[derive(Debug)]
pub struct BadInput(pub Box<dyn std::error::Error + Send + Sync + 'static>);

impl fmt::Display for BadInput {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

impl std::error::Error for BadInput {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        self.0.source()
    }
}

/// Mark an error as caused by the input: the program exits with code 2.
pub fn bad_input<E: std::error::Error + Send + Sync + 'static>(e: E) -> anyhow::Error {
    anyhow::Error::new(BadInput(Box::new(e)))
}

/// A bad-input error from a message.
pub fn bad_input_msg(msg: impl Into<String>) -> anyhow::Error {
    #[derive(Debug)]
    struct Msg(String);
    impl fmt::Display for Msg {
        fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
            f.write_str(&self.0)
        }
    }
    impl std::error::Error for Msg {}
    bad_input(Msg(msg.into()))
}

/// A run stopped by the user (Ctrl-C) after writing what it had: exit code 130.
#[derive(Debug)]
pub struct Interrupted(pub String);

impl fmt::Display for Interrupted {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "interrupted: {}", self.0)
    }
}

impl std::error::Error for Interrupted {}

/// Exit code for an error: 130 if the user interrupted the run, 2 if any cause is bad input,
/// otherwise 1.
pub fn exit_code(e: &anyhow::Error) -> i32 {
    if e.chain().any(|c| c.is::<Interrupted>()) {
        return 130;
    }
    let input = e.chain().any(|c| {
        c.is::<BadInput>()
            || c.is::<aftercast_core::DataError>()
            || matches!(
                c.downcast_ref::<aftercast_report::ReportError>(),
                Some(aftercast_report::ReportError::Output(_))
            )
            || matches!(
                c.downcast_ref::<aftercast_windows::WindowsError>(),
                Some(aftercast_windows::WindowsError::Data(_))
            )
            || matches!(
                c.downcast_ref::<aftercast_calibrate::CalibrateError>(),
                Some(aftercast_calibrate::CalibrateError::Data(_))
            )
    });
    if input { 2 } else { 1 }
}
