//! The embedded DuckDB engine: a DuckDB file or an in-memory database, opened through
//! `upshot-duckdb-ext` so that upshot's functions (`upshot_moments`, `upshot_linear`) are
//! registered; CSV and Parquet files read as sources. Results come back as Arrow and are
//! turned into a tiny row table at once (a pass returns one row per group).
//!
//! [`DUCKDB`] is the [`Connector`] the binary links: it opens databases confined
//! ([`DuckDbEngine::open_confined`]: no extension auto-install or auto-load, no file but the
//! study's file sources, no network, configuration locked). [`DuckDbEngine::open`] opens one
//! unconfined, for tests and the benchmark that set up their own tables. This crate builds no SQL from strings and knows nothing of diagrams
//! or estimators. With feature `bundled` (default) DuckDB is compiled in; with `loadable` it runs
//! inside a DuckDB that loaded upshot's extension ([`DuckDbEngine::attach`]).
#![deny(missing_docs)]

use duckdb::arrow::array::{Array, AsArray};
use duckdb::arrow::compute::cast;
use duckdb::arrow::datatypes::DataType;
use duckdb::arrow::record_batch::RecordBatch;
use duckdb::arrow::util::display::{ArrayFormatter, FormatOptions};
use duckdb::Connection;
use upshot_duckdb_ext::Database;
use upshot_engine::{
    Access, Aggregates, Capabilities, Cell, Column, Connector, Engine, EngineError, Param, Write,
};
use upshot_sql::{Dialect, DuckDb, Functions, Pass, Source};

/// DuckDB, embedded in the process, with upshot's functions registered.
pub struct DuckDbEngine {
    db: Database,
    memory: bool,
    limit: std::cell::Cell<Option<std::time::Duration>>,
}

/// The location string of a fresh in-memory database.
pub const MEMORY: &str = "duckdb::memory:";

impl DuckDbEngine {
    /// Opens `location`: [`MEMORY`], or a database file (opened read-only unless `write`).
    pub fn open(location: &str, write: bool) -> Result<Self, EngineError> {
        let path = (location != MEMORY).then(|| std::path::Path::new(location));
        if let Some(p) = path {
            if !write && !p.is_file() {
                return Err(EngineError::Open {
                    location: location.to_string(),
                    message: "no such database file; check the path (databases are opened read-only unless results are written)".into(),
                });
            }
        }
        let db = Database::open(path, write).map_err(|e| {
            let message = e.to_string();
            if message.contains("lock") {
                EngineError::Busy {
                    location: location.to_string(),
                    message,
                }
            } else {
                EngineError::Open {
                    location: location.to_string(),
                    message,
                }
            }
        })?;
        Ok(DuckDbEngine {
            db,
            memory: path.is_none(),
            limit: std::cell::Cell::new(None),
        })
    }

    /// Opens `location` as [`DuckDbEngine::open`] does, then confines it: no extension is
    /// installed or loaded on a query's behalf, no file is read but `files` (a path, or a
    /// pattern whose folder is then readable), nothing is fetched from the network, and the
    /// configuration is locked so that no query can change any of it.
    pub fn open_confined(
        location: &str,
        write: bool,
        files: &[String],
    ) -> Result<Self, EngineError> {
        let e = Self::open(location, write)?;
        let (mut paths, mut folders) = (Vec::new(), Vec::new());
        for f in files {
            let path = std::path::Path::new(f);
            let absolute = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
            if upshot_sql::is_parquet_pattern(f) {
                for p in [path, absolute.as_path()] {
                    let dir = p
                        .parent()
                        .map(|d| d.display().to_string())
                        .unwrap_or_default();
                    folders.push(upshot_sql::string_literal(&format!("{dir}/")));
                }
            } else {
                paths.push(upshot_sql::string_literal(f));
                paths.push(upshot_sql::string_literal(&absolute.display().to_string()));
            }
        }
        let mut setup = vec![
            "SET autoinstall_known_extensions = false".to_string(),
            "SET autoload_known_extensions = false".to_string(),
        ];
        if !paths.is_empty() {
            setup.push(format!("SET allowed_paths = [{}]", paths.join(", ")));
        }
        if !folders.is_empty() {
            setup.push(format!(
                "SET allowed_directories = [{}]",
                folders.join(", ")
            ));
        }
        setup.push("SET enable_external_access = false".into());
        setup.push("SET lock_configuration = true".into());
        e.conn()
            .execute_batch(&setup.join(";\n"))
            .map_err(|err| EngineError::Open {
                location: location.to_string(),
                message: format!("cannot confine the database: {err}"),
            })?;
        Ok(e)
    }

