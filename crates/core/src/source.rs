//! Where a study's rows are: the database locator and the source (a table, one SELECT, a CSV
//! or Parquet file), resolved by one rule for every surface.

use crate::CoreError;
use std::path::{Path, PathBuf};
use upshot_engine::Engine;
use upshot_graph::Role;
use upshot_sql::{Dialect, Source};
use upshot_study::{Rows, Study};

/// The locator of the default database: a fresh in-memory DuckDB.
pub const DEFAULT_DATABASE: &str = "duckdb::memory:";

/// A study's rows, resolved.
#[derive(Clone, Debug, PartialEq)]
pub struct ResolvedRows {
    /// The rows, as passes read them.
    pub source: Source,
    /// How the rows are named in output: the table, the file, or `query`.
    pub label: String,
    /// The database locator ([`DEFAULT_DATABASE`] when the study names none).
    pub database: String,
}

/// What a `--source` text (or a SQL surface's `source` argument) names: a SELECT (text that
/// starts with `SELECT`, `WITH` or `(`), a file (an existing file, a folder — refused later
/// with the pattern to use — or a name ending in `.csv` or a Parquet extension), else a table.
pub fn classify_source(text: &str) -> Rows {
    let head = text.trim_start().to_lowercase();
    let first = head
        .split(|c: char| !c.is_ascii_alphabetic())
        .next()
        .unwrap_or("");
    // Other statements are classified as queries, so that the one-SELECT rule refuses them by
    // name (instead of looking them up as a table).
    const STATEMENTS: [&str; 26] = [
        "attach",
        "detach",
        "copy",
        "pragma",
        "install",
        "load",
        "set",
        "reset",
        "create",
        "drop",
        "delete",
        "insert",
        "update",
        "alter",
        "call",
        "export",
        "import",
        "use",
        "checkpoint",
        "vacuum",
        "begin",
        "commit",
        "rollback",
        "truncate",
        "merge",
        "grant",
    ];
    let statement = STATEMENTS.contains(&first) && head.len() > first.len();
    if statement
        || head.starts_with("select")
        || head.starts_with("with")
        || head.starts_with('(')
        || head.starts_with("values")
    {
        Rows::Query(text.to_string())
    } else if Path::new(text).is_file()
        || Path::new(text).is_dir()
        || head.ends_with(".csv")
        || upshot_sql::is_parquet(&head)
    {
        Rows::File(PathBuf::from(text))
    } else {
        Rows::Table(text.to_string())
    }
}

fn file(p: &Path) -> Result<(Source, String), CoreError> {
    let shown = p.display().to_string();
    // A Parquet pattern (`sales/part-*.parquet`) is checked by the engine, which names the
    // pattern when nothing matches.
    let pattern = upshot_sql::is_parquet_pattern(&shown);
    if p.is_dir() {
        return Err(CoreError::Input(format!(
            "source: {shown} is a folder; name a file, or the folder's Parquet files as a pattern such as {}",
            p.join("*.parquet").display()
        )));
    }
    if !pattern && !p.is_file() {
        return Err(CoreError::Input(format!(
            "source: no file {shown}; fix the path (a study's paths are relative to the study file)"
        )));
    }
    Ok((Source::file(&shown), shown))
}

/// The database locator a SQL surface gives: the rows are in the database that runs the
/// query calling upshot (a table or a SELECT there), not in one upshot opens by name.
pub const CALLER_DATABASE: &str = "(the calling database)";

/// The locator of the database a study's rows are in ([`DEFAULT_DATABASE`] when it names none).
pub fn database_of(study: &Study) -> String {
    study
        .source
        .database
        .clone()
        .unwrap_or_else(|| DEFAULT_DATABASE.to_string())
}

/// The files a study's rows are read from (a CSV or Parquet file, or a pattern over files): the
/// only files an engine opened for it may read.
pub fn files_of(study: &Study) -> Vec<String> {
    match &study.source.rows {
        Some(Rows::File(p)) => vec![p.display().to_string()],
        _ => vec![],
    }
}

/// The study's rows, with user SQL parsed by `dialect`'s parser (one read-only SELECT).
pub fn source_of(study: &Study, dialect: &dyn Dialect) -> Result<ResolvedRows, CoreError> {
    let database = study.source.database.clone();
    let (source, label) = match &study.source.rows {
        Some(Rows::File(p)) => file(p)?,
        Some(Rows::Table(t)) => (
            Source::table(t).map_err(|e| CoreError::Input(format!("source table: {e}")))?,
            t.clone(),
        ),
        Some(Rows::Query(q)) => (
            Source::query(q, dialect)
                .map_err(|e| CoreError::Input(format!("source query: {e}")))?,
            "query".to_string(),
        ),
        None => {
            return Err(CoreError::Input(
                "no rows to read: give --source (a table, a CSV or Parquet file, or a SELECT) or a study file with a [source] section".into(),
            ))
        }
    };
    if matches!(source, Source::Table(_) | Source::Query(_)) && database.is_none() {
        return Err(CoreError::Input(format!(
            "source {label} is read from a database: give --db (a DuckDB file, postgresql://... or sc://...) or [source].database in the study"
        )));
    }
    Ok(ResolvedRows {
        source,
        label,
        database: database_of(study),
    })
}

/// Whether `upshot check` can compare the diagram's names with the source's columns: a file
/// source, or a table or query in a named database.
pub fn has_columns_to_check(study: &Study) -> bool {
    match &study.source.rows {
        Some(Rows::File(_)) => true,
        Some(_) => study.source.database.is_some(),
        None => false,
    }
}

/// Checks that every observed variable of the diagram is a column of the study's source.
/// Reads the schema only, no rows.
pub fn check_columns(study: &Study, engine: &dyn Engine) -> Result<(), CoreError> {
    let label = study
        .path
        .as_ref()
        .map(|p| format!("{}: ", p.display()))
        .unwrap_or_default();
    let rows = source_of(study, engine.dialect())
        .map_err(|e| CoreError::Input(format!("{label}{e}; or use --offline")))?;
    let what = match &rows.source {
        Source::Table(_) => format!("table {}", rows.label),
        Source::Query(_) => "the source query".to_string(),
        _ => rows.label.clone(),
    };
    let columns = engine
        .columns(&rows.source)
        .map_err(|e| CoreError::Input(format!("{label}[source]: cannot read {what}: {e}")))?;
    let names: Vec<&str> = columns.iter().map(|c| c.name.as_str()).collect();
    for n in study.diagram.nodes() {
        if n.role == Role::Observed && n.confounds.is_none() && !names.contains(&n.name.as_str()) {
            return Err(CoreError::Input(format!(
                "{label}the diagram's observed variable `{}` is not a column of {what}; columns: {}. Rename it, or declare it `latent` if it is not recorded",
                n.name,
                names.join(", ")
            )));
        }
    }
    Ok(())
}
