//! The rows a study reads: a table name or one user SELECT, and an optional filter expression.

use crate::dialect::{Dialect, FileKind};
use crate::error::SqlError;
use crate::template::{self, Bind};
use sqlparser::ast::{
    Expr, FunctionArg, FunctionArgExpr, Ident, ObjectName, Query, SelectItem, SetExpr, Statement,
    TableAlias, TableFactor, Value, Visit, Visitor,
};
use sqlparser::parser::Parser;
use sqlparser::tokenizer::Token;
use std::ops::ControlFlow;

/// Where a pass reads rows from. Invariant: a `Query` is a single read-only SELECT.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// A table or view; parts of a dotted name are quoted separately.
    Table(Vec<String>),
    /// A user query, parsed.
    Query(Box<Query>),
    /// A CSV file read by the engine's CSV reader ([`Dialect::file_reader`]); the path is a
    /// string literal.
    Csv(String),
    /// A Parquet file (or a glob of them) read by the engine's Parquet reader; the path is a
    /// string literal.
    Parquet(String),
    /// Another source with numeric columns cut into bins at given points: every column of the
    /// inner source, and one bin number per [`BinnedColumn`] (built by upshot; never parsed).
    Binned(Box<Binned>),
    /// The first rows of another source that pass a filter (built by upshot; never parsed).
    First(Box<First>),
}

/// The first `rows` rows of `inner` that pass `filter`, in whatever order the engine reads
/// them. Not a random sample: a table stored in some order gives rows of that order. For warm
/// starts only, whose results seed passes over all rows and never reach an estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct First {
    /// The rows.
    pub inner: Source,
    /// The filter the rows pass (applied before the limit).
    pub filter: Option<Expr>,
    /// How many.
    pub rows: u64,
}

/// A source whose rows carry bin numbers of some of their columns.
#[derive(Clone, Debug, PartialEq)]
pub struct Binned {
    /// The rows.
    pub inner: Source,
    /// The columns cut into bins.
    pub columns: Vec<BinnedColumn>,
}

/// A numeric column cut at increasing points into `cuts.len() + 1` bins: bin 1 holds values
/// below the first cut, bin `i + 1` values from cut `i` up to (not including) cut `i + 1`, the
/// last bin values from the last cut up. Compared as 64-bit floats; NULL stays NULL.
#[derive(Clone, Debug, PartialEq)]
pub struct BinnedColumn {
    /// The column cut.
    pub column: String,
    /// The name of its bin number (an integer from 1).
    pub alias: String,
    /// The cut points, strictly increasing and finite.
    pub cuts: Vec<f64>,
}

impl Source {
    /// A table named `name`; `schema.table` is split at dots.
    pub fn table(name: &str) -> Result<Source, SqlError> {
        let parts: Vec<String> = name.split('.').map(|s| s.to_string()).collect();
        if parts.iter().any(|p| p.is_empty()) {
            return Err(SqlError::Empty {
                what: "a part of the table name",
            });
        }
        Ok(Source::Table(parts))
    }

    /// A file source chosen by the path's extension: `.parquet` (also `.parq`, `.pq`) is read as
    /// Parquet, anything else as CSV.
    pub fn file(path: &str) -> Source {
        if is_parquet(path) {
            Source::Parquet(path.to_string())
        } else {
            Source::Csv(path.to_string())
        }
    }

    /// A user query, which must be exactly one SELECT (optionally with WITH) and nothing else.
    pub fn query(sql: &str, d: &dyn Dialect) -> Result<Source, SqlError> {
        if sql.trim().is_empty() {
            return Err(SqlError::Empty {
                what: "the source query",
            });
        }
        let parse = |e: sqlparser::parser::ParserError| SqlError::Parse {
            what: "the source query",
            message: e.to_string(),
        };
        let dialect = d.parser();
        let mut stmts = Parser::new(dialect.as_ref())
            .with_recursion_limit(USER_SQL_DEPTH)
            .try_with_sql(sql)
            .map_err(parse)?
            .parse_statements()
            .map_err(parse)?;
        if stmts.len() != 1 {
            return Err(SqlError::NotOneStatement { count: stmts.len() });
        }
        match stmts.pop().expect("one statement") {
            Statement::Query(q) => {
                check_read_only(&q)?;
                Ok(Source::Query(q))
            }
            other => Err(SqlError::NotASelect {
                kind: other
                    .to_string()
                    .split_whitespace()
                    .take(2)
                    .collect::<Vec<_>>()
                    .join(" "),
            }),
        }
    }

    /// The file kind of a file source.
    pub fn file_kind(&self) -> Option<FileKind> {
        match self {
            Source::Csv(_) => Some(FileKind::Csv),
            Source::Parquet(_) => Some(FileKind::Parquet),
            Source::Binned(b) => b.inner.file_kind(),
            Source::First(f) => f.inner.file_kind(),
            _ => None,
        }
    }