    /// The engine over a connection to the database of the DuckDB process that loaded upshot
    /// as an extension (the SQL surface; see `upshot_duckdb_ext::extension_init`). It sees
    /// committed tables, not the calling connection's TEMP tables or uncommitted rows; it is
    /// not confined (the caller's own settings apply).
    pub fn attach(conn: Connection) -> Self {
        DuckDbEngine {
            db: Database::attach(conn),
            memory: false,
            limit: std::cell::Cell::new(None),
        }
    }

    fn conn(&self) -> &Connection {
        self.db.connection()
    }

    /// Runs statements of upshot's own (setting up test tables); never user text.
    pub fn execute_batch(&self, sql: &str) -> Result<(), EngineError> {
        self.conn()
            .execute_batch(sql)
            .map_err(|e| EngineError::Query {
                pass: "setup".into(),
                message: e.to_string(),
            })
    }

    fn write_all(
        &self,
        statements: &[Write],
        before_commit: &mut dyn FnMut() -> Result<(), String>,
    ) -> Result<(), EngineError> {
        let err = |e: duckdb::Error| EngineError::Query {
            pass: "write".into(),
            message: e.to_string(),
        };
        self.conn()
            .execute_batch("BEGIN TRANSACTION")
            .map_err(err)?;
        let result = (|| {
            for w in statements {
                let mut stmt = self.conn().prepare(&w.sql)?;
                if w.rows.is_empty() {
                    stmt.execute([])?;
                }
                for row in &w.rows {
                    let values: Vec<duckdb::types::Value> = row
                        .iter()
                        .map(|p| match p {
                            Param::Null => duckdb::types::Value::Null,
                            Param::Number(x) => duckdb::types::Value::Double(*x),
                            Param::Text(t) => duckdb::types::Value::Text(t.clone()),
                        })
                        .collect();
                    stmt.execute(duckdb::params_from_iter(values))?;
                }
            }
            Ok::<(), duckdb::Error>(())
        })();
        match result {
            Ok(()) => match before_commit() {
                Ok(()) => self.conn().execute_batch("COMMIT").map_err(err),
                Err(why) => {
                    let _ = self.conn().execute_batch("ROLLBACK");
                    Err(EngineError::Aborted(why))
                }
            },
            Err(e) => {
                let _ = self.conn().execute_batch("ROLLBACK");
                Err(err(e))
            }
        }
    }

    /// Runs a query of upshot's own (tests, benchmarks) and returns its first cell as a number.
    pub fn query_number(&self, sql: &str) -> Result<f64, EngineError> {
        let batches = self.query("query", sql)?;
        cells("query", &batches)?
            .rows
            .first()
            .and_then(|r| r.first())
            .and_then(|c| match c {
                Cell::Number(x) => Some(*x),
                _ => None,
            })
            .ok_or_else(|| EngineError::Query {
                pass: "query".into(),
                message: "no number in the first cell".into(),
            })
    }

    fn query(&self, name: &str, sql: &str) -> Result<Vec<RecordBatch>, EngineError> {
        let err = |e: duckdb::Error| EngineError::Query {
            pass: name.to_string(),
            message: explained(e),
        };
        let Some(limit) = self.limit.get() else {
            let mut stmt = self.conn().prepare(sql).map_err(err)?;
            return Ok(stmt.query_arrow([]).map_err(err)?.collect());
        };
        // A watchdog interrupts the connection when the limit passes first.
        let handle = self.conn().interrupt_handle();
        let (done, wait) = std::sync::mpsc::channel::<()>();
        let watchdog = std::thread::spawn(move || {
            let fired = matches!(
                wait.recv_timeout(limit),
                Err(std::sync::mpsc::RecvTimeoutError::Timeout)
            );
            if fired {
                handle.interrupt();
            }
            fired
        });
        let result = (|| {
            let mut stmt = self.conn().prepare(sql).map_err(err)?;
            let batches: Vec<RecordBatch> = stmt.query_arrow([]).map_err(err)?.collect();
            Ok(batches)
        })();
        let _ = done.send(());
        let fired = watchdog.join().unwrap_or(false);
        // An interrupted stream may end early without an error: a fired watchdog fails the pass.
        if fired {
            return Err(EngineError::TimedOut {
                pass: name.to_string(),
                seconds: limit.as_secs(),
            });
        }
        result
    }
}

/// DuckDB's message, with what to do where upshot's confinement refused something.
fn explained(e: duckdb::Error) -> String {
    let m = e.to_string();
    if m.contains("disabled by configuration") || m.contains("Permission Error") {
        format!("{m}\n(upshot lets the database read no file but the study's own file source, and install or load no extension; give a file as the source, or load it into a table first)")
    } else {
        m
    }
}

