//! `upshot plan` and `upshot run`: resolve each question to an estimator spec, then list its
//! passes or run them on the engine and report the estimates.

use crate::check::{assess, assumptions, clean, load_study, Chosen};
use crate::exit::{Failure, NOT_IDENTIFIED, OK};
use serde::Serialize;
use std::io::{IsTerminal, Write as _};
use std::path::{Path, PathBuf};
use upshot_engine::{DuckDbEngine, Engine, Param, Write, MEMORY};
use upshot_graph::report::{self, Declared};
use upshot_graph::Kind;
use upshot_methods::{
    auto, estimate, plan, Basis, ColumnType, Estimate, Estimator, NullPolicy, Outcome, Spec, Target,
};
use upshot_sql::{dialect_by_name, parse_filter, Dialect, DuckDb, Source, DIALECTS};
use upshot_study::{Estimand, Method, Question, QuestionInput, Route, SourceKind, Study};

/// Flags of `upshot plan` and `upshot run`.
#[derive(clap::Args)]
pub struct Args {
    /// Study file (TOML). Without it, give --graph, --treatment and --outcome.
    study: Option<PathBuf>,
    /// Only this question of the study.
    #[arg(long)]
    question: Option<String>,
    /// Diagram: a file path, `-` for standard input, or inline edges such as "z -> t -> y".
    #[arg(long)]
    graph: Option<String>,
    /// Treatment column.
    #[arg(long, value_delimiter = ',')]
    treatment: Vec<String>,
    /// Outcome column.
    #[arg(long, value_delimiter = ',')]
    outcome: Vec<String>,
    /// ATE, ATT or ATC.
    #[arg(long)]
    estimand: Option<String>,
    /// Segment columns for per-segment effects, comma-separated.
    #[arg(long = "segment-by", value_delimiter = ',')]
    segment_by: Vec<String>,
    /// Method key: auto, stratify, regress, weight, doubly-robust, partial-out.
    #[arg(long)]
    method: Option<String>,
    /// Adjustment set to use instead of the one identification picks (checked first).
    #[arg(long, value_delimiter = ',', num_args = 0..)]
    adjust: Option<Vec<String>>,
    /// Database: a DuckDB file, or duckdb::memory: (default: the study's, else in-memory).
    #[arg(long)]
    db: Option<String>,
    /// Rows: a table name, a CSV file, or one SELECT statement (default: the study's).
    #[arg(long)]
    source: Option<String>,
    /// A SQL boolean expression restricting the rows (one expression).
    #[arg(long)]
    filter: Option<String>,
    /// Integer unit key column, for cross-fitting folds.
    #[arg(long)]
    unit: Option<String>,
    /// Cross-fitting folds for doubly-robust and partial-out (1 = none).
    #[arg(long, default_value_t = 5)]
    folds: u32,
    /// Rows with NULL in a used column: `exclude` (count and report them) or `error`.
    #[arg(long = "on-null", default_value = "exclude")]
    on_null: String,
    /// Clip propensities to [c, 1 - c] (0 = no clipping).
    #[arg(long, default_value_t = 0.01)]
    clip: f64,
    /// Add squares of numeric covariates to the models.
    #[arg(long)]
    squares: bool,
    /// Add pairwise products of covariates to the models.
    #[arg(long)]
    interactions: bool,
    /// Output: text, json or csv (`plan`: text or json).
    #[arg(long, default_value = "text")]
    format: String,
    /// `run`: append the estimates to this results table in the database (one transaction).
    #[arg(long)]
    into: Option<String>,
    /// `run --into`: a key for this run; rerunning with the same key replaces its rows.
    #[arg(long = "run-key")]
    run_key: Option<String>,
    /// `plan`: SQL dialect to render (duckdb, postgres).
    #[arg(long)]
    dialect: Option<String>,
}

/// One question, resolved.
struct Resolved {
    question: String,
    spec: Spec,
    chosen: Chosen,
    assumptions: Vec<String>,
    source_label: String,
}