    /// The relation to put in a FROM clause.
    pub(crate) fn relation(
        &self,
        d: &dyn Dialect,
        alias: Option<TableAlias>,
    ) -> Result<TableFactor, SqlError> {
        match self {
            Source::Binned(b) => return b.relation(d, alias),
            Source::First(f) => {
                let text = format!("SELECT * FROM __src AS src WHERE __filter LIMIT {}", f.rows);
                let q = template::query(d, &text, &[], &f.inner, f.filter.as_ref())?;
                return Source::Query(Box::new(q)).relation(d, alias);
            }
            _ => {}
        }
        let reader = match self.file_kind() {
            Some(kind) => Some(d.file_reader(kind).ok_or(SqlError::NoFileReader {
                dialect: d.name(),
                kind: match kind {
                    FileKind::Csv => "CSV",
                    FileKind::Parquet => "Parquet",
                },
            })?),
            None => None,
        };
        let text = match (self, reader) {
            (Source::Table(_), _) => "SELECT 1 FROM t AS src".to_string(),
            (Source::Query(_) | Source::Binned(_) | Source::First(_), _) => {
                "SELECT 1 FROM (SELECT 1) AS src".to_string()
            }
            (_, Some(f)) => format!("SELECT 1 FROM {f}('file') AS src"),
            (_, None) => unreachable!("a file source has a reader"),
        };
        let template =
            sqlparser::parser::Parser::parse_sql(&sqlparser::dialect::GenericDialect {}, &text)
                .expect("fixed text parses");
        let Some(Statement::Query(q)) = template.into_iter().next() else {
            unreachable!()
        };
        let SetExpr::Select(s) = *q.body else {
            unreachable!()
        };
        let mut rel = s.from.into_iter().next().expect("one FROM item").relation;
        match (&mut rel, self) {
            (TableFactor::Table { name, alias: a, .. }, Source::Table(parts)) => {
                *name = ObjectName::from(
                    parts
                        .iter()
                        .map(|p| Ident::with_quote(d.quote(), p.clone()))
                        .collect::<Vec<_>>(),
                );
                *a = alias;
            }
            (
                TableFactor::Derived {
                    subquery, alias: a, ..
                },
                Source::Query(q),
            ) => {
                *subquery = q.clone();
                *a = alias;
            }
            (
                TableFactor::Table {
                    args: Some(args),
                    alias: a,
                    ..
                },
                Source::Csv(path) | Source::Parquet(path),
            ) => {
                args.args = vec![FunctionArg::Unnamed(FunctionArgExpr::Expr(Expr::value(
                    Value::SingleQuotedString(path.clone()),
                )))];
                *a = alias;
            }
            _ => unreachable!("template matches the source kind"),
        }
        Ok(rel)
    }
}

impl Binned {
    /// `(SELECT src.*, CASE ... END AS "bin", ... FROM inner AS src) AS alias`.
    fn relation(
        &self,
        d: &dyn Dialect,
        alias: Option<TableAlias>,
    ) -> Result<TableFactor, SqlError> {
        let mut binds = Vec::new();
        let mut bind = |b: Bind| {
            binds.push(b);
            format!("__{}", binds.len() - 1)
        };
        let mut items = vec!["src.*".to_string()];
        for (i, c) in self.columns.iter().enumerate() {
            let x = bind(Bind::Column(c.column.clone()));
            let xf = format!("CAST({x} AS {})", d.float_type());
            let mut case = format!("CASE WHEN {x} IS NULL THEN NULL");
            for (j, cut) in c.cuts.iter().enumerate() {
                if !cut.is_finite() || (j > 0 && *cut <= c.cuts[j - 1]) {
                    return Err(SqlError::NonFinite {
                        what: format!(
                            "cut {} of `{}` (cuts must be finite and increasing)",
                            j + 1,
                            c.column
                        ),
                        value: *cut,
                    });
                }
                let at = bind(Bind::Number(*cut));
                let bin = bind(Bind::Integer(j as i64 + 1));
                case.push_str(&format!(" WHEN {xf} < {at} THEN {bin}"));
            }
            let last = bind(Bind::Integer(c.cuts.len() as i64 + 1));
            items.push(format!("{case} ELSE {last} END AS bin{i}"));
        }
        let text = format!("SELECT {} FROM __src AS src", items.join(", "));
        let mut q = template::query(d, &text, &binds, &self.inner, None)?;
        if let SetExpr::Select(s) = q.body.as_mut() {
            for (item, c) in s.projection.iter_mut().skip(1).zip(&self.columns) {
                if let SelectItem::ExprWithAlias { alias, .. } = item {
                    *alias = Ident::with_quote(d.quote(), c.alias.clone());
                }
            }
        }
        let mut rel = Source::Query(Box::new(q)).relation(d, alias)?;
        if let TableFactor::Derived { subquery, .. } = &mut rel {
            template::fence(subquery, d);
        }
        Ok(rel)
    }
}

