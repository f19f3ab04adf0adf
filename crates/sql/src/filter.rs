//! What a user filter may contain: a row predicate over the source's columns, nothing that
//! reads other tables, files or the network, and nothing that differs between runs.
//!
//! Allowed: column references, literals, arithmetic, comparison and boolean operators, `CASE`,
//! `CAST`, `IS [NOT] NULL` (and `IS [NOT] TRUE/FALSE`, `IS [NOT] DISTINCT FROM`), `IN` with a
//! list, `BETWEEN`, `LIKE` / `ILIKE`, and the deterministic scalar functions of
//! [`FUNCTIONS`]. Everything else — subqueries, `EXISTS`, table functions, other functions,
//! window and aggregate clauses — is refused with an error that names the part.

use crate::error::SqlError;
use sqlparser::ast::{
    BinaryOperator, Expr, FunctionArg, FunctionArgExpr, FunctionArguments, InTarget, UnaryOperator,
    Value,
};

/// The scalar functions a filter may call (lower case): deterministic, row-local, and
/// spelled the same in DuckDB, PostgreSQL and Spark SQL.
pub const FUNCTIONS: [&str; 22] = [
    "abs",
    "ceil",
    "ceiling",
    "floor",
    "round",
    "sign",
    "sqrt",
    "exp",
    "ln",
    "log",
    "power",
    "mod",
    "coalesce",
    "nullif",
    "greatest",
    "least",
    "lower",
    "upper",
    "length",
    "trim",
    "substr",
    "substring",
];

fn refuse(part: impl Into<String>, why: &str) -> SqlError {
    SqlError::FilterPart {
        part: part.into(),
        why: why.to_string(),
    }
}

/// Checks that `e` is a row predicate over the source's columns.
pub(crate) fn check_row_predicate(e: &Expr) -> Result<(), SqlError> {
    check(e, 0)?;
    if !is_predicate(e, 0) {
        return Err(refuse(
            short(&e.to_string()),
            "a filter must be a condition (a comparison, IS NULL, IN, BETWEEN, LIKE, or such conditions joined by AND, OR, NOT); write `x <> 0` or `flag = true` instead of a bare value",
        ));
    }
    Ok(())
}

/// Whether `e` is a condition by its form (so that no value is cast to a boolean silently).
fn is_predicate(e: &Expr, depth: usize) -> bool {
    use BinaryOperator as B;
    if depth > MAX_DEPTH {
        return false;
    }
    match e {
        Expr::Nested(x) => is_predicate(x, depth + 1),
        Expr::UnaryOp {
            op: UnaryOperator::Not,
            expr,
        } => is_predicate(expr, depth + 1),
        Expr::BinaryOp { left, op, right } => match op {
            B::And | B::Or => is_predicate(left, depth + 1) && is_predicate(right, depth + 1),
            B::Gt | B::Lt | B::GtEq | B::LtEq | B::Eq | B::NotEq => true,
            _ => false,
        },
        Expr::Value(v) => matches!(v.value, Value::Boolean(_)),
        Expr::IsNull(_)
        | Expr::IsNotNull(_)
        | Expr::IsTrue(_)
        | Expr::IsNotTrue(_)
        | Expr::IsFalse(_)
        | Expr::IsNotFalse(_)
        | Expr::IsDistinctFrom(..)
        | Expr::IsNotDistinctFrom(..)
        | Expr::Between { .. }
        | Expr::In { .. }
        | Expr::Like { .. }
        | Expr::ILike { .. } => true,
        _ => false,
    }
}

/// Deeper nesting than this is refused (no stack exhaustion on hostile input).
const MAX_DEPTH: usize = 200;