fn method_of(q: &Question, study: &Study, adjust: &[String]) -> Result<Estimator, Failure> {
    let kind = |n: &str| {
        study
            .diagram
            .index_of(n)
            .map(|i| study.diagram.node(i).kind)
            .unwrap_or(Kind::Unspecified)
    };
    Ok(match q.method {
        Method::Auto => {
            let binary = matches!(kind(&q.treatment[0]), Kind::Binary | Kind::Unspecified);
            let discrete = adjust
                .iter()
                .all(|c| matches!(kind(c), Kind::Binary | Kind::Categorical | Kind::Ordinal));
            auto(binary, discrete)
        }
        Method::Stratify => Estimator::Stratify,
        Method::Regress => Estimator::Regress,
        Method::Weight => Estimator::Weight,
        Method::DoublyRobust => Estimator::DoublyRobust,
        Method::PartialOut => Estimator::PartialOut,
        m @ (Method::Iv | Method::FrontDoor | Method::Match | Method::Coarsen) => {
            return Err(Failure::input(format!(
                "question `{}`: method `{}` is not available in this version of upshot; adjustment methods are: stratify, regress, weight, doubly-robust, partial-out",
                q.name,
                m.as_str()
            )))
        }
    })
}

fn source_of(
    a: &Args,
    study: &Study,
    d: &dyn Dialect,
) -> Result<(Source, String, Option<String>), Failure> {
    let base: Option<&Path> = study.path.as_deref().and_then(|p| p.parent());
    let db = a.db.clone().or_else(|| {
        study.source.database.as_ref().map(|db| {
            // A database file named in a study is relative to the study file.
            match base {
                Some(b) if db != MEMORY && !Path::new(db).is_absolute() => {
                    b.join(db).display().to_string()
                }
                _ => db.clone(),
            }
        })
    });
    let file = |p: &Path| -> Result<(Source, String), Failure> {
        let shown = p.display().to_string();
        // A Parquet glob (`sales/part-*.parquet`) is checked by the engine, which names the
        // pattern when nothing matches.
        let glob = upshot_sql::is_parquet_pattern(&shown);
        if p.is_dir() {
            return Err(Failure::input(format!(
                "source: {shown} is a folder; name a file, or the folder's Parquet files as a pattern such as {}",
                p.join("*.parquet").display()
            )));
        }
        if !glob && !p.is_file() {
            return Err(Failure::input(format!(
                "source: no file {shown}; fix the path (a study's paths are relative to the study file)"
            )));
        }
        Ok((Source::file(&shown), shown))
    };
    let (source, label) = match &a.source {
        Some(s) => {
            let head = s.trim_start().to_lowercase();
            if head.starts_with("select") || head.starts_with("with") || head.starts_with('(') {
                (
                    Source::query(s, d).map_err(|e| Failure::input(format!("--source: {e}")))?,
                    "query".to_string(),
                )
            } else if Path::new(s).is_file()
                || (db.is_none() && Path::new(s).is_dir())
                || head.ends_with(".csv")
                || upshot_sql::is_parquet(&head)
            {
                file(Path::new(s))?
            } else {
                (
                    Source::table(s).map_err(|e| Failure::input(format!("--source: {e}")))?,
                    s.clone(),
                )
            }
        }
        None => match &study.source.rows {
            Some(SourceKind::File(p)) => file(p)?,
            Some(SourceKind::Table(t)) => (
                Source::table(t).map_err(|e| Failure::input(format!("[source].table: {e}")))?,
                t.clone(),
            ),
            Some(SourceKind::Query(q)) => (
                Source::query(q, d).map_err(|e| Failure::input(format!("[source].query: {e}")))?,
                "query".to_string(),
            ),
            None => {
                return Err(Failure::input(
                    "no rows to read: give --source (a table, a CSV file or a SELECT) or a study file with a [source] section",
                ))
            }
        },
    };
    if matches!(source, Source::Table(_) | Source::Query(_)) && db.is_none() {
        return Err(Failure::input(format!(
            "source {label} is read from a database: give --db (a DuckDB file) or [source].database in the study"
        )));
    }
    Ok((source, label, db))
}

