//! SQL passes for upshot, built as sqlparser ASTs and rendered per dialect.
//!
//! An estimator never sees rows: it asks for grouped sufficient statistics. This crate provides
//! the kit every pass is built with ([`design`]: centred design terms, folds, inlined per-group
//! models, sums of products) and the pass shapes estimators share ([`passes`]: profile, cell
//! table, levels, centred Gram matrix, residual moments, logistic Newton steps). An estimator's
//! own passes live with the estimator, in `upshot-methods`. User input enters only as AST nodes:
//! identifiers as quoted [`sqlparser::ast::Ident`]s, category levels as string literals, a
//! source query parsed and checked to be one read-only SELECT, a filter parsed and checked to
//! be one row predicate ([`Source`], [`parse_filter`]).
//!
//! Key design decision: pass shapes are written as SQL *templates of our own text* with
//! placeholder identifiers (`__0`, `__src`, `__filter`), parsed once into an AST, and the
//! placeholders are then replaced by AST nodes. The shapes stay readable, no user text is ever
//! formatted into SQL, and the result renders for any [`Dialect`] through the AST's `Display`.
//! What differs between engines is a [`Dialect`] question; what the connected database offers
//! beyond its dialect (upshot's own DuckDB functions) is [`Functions`]; the two together are
//! the [`Flavor`] a pass is built for.
//!
//! This crate does no I/O: it runs no query and reads no file.
#![deny(missing_docs)]

mod aggregates;
pub mod design;
mod dialect;
mod error;
mod filter;
mod layout;
pub mod passes;
mod results_table;
mod source;
mod template;

pub use aggregates::{Aggregates, Cell, ResultError};
pub use design::{
    fold_of, Design, DesignTerm, Fold, Key, KeyValue, Model, Models, Out, Pass, PassText, Selector,
    FOLD_PRIME,
};
pub use dialect::{
    dialect_by_name, Dialect, DuckDb, FileKind, Flavor, Functions, Postgres, Spark, DIALECTS,
    DUCKDB_LINEAR, DUCKDB_MOMENTS,
};
pub use error::SqlError;
pub use filter::FUNCTIONS as FILTER_FUNCTIONS;
pub use layout::{
    group_keys, Built, CellsLayout, Cuts, CutsLayout, GramLayout, LevelRow, LevelsLayout,
    LogisticGramLayout, LogisticLayout, LogisticRow, NonFinite, NonFiniteLayout, ProfileColumn,
    ProfileLayout, ProfiledCell, ProfiledCellsLayout, ProfiledColumn, ResidualLayout,
};
pub use passes::{
    binned_cells, cells, gram, levels, logistic_fits, logistic_fits_with_gram, nonfinite, profile,
    profiled_cells, quantile_cuts, residuals, residuals_and_pooled, schema_probe, CellKey,
    Variants,
};
pub use results_table::{
    results_schema_file, results_sql, rows_table_sql, ResultsSql, RESULT_COLUMNS,
};
pub use source::{
    complete_cases, is_parquet, is_parquet_pattern, parse_filter, Binned, BinnedColumn, First,
    Source, USER_SQL_DEPTH,
};
pub use sqlparser::ast::Expr;

/// `text` as a SQL string literal, rendered from the AST (quotes doubled): for the few
/// statements of upshot's own that name a path, such as an engine's file allow-list.
pub fn string_literal(text: &str) -> String {
    Expr::value(sqlparser::ast::Value::SingleQuotedString(text.to_string())).to_string()
}
