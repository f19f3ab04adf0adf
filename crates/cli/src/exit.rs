//! Exit codes (also in README.md):
//! 0 success (for `check`: every question identified), 1 internal or I/O failure (a failed
//! query, output that could not be written), 2 invalid input (flags, study file, diagram,
//! source, data), 3 not identified.

use std::io::Write as _;

/// Success.
pub const OK: i32 = 0;
/// Internal error or failure to write output.
pub const INTERNAL: i32 = 1;
/// Invalid input.
pub const INPUT: i32 = 2;
/// Some question is not identified.
pub const NOT_IDENTIFIED: i32 = 3;

/// An error that ends the command with a code.
#[derive(Debug)]
pub struct Failure {
    /// Exit code.
    pub code: i32,
    /// What to print.
    pub message: String,
}

impl Failure {
    /// Invalid input.
    pub fn input(message: impl Into<String>) -> Self {
        Failure {
            code: INPUT,
            message: message.into(),
        }
    }
    /// Internal or I/O failure.
    pub fn internal(message: impl Into<String>) -> Self {
        Failure {
            code: INTERNAL,
            message: message.into(),
        }
    }
}

impl From<upshot_study::StudyError> for Failure {
    fn from(e: upshot_study::StudyError) -> Self {
        Failure::input(e.to_string())
    }
}

impl From<upshot_core::CoreError> for Failure {
    fn from(e: upshot_core::CoreError) -> Self {
        use upshot_core::CoreError as E;
        match e {
            E::Input(m) => Failure::input(m),
            E::NotIdentified(m) => Failure {
                code: NOT_IDENTIFIED,
                message: m,
            },
            E::Engine(m) => Failure::internal(m),
        }
    }
}

/// Writes `text` to standard output and flushes it. A closed or full output (`| head -c0`,
/// `> /dev/full`) is a failure with exit code 1, never a panic; callers write nothing else
/// (no results table) after it fails.
pub fn emit(text: &str) -> Result<(), Failure> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())
        .and_then(|()| out.flush())
        .map_err(|e| Failure::internal(format!("cannot write the output: {e}")))
}

/// A failure to open the database named by `whence` (`--db`, or the study's `[source]
/// database`): busy (a lock held by another process) is a retryable failure (exit 1),
/// anything else bad input (exit 2).
pub fn opening(whence: &str, e: upshot_core::EngineError) -> Failure {
    match e {
        upshot_core::EngineError::Busy { .. } => Failure::internal(format!("{whence}: {e}")),
        other => Failure::input(format!("{whence}: {other}")),
    }
}