fn resolve(
    a: &Args,
    study: &Study,
    q: &Question,
    d: &'static dyn Dialect,
) -> Result<Resolved, Failure> {
    if q.treatment.len() != 1 || q.outcome.len() != 1 {
        return Err(Failure::input(format!(
            "question `{}`: run estimates one treatment and one outcome at a time (found {} and {}); split it into several questions",
            q.name,
            q.treatment.len(),
            q.outcome.len()
        )));
    }
    let declared = Declared {
        adjust: q.adjust.clone(),
        mediators: q.mediators.clone(),
        instruments: q.instruments.clone(),
        instrument_given: q.instrument_given.clone(),
    };
    let id = report::identify(&study.diagram, &q.treatment, &q.outcome, &declared);
    let (identified, chosen, problems) = assess(q, &id);
    let Some(chosen) = chosen.filter(|_| identified) else {
        return Err(Failure {
            code: NOT_IDENTIFIED,
            message: format!(
                "question `{}`: the effect of {} on {} is not identified from the diagram{}; see `upshot check` for the paths and alternatives",
                q.name,
                q.treatment[0],
                q.outcome[0],
                if problems.is_empty() {
                    String::new()
                } else {
                    format!(": {}", problems.join("; "))
                }
            ),
        });
    };
    if chosen.route != Route::Adjustment {
        return Err(Failure::input(format!(
            "question `{}`: the effect is identified only through the {} route ({}), whose estimators are not available in this version; the adjustment methods need a valid adjustment set",
            q.name,
            match chosen.route {
                Route::FrontDoor => "front-door",
                _ => "instrument",
            },
            chosen.set.join(", ")
        )));
    }
    let method = method_of(q, study, &chosen.set)?;
    let (source, source_label, _) = source_of(a, study, d)?;
    let filter_text = a.filter.clone().or_else(|| study.source.filter.clone());
    let filter = match &filter_text {
        Some(f) => Some(parse_filter(f, d).map_err(|e| Failure::input(format!("--filter: {e}")))?),
        None => None,
    };
    let on_null = match a.on_null.as_str() {
        "exclude" => NullPolicy::Exclude,
        "error" => NullPolicy::Error,
        other => {
            return Err(Failure::input(format!(
                "--on-null: unknown policy `{other}`; expected exclude or error"
            )))
        }
    };
    if a.folds == 0 || a.folds > 20 {
        return Err(Failure::input(format!(
            "--folds: {} folds; use 1 (no cross-fitting) to 20",
            a.folds
        )));
    }
    if !(0.0..0.5).contains(&a.clip) {
        return Err(Failure::input(format!(
            "--clip: {} is outside [0, 0.5); propensities are clipped to [c, 1 - c]",
            a.clip
        )));
    }
    let categorical = study
        .diagram
        .nodes()
        .iter()
        .filter(|n| matches!(n.kind, Kind::Categorical | Kind::Ordinal))
        .map(|n| n.name.clone())
        .collect();
    let target = match q.estimand {
        Estimand::Ate => Target::Ate,
        Estimand::Att => Target::Att,
        Estimand::Atc => Target::Atc,
    };
    Ok(Resolved {
        question: q.name.clone(),
        assumptions: assumptions(&Some(chosen.clone()), q.method),
        spec: Spec {
            dialect: d,
            question: q.name.clone(),
            source,
            filter,
            treatment: q.treatment[0].clone(),
            outcome: q.outcome[0].clone(),
            adjust: chosen.set.clone(),
            segments: q.segments.clone(),
            target,
            method,
            folds: a.folds,
            unit: a
                .unit
                .clone()
                .or_else(|| q.unit.clone())
                .or_else(|| study.source.unit.clone()),
            on_null,
            clip: a.clip,
            categorical,
            basis: Basis {
                squares: a.squares,
                interactions: a.interactions,
            },
            columns: None,
        },
        chosen,
        source_label,
    })
}

