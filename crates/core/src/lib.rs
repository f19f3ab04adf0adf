//! The one library every surface of upshot calls: questions → identification → plans → runs
//! on an [`Engine`] → typed results → the results table.
//!
//! Input is a [`Study`] (a study file, or one the CLI builds from its flags) and [`Settings`]
//! (folds, clipping, NULL policy, basis). Step by step:
//! - [`identify::check`]: per question, the identification report (routes, sets, the route and
//!   set upshot would use, what a declared set gets wrong, assumptions) — no data needed;
//! - [`resolve`]: per question, the route, the set, the method (the `auto` rule applied), the
//!   full estimator [`Spec`], the assumptions — or why it is not identified;
//! - [`plan`]: the passes a resolved question runs, as SQL for a [`Flavor`];
//! - [`run`]: the passes run on an engine, giving one [`Answer`] per question (typed estimate
//!   rows and diagnostics) from which text, JSON, CSV and the results table are produced;
//! - [`write_results`]: the results table, in one transaction.
//!
//! Key design decision: surfaces (the `upshot` binary, a SQL extension) only bind arguments
//! and render; everything a second surface would otherwise copy — route choice, source
//! resolution, spec validation, result rows — lives here. This crate links no database client:
//! engines come in through [`upshot_engine::Connector`]s the surface lists.
//!
//! This crate reads no files itself beyond what `upshot-study` reads, and runs queries only
//! through the [`Engine`] it is given.
#![deny(missing_docs)]

pub mod identify;
pub mod request;
mod resolve;
mod results;
mod source;

pub use request::{diagram_argument, DiagramInput, Request, Spelling, DEFAULT_MIN_CELL};
pub use resolve::{plan, resolve, QuestionPlan, Resolved, Settings};
pub use results::{
    check_results_table, check_rows_request, check_rows_table, results_rows, run, suppress_small,
    write_results, Answer, QuestionSummary, RowsInto, Writes, PER_ROW_COLUMNS,
};
pub use source::{
    check_columns, classify_source, database_of, files_of, has_columns_to_check, source_of,
    ResolvedRows, CALLER_DATABASE, DEFAULT_DATABASE,
};
pub use upshot_engine::{connect, connector, Access, Connector, Engine, EngineError};
pub use upshot_methods::{
    Basis, Diagnostics, Estimate, InstrumentCoefficient, InstrumentReport, Matching, NullPolicy,
    PlannedPass, Spec, TestStat, MAX_FOLDS, MAX_NEIGHBOURS,
};
pub use upshot_sql::Flavor;
pub use upshot_study::{Estimand, Method, Route, Study};

/// A message as a surface shows it: control characters from user text (ESC, NUL, ...) escaped
/// (`\u{1b}`), never sent to a terminal or a SQL client raw; line breaks and tabs stay.
pub fn printable(message: &str) -> String {
    message
        .chars()
        .map(|c| match c {
            '\n' | '\t' => c.to_string(),
            c if c.is_control() => c.escape_unicode().to_string(),
            c => c.to_string(),
        })
        .collect()
}

/// Why a step could not be done. Surfaces map the kinds to exit codes (README).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CoreError {
    /// Bad input: flags, study, source, or data an estimator cannot use. The message names
    /// the question, column, value or path and what to do.
    #[error("{0}")]
    Input(String),
    /// The question's effect is not identified by the route its method needs.
    #[error("{0}")]
    NotIdentified(String),
    /// The database failed (a query, a write).
    #[error("{0}")]
    Engine(String),
}
