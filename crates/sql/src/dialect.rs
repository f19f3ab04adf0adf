//! SQL dialects as capability questions, in the manner of DataFusion's unparser: each engine
//! answers a few questions (quote character, float type, distinct-count function) and the same
//! pass AST renders for all of them.

use sqlparser::dialect as sp;

/// What upshot needs to know about an engine's SQL.
pub trait Dialect: Sync {
    /// The name used on the command line (`--dialect`).
    fn name(&self) -> &'static str;
    /// The character that quotes identifiers.
    fn quote(&self) -> char {
        '"'
    }
    /// The type name of 64-bit floats in `CAST(x AS ...)`.
    fn float_type(&self) -> &'static str {
        "DOUBLE"
    }
    /// An approximate distinct-count aggregate, if the engine has one (else exact `COUNT(DISTINCT)`).
    fn approx_distinct(&self) -> Option<&'static str> {
        None
    }
    /// The sqlparser dialect that parses user SQL written for this engine.
    fn parser(&self) -> Box<dyn sp::Dialect>;
}

/// DuckDB (the embedded default).
pub struct DuckDb;

impl Dialect for DuckDb {
    fn name(&self) -> &'static str {
        "duckdb"
    }
    fn approx_distinct(&self) -> Option<&'static str> {
        Some("approx_count_distinct")
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::DuckDbDialect {})
    }
}

/// PostgreSQL.
pub struct Postgres;

impl Dialect for Postgres {
    fn name(&self) -> &'static str {
        "postgres"
    }
    fn float_type(&self) -> &'static str {
        "DOUBLE PRECISION"
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::PostgreSqlDialect {})
    }
}

/// Every dialect upshot renders, in documentation order.
pub static DIALECTS: [&dyn Dialect; 2] = [&DuckDb, &Postgres];

/// Looks a dialect up by its name.
pub fn dialect_by_name(name: &str) -> Option<&'static dyn Dialect> {
    DIALECTS.iter().copied().find(|d| d.name() == name)
}