fn questions<'a>(study: &'a Study, only: &Option<String>) -> Result<Vec<&'a Question>, Failure> {
    let mut qs: Vec<&Question> = study.questions.iter().collect();
    if let Some(name) = only {
        qs.retain(|q| &q.name == name);
        if qs.is_empty() {
            let names: Vec<&str> = study.questions.iter().map(|q| q.name.as_str()).collect();
            return Err(Failure::input(format!(
                "--question: no question `{name}`; the study has: {}",
                names.join(", ")
            )));
        }
    }
    Ok(qs)
}

fn overrides(a: &Args) -> QuestionInput {
    QuestionInput {
        treatment: clean(a.treatment.clone()),
        outcome: clean(a.outcome.clone()),
        estimand: a.estimand.clone(),
        segments: clean(a.segment_by.clone()),
        method: a.method.clone(),
        adjust: a.adjust.clone().map(clean),
        mediators: None,
        instruments: None,
        instrument_given: vec![],
    }
}

/// FNV-1a, 64 bits, of the plan's SQL: stable across runs and machines.
fn plan_hash(spec: &Spec) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    if let Ok(p) = plan(spec) {
        for pass in p {
            for b in pass.sql.bytes() {
                h ^= u64::from(b);
                h = h.wrapping_mul(0x0100_0000_01b3);
            }
        }
    }
    format!("{h:016x}")
}

/// `upshot plan`.
pub fn run_plan(a: Args) -> Result<i32, Failure> {
    let d: &'static dyn Dialect = match &a.dialect {
        None => &DuckDb,
        Some(n) => dialect_by_name(n).ok_or_else(|| {
            Failure::input(format!(
                "--dialect: unknown dialect `{n}`; expected one of {}",
                DIALECTS
                    .iter()
                    .map(|d| d.name())
                    .collect::<Vec<_>>()
                    .join(", ")
            ))
        })?,
    };
    if a.into.is_some() || a.run_key.is_some() {
        return Err(Failure::input(
            "--into and --run-key belong to `upshot run`; `plan` writes nothing",
        ));
    }
    let json = match a.format.as_str() {
        "text" => false,
        "json" => true,
        f => {
            return Err(Failure::input(format!(
                "--format: unknown format `{f}` for plan; expected text or json"
            )))
        }
    };
    let study = load_study(
        a.study.as_deref(),
        a.graph.as_deref(),
        overrides(&a),
        "plan",
    )?;
    #[derive(Serialize)]
    struct PlanDoc {
        question: String,
        treatment: String,
        outcome: String,
        method: &'static str,
        estimand: &'static str,
        adjustment_set: Vec<String>,
        dialect: &'static str,
        plan_hash: String,
        passes: Vec<upshot_methods::PlannedPass>,
    }
    let mut docs = Vec::new();
    for q in questions(&study, &a.question)? {
        let r = resolve(&a, &study, q, d)?;
        let passes =
            plan(&r.spec).map_err(|e| Failure::input(format!("question `{}`: {e}", q.name)))?;
        docs.push(PlanDoc {
            question: r.question.clone(),
            treatment: r.spec.treatment.clone(),
            outcome: r.spec.outcome.clone(),
            method: r.spec.method.key(),
            estimand: upshot_methods::target_name(r.spec.target),
            adjustment_set: r.spec.adjust.clone(),
            dialect: d.name(),
            plan_hash: plan_hash(&r.spec),
            passes,
        });
    }
    if json {
        let doc = serde_json::json!({"format": "upshot-plan/1", "tool_version": env!("CARGO_PKG_VERSION"), "questions": docs});
        println!(
            "{}",
            serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))?
        );
        return Ok(OK);
    }
    let mut out = String::new();
    for doc in docs {
        out.push_str(&format!(
            "-- question {}: {} of {} on {} by method {}, adjusting for {{{}}} ({} SQL, plan {})\n",
            doc.question,
            doc.estimand,
            doc.treatment,
            doc.outcome,
            doc.method,
            doc.adjustment_set.join(", "),
            doc.dialect,
            doc.plan_hash
        ));
        for (i, p) in doc.passes.iter().enumerate() {
            out.push_str(&format!(
                "\n-- pass {}: {} — {}\n",
                i + 1,
                p.name,
                p.purpose
            ));
            if let Some(x) = &p.inlines {
                out.push_str(&format!("-- inlines: {x}\n"));
            }
            if let Some(x) = &p.repeats {
                out.push_str(&format!("-- runs: {x}\n"));
            }
            out.push_str(&p.sql);
            out.push_str(";\n");
        }
        out.push('\n');
    }
    print!("{out}");
    Ok(OK)
}

