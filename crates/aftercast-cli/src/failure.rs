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

/// Exit code for an error: 2 if any cause is bad input, otherwise 1.
pub fn exit_code(e: &anyhow::Error) -> i32 {
    let input = e.chain().any(|c| c.is::<BadInput>() || c.is::<aftercast_core::DataError>());
    if input { 2 } else { 1 }
}
