//! Running resolved questions on an engine, the typed results, and the results table.

use crate::resolve::{plan_hash, Resolved};
use crate::CoreError;
use serde::Serialize;
use upshot_engine::{Engine, Param, Write};
use upshot_methods::{estimate, ColumnType, Diagnostics, Estimate, MethodError};
use upshot_study::{Estimand, Method, Study};

/// What a question's estimate is about, and what was found besides the estimates.
#[derive(Clone, Debug, Serialize)]
pub struct QuestionSummary {
    /// Question name.
    pub question: String,
    /// Method used.
    pub method: Method,
    /// Estimand.
    pub estimand: Estimand,
    /// Treatment column.
    pub treatment: String,
    /// Outcome column.
    pub outcome: String,
    /// Adjustment set (for `iv`: the instruments' conditioning set).
    pub adjustment_set: Vec<String>,
    /// Instruments (`iv` only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub instruments: Vec<String>,
    /// Mediators (`front-door` only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub mediators: Vec<String>,
    /// Why this set.
    pub why_this_set: String,
    /// The rows read: table, file or `query`.
    pub source: String,
    /// Hash of the plan's SQL.
    pub plan_hash: String,
    /// What the estimate rests on.
    pub assumptions: Vec<String>,
    /// Rows read and excluded, notes, warnings, passes.
    pub diagnostics: Diagnostics,
}

/// One question's answer: its summary and one estimate row per segment (the `all` row first).
#[derive(Clone, Debug)]
pub struct Answer {
    /// The question and its diagnostics.
    pub summary: QuestionSummary,
    /// The estimate rows.
    pub estimates: Vec<Estimate>,
    /// The query of the per-row table (`match` with a unit key); run only by
    /// [`write_results`] when a per-row table is asked for.
    pub rows: Option<upshot_sql::Pass>,
}

/// A per-row table to create in the source's database (`--rows-into`).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RowsInto {
    /// The table (`schema.table` allowed).
    pub table: String,
    /// Replace it when it exists (otherwise an existing table is refused).
    pub replace: bool,
}

/// What a run writes: the results table (with the run key), a per-row table, or both — in one
/// transaction where the engine has them.
#[derive(Clone, Copy, Debug, Default)]
pub struct Writes<'a> {
    /// The results table.
    pub into: Option<&'a str>,
    /// The run key (replaces an earlier run's rows in the results table).
    pub run_key: Option<&'a str>,
    /// The per-row table.
    pub rows_into: Option<&'a RowsInto>,
}

/// Checks a per-row table request against the resolved questions before anything is opened:
/// one question, method `match`, a unit key to name the rows by.
pub fn check_rows_request(resolved: &[Resolved], rows: &RowsInto) -> Result<(), CoreError> {
    let [r] = resolved else {
        return Err(CoreError::Input(format!(
            "--rows-into: the study has {} questions; a per-row table holds one question's rows — add --question NAME",
            resolved.len()
        )));
    };
    if r.spec.method != Method::Match {
        return Err(CoreError::Input(format!(
            "--rows-into: question `{}` uses method `{}`; per-row effects come from matching — use --method match",
            r.question,
            r.spec.method.as_str()
        )));
    }
    let Some(unit) = &r.spec.unit else {
        return Err(CoreError::Input(format!(
            "--rows-into: question `{}` has no unit key to name each row by; give --unit COLUMN (a column that identifies rows, for example customer_id)",
            r.question
        )));
    };
    if let Some(s) = r
        .spec
        .segments
        .iter()
        .find(|s| s.eq_ignore_ascii_case(unit))
    {
        return Err(CoreError::Input(format!(
            "--rows-into: `{s}` is both the unit key and a segment column; a unit key names one row, so segment by another column"
        )));
    }
    let taken = |n: &str| PER_ROW_COLUMNS.iter().any(|c| c.eq_ignore_ascii_case(n));
    for name in std::iter::once(unit).chain(&r.spec.segments) {
        if taken(name) {
            return Err(CoreError::Input(format!(
                "--rows-into: column `{name}` has the name of one the per-row table adds ({}); rename it in a source query (SELECT …, {name} AS {name}_) and rerun",
                PER_ROW_COLUMNS.join(", ")
            )));
        }
    }
    upshot_sql::Source::table(&rows.table)
        .map(|_| ())
        .map_err(|e| CoreError::Input(format!("--rows-into: {e}")))
}