/// Shows one line of progress on a terminal; silent otherwise.
struct Progress {
    on: bool,
    count: usize,
}

impl Progress {
    fn pass(&mut self, question: &str, name: &str) {
        self.count += 1;
        if self.on {
            const SPIN: [char; 4] = ['|', '/', '-', '\\'];
            eprint!(
                "\r\x1b[2K{} {question}: pass {} ({name})",
                SPIN[self.count % 4],
                self.count
            );
            let _ = std::io::stderr().flush();
        }
    }
    fn done(&self) {
        if self.on {
            eprint!("\r\x1b[2K");
        }
    }
}

fn column_types(engine: &DuckDbEngine, r: &Resolved) -> Result<Vec<ColumnType>, Failure> {
    let cols = engine.columns(&r.spec.source).map_err(|e| {
        Failure::input(format!(
            "question `{}`: cannot read the columns of {}: {e}; check the table name (quoted names are case-sensitive), the file path or the query",
            r.question, r.source_label
        ))
    })?;
    Ok(cols
        .into_iter()
        .map(|c| ColumnType {
            name: c.name,
            numeric: c.numeric,
            integer: c.integer,
        })
        .collect())
}

#[derive(Serialize)]
struct QuestionDoc {
    question: String,
    method: &'static str,
    estimand: &'static str,
    treatment: String,
    outcome: String,
    adjustment_set: Vec<String>,
    why_this_set: String,
    source: String,
    plan_hash: String,
    assumptions: Vec<String>,
    diagnostics: upshot_methods::Diagnostics,
}

/// `upshot run`.
pub fn run_run(a: Args) -> Result<i32, Failure> {
    let format = a.format.as_str();
    if !matches!(format, "text" | "json" | "csv") {
        return Err(Failure::input(format!(
            "--format: unknown format `{format}`; expected text, json or csv"
        )));
    }
    if a.dialect.is_some() {
        return Err(Failure::input(
            "--dialect belongs to `upshot plan`; `run` uses the engine's dialect",
        ));
    }
    if a.run_key.is_some() && a.into.is_none() {
        return Err(Failure::input(
            "--run-key needs --into TABLE (it names a run in the results table)",
        ));
    }
    let study = load_study(a.study.as_deref(), a.graph.as_deref(), overrides(&a), "run")?;
    let qs = questions(&study, &a.question)?;
    let mut resolved = Vec::new();
    for q in qs {
        resolved.push(resolve(&a, &study, q, &DuckDb)?);
    }
    let (_, _, db) = source_of(&a, &study, &DuckDb)?;
    let location = db.clone().unwrap_or_else(|| MEMORY.to_string());
    if a.into.is_some() && location == MEMORY {
        return Err(Failure::input(
            "--into needs a database file to write to: give --db FILE (a DuckDB file; it is created if missing)",
        ));
    }
    if a.into.is_none() && location != MEMORY && !Path::new(&location).is_file() {
        return Err(Failure::input(format!(
            "--db: no database file {location}; check the path (run opens databases read-only unless --into is given)"
        )));
    }
    let engine = DuckDbEngine::open(&location, a.into.is_some())
        .map_err(|e| Failure::input(format!("--db: {e}")))?;
    let mut progress = Progress {
        on: std::io::stderr().is_terminal() && format == "text",
        count: 0,
    };
    let mut results: Vec<(Resolved, Outcome, String)> = Vec::new();
    for mut r in resolved {
        r.spec.columns = Some(column_types(&engine, &r)?);
        let hash = plan_hash(&r.spec);
        let question = r.question.clone();
        let mut runner = |p: &upshot_sql::Pass| {
            progress.pass(&question, &p.name);
            engine.run(p).map_err(|e| e.to_string())
        };
        let outcome = estimate(&r.spec, &mut runner);
        progress.done();
        let outcome = outcome.map_err(|e| match e {
            upshot_methods::MethodError::Engine(m) => {
                Failure::internal(format!("question `{}`: {m}", r.question))
            }
            other => Failure::input(format!("question `{}`: {other}", r.question)),
        })?;
        results.push((r, outcome, hash));
    }
    if let Some(table) = &a.into {
        write_results(&engine, table, a.run_key.as_deref(), &study, &results)?;
    }
    let out = match format {
        "json" => render_json(&study, &results)?,
        "csv" => render_csv(&results),
        _ => render_text(&results, a.into.as_deref()),
    };
    print!("{out}");
    Ok(OK)
}