fn check(e: &Expr, depth: usize) -> Result<(), SqlError> {
    if depth > MAX_DEPTH {
        return Err(refuse(
            "the filter",
            "it nests more than 200 levels deep; simplify it",
        ));
    }
    let deeper = |x: &Expr| check(x, depth + 1);
    match e {
        Expr::Identifier(_) => Ok(()),
        Expr::CompoundIdentifier(parts) => Err(refuse(
            parts
                .iter()
                .map(|p| p.to_string())
                .collect::<Vec<_>>()
                .join("."),
            "a filter names the source's columns alone (no table or schema prefix)",
        )),
        Expr::Value(v) => match &v.value {
            Value::Placeholder(p) => Err(refuse(p.clone(), "parameters have no value here")),
            _ => Ok(()),
        },
        Expr::TypedString(_) => Ok(()),
        Expr::Nested(x) => deeper(x),
        Expr::UnaryOp { op, expr } => match op {
            UnaryOperator::Not | UnaryOperator::Minus | UnaryOperator::Plus => deeper(expr),
            other => Err(refuse(other.to_string(), "operator not allowed in a filter")),
        },
        Expr::BinaryOp { left, op, right } => {
            use BinaryOperator as B;
            match op {
                B::Plus
                | B::Minus
                | B::Multiply
                | B::Divide
                | B::Modulo
                | B::Gt
                | B::Lt
                | B::GtEq
                | B::LtEq
                | B::Eq
                | B::NotEq
                | B::And
                | B::Or
                | B::StringConcat => {
                    deeper(left)?;
                    deeper(right)
                }
                other => Err(refuse(
                    other.to_string(),
                    "operator not allowed in a filter (arithmetic, comparison, AND/OR/NOT and || are)",
                )),
            }
        }
        Expr::IsNull(x)
        | Expr::IsNotNull(x)
        | Expr::IsTrue(x)
        | Expr::IsNotTrue(x)
        | Expr::IsFalse(x)
        | Expr::IsNotFalse(x) => deeper(x),
        Expr::IsDistinctFrom(a, b) | Expr::IsNotDistinctFrom(a, b) => {
            deeper(a)?;
            deeper(b)
        }
        Expr::Between { expr, low, high, .. } => {
            deeper(expr)?;
            deeper(low)?;
            deeper(high)
        }
        Expr::In { expr, target, .. } => {
            deeper(expr)?;
            match target {
                InTarget::List(items) => items.iter().try_for_each(deeper),
                InTarget::Subquery(q) => Err(refuse(
                    format!("IN ({q})"),
                    "a subquery reads other rows; list the values instead",
                )),
                other => Err(refuse(
                    format!("IN {other}"),
                    "a filter's IN takes a list of values",
                )),
            }
        }
        Expr::Like {
            expr,
            pattern,
            escape_char,
            any: false,
            ..
        }
        | Expr::ILike {
            expr,
            pattern,
            escape_char,
            any: false,
            ..
        } => {
            deeper(expr)?;
            deeper(pattern)?;
            escape_char.as_deref().map_or(Ok(()), deeper)
        }
        Expr::Case {
            operand,
            conditions,
            else_result,
            ..
        } => {
            if let Some(o) = operand {
                deeper(o)?;
            }
            for c in conditions {
                deeper(&c.condition)?;
                deeper(&c.result)?;
            }
            else_result.as_deref().map_or(Ok(()), deeper)
        }
        Expr::Cast {
            expr,
            format: None,
            ..
        } => deeper(expr),
        Expr::Function(f) => {
            let name = f.name.to_string();
            let lower = name.to_lowercase();
            if f.name.0.len() != 1 || !FUNCTIONS.contains(&lower.as_str()) {
                return Err(refuse(
                    format!("{name}(...)"),
                    &format!(
                        "a filter is evaluated by every pass, so it may call only deterministic scalar functions, these: {}",
                        FUNCTIONS.join(", ")
                    ),
                ));
            }
            if f.over.is_some()
                || f.filter.is_some()
                || !f.within_group.is_empty()
                || !matches!(f.parameters, FunctionArguments::None)
            {
                return Err(refuse(
                    e.to_string(),
                    "window, FILTER and WITHIN GROUP clauses are not allowed in a filter",
                ));
            }
            match &f.args {
                FunctionArguments::None => Ok(()),
                FunctionArguments::Subquery(q) => Err(refuse(
                    format!("{name}({q})"),
                    "a subquery reads other rows",
                )),
                FunctionArguments::List(list) => {
                    if list.duplicate_treatment.is_some() || !list.clauses.is_empty() {
                        return Err(refuse(e.to_string(), "aggregate clauses are not allowed"));
                    }
                    for a in &list.args {
                        match a {
                            FunctionArg::Unnamed(FunctionArgExpr::Expr(x)) => deeper(x)?,
                            other => {
                                return Err(refuse(
                                    other.to_string(),
                                    "function arguments are plain expressions",
                                ))
                            }
                        }
                    }
                    Ok(())
                }
            }
        }
        Expr::Subquery(q) => Err(refuse(
            format!("({q})"),
            "a subquery reads other rows, tables or files; a filter is a condition on each row's own columns",
        )),
        Expr::Exists { subquery, .. } => Err(refuse(
            format!("EXISTS ({subquery})"),
            "a subquery reads other rows, tables or files; a filter is a condition on each row's own columns",
        )),
        other => Err(refuse(
            short(&other.to_string()),
            "not allowed in a filter (columns, literals, operators, CASE, CAST, IS NULL, IN (list), BETWEEN, LIKE and a few scalar functions are)",
        )),
    }
}

/// At most 80 characters of `s`.
fn short(s: &str) -> String {
    if s.chars().count() > 80 {
        format!("{}…", s.chars().take(79).collect::<String>())
    } else {
        s.to_string()
    }
}

#[cfg(test)]
mod tests {
    use crate::{parse_filter, DuckDb, SqlError};

    fn refused(sql: &str) -> String {
        match parse_filter(sql, &DuckDb) {
            Err(e @ SqlError::FilterPart { .. }) => e.to_string(),
            other => panic!("{sql}: {other:?}"),
        }
    }

    #[test]
    fn row_predicates_pass() {
        for ok in [
            "x1 < 3 AND zone = 'North'",
            "NOT (a IS NULL) OR b BETWEEN 1 AND 2",
            "tenure_band IN ('new', '1y')",
            "CASE WHEN a > 0 THEN b ELSE c END > 1.5",
            "CAST(a AS DOUBLE) / 2 >= abs(b - 3)",
            "lower(zone) LIKE 'n%'",
            "coalesce(a, 0) <> 1",
        ] {
            parse_filter(ok, &DuckDb).unwrap_or_else(|e| panic!("{ok}: {e}"));
        }
    }

    #[test]
    fn subqueries_functions_and_prefixes_are_refused_by_name() {
        let m = refused("x1 < (SELECT count(*) FROM read_text('/etc/hostname'))");
        assert!(m.contains("subquery") && m.contains("read_text"), "{m}");
        assert!(refused("EXISTS (SELECT 1)").contains("EXISTS"));
        assert!(refused("x IN (SELECT id FROM t)").contains("IN (SELECT"));
        assert!(refused("random() < 0.5").contains("random(...)"));
        assert!(refused("getenv('HOME') = 'x'").contains("getenv"));
        assert!(refused("t.x > 1").contains("t.x"));
        assert!(refused("sum(x) OVER () > 1").contains("sum(...)"));
        // A bare value is not silently cast to a boolean.
        assert!(refused("x1").contains("a filter must be a condition"));
        assert!(refused("x1 + 1").contains("a filter must be a condition"));
        assert!(refused("(a > 1) AND b").contains("a filter must be a condition"));
    }
}
