//! The results table: where `upshot run --into` appends estimates. Its schema is
//! `sql/results.sql` (rendered for the table name `upshot_results`); statements here are built
//! from the same column list, with the user's table name as quoted identifiers.

use crate::dialect::Dialect;
use crate::error::SqlError;
use sqlparser::ast::{Ident, ObjectName, Statement};
use sqlparser::parser::Parser;

/// Columns of the results table: name, SQL type, meaning.
pub const RESULT_COLUMNS: [(&str, &str, &str); 24] = [
    (
        "run_id",
        "VARCHAR",
        "identifies one run: the run key, or one made from the time and plan hash",
    ),
    (
        "run_key",
        "VARCHAR",
        "the --run-key given (NULL without one); rerunning with it replaces the run's rows",
    ),
    (
        "run_at",
        "TIMESTAMP",
        "when the run wrote its rows (the transaction's time)",
    ),
    ("tool_version", "VARCHAR", "upshot's version"),
    ("study", "VARCHAR", "study name"),
    ("question", "VARCHAR", "question name"),
    (
        "plan_hash",
        "VARCHAR",
        "hash of the plan's SQL: equal hashes ran the same passes",
    ),
    ("treatment", "VARCHAR", "treatment column"),
    ("outcome", "VARCHAR", "outcome column"),
    ("segment", "VARCHAR", "`all`, or `column=value, ...`"),
    ("estimand", "VARCHAR", "ATE, ATT or ATC"),
    ("method", "VARCHAR", "method key"),
    ("estimate", "DOUBLE", "point estimate"),
    ("std_error", "DOUBLE", "standard error"),
    ("ci_low", "DOUBLE", "lower end of the 95% interval"),
    ("ci_high", "DOUBLE", "upper end of the 95% interval"),
    (
        "n_treated",
        "DOUBLE",
        "treated rows used (NULL for a continuous treatment)",
    ),
    (
        "n_control",
        "DOUBLE",
        "control rows used (NULL for a continuous treatment)",
    ),
    ("n_used", "DOUBLE", "rows used"),
    ("rows_read", "DOUBLE", "rows after the filter"),
    (
        "rows_excluded_null",
        "DOUBLE",
        "rows excluded for NULL in a used column",
    ),
    (
        "rows_excluded_other",
        "DOUBLE",
        "rows excluded otherwise (strata lacking an arm)",
    ),
    (
        "adjustment_set",
        "VARCHAR",
        "adjustment columns, comma-separated",
    ),
    ("source", "VARCHAR", "the rows read: table, file or `query`"),
];

/// The statements that write one run.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ResultsSql {
    /// `CREATE TABLE IF NOT EXISTS`.
    pub create: String,
    /// `DELETE ... WHERE run_key = $1` (replaces a rerun's rows); `None` where the insert
    /// itself replaces the run's rows ([`Dialect::replaces_run_by_partition`]).
    pub delete: Option<String>,
    /// `INSERT ... VALUES ($1, $2, CURRENT_TIMESTAMP, ...)`, one numbered parameter per column
    /// but `run_at` (`INSERT OVERWRITE` of the run's partition where the dialect replaces by
    /// partition).
    pub insert: String,
}

fn table_name(d: &dyn Dialect, table: &str) -> Result<ObjectName, SqlError> {
    let parts: Vec<&str> = table.split('.').collect();
    if parts.iter().any(|p| p.is_empty()) {
        return Err(SqlError::Empty {
            what: "a part of the results table name",
        });
    }
    Ok(ObjectName::from(
        parts
            .iter()
            .map(|p| Ident::with_quote(d.quote(), p.to_string()))
            .collect::<Vec<_>>(),
    ))
}

fn checked(d: &dyn Dialect, sql: String) -> Result<String, SqlError> {
    let stmts = Parser::parse_sql(d.parser().as_ref(), &sql).map_err(|e| SqlError::Parse {
        what: "a results-table statement",
        message: e.to_string(),
    })?;
    match stmts.as_slice() {
        [Statement::CreateTable(_)] | [Statement::Delete(_)] | [Statement::Insert(_)] => {
            Ok(format!("{}", stmts[0]))
        }
        _ => Err(SqlError::NotOneStatement { count: stmts.len() }),
    }
}