fn write_results(
    engine: &DuckDbEngine,
    table: &str,
    run_key: Option<&str>,
    study: &Study,
    results: &[(Resolved, Outcome, String)],
) -> Result<(), Failure> {
    let sql = upshot_sql::results_sql(&DuckDb, table)
        .map_err(|e| Failure::input(format!("--into: {e}")))?;
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_millis())
        .unwrap_or(0);
    let hashes: Vec<&str> = results.iter().map(|r| r.2.as_str()).collect();
    let run_id = match run_key {
        Some(k) => k.to_string(),
        None => format!("{}-{now}", hashes.first().copied().unwrap_or("run")),
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
    for (r, o, hash) in results {
        let other: f64 = o.diagnostics.rows_excluded_other.iter().map(|x| x.1).sum();
        for e in &o.estimates {
            rows.push(vec![
                text(&run_id),
                run_key.map_or(Param::Null, text),
                text(env!("CARGO_PKG_VERSION")),
                text(&study.name),
                text(&r.question),
                text(hash),
                text(&r.spec.treatment),
                text(&r.spec.outcome),
                text(&e.segment),
                text(e.estimand),
                text(e.method),
                num(e.estimate),
                num(e.std_error),
                num(e.ci_low),
                num(e.ci_high),
                opt(e.n_treated),
                opt(e.n_control),
                num(e.n_used),
                num(o.diagnostics.rows_read),
                num(o.diagnostics.rows_excluded_null),
                num(other),
                text(&e.adjustment_set.join(", ")),
                text(&r.source_label),
            ]);
        }
    }
    let mut statements = vec![Write {
        sql: sql.create,
        rows: vec![],
    }];
    if let Some(k) = run_key {
        statements.push(Write {
            sql: sql.delete,
            rows: vec![vec![text(k)]],
        });
    }
    statements.push(Write {
        sql: sql.insert,
        rows,
    });
    engine.write(&statements).map_err(|e| {
        Failure::internal(format!(
            "--into {table}: nothing was written (the transaction was rolled back): {e}"
        ))
    })
}

fn fmt_num(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    let a = x.abs();
    if a != 0.0 && !(1e-3..1e7).contains(&a) {
        format!("{x:.4e}")
    } else {
        format!("{x:.4}")
    }
}

fn count(x: Option<f64>) -> String {
    x.map_or("—".into(), |v| format!("{v:.0}"))
}

