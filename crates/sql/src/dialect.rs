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
    /// A fused moments aggregate, if the engine has one: its name and the most design columns
    /// it takes. `name(w, v_1, ..., v_k)` returns, as a list, the row-major upper triangle of
    /// `Σ w z zᵀ` for `z = (1, v_1, ..., v_k)`; passes then compute their sums of products
    /// with one call instead of one `SUM` per product.
    fn moments(&self) -> Option<(&'static str, usize)> {
        None
    }
    /// A linear-predictor scalar function, if the engine has one:
    /// `name([c_0, c_1, ..., c_k], x_1, ..., x_k) = c_0 + c_1 x_1 + ... + c_k x_k`, summed left
    /// to right. Passes then evaluate each inlined model with one call instead of two operations
    /// per term.
    fn linear(&self) -> Option<&'static str> {
        None
    }
    /// The sqlparser dialect that parses user SQL written for this engine.
    fn parser(&self) -> Box<dyn sp::Dialect>;
}

/// The fused aggregate upshot registers in the DuckDB databases it opens (crate
/// `upshot-duckdb-ext`, which checks these two values against its own).
pub const DUCKDB_MOMENTS: (&str, usize) = ("upshot_moments", 160);

/// The linear-predictor function upshot registers in the DuckDB databases it opens.
pub const DUCKDB_LINEAR: &str = "upshot_linear";

/// DuckDB as upshot opens it (the embedded default): with upshot's fused moments aggregate and
/// linear-predictor function.
pub struct DuckDb;

impl Dialect for DuckDb {
    fn name(&self) -> &'static str {
        "duckdb"
    }
    fn approx_distinct(&self) -> Option<&'static str> {
        Some("approx_count_distinct")
    }
    fn moments(&self) -> Option<(&'static str, usize)> {
        Some(DUCKDB_MOMENTS)
    }
    fn linear(&self) -> Option<&'static str> {
        Some(DUCKDB_LINEAR)
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::DuckDbDialect {})
    }
}

/// Any DuckDB, without upshot's functions: sums of products as plain `SUM`s and predictors as
/// plain arithmetic (for plans run elsewhere, and the benchmark's comparison).
pub struct DuckDbPlain;

impl Dialect for DuckDbPlain {
    fn name(&self) -> &'static str {
        "duckdb-plain"
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
pub static DIALECTS: [&dyn Dialect; 3] = [&DuckDb, &DuckDbPlain, &Postgres];

/// Looks a dialect up by its name.
pub fn dialect_by_name(name: &str) -> Option<&'static dyn Dialect> {
    DIALECTS.iter().copied().find(|d| d.name() == name)
}
