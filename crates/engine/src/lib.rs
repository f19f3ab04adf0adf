//! Engines that run upshot's passes where the data lives.
//!
//! The primary trait is [`Engine`]: run one pass and return its small result as
//! [`Aggregates`], and report a source's columns. [`DuckDbEngine`] is the embedded default
//! (a DuckDB file, or `duckdb::memory:`), which can also read CSV files as a source.
//!
//! Key design decision: an engine receives a built [`upshot_sql::Pass`] and renders it with its
//! own dialect; it never builds SQL from strings, and results are converted from Arrow into a
//! tiny row table at once, because a pass returns a handful of rows (one per group).
//!
//! This crate does I/O (it talks to databases); it knows nothing of diagrams or estimators.
#![deny(missing_docs)]

mod duck;

pub use duck::{DuckDbEngine, MEMORY};
use upshot_sql::{Dialect, Pass, Source};

/// An error from the database, with the pass that failed.
#[derive(Debug, thiserror::Error)]
pub enum EngineError {
    /// The database could not be opened.
    #[error("cannot open {location}: {message}")]
    Open {
        /// What was opened.
        location: String,
        /// The database's message.
        message: String,
    },
    /// A query failed.
    #[error("the {pass} pass failed in the database: {message}")]
    Query {
        /// Pass name.
        pass: String,
        /// The database's message.
        message: String,
    },
    /// A result value of an unexpected type.
    #[error("the {pass} pass returned {found} for `{column}`, expected {expected}")]
    Type {
        /// Pass name.
        pass: String,
        /// Output column.
        column: String,
        /// What was found.
        found: String,
        /// What was expected.
        expected: &'static str,
    },
}

/// One value of a pass result.
#[derive(Clone, Debug, PartialEq)]
pub enum Cell {
    /// SQL NULL.
    Null,
    /// A number (integers are converted).
    Number(f64),
    /// Text, or any other type rendered as text.
    Text(String),
}

/// The few rows a pass returns. Invariant: every row has one cell per name.
#[derive(Clone, Debug, PartialEq)]
pub struct Aggregates {
    /// The pass name, for messages.
    pub pass: String,
    /// Output column names.
    pub names: Vec<String>,
    /// Rows.
    pub rows: Vec<Vec<Cell>>,
}

impl Aggregates {
    /// The number in column `name` of row `row`; NULL (an empty group's sum) is an error.
    pub fn number(&self, row: usize, name: &str) -> Result<f64, EngineError> {
        let i = self
            .names
            .iter()
            .position(|n| n == name)
            .ok_or_else(|| EngineError::Type {
                pass: self.pass.clone(),
                column: name.to_string(),
                found: "no such column".into(),
                expected: "a number",
            })?;
        match &self.rows[row][i] {
            Cell::Number(x) => Ok(*x),
            other => Err(EngineError::Type {
                pass: self.pass.clone(),
                column: name.to_string(),
                found: format!("{other:?}"),
                expected: "a number",
            }),
        }
    }
}

/// A column of a source, as the engine reports it.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Column {
    /// Name.
    pub name: String,
    /// The engine's type name.
    pub type_name: String,
    /// Whether the type is numeric.
    pub numeric: bool,
}

/// Runs passes.
pub trait Engine {
    /// The dialect passes are rendered in.
    fn dialect(&self) -> &'static dyn Dialect;
    /// Runs one pass.
    fn run(&self, pass: &Pass) -> Result<Aggregates, EngineError>;
    /// The columns of a source (reads no rows).
    fn columns(&self, source: &Source) -> Result<Vec<Column>, EngineError>;
}