/// The columns a per-row table adds after the unit key and the segment columns.
pub const PER_ROW_COLUMNS: [&str; 8] = [
    "treatment",
    "outcome",
    "counterfactual",
    "difference",
    "distance",
    "matches",
    "propensity",
    "logit",
];

/// Checks that the per-row table can be written on `engine`: a database that keeps what is
/// written, and no table of that name unless it may be replaced.
pub fn check_rows_table(engine: &dyn Engine, rows: &RowsInto) -> Result<(), CoreError> {
    if !engine.capabilities().durable {
        return Err(CoreError::Input(format!(
            "--rows-into {}: the rows are read by an in-memory database (a file source, or no --db), which keeps nothing it is given: load them into a table of a database (--db FILE.duckdb, PostgreSQL or Spark) and rerun",
            rows.table
        )));
    }
    let source = upshot_sql::Source::table(&rows.table)
        .map_err(|e| CoreError::Input(format!("--rows-into: {e}")))?;
    if !rows.replace && engine.columns(&source).is_ok() {
        return Err(CoreError::Input(format!(
            "--rows-into {}: the table exists; add --replace to replace it, or name another table",
            rows.table
        )));
    }
    Ok(())
}

/// Runs resolved questions on `engine`, calling `progress(question, pass)` before each pass.
pub fn run(
    engine: &dyn Engine,
    resolved: Vec<Resolved>,
    progress: &mut dyn FnMut(&str, &str),
) -> Result<Vec<Answer>, CoreError> {
    let mut answers = Vec::new();
    for mut r in resolved {
        if r.spec.source.file_kind().is_some() && !engine.capabilities().reads_files {
            return Err(CoreError::Input(format!(
                "question `{}`: the {} engine reads no files; load {} into a table there",
                r.question,
                engine.dialect().name(),
                r.source_label
            )));
        }
        let cols = engine.columns(&r.spec.source).map_err(|e| {
            CoreError::Input(format!(
                "question `{}`: cannot read the columns of {}: {e}; check the table name (quoted names are case-sensitive), the file path or the query",
                r.question, r.source_label
            ))
        })?;
        let booleans = cols
            .iter()
            .filter(|c| c.boolean)
            .map(|c| c.name.clone())
            .collect();
        r.spec.flavor = engine.flavor().with_booleans(booleans);
        r.spec.columns = Some(
            cols.into_iter()
                .map(|c| ColumnType {
                    name: c.name,
                    type_name: c.type_name,
                    numeric: c.numeric,
                    integer: c.integer,
                    boolean: c.boolean,
                })
                .collect(),
        );
        let hash = plan_hash(&r.spec);
        let question = r.question.clone();
        let mut runner = |p: &upshot_sql::Pass| {
            progress(&question, &p.name);
            engine.run(p).map_err(|e| e.to_string())
        };
        let outcome = estimate(&r.spec, &mut runner).map_err(|e| match e {
            MethodError::Engine(m) => CoreError::Engine(format!("question `{}`: {m}", r.question)),
            other => CoreError::Input(format!("question `{}`: {other}", r.question)),
        })?;
        let mut outcome = outcome;
        suppress_small(&mut outcome, r.min_cell);
        answers.push(Answer {
            summary: QuestionSummary {
                question: r.question.clone(),
                method: r.spec.method,
                estimand: r.spec.estimand,
                treatment: r.spec.treatment.clone(),
                outcome: r.spec.outcome.clone(),
                adjustment_set: r.spec.adjust.clone(),
                instruments: r.spec.instruments.clone(),
                mediators: r.spec.mediators.clone(),
                why_this_set: r.chosen.why.clone(),
                source: r.source_label.clone(),
                plan_hash: hash,
                assumptions: r.assumptions.clone(),
                diagnostics: outcome.diagnostics,
            },
            estimates: outcome.estimates,
            rows: outcome.rows,
        });
    }
    Ok(answers)
}

