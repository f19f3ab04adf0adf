//! Engines that run upshot's passes where the data lives.
//!
//! The primary trait is [`Engine`]: run one pass and return its small result as
//! [`Aggregates`], and report a source's columns. [`DuckDbEngine`] is the embedded default
//! (a DuckDB file, or `duckdb::memory:`), which can also read CSV and Parquet files as a source;
//! it opens databases through `upshot-duckdb-ext`, so upshot's `upshot_moments` aggregate is
//! registered for the passes rendered in the `duckdb` dialect.
//!
//! Key design decision: an engine receives a built [`upshot_sql::Pass`] and renders it with its
//! own dialect; it never builds SQL from strings, and results are converted from Arrow into a
//! tiny row table at once, because a pass returns a handful of rows (one per group).
//!
//! This crate does I/O (it talks to databases); it knows nothing of diagrams or estimators.
#![deny(missing_docs)]

mod duck;

pub use duck::{DuckDbEngine, MEMORY};
pub use upshot_sql::{Aggregates, Cell};
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
    #[error(transparent)]
    Result(#[from] upshot_sql::ResultError),
}

/// A column of a source, as the engine reports it.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Column {
    /// Name.
    pub name: String,
    /// The engine's type name.
    pub type_name: String,
    /// Whether the type is numeric (booleans count, as 0/1).
    pub numeric: bool,
    /// Whether the type is an integer.
    pub integer: bool,
}

/// A parameter of a write statement.
#[derive(Clone, Debug, PartialEq)]
pub enum Param {
    /// NULL.
    Null,
    /// A number.
    Number(f64),
    /// Text.
    Text(String),
}

/// One statement of upshot's own and the rows of parameters it runs with.
#[derive(Clone, Debug, PartialEq)]
pub struct Write {
    /// The statement, with numbered parameters.
    pub sql: String,
    /// One execution per row.
    pub rows: Vec<Vec<Param>>,
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