/// How deeply user SQL (a filter, a source query) may nest. The parser backtracks, and found by
/// fuzzing: 683 bytes of nested `(`, `.`, `IN` and `$` took 9.8 s to refuse in the DuckDB dialect
/// at the parser's default depth (50), 0.2 ms at 30.
pub const USER_SQL_DEPTH: usize = 30;

/// Whether a file path names Parquet data (by its extension, case-insensitive).
pub fn is_parquet(path: &str) -> bool {
    let lower = path.to_lowercase();
    [".parquet", ".parq", ".pq"]
        .iter()
        .any(|ext| lower.ends_with(ext))
}

/// Whether a path is a pattern over many Parquet files (`orders/part-*.parquet`): the engine
/// expands it, and names the pattern when nothing matches.
pub fn is_parquet_pattern(path: &str) -> bool {
    is_parquet(path) && path.contains(['*', '?', '['])
}

/// Refuses anything but reading, anywhere in a source query: data-modifying statements in the
/// body, in a `WITH` clause (`WITH d AS (DELETE ... RETURNING *) SELECT ...`), in a derived
/// table or in a subquery, and `SELECT ... INTO`. Runs before any engine sees the query.
fn check_read_only(q: &Query) -> Result<(), SqlError> {
    struct ReadOnly(Option<SqlError>);
    impl Visitor for ReadOnly {
        type Break = ();
        fn pre_visit_query(&mut self, q: &Query) -> ControlFlow<()> {
            match body_kind(&q.body) {
                Ok(()) => ControlFlow::Continue(()),
                Err(e) => {
                    self.0 = Some(e);
                    ControlFlow::Break(())
                }
            }
        }
    }
    fn body_kind(s: &SetExpr) -> Result<(), SqlError> {
        match s {
            SetExpr::Select(sel) => {
                if sel.into.is_some() {
                    return Err(SqlError::NotASelect {
                        kind: "SELECT ... INTO".into(),
                    });
                }
                Ok(())
            }
            SetExpr::Query(_) | SetExpr::Values(_) => Ok(()),
            SetExpr::SetOperation { left, right, .. } => {
                body_kind(left)?;
                body_kind(right)
            }
            other => Err(SqlError::NotASelect {
                kind: other
                    .to_string()
                    .split_whitespace()
                    .next()
                    .unwrap_or("")
                    .to_uppercase(),
            }),
        }
    }
    let mut v = ReadOnly(None);
    let _ = q.visit(&mut v);
    v.0.map_or(Ok(()), Err)
}

/// Parses a filter: exactly one SQL expression, with nothing after it, that is a row predicate
/// over the source's columns (see [`crate::filter`] for what it may contain).
pub fn parse_filter(sql: &str, d: &dyn Dialect) -> Result<Expr, SqlError> {
    if sql.trim().is_empty() {
        return Err(SqlError::Empty { what: "the filter" });
    }
    let parse = |m: sqlparser::parser::ParserError| SqlError::Parse {
        what: "the filter",
        message: m.to_string(),
    };
    let dialect = d.parser();
    let mut p = Parser::new(dialect.as_ref())
        .with_recursion_limit(USER_SQL_DEPTH)
        .try_with_sql(sql)
        .map_err(parse)?;
    let e = p.parse_expr().map_err(parse)?;
    let next = p.peek_token();
    if next.token != Token::EOF {
        let mut rest = Vec::new();
        loop {
            let t = p.next_token();
            if t.token == Token::EOF || rest.len() > 6 {
                break;
            }
            rest.push(t.token.to_string());
        }
        return Err(SqlError::TrailingInput {
            expr: e.to_string(),
            rest: rest.join(" "),
        });
    }
    crate::filter::check_row_predicate(&e)?;
    Ok(e)
}

/// The filter of complete cases: `filter` (if any) and every column `IS NOT NULL`, so that all
/// passes of an estimate read exactly the same rows.
pub fn complete_cases(d: &dyn Dialect, filter: Option<&Expr>, columns: &[String]) -> Option<Expr> {
    let mut out = filter.map(|f| Expr::Nested(Box::new(f.clone())));
    for c in columns {
        let test = Expr::IsNotNull(Box::new(Expr::Identifier(Ident::with_quote(
            d.quote(),
            c.clone(),
        ))));
        out = Some(match out {
            None => test,
            Some(e) => Expr::BinaryOp {
                left: Box::new(e),
                op: sqlparser::ast::BinaryOperator::And,
                right: Box::new(test),
            },
        });
    }
    out
}
