//! Exit codes (also in README.md):
//! 0 success (for `check`: every question identified), 1 internal or I/O failure,
//! 2 invalid input (flags, study file, diagram), 3 not identified (`check`).

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