fn render_text(results: &[(Resolved, Outcome, String)], into: Option<&str>) -> String {
    let mut o = String::new();
    for (r, out, _) in results {
        let spec = &r.spec;
        o.push_str(&format!(
            "question {}: {} of {} on {} — method {}, adjusting for {{{}}}\n",
            r.question,
            upshot_methods::target_name(spec.target),
            spec.treatment,
            spec.outcome,
            spec.method.key(),
            spec.adjust.join(", ")
        ));
        let header = [
            "segment",
            "estimate",
            "std. error",
            "95% interval",
            "treated",
            "control",
        ];
        let mut rows: Vec<[String; 6]> = vec![header.map(str::to_string)];
        for e in &out.estimates {
            rows.push([
                e.segment.clone(),
                fmt_num(e.estimate),
                fmt_num(e.std_error),
                format!("[{}, {}]", fmt_num(e.ci_low), fmt_num(e.ci_high)),
                count(e.n_treated),
                count(e.n_control),
            ]);
        }
        let mut width = [0usize; 6];
        for row in &rows {
            for (w, c) in width.iter_mut().zip(row) {
                *w = (*w).max(c.chars().count());
            }
        }
        for row in &rows {
            o.push_str("  ");
            for (i, (c, w)) in row.iter().zip(width).enumerate() {
                let pad = w - c.chars().count();
                if i == 0 {
                    o.push_str(c);
                    o.push_str(&" ".repeat(pad));
                } else {
                    o.push_str("  ");
                    o.push_str(&" ".repeat(pad));
                    o.push_str(c);
                }
            }
            o.push('\n');
        }
        let d = &out.diagnostics;
        o.push_str(&format!(
            "  rows: {} read, {} excluded for NULL{}{}; {} passes\n",
            d.rows_read,
            d.rows_excluded_null,
            if d.null_columns.is_empty() {
                String::new()
            } else {
                format!(
                    " ({})",
                    d.null_columns
                        .iter()
                        .map(|(c, n)| format!("{c}: {n}"))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            },
            d.rows_excluded_other
                .iter()
                .map(|(why, n)| format!(", {n} excluded {why}"))
                .collect::<String>(),
            d.passes
        ));
        o.push_str(&format!("  adjustment set: {}\n", r.chosen.why));
        for w in &d.warnings {
            o.push_str(&format!("  warning: {w}\n"));
        }
        for n in &d.notes {
            o.push_str(&format!("  note: {n}\n"));
        }
        o.push_str("  rests on:\n");
        for x in &r.assumptions {
            o.push_str(&format!("    - {x}\n"));
        }
        o.push('\n');
    }
    if let Some(t) = into {
        o.push_str(&format!("estimates appended to {t}\n"));
    }
    o
}

fn render_json(study: &Study, results: &[(Resolved, Outcome, String)]) -> Result<String, Failure> {
    let estimates: Vec<&Estimate> = results.iter().flat_map(|r| &r.1.estimates).collect();
    let questions: Vec<QuestionDoc> = results
        .iter()
        .map(|(r, o, hash)| QuestionDoc {
            question: r.question.clone(),
            method: r.spec.method.key(),
            estimand: upshot_methods::target_name(r.spec.target),
            treatment: r.spec.treatment.clone(),
            outcome: r.spec.outcome.clone(),
            adjustment_set: r.spec.adjust.clone(),
            why_this_set: r.chosen.why.clone(),
            source: r.source_label.clone(),
            plan_hash: hash.clone(),
            assumptions: r.assumptions.clone(),
            diagnostics: o.diagnostics.clone(),
        })
        .collect();
    let doc = serde_json::json!({
        "format": "upshot-run/1",
        "tool_version": env!("CARGO_PKG_VERSION"),
        "study": study.name,
        "estimates": estimates,
        "questions": questions,
    });
    Ok(serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))? + "\n")
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn render_csv(results: &[(Resolved, Outcome, String)]) -> String {
    let mut o = String::from(
        "question,segment,estimand,method,estimate,std_error,ci_low,ci_high,n_treated,n_control,n_used,adjustment_set\n",
    );
    let opt = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v}"));
    for (_, out, _) in results {
        for e in &out.estimates {
            o.push_str(&format!(
                "{},{},{},{},{:?},{:?},{:?},{:?},{},{},{},{}\n",
                csv_field(&e.question),
                csv_field(&e.segment),
                e.estimand,
                e.method,
                e.estimate,
                e.std_error,
                e.ci_low,
                e.ci_high,
                opt(e.n_treated),
                opt(e.n_control),
                e.n_used,
                csv_field(&e.adjustment_set.join(";"))
            ));
        }
    }
    o
}
