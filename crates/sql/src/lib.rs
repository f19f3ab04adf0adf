//! SQL passes for upshot, built as sqlparser ASTs and rendered per dialect.
//!
//! An estimator never sees rows: it asks for grouped sufficient statistics. This crate builds
//! each such request — a [`Pass`] — as a sqlparser `Query`: the profile pass, the cell table, the
//! centred Gram matrix, the residual moments of a linear fit and the logistic Newton step so far. User input enters only as AST nodes: identifiers as quoted
//! [`sqlparser::ast::Ident`]s, category levels as string literals, a source query parsed and
//! checked to be one SELECT, a filter parsed and checked to be one expression ([`Source`],
//! [`parse_filter`]).
//!
//! Key design decision: pass shapes are written as SQL *templates of our own text* with
//! placeholder identifiers (`__0`, `__src`, `__filter`), parsed once into an AST, and the
//! placeholders are then replaced by AST nodes. The shapes stay readable, no user text is ever
//! formatted into SQL, and the result renders for any [`Dialect`] through the AST's `Display`.
//!
//! This crate does no I/O: it runs no query and reads no file.
#![deny(missing_docs)]

mod design;
mod dialect;
mod error;
mod pass;
mod result;
mod results;
mod source;
mod template;

pub use design::{
    augmented_sums, design_gram, design_residuals, fold_of, levels, logistic_fits,
    partial_out_sums, weighting_sums, Design, Fold, Key, KeyValue, Model, Models, Nuisances,
    Selector, Target, Variants, FOLD_PRIME,
};
pub use dialect::{
    dialect_by_name, Dialect, DuckDb, DuckDbPlain, Postgres, DIALECTS, DUCKDB_LINEAR,
    DUCKDB_MOMENTS,
};
pub use error::SqlError;
pub use pass::{
    cells, gram, logistic_step, profile, residual_moments, schema_probe, DesignTerm, Pass,
    ProfileColumn,
};
pub use result::{Aggregates, Cell, ResultError};
pub use results::{results_schema_file, results_sql, ResultsSql, RESULT_COLUMNS};
pub use source::{complete_cases, is_parquet, is_parquet_pattern, parse_filter, Source};
pub use sqlparser::ast::Expr;
