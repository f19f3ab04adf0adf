//! SQL dialects as capability questions, in the manner of DataFusion's unparser: each engine
//! answers a few questions (quote character, float and text types, list access, file readers,
//! aggregate `FILTER`, boolean casts, integer division, result width, parameter style) and the
//! same pass AST renders for all of them.
//!
//! What the *connected database* offers beyond its dialect — upshot's own DuckDB functions —
//! is not a dialect: it is [`Functions`], which an engine reports and a [`Flavor`] carries
//! beside the dialect.

use sqlparser::dialect as sp;

/// A kind of file an engine may read as a source.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FileKind {
    /// Comma-separated values with a header row.
    Csv,
    /// Parquet (one file or a pattern over many).
    Parquet,
}

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
    /// The type name of text in `CAST(x AS ...)` (one-hot levels compare text).
    fn text_type(&self) -> &'static str {
        "VARCHAR"
    }
    /// An approximate distinct-count aggregate, if the engine has one (else exact `COUNT(DISTINCT)`).
    fn approx_distinct(&self) -> Option<&'static str> {
        None
    }
    /// The element `index` (1-based) of a list-valued expression `list`.
    fn list_element(&self, list: &str, index: usize) -> String {
        format!("list_extract({list}, {index})")
    }
    /// The table function that reads a file of `kind` (its one argument is the path as a
    /// string literal), or `None` when the engine reads no files.
    fn file_reader(&self, kind: FileKind) -> Option<&'static str> {
        let _ = kind;
        None
    }
    /// Whether aggregates take `FILTER (WHERE ...)`; else a count of rows meeting a condition
    /// is written `SUM(CASE WHEN ... THEN 1 ELSE 0 END)`.
    fn aggregate_filter(&self) -> bool {
        true
    }
    /// Whether `CAST(b AS <float>)` works on a boolean column; else it goes through an integer.
    fn casts_boolean_to_float(&self) -> bool {
        true
    }
    /// Whether `/` between two integers truncates (PostgreSQL: `7 / 2 = 3`). Pass builders cast
    /// to the float type before dividing; this records why that cast must stay.
    fn integer_division_truncates(&self) -> bool {
        false
    }
    /// The most columns one query may return, if the engine limits them.
    fn max_result_columns(&self) -> Option<usize> {
        None
    }
    /// The placeholder of the `n`-th (1-based) parameter of a prepared statement.
    fn parameter(&self, n: usize) -> String {
        format!("${n}")
    }
    /// A 64-bit float literal from Rust's shortest representation of it (`0.5`, `1e-300`).
    /// Where a plain decimal literal is exact DECIMAL (Spark SQL), a suffix makes it a double.
    fn float_literal(&self, shortest: String) -> String {
        shortest
    }
    /// Whether dividing by zero raises an error (Spark SQL with ANSI mode on): every division
    /// in a pass must then have a divisor that cannot be zero (passes divide only by scales,
    /// clipped propensities and counts they check).
    fn division_by_zero_raises(&self) -> bool {
        false
    }
    /// Whether upshot's own derived tables need `OFFSET 0` to stay subqueries. PostgreSQL
    /// pulls a subquery up into the query above it, copying each computed column into every
    /// expression that uses it: a pass whose sums reuse a fitted value hundreds of times then
    /// evaluates it hundreds of times per row (measured: the residual pass of a 100,000-row
    /// doubly-robust run took minutes). `OFFSET 0` keeps the subquery, so each is computed once.
    fn fences_subqueries(&self) -> bool {
        false
    }
    /// Whether a fit may start from the first rows of a source (a warm start): a query that
    /// reads a few thousand rows costs little next to a scan of the table, and `LIMIT n` reads
    /// the same rows each time. DuckDB keeps a table's insertion order. PostgreSQL does not:
    /// synchronized and parallel sequential scans start anywhere, so each `LIMIT` pass read
    /// other rows, and a warm start's Newton iterations on 600,000 rows ran out without
    /// settling (measured: 33 passes against 9). Spark Connect pays about a second per query,
    /// which a handful of small passes would add up to.
    fn warm_starts(&self) -> bool {
        true
    }
    /// Whether per-group models (segments × folds) reach their rows through a joined table
    /// of coefficients (`VALUES`, one row per model, joined on the keys) instead of a `CASE`
    /// over the keys per row, where a family has many models (see
    /// [`crate::design::JOINED_MODELS`]). Measured faster on DuckDB, PostgreSQL and Spark
    /// (docs/benchmark.md); a dialect where a join costs more than the `CASE` says `false`.
    fn joins_models(&self) -> bool {
        true
    }
    /// Whether the results table is partitioned by `run_id` and a run's rows replace its
    /// partition (`INSERT OVERWRITE`, Spark: no `DELETE` on a plain managed table), instead of
    /// a `DELETE` and an `INSERT` in one transaction.
    fn replaces_run_by_partition(&self) -> bool {
        false
    }
    /// The sqlparser dialect that parses user SQL written for this engine.
    fn parser(&self) -> Box<dyn sp::Dialect>;
}

/// upshot's own functions, when the connected database has them (an engine reports this; it
/// is a fact about the database, not about its SQL dialect).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Functions {
    /// A fused moments aggregate: its name and the most design columns it takes.
    /// `name(w, v_1, ..., v_k)` returns, as a list, the row-major upper triangle of `Σ w z zᵀ`
    /// for `z = (1, v_1, ..., v_k)`; passes then compute their sums of products with one call
    /// instead of one `SUM` per product.
    pub moments: Option<(&'static str, usize)>,
    /// A linear-predictor scalar function:
    /// `name([c_0, c_1, ..., c_k], x_1, ..., x_k) = c_0 + c_1 x_1 + ... + c_k x_k`, summed left
    /// to right. Passes then evaluate each inlined model with one call instead of two
    /// operations per term.
    pub linear: Option<&'static str>,
}

