//! A table function whose rows are all computed when it is bound (upshot's answers are a few
//! rows of aggregates), then emitted chunk by chunk.

use duckdb::core::{DataChunkHandle, Inserter, LogicalTypeHandle, LogicalTypeId};
use duckdb::vtab::{BindInfo, InitInfo, TableFunctionInfo, VTab};
use std::error::Error;
use std::sync::atomic::{AtomicUsize, Ordering};

/// A column's SQL type.
#[derive(Clone, Copy, Debug)]
pub enum Type {
    Text,
    Double,
    Bigint,
    Bool,
    TextList,
}

impl Type {
    fn logical(self) -> LogicalTypeHandle {
        match self {
            Type::Text => LogicalTypeHandle::from(LogicalTypeId::Varchar),
            Type::Double => LogicalTypeHandle::from(LogicalTypeId::Double),
            Type::Bigint => LogicalTypeHandle::from(LogicalTypeId::Bigint),
            Type::Bool => LogicalTypeHandle::from(LogicalTypeId::Boolean),
            Type::TextList => {
                LogicalTypeHandle::list(&LogicalTypeHandle::from(LogicalTypeId::Varchar))
            }
        }
    }
}

/// A value of a row.
#[derive(Clone, Debug, PartialEq)]
pub enum Value {
    Null,
    Text(String),
    Double(f64),
    Bigint(i64),
    Bool(bool),
    TextList(Vec<String>),
}

/// A table: its columns and rows.
pub struct Table {
    pub columns: Vec<(&'static str, Type)>,
    pub rows: Vec<Vec<Value>>,
}

/// What a function computes from its arguments.
pub trait Rows {
    /// The columns (known before the arguments are read, so errors can come from `table`).
    fn columns() -> Vec<(&'static str, Type)>;
    /// Positional parameters.
    fn positional() -> Vec<Type>;
    /// Named parameters.
    fn named() -> Vec<(&'static str, Type)>;
    /// The rows for the arguments `args`; `engine` is upshot's connection to the calling
    /// database.
    fn table(args: &Args, engine: &Engine) -> Result<Vec<Vec<Value>>, String>;
}

/// upshot's engine over its own connection to one database that loaded the extension (made
/// at load; calls take turns on it). Registered as every function's extra info, so a process
/// with several databases runs each call on the caller's.
pub type Engine = std::sync::Arc<std::sync::Mutex<upshot_engine_duckdb::DuckDbEngine>>;

/// The arguments of one call, as text (lists joined by commas), by position and by name.
pub struct Args {
    pub positional: Vec<Option<String>>,
    pub named: Vec<(&'static str, Option<String>)>,
}

impl Args {
    /// A named argument, if given.
    pub fn named(&self, name: &str) -> Option<&str> {
        self.named
            .iter()
            .find(|(n, _)| *n == name)
            .and_then(|(_, v)| v.as_deref())
    }
}

pub struct Bound {
    table: Table,
}

pub struct Cursor {
    next: AtomicUsize,
}

/// The table function of a [`Rows`] implementation.
pub struct Function<R: Rows>(std::marker::PhantomData<R>);

/// An argument as text; `None` for SQL NULL (reading a NULL as text would raise inside
/// DuckDB, across the extension boundary).
fn text_of(v: duckdb::vtab::Value) -> Option<String> {
    (!v.is_null()).then(|| v.to_string())
}

impl<R: Rows> VTab for Function<R> {
    type InitData = Cursor;
    type BindData = Bound;

    fn bind(bind: &BindInfo) -> Result<Bound, Box<dyn Error>> {
        let columns = R::columns();
        for (name, t) in &columns {
            bind.add_result_column(name, t.logical());
        }
        let positional = (0..bind.get_parameter_count())
            .map(|i| text_of(bind.get_parameter(i)))
            .collect();
        let named = R::named()
            .into_iter()
            .map(|(n, _)| (n, bind.get_named_parameter(n).and_then(text_of)))
            .collect();
        // SAFETY: every function is registered with an `Engine` as its extra info
        // (`functions::register`), which DuckDB keeps for the function's life.
        let engine: &Engine = unsafe { &*bind.get_extra_info::<Engine>() };
        // A panic must not cross into DuckDB (it would end the caller's process): it becomes
        // an error of the query.
        let args = Args { positional, named };
        let rows =
            std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| R::table(&args, engine)))
                .unwrap_or_else(|p| {
                    let what = p
                        .downcast_ref::<&str>()
                        .map(|s| s.to_string())
                        .or_else(|| p.downcast_ref::<String>().cloned())
                        .unwrap_or_default();
                    Err(format!(
                        "upshot failed inside (a bug; please report it with the query): {what}"
                    ))
                })
                .map_err(|e| upshot_core::printable(&e))?;
        Ok(Bound {
            table: Table { columns, rows },
        })
    }

    fn init(_: &InitInfo) -> Result<Cursor, Box<dyn Error>> {
        Ok(Cursor {
            next: AtomicUsize::new(0),
        })
    }

    fn func(
        func: &TableFunctionInfo<Self>,
        output: &mut DataChunkHandle,
    ) -> Result<(), Box<dyn Error>> {
        let table = &func.get_bind_data().table;
        let cursor = func.get_init_data();
        const CHUNK: usize = 1024;
        let start = cursor.next.fetch_add(CHUNK, Ordering::Relaxed);
        let end = table.rows.len().min(start + CHUNK);
        if start >= end {
            output.set_len(0);
            return Ok(());
        }
        for (c, (_, t)) in table.columns.iter().enumerate() {
            match t {
                Type::TextList => {
                    let mut list = output.list_vector(c);
                    let total: usize = table.rows[start..end]
                        .iter()
                        .map(|r| match &r[c] {
                            Value::TextList(v) => v.len(),
                            _ => 0,
                        })
                        .sum();
                    let child = list.child(total.max(1));
                    let mut offset = 0;
                    for (i, r) in table.rows[start..end].iter().enumerate() {
                        match &r[c] {
                            Value::TextList(v) => {
                                for (j, s) in v.iter().enumerate() {
                                    child.insert(offset + j, s.as_str());
                                }
                                list.set_entry(i, offset, v.len());
                                offset += v.len();
                            }
                            _ => list.set_null(i),
                        }
                    }
                    list.set_len(offset);
                }
                _ => {
                    let mut v = output.flat_vector(c);
                    for (i, r) in table.rows[start..end].iter().enumerate() {
                        // SAFETY: the column was declared at bind with the type written here
                        // (DOUBLE, BIGINT, BOOLEAN: f64, i64, bool in DuckDB's layout), and
                        // `i` < CHUNK ≤ the vector's capacity (DuckDB's vector size, 2,048).
                        match &r[c] {
                            Value::Null | Value::TextList(_) => v.set_null(i),
                            Value::Text(s) => v.insert(i, s.as_str()),
                            Value::Double(x) => unsafe { v.as_mut_slice::<f64>()[i] = *x },
                            Value::Bigint(x) => unsafe { v.as_mut_slice::<i64>()[i] = *x },
                            Value::Bool(b) => unsafe { v.as_mut_slice::<bool>()[i] = *b },
                        }
                    }
                }
            }
        }
        output.set_len(end - start);
        Ok(())
    }

    fn parameters() -> Option<Vec<LogicalTypeHandle>> {
        Some(R::positional().into_iter().map(Type::logical).collect())
    }

    fn named_parameters() -> Option<Vec<(String, LogicalTypeHandle)>> {
        Some(
            R::named()
                .into_iter()
                .map(|(n, t)| (n.to_string(), t.logical()))
                .collect(),
        )
    }
}