fn cells(pass: &str, batches: &[RecordBatch]) -> Result<Aggregates, EngineError> {
    let names: Vec<String> = match batches.first() {
        Some(b) => b
            .schema()
            .fields()
            .iter()
            .map(|f| f.name().clone())
            .collect(),
        None => Vec::new(),
    };
    let mut rows = Vec::new();
    for b in batches {
        let mut cols: Vec<Vec<Cell>> = Vec::new();
        for a in b.columns() {
            let numeric = a.data_type().is_numeric() || matches!(a.data_type(), DataType::Boolean);
            let col: Vec<Cell> = if numeric {
                let f = cast(a, &DataType::Float64).map_err(|e| EngineError::Query {
                    pass: pass.to_string(),
                    message: e.to_string(),
                })?;
                let f = f.as_primitive::<duckdb::arrow::datatypes::Float64Type>();
                (0..f.len())
                    .map(|i| {
                        if f.is_null(i) {
                            Cell::Null
                        } else {
                            Cell::Number(f.value(i))
                        }
                    })
                    .collect()
            } else {
                let fmt = ArrayFormatter::try_new(a.as_ref(), &FormatOptions::default()).map_err(
                    |e| EngineError::Query {
                        pass: pass.to_string(),
                        message: e.to_string(),
                    },
                )?;
                (0..a.len())
                    .map(|i| {
                        if a.is_null(i) {
                            Cell::Null
                        } else {
                            Cell::Text(fmt.value(i).to_string())
                        }
                    })
                    .collect()
            };
            cols.push(col);
        }
        for r in 0..b.num_rows() {
            rows.push(cols.iter().map(|c| c[r].clone()).collect());
        }
    }
    Ok(Aggregates {
        pass: pass.to_string(),
        names,
        rows,
    })
}

impl Engine for DuckDbEngine {
    fn dialect(&self) -> &'static dyn Dialect {
        &DuckDb
    }

    fn capabilities(&self) -> Capabilities {
        Capabilities {
            functions: Functions::UPSHOT_DUCKDB,
            reads_files: true,
            durable: !self.memory,
        }
    }

    fn limit_time(&self, limit: std::time::Duration) -> Result<(), EngineError> {
        self.limit.set(Some(limit));
        Ok(())
    }

    fn write(
        &self,
        statements: &[Write],
        before_commit: &mut dyn FnMut() -> Result<(), String>,
    ) -> Result<(), EngineError> {
        self.write_all(statements, before_commit)
    }

    fn run(&self, pass: &Pass) -> Result<Aggregates, EngineError> {
        let sql = pass.query.to_string();
        let batches = self.query(&pass.name, &sql)?;
        cells(&pass.name, &batches)
    }

    fn columns(&self, source: &Source) -> Result<Vec<Column>, EngineError> {
        let pass =
            upshot_sql::schema_probe(&self.flavor(), source).map_err(|e| EngineError::Query {
                pass: "schema".into(),
                message: e.to_string(),
            })?;
        let sql = pass.query.to_string();
        let err = |e: duckdb::Error| EngineError::Query {
            pass: "schema".into(),
            message: explained(e),
        };
        let mut stmt = self.conn().prepare(&sql).map_err(err)?;
        let arrow = stmt.query_arrow([]).map_err(err)?;
        let schema = arrow.get_schema();
        Ok(schema
            .fields()
            .iter()
            .map(|f| Column {
                name: f.name().clone(),
                type_name: f.data_type().to_string(),
                numeric: f.data_type().is_numeric() || matches!(f.data_type(), DataType::Boolean),
                // HUGEINT and UHUGEINT arrive as 38-digit decimals of scale 0.
                integer: f.data_type().is_integer()
                    || matches!(
                        f.data_type(),
                        DataType::Decimal128(_, 0) | DataType::Decimal256(_, 0)
                    ),
                boolean: matches!(f.data_type(), DataType::Boolean),
            })
            .collect())
    }
}

/// Opens DuckDB files and in-memory databases (any locator without `://`).
pub struct DuckDbConnector;

/// The DuckDB connector.
pub static DUCKDB: DuckDbConnector = DuckDbConnector;

impl Connector for DuckDbConnector {
    fn name(&self) -> &'static str {
        "duckdb"
    }
    fn locators(&self) -> &'static str {
        "a DuckDB file or duckdb::memory:"
    }
    fn accepts(&self, locator: &str) -> bool {
        !locator.contains("://")
    }
    fn dialect(&self) -> &'static dyn Dialect {
        &DuckDb
    }
    fn connect(
        &self,
        locator: &str,
        access: Access,
        files: &[String],
    ) -> Result<Box<dyn Engine>, EngineError> {
        Ok(Box::new(DuckDbEngine::open_confined(
            locator,
            access == Access::ReadWrite,
            files,
        )?))
    }
}