impl Functions {
    /// No functions of upshot's: plain `SUM`s and arithmetic, for any database.
    pub const NONE: Functions = Functions {
        moments: None,
        linear: None,
    };
    /// The functions upshot registers in the DuckDB databases it opens (crate
    /// `upshot-duckdb-ext`, whose constants a test compares with these).
    pub const UPSHOT_DUCKDB: Functions = Functions {
        moments: Some(DUCKDB_MOMENTS),
        linear: Some(DUCKDB_LINEAR),
    };
}

/// The fused aggregate upshot registers in the DuckDB databases it opens.
pub const DUCKDB_MOMENTS: (&str, usize) = ("upshot_moments", 160);

/// The linear-predictor function upshot registers in the DuckDB databases it opens.
pub const DUCKDB_LINEAR: &str = "upshot_linear";

/// What passes are built for: the engine's dialect, the functions its database offers, and the
/// source's boolean columns (a dialect that cannot cast a boolean to a float reads them through
/// an integer; the list is empty when the source's types are not known, as in `plan`).
#[derive(Clone)]
pub struct Flavor {
    /// The SQL dialect.
    pub dialect: &'static dyn Dialect,
    /// upshot's functions present in the database.
    pub functions: Functions,
    /// The source's boolean columns.
    pub booleans: Vec<String>,
}

impl Flavor {
    /// A dialect without upshot's functions.
    pub fn plain(dialect: &'static dyn Dialect) -> Flavor {
        Flavor {
            dialect,
            functions: Functions::NONE,
            booleans: Vec::new(),
        }
    }
    /// DuckDB as upshot opens it: with upshot's functions.
    pub fn duckdb() -> Flavor {
        Flavor {
            dialect: &DuckDb,
            functions: Functions::UPSHOT_DUCKDB,
            booleans: Vec::new(),
        }
    }
    /// The same, with `functions`.
    pub fn with_functions(mut self, functions: Functions) -> Flavor {
        self.functions = functions;
        self
    }
    /// The same, for a source whose boolean columns are `booleans`.
    pub fn with_booleans(mut self, booleans: Vec<String>) -> Flavor {
        self.booleans = booleans;
        self
    }
}

impl std::fmt::Debug for Flavor {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Flavor")
            .field("dialect", &self.dialect.name())
            .field("functions", &self.functions)
            .field("booleans", &self.booleans)
            .finish()
    }
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
    fn file_reader(&self, kind: FileKind) -> Option<&'static str> {
        Some(match kind {
            FileKind::Csv => "read_csv_auto",
            FileKind::Parquet => "read_parquet",
        })
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::DuckDbDialect {})
    }
}

/// PostgreSQL (15 measured on these machines: `SUM(int8)` is numeric, hence the casts to
/// `DOUBLE PRECISION`; integer division truncates; at most 1,664 result columns).
pub struct Postgres;

impl Dialect for Postgres {
    fn warm_starts(&self) -> bool {
        false
    }
    fn name(&self) -> &'static str {
        "postgres"
    }
    fn float_type(&self) -> &'static str {
        "DOUBLE PRECISION"
    }
    fn list_element(&self, list: &str, index: usize) -> String {
        format!("({list})[{index}]")
    }
    fn casts_boolean_to_float(&self) -> bool {
        false
    }
    fn integer_division_truncates(&self) -> bool {
        true
    }
    fn max_result_columns(&self) -> Option<usize> {
        Some(1664)
    }
    fn fences_subqueries(&self) -> bool {
        true
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::PostgreSqlDialect {})
    }
}

/// Apache Spark SQL (4.x, ANSI mode on as by default: division by zero and integer overflow
/// raise). Identifiers quote with backticks; `0.5` is an exact DECIMAL, so upshot's float
/// literals carry an exponent (`0.5E0` is a DOUBLE); parameters are `?`.
pub struct Spark;

impl Dialect for Spark {
    fn warm_starts(&self) -> bool {
        false
    }
    fn name(&self) -> &'static str {
        "spark"
    }
    fn quote(&self) -> char {
        '`'
    }
    fn text_type(&self) -> &'static str {
        "STRING"
    }
    fn approx_distinct(&self) -> Option<&'static str> {
        Some("approx_count_distinct")
    }
    fn list_element(&self, list: &str, index: usize) -> String {
        format!("element_at({list}, {index})")
    }
    fn parameter(&self, _n: usize) -> String {
        "?".into()
    }
    fn float_literal(&self, shortest: String) -> String {
        // An exponent makes a DOUBLE literal (a `D` suffix would too, but sqlparser does not
        // read it back).
        if shortest.contains(['e', 'E']) {
            shortest
        } else {
            format!("{shortest}E0")
        }
    }
    fn division_by_zero_raises(&self) -> bool {
        true
    }
    fn replaces_run_by_partition(&self) -> bool {
        true
    }
    fn parser(&self) -> Box<dyn sp::Dialect> {
        Box::new(sp::DatabricksDialect {})
    }
}

/// Every dialect upshot renders, in documentation order.
pub static DIALECTS: [&dyn Dialect; 3] = [&DuckDb, &Postgres, &Spark];

/// Looks a dialect up by its name.
pub fn dialect_by_name(name: &str) -> Option<&'static dyn Dialect> {
    DIALECTS.iter().copied().find(|d| d.name() == name)
}