/// Small-cell suppression: an estimate row with fewer than `k` rows in either treatment arm (in
/// all, for a continuous treatment) loses its estimate, interval and counts — in every output
/// and in the results table — and says `<k` instead; its instrument report keeps no numbers.
/// When a single segment is suppressed, the smallest other segment is too (complementary
/// suppression): otherwise the `all` row's counts minus the shown segments' would give the
/// small segment's counts back. The notes and warnings about a suppressed row (which can hold
/// its counts) are withheld, and one note says so.
pub fn suppress_small(outcome: &mut upshot_methods::Outcome, k: u32) {
    if k == 0 {
        return;
    }
    let k = f64::from(k);
    let small = |e: &Estimate| match (e.n_treated, e.n_control) {
        (Some(t), Some(c)) => t < k || c < k,
        _ => e.n_used < k,
    };
    let segments: Vec<usize> = (0..outcome.estimates.len())
        .filter(|&i| !outcome.estimates[i].segment_values.is_empty())
        .collect();
    let mut hide: Vec<usize> = (0..outcome.estimates.len())
        .filter(|&i| small(&outcome.estimates[i]))
        .collect();
    let hidden_segments = segments.iter().filter(|i| hide.contains(i)).count();
    if hidden_segments == 1 {
        if let Some(&next) = segments
            .iter()
            .filter(|i| !hide.contains(i))
            .min_by(|a, b| {
                outcome.estimates[**a]
                    .n_used
                    .total_cmp(&outcome.estimates[**b].n_used)
            })
        {
            hide.push(next);
        }
    }
    let diagnostics = &mut outcome.diagnostics;
    let reports = &mut diagnostics.instruments;
    for (i, e) in outcome.estimates.iter_mut().enumerate() {
        if !hide.contains(&i) {
            continue;
        }
        let label = if e.segment_values.is_empty() {
            "all rows:".to_string()
        } else {
            format!("segment {}:", e.segment)
        };
        diagnostics.notes.retain(|n| !n.starts_with(&label));
        diagnostics.warnings.retain(|w| !w.starts_with(&label));
        diagnostics.notes.push(format!(
            "{label} suppressed (fewer than {k} rows in an arm); its estimate, counts and notes are withheld"
        ));
        e.estimate = f64::NAN;
        e.std_error = f64::NAN;
        e.ci_low = f64::NAN;
        e.ci_high = f64::NAN;
        e.n_treated = e.n_treated.map(|_| f64::NAN);
        e.n_control = e.n_control.map(|_| f64::NAN);
        e.n_used = f64::NAN;
        e.suppressed = Some(format!("<{k}"));
        if let Some(r) = reports.get_mut(i) {
            r.first_stage.clear();
            r.partial_f = f64::NAN;
            r.f_df = (f64::NAN, f64::NAN);
            r.se_unadjusted = f64::NAN;
            r.se_robust = f64::NAN;
            r.se_delta = None;
            r.sargan = None;
            r.hansen_j = None;
            r.complier_share = None;
        }
    }
}

/// The run id and the rows of the results table (`sql/results.sql`, one per estimate), in
/// column order but `run_at` (the database's time at the write).
pub fn results_rows(
    study: &Study,
    run_key: Option<&str>,
    answers: &[Answer],
    now_millis: u128,
) -> (String, Vec<Vec<Param>>) {
    let run_id = match run_key {
        Some(k) => k.to_string(),
        None => format!(
            "{}-{now_millis}",
            answers
                .first()
                .map_or("run", |a| a.summary.plan_hash.as_str())
        ),
    };
    let text = |s: &str| Param::Text(s.to_string());
    let num = |x: f64| {
        if x.is_finite() {
            Param::Number(x)
        } else {
            Param::Null
        }
    };
    let opt = |x: Option<f64>| x.map_or(Param::Null, num);
    let mut rows = Vec::new();
    for a in answers {
        let s = &a.summary;
        let d = &s.diagnostics;
        let other: f64 = d.rows_excluded_other.iter().map(|x| x.1).sum();
        for e in &a.estimates {
            rows.push(vec![
                text(&run_id),
                run_key.map_or(Param::Null, text),
                text(env!("CARGO_PKG_VERSION")),
                text(&study.name),
                text(&s.question),
                text(&s.plan_hash),
                text(&s.treatment),
                text(&s.outcome),
                text(&e.segment),
                text(e.estimand.as_str()),
                text(e.method.as_str()),
                num(e.estimate),
                num(e.std_error),
                num(e.ci_low),
                num(e.ci_high),
                opt(e.n_treated),
                opt(e.n_control),
                num(e.n_used),
                num(d.rows_read),
                num(d.rows_excluded_null),
                num(other),
                text(&e.adjustment_set.join(", ")),
                text(&s.source),
            ]);
        }
    }
    (run_id, rows)
}

