//! PostgreSQL as an upshot engine: passes run in the server and only their few aggregate rows
//! come back; the results table is written in one transaction.
//!
//! [`POSTGRES`] is the [`Connector`] for `postgresql://user@host:port/dbname` locators (the libpq
//! URL form; `postgres://` too). The password never comes from the locator or a study file: a
//! locator that carries one is refused, and the `PGPASSWORD` environment variable supplies it.
//! Estimation runs in read-only transactions (`SET SESSION CHARACTERISTICS AS TRANSACTION READ
//! ONLY`); only `--into` opens the session read-write.
//!
//! Key design decision: results are read through the simple-query (text) protocol, with the
//! column types taken from the prepared statement: a numeric column of any type (`float8`,
//! `int8`, `numeric` — PostgreSQL's `SUM(int8)` is `numeric`) parses into a number, every other
//! type stays text. No numeric crate is needed and no precision is lost beyond `float8`'s.
//!
//! This crate builds no SQL of its own beyond session settings; it knows nothing of diagrams or
//! estimators.
#![deny(missing_docs)]

use postgres::types::Type;
use postgres::{Client, NoTls, SimpleQueryMessage};
use std::cell::RefCell;
use upshot_engine::{
    redacted, Access, Aggregates, Capabilities, Cell, Column, Connector, Engine, EngineError, Write,
};
use upshot_sql::{Dialect, Functions, Pass, Postgres, Source};

/// A connection to a PostgreSQL server.
pub struct PostgresEngine {
    client: RefCell<Client>,
    limit: std::cell::Cell<Option<u64>>,
}

fn numeric(t: &Type) -> bool {
    matches!(
        *t,
        Type::INT2
            | Type::INT4
            | Type::INT8
            | Type::FLOAT4
            | Type::FLOAT8
            | Type::NUMERIC
            | Type::OID
    )
}

fn integer(t: &Type) -> bool {
    matches!(*t, Type::INT2 | Type::INT4 | Type::INT8)
}

fn query_error(pass: &str, e: postgres::Error) -> EngineError {
    EngineError::Query {
        pass: pass.to_string(),
        message: message(&e),
    }
}

/// SQLSTATE 57014: the statement was cancelled (by `statement_timeout`).
fn cancelled(e: &postgres::Error) -> bool {
    e.code() == Some(&postgres::error::SqlState::QUERY_CANCELED)
}

/// The server's message (with its detail and hint) or the client's.
fn message(e: &postgres::Error) -> String {
    match e.as_db_error() {
        Some(db) => {
            let mut m = db.message().to_string();
            if let Some(d) = db.detail() {
                m.push_str(&format!(" ({d})"));
            }
            if let Some(h) = db.hint() {
                m.push_str(&format!("; {h}"));
            }
            m
        }
        None => {
            // The client's error names the step ("error connecting to server"); its source says
            // why ("Connection refused").
            let mut m = e.to_string();
            let mut source = std::error::Error::source(e);
            while let Some(s) = source {
                m.push_str(&format!(": {s}"));
                source = s.source();
            }
            m
        }
    }
}

impl PostgresEngine {
    /// Connects to `locator` (no password in it; `PGPASSWORD` supplies one), read-only unless
    /// `access` is [`Access::ReadWrite`].
    pub fn connect(locator: &str, access: Access) -> Result<Self, EngineError> {
        let shown = redacted(locator);
        let open = |message: String| EngineError::Open {
            location: shown.clone(),
            message,
        };
        if shown != locator {
            return Err(open(
                "the locator holds a password; remove it and set PGPASSWORD in the environment (passwords never go on the command line or in a study file)".into(),
            ));
        }
        let mut config: postgres::Config = locator.parse().map_err(|e: postgres::Error| {
            open(format!(
                "not a PostgreSQL URL ({e}); expected postgresql://user@host:port/dbname"
            ))
        })?;
        if let Ok(p) = std::env::var("PGPASSWORD") {
            config.password(p);
        }
        config.application_name("upshot");
        let mut client = config.connect(NoTls).map_err(|e| open(message(&e)))?;
        if access == Access::ReadOnly {
            client
                .batch_execute("SET SESSION CHARACTERISTICS AS TRANSACTION READ ONLY")
                .map_err(|e| open(message(&e)))?;
        }
        Ok(PostgresEngine {
            client: RefCell::new(client),
            limit: std::cell::Cell::new(None),
        })
    }

    /// Runs statements of upshot's own (test set-up); never user text.
    pub fn execute_batch(&self, sql: &str) -> Result<(), EngineError> {
        self.client
            .borrow_mut()
            .batch_execute(sql)
            .map_err(|e| query_error("setup", e))
    }

    /// Runs a query of upshot's own (tests, set-up) and returns its rows; never user text.
    pub fn select(&self, sql: &str) -> Result<Aggregates, EngineError> {
        self.query("setup", sql)
    }

