//! Templates of upshot's own SQL text with placeholders replaced by AST nodes.

use crate::dialect::Dialect;
use crate::error::SqlError;
use crate::source::Source;
use sqlparser::ast::{
    visit_expressions_mut, Expr, Ident, LimitClause, Offset, OffsetRows, Query, SetExpr, Statement,
    TableFactor, Value,
};
use sqlparser::dialect::GenericDialect;
use sqlparser::parser::Parser;
use std::ops::ControlFlow;

/// What a placeholder `__N` stands for.
#[derive(Clone, Debug)]
pub(crate) enum Bind {
    /// A column, as a quoted identifier.
    Column(String),
    /// A number of ours (means, scales, coefficients), as a numeric literal.
    Number(f64),
    /// A whole number (a group key's value), as an integer literal: compared with an integer
    /// column it needs no cast (`1.0` would turn each row's key into a wide DECIMAL).
    Integer(i64),
    /// A string literal (a category level read from the data).
    Text(String),
}

pub(crate) fn number(x: f64, what: &str) -> Result<Expr, SqlError> {
    if !x.is_finite() {
        return Err(SqlError::NonFinite {
            what: what.to_string(),
            value: x,
        });
    }
    // `{:?}` is Rust's shortest representation that reads back to the same f64.
    let s = format!("{x:?}");
    Ok(Expr::value(Value::Number(s, false)))
}

fn bind_expr(d: &dyn Dialect, b: &Bind) -> Result<Expr, SqlError> {
    Ok(match b {
        Bind::Column(c) => Expr::Identifier(Ident::with_quote(d.quote(), c.clone())),
        Bind::Number(x) => match number(*x, "a pass")? {
            Expr::Value(v) => match v.value {
                Value::Number(s, l) => Expr::value(Value::Number(d.float_literal(s), l)),
                other => Expr::value(other),
            },
            e => e,
        },
        Bind::Integer(i) => Expr::value(Value::Number(i.to_string(), false)),
        Bind::Text(t) => Expr::value(Value::SingleQuotedString(t.clone())),
    })
}

fn placeholder(e: &Expr) -> Option<&str> {
    match e {
        Expr::Identifier(id) if id.quote_style.is_none() && id.value.starts_with("__") => {
            Some(&id.value[2..])
        }
        _ => None,
    }
}

fn substitute<T: sqlparser::ast::VisitMut>(
    node: &mut T,
    d: &dyn Dialect,
    binds: &[Bind],
    filter: Option<&Expr>,
) -> Result<(), SqlError> {
    let mut failure = None;
    let _ = visit_expressions_mut(node, |e| {
        if let Some(key) = placeholder(e) {
            let replacement = if key == "filter" {
                Ok(match filter {
                    Some(f) => Expr::Nested(Box::new(f.clone())),
                    None => Expr::value(Value::Boolean(true)),
                })
            } else {
                let i: usize = key
                    .parse()
                    .expect("template placeholders are __N, __src or __filter");
                bind_expr(d, &binds[i])
            };
            match replacement {
                Ok(r) => *e = r,
                Err(err) => {
                    failure = Some(err);
                    return ControlFlow::Break(());
                }
            }
        }
        ControlFlow::Continue(())
    });
    failure.map_or(Ok(()), Err)
}

/// Parses a query template of our own (with `FROM __src AS src`), fills its placeholders, and
/// puts the source in place of `__src`.
pub(crate) fn query(
    d: &dyn Dialect,
    text: &str,
    binds: &[Bind],
    source: &Source,
    filter: Option<&Expr>,
) -> Result<Query, SqlError> {
    let mut stmts = Parser::parse_sql(&GenericDialect {}, text)
        .unwrap_or_else(|err| panic!("template must parse: {err}\n{text}"));
    assert_eq!(stmts.len(), 1, "one statement per template");
    let mut q = match stmts.pop() {
        Some(Statement::Query(q)) => *q,
        _ => panic!("templates are queries"),
    };
    substitute(&mut q, d, binds, filter)?;
    place_source(&mut q, source, d)?;
    Ok(q)
}

/// Keeps a derived table of upshot's own a subquery where the dialect would pull it up
/// ([`Dialect::fences_subqueries`]).
pub(crate) fn fence(subquery: &mut Query, d: &dyn Dialect) {
    if d.fences_subqueries() && subquery.limit_clause.is_none() {
        subquery.limit_clause = Some(LimitClause::LimitOffset {
            limit: None,
            offset: Some(Offset {
                value: Expr::value(Value::Number("0".into(), false)),
                rows: OffsetRows::None,
            }),
            limit_by: vec![],
        });
    }
}

/// Replaces the relation `__src` anywhere in the query's FROM clauses (common table expressions
/// included).
fn place_source(q: &mut Query, source: &Source, d: &dyn Dialect) -> Result<(), SqlError> {
    if let Some(with) = &mut q.with {
        for cte in &mut with.cte_tables {
            place_source(&mut cte.query, source, d)?;
        }
    }
    place_in_body(q.body.as_mut(), source, d)
}

fn place_in_body(body: &mut SetExpr, source: &Source, d: &dyn Dialect) -> Result<(), SqlError> {
    match body {
        SetExpr::Select(s) => {
            for twj in &mut s.from {
                match &mut twj.relation {
                    TableFactor::Table { name, alias, .. } if name.to_string() == "__src" => {
                        let alias = alias.take();
                        twj.relation = source.relation(d, alias)?;
                    }
                    TableFactor::Derived { subquery, .. } => {
                        fence(subquery, d);
                        place_source(subquery, source, d)?
                    }
                    _ => {}
                }
            }
            Ok(())
        }
        SetExpr::SetOperation { left, right, .. } => {
            place_in_body(left, source, d)?;
            place_in_body(right, source, d)
        }
        SetExpr::Query(q) => place_source(q, source, d),
        _ => Ok(()),
    }
}