/// Checks a results-table name for `engine` before anything runs (the name is quoted part by
/// part; an empty part is refused).
pub fn check_results_table(engine: &dyn Engine, table: &str) -> Result<(), CoreError> {
    upshot_sql::results_sql(engine.dialect(), table)
        .map(|_| ())
        .map_err(|e| CoreError::Input(format!("--into: {e}")))
}

/// Writes what `writes` asks for in one transaction (on an engine without transactions, in
/// order): the per-row table (dropped first with `replace`, then created from the question's
/// per-row query), then the results table (created if missing, an earlier run with the same
/// run key replaced, these answers appended); then calls `before_commit` (a surface writes its
/// output there) and commits. Nothing is written when any statement or `before_commit` fails;
/// a failing `before_commit`'s message comes back as [`CoreError::Engine`].
pub fn write_results(
    engine: &dyn Engine,
    writes: Writes,
    study: &Study,
    answers: &[Answer],
    before_commit: &mut dyn FnMut() -> Result<(), String>,
) -> Result<(), CoreError> {
    if !engine.capabilities().durable {
        return Err(CoreError::Input(
            "--into needs a database that keeps what is written: give --db FILE (a DuckDB file; it is created if missing)".into(),
        ));
    }
    let mut statements = Vec::new();
    let mut what = Vec::new();
    if let Some(r) = writes.rows_into {
        let query = match answers {
            [a] => a.rows.as_ref(),
            _ => None,
        }
        .ok_or_else(|| {
            CoreError::Input(format!(
                "--rows-into {}: no per-row rows to write (one `match` question with a unit key has them)",
                r.table
            ))
        })?;
        let sql = upshot_sql::rows_table_sql(engine.dialect(), &r.table, &query.query, r.replace)
            .map_err(|e| CoreError::Input(format!("--rows-into: {e}")))?;
        statements.extend(sql.into_iter().map(|sql| Write { sql, rows: vec![] }));
        what.push(format!("--rows-into {}", r.table));
    }
    if let Some(table) = writes.into {
        let sql = upshot_sql::results_sql(engine.dialect(), table)
            .map_err(|e| CoreError::Input(format!("--into: {e}")))?;
        let now = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_millis())
            .unwrap_or(0);
        let (_, rows) = results_rows(study, writes.run_key, answers, now);
        statements.push(Write {
            sql: sql.create,
            rows: vec![],
        });
        if let (Some(k), Some(delete)) = (writes.run_key, sql.delete) {
            statements.push(Write {
                sql: delete,
                rows: vec![vec![Param::Text(k.to_string())]],
            });
        }
        statements.push(Write {
            sql: sql.insert,
            rows,
        });
        what.push(format!("--into {table}"));
    }
    let what = what.join(" and ");
    engine
        .write(&statements, before_commit)
        .map_err(|e| match e {
            upshot_engine::EngineError::Aborted(why) => CoreError::Engine(format!(
                "{why}; {what}: nothing was written (the transaction was rolled back)"
            )),
            upshot_engine::EngineError::Written(why) => CoreError::Engine(format!("{what}: {why}")),
            e => CoreError::Engine(format!(
                "{what}: nothing was written (the transaction was rolled back): {e}"
            )),
        })
}
