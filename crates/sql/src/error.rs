//! Errors of SQL construction and of user SQL that is not allowed.

/// Why a source, filter or pass cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SqlError {
    /// The SQL text does not parse.
    #[error("{what} does not parse as SQL: {message}")]
    Parse {
        /// `source query` or `filter`.
        what: &'static str,
        /// The parser's message.
        message: String,
    },
    /// A source query with zero or several statements.
    #[error("the source query must be one SELECT statement, found {count} statements; remove everything after the first `;`")]
    NotOneStatement {
        /// How many statements were found.
        count: usize,
    },
    /// A statement that is not a SELECT.
    #[error("a source is a table name, a file, or one read-only SELECT; found {kind}")]
    NotASelect {
        /// What was found.
        kind: String,
    },
    /// Text after a complete filter expression.
    #[error("the filter must be one SQL expression; unexpected `{rest}` after `{expr}`")]
    TrailingInput {
        /// The expression that parsed.
        expr: String,
        /// What follows it.
        rest: String,
    },
    /// An empty name or empty text.
    #[error("{what} is empty")]
    Empty {
        /// What is empty.
        what: &'static str,
    },
    /// A number that SQL cannot carry.
    #[error("cannot write the non-finite number {value} for {what} into SQL")]
    NonFinite {
        /// What the number is.
        what: String,
        /// The value.
        value: f64,
    },
    /// A filter that is not a row predicate over the source's columns.
    #[error("the filter may only test each row's own columns: `{part}` is not allowed ({why})")]
    FilterPart {
        /// The offending part, as SQL.
        part: String,
        /// Why, and what is allowed.
        why: String,
    },
    /// A file source on an engine that reads no files.
    #[error("the {dialect} engine reads no {kind} files; load the file into a table there, or read it with DuckDB (the default engine)")]
    NoFileReader {
        /// The dialect's name.
        dialect: &'static str,
        /// The file kind.
        kind: &'static str,
    },
    /// A pass with more result columns than the engine allows.
    #[error("a pass would return {columns} columns, more than the {dialect} engine allows ({max}); use fewer covariates or no --interactions")]
    TooWide {
        /// Its result columns.
        columns: usize,
        /// The dialect.
        dialect: &'static str,
        /// The engine's limit.
        max: usize,
    },
    /// A zero or non-finite scale for centring.
    #[error("column `{column}` has scale {scale}; centring needs a positive finite scale (is the column constant?)")]
    BadScale {
        /// The column.
        column: String,
        /// The scale given.
        scale: f64,
    },
}