/// The create, delete and insert statements for the results table `table` (`schema.table`
/// allowed), the name quoted part by part.
pub fn results_sql(d: &dyn Dialect, table: &str) -> Result<ResultsSql, SqlError> {
    let name = table_name(d, table)?.to_string();
    let cols: Vec<String> = RESULT_COLUMNS
        .iter()
        .map(|(c, t, _)| {
            let t = match *t {
                "DOUBLE" => d.float_type(),
                "VARCHAR" => d.text_type(),
                other => other,
            };
            format!("{c} {t}")
        })
        .collect();
    let mut next = 0;
    let values: Vec<String> = RESULT_COLUMNS
        .iter()
        .map(|(c, _, _)| {
            if *c == "run_at" {
                "CURRENT_TIMESTAMP".to_string()
            } else {
                next += 1;
                d.parameter(next)
            }
        })
        .collect();
    let names: Vec<&str> = RESULT_COLUMNS.iter().map(|c| c.0).collect();
    let by_partition = d.replaces_run_by_partition();
    Ok(ResultsSql {
        create: checked(
            d,
            format!(
                "CREATE TABLE IF NOT EXISTS {name} ({}){}",
                cols.join(", "),
                if by_partition {
                    " PARTITIONED BY (run_id)"
                } else {
                    ""
                }
            ),
        )?,
        delete: if by_partition {
            None
        } else {
            Some(checked(
                d,
                format!("DELETE FROM {name} WHERE run_key = {}", d.parameter(1)),
            )?)
        },
        insert: checked(
            d,
            format!(
                "INSERT {} {name} ({}) VALUES ({})",
                if by_partition {
                    "OVERWRITE TABLE"
                } else {
                    "INTO"
                },
                names.join(", "),
                values.join(", ")
            ),
        )?,
    })
}

/// The schema file `sql/results.sql`: the create statement for `upshot_results`, one column
/// per line with its meaning.
pub fn results_schema_file() -> String {
    let mut out = String::from(
        "-- The results table of `upshot run --into upshot_results` (DuckDB types).\n-- Generated from upshot-sql's RESULT_COLUMNS; a test keeps it in step.\nCREATE TABLE IF NOT EXISTS upshot_results (\n",
    );
    for (i, (c, t, what)) in RESULT_COLUMNS.iter().enumerate() {
        let comma = if i + 1 < RESULT_COLUMNS.len() {
            ","
        } else {
            ""
        };
        out.push_str(&format!("  {c} {t}{comma} -- {what}\n"));
    }
    out.push_str(");\n");
    out
}

/// The statements that create a per-row table `table` (`schema.table` allowed, quoted part by
/// part) from `query` inside the source's database: `DROP TABLE IF EXISTS` first when
/// `replace`, then `CREATE TABLE … AS` the query. Each is parsed back with the dialect's parser.
pub fn rows_table_sql(
    d: &dyn Dialect,
    table: &str,
    query: &sqlparser::ast::Query,
    replace: bool,
) -> Result<Vec<String>, SqlError> {
    let parts: Vec<&str> = table.split('.').collect();
    if parts.iter().any(|p| p.trim().is_empty()) {
        return Err(SqlError::Empty {
            what: "a part of the per-row table name",
        });
    }
    let name = table_name(d, table)?.to_string();
    let mut out = Vec::new();
    if replace {
        out.push(format!("DROP TABLE IF EXISTS {name}"));
    }
    out.push(format!("CREATE TABLE {name} AS {query}"));
    for sql in &out {
        let stmts = Parser::parse_sql(d.parser().as_ref(), sql).map_err(|e| SqlError::Parse {
            what: "a per-row table statement",
            message: e.to_string(),
        })?;
        match stmts.as_slice() {
            [Statement::CreateTable(_)] | [Statement::Drop { .. }] => {}
            _ => return Err(SqlError::NotOneStatement { count: stmts.len() }),
        }
    }
    Ok(out)
}