    fn query(&self, pass: &str, sql: &str) -> Result<Aggregates, EngineError> {
        let failed = |e: postgres::Error| match self.limit.get() {
            Some(seconds) if cancelled(&e) => EngineError::TimedOut {
                pass: pass.to_string(),
                seconds,
            },
            _ => query_error(pass, e),
        };
        let mut client = self.client.borrow_mut();
        let statement = client.prepare(sql).map_err(failed)?;
        let columns = statement.columns();
        let names: Vec<String> = columns.iter().map(|c| c.name().to_string()).collect();
        let is_number: Vec<bool> = columns.iter().map(|c| numeric(c.type_())).collect();
        let mut rows = Vec::new();
        for m in client.simple_query(sql).map_err(failed)? {
            if let SimpleQueryMessage::Row(r) = m {
                let mut row = Vec::with_capacity(names.len());
                for (i, number) in is_number.iter().enumerate() {
                    row.push(match r.get(i) {
                        None => Cell::Null,
                        Some(v) if *number => match v {
                            "NaN" => Cell::Number(f64::NAN),
                            "Infinity" => Cell::Number(f64::INFINITY),
                            "-Infinity" => Cell::Number(f64::NEG_INFINITY),
                            v => v.parse::<f64>().map(Cell::Number).map_err(|_| {
                                EngineError::Query {
                                    pass: pass.to_string(),
                                    message: format!(
                                        "column {} holds `{v}`, not a number",
                                        names[i]
                                    ),
                                }
                            })?,
                        },
                        Some(v) => Cell::Text(v.to_string()),
                    });
                }
                rows.push(row);
            }
        }
        Ok(Aggregates {
            pass: pass.to_string(),
            names,
            rows,
        })
    }
}

impl Engine for PostgresEngine {
    fn dialect(&self) -> &'static dyn Dialect {
        &Postgres
    }

    fn capabilities(&self) -> Capabilities {
        Capabilities {
            functions: Functions::NONE,
            reads_files: false,
            durable: true,
        }
    }

    fn run(&self, pass: &Pass) -> Result<Aggregates, EngineError> {
        self.query(&pass.name, &pass.query.to_string())
    }

    fn limit_time(&self, limit: std::time::Duration) -> Result<(), EngineError> {
        // The server cancels the statement (its own `statement_timeout`, in milliseconds).
        let ms = limit.as_millis().max(1);
        self.execute_batch(&format!("SET statement_timeout = {ms}"))?;
        self.limit.set(Some(limit.as_secs()));
        Ok(())
    }

    fn columns(&self, source: &Source) -> Result<Vec<Column>, EngineError> {
        let probe =
            upshot_sql::schema_probe(&self.flavor(), source).map_err(|e| EngineError::Query {
                pass: "schema".into(),
                message: e.to_string(),
            })?;
        let sql = probe.query.to_string();
        let statement = self
            .client
            .borrow_mut()
            .prepare(&sql)
            .map_err(|e| query_error("schema", e))?;
        Ok(statement
            .columns()
            .iter()
            .map(|c| Column {
                name: c.name().to_string(),
                type_name: c.type_().name().to_string(),
                numeric: numeric(c.type_()) || *c.type_() == Type::BOOL,
                integer: integer(c.type_()),
                boolean: *c.type_() == Type::BOOL,
            })
            .collect())
    }

    fn write(
        &self,
        statements: &[Write],
        before_commit: &mut dyn FnMut() -> Result<(), String>,
    ) -> Result<(), EngineError> {
        let mut client = self.client.borrow_mut();
        let mut tx = client.transaction().map_err(|e| query_error("write", e))?;
        for w in statements {
            let statement = tx.prepare(&w.sql).map_err(|e| query_error("write", e))?;
            let types = statement.params().to_vec();
            if w.rows.is_empty() {
                tx.execute(&statement, &[])
                    .map_err(|e| query_error("write", e))?;
            }
            for row in &w.rows {
                let values: Vec<Box<dyn postgres::types::ToSql + Sync>> =
                    row.iter().zip(&types).map(|(p, t)| param(p, t)).collect();
                let refs: Vec<&(dyn postgres::types::ToSql + Sync)> =
                    values.iter().map(|b| b.as_ref()).collect();
                tx.execute(&statement, &refs)
                    .map_err(|e| query_error("write", e))?;
            }
        }
        before_commit().map_err(EngineError::Aborted)?;
        tx.commit().map_err(|e| query_error("write", e))
    }
}

/// A parameter as the server's inferred type wants it.
fn param(p: &upshot_engine::Param, t: &Type) -> Box<dyn postgres::types::ToSql + Sync> {
    use upshot_engine::Param;
    match (p, t) {
        (Param::Null, t) if numeric(t) => Box::new(None::<f64>),
        (Param::Null, _) => Box::new(None::<String>),
        (Param::Number(x), &Type::INT8) => Box::new(*x as i64),
        (Param::Number(x), &Type::INT4) => Box::new(*x as i32),
        (Param::Number(x), &Type::FLOAT4) => Box::new(*x as f32),
        (Param::Number(x), _) => Box::new(*x),
        (Param::Text(s), _) => Box::new(s.clone()),
    }
}

/// Opens PostgreSQL servers from `postgresql://` (or `postgres://`) locators.
pub struct PostgresConnector;

/// The PostgreSQL connector.
pub static POSTGRES: PostgresConnector = PostgresConnector;

impl Connector for PostgresConnector {
    fn name(&self) -> &'static str {
        "postgresql"
    }
    fn locators(&self) -> &'static str {
        "postgresql://user@host:port/dbname"
    }
    fn accepts(&self, locator: &str) -> bool {
        locator.starts_with("postgresql://") || locator.starts_with("postgres://")
    }
    fn dialect(&self) -> &'static dyn Dialect {
        &Postgres
    }
    fn connect(
        &self,
        locator: &str,
        access: Access,
        files: &[String],
    ) -> Result<Box<dyn Engine>, EngineError> {
        if let Some(f) = files.first() {
            return Err(EngineError::Open {
                location: redacted(locator),
                message: format!(
                    "{f} is a file: PostgreSQL reads tables and queries, not files on this machine; load the file into a table, or read it with a DuckDB database"
                ),
            });
        }
        Ok(Box::new(PostgresEngine::connect(locator, access)?))
    }
}
