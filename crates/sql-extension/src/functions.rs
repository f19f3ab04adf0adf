//! The table functions: SQL arguments bound into a [`Request`], the core's typed results
//! turned into rows.

use crate::rows::{Args, Engine, Function, Rows, Type, Value};
use duckdb::Connection;
use std::sync::{Arc, Mutex};
use upshot_core::identify::{self, route_rows};
use upshot_core::{diagram_argument, Engine as _, Flavor, Request, Spelling};
use upshot_engine_duckdb::DuckDbEngine;
use upshot_study::QuestionInput;

/// Registers every function in the database that loads the extension; `kept` becomes the
/// engine of that database's calls.
pub fn register(con: &Connection, kept: Connection) -> duckdb::Result<()> {
    let engine: Engine = Arc::new(Mutex::new(DuckDbEngine::attach(kept)));
    con.register_table_function_with_extra_info::<Function<Identify>, _>(
        "upshot_identify",
        &engine,
    )?;
    con.register_table_function_with_extra_info::<Function<Plan>, _>("upshot_plan", &engine)?;
    con.register_table_function_with_extra_info::<Function<EstimateRows>, _>(
        "upshot_estimate",
        &engine,
    )?;
    con.register_table_function_with_extra_info::<Function<StudyRows>, _>("upshot_study", &engine)?;
    Ok(())
}

/// A comma-separated list of names.
fn list(v: Option<&str>) -> Vec<String> {
    v.map(|s| upshot_core::request::names(s.split(',').map(String::from).collect()))
        .unwrap_or_default()
}

/// A positional argument that must be given.
fn required<'a>(args: &'a Args, i: usize, name: &str) -> Result<&'a str, String> {
    args.positional
        .get(i)
        .and_then(|v| v.as_deref())
        .ok_or_else(|| format!("{name}: NULL; give a value"))
}

const QUESTION: [(&str, Type); 7] = [
    ("estimand", Type::Text),
    ("method", Type::Text),
    ("segments", Type::Text),
    ("adjust", Type::Text),
    ("instruments", Type::Text),
    ("instrument_given", Type::Text),
    ("mediators", Type::Text),
];

/// The request of `(diagram, treatment, outcome)` at positions `at..at + 3` and the question
/// parameters.
fn request(args: &Args, at: usize) -> Result<Request, String> {
    let diagram =
        diagram_argument(required(args, at, "diagram")?, "diagram").map_err(|e| e.to_string())?;
    let question = QuestionInput {
        treatment: list(Some(required(args, at + 1, "treatment")?)),
        outcome: list(Some(required(args, at + 2, "outcome")?)),
        estimand: args.named("estimand").map(String::from),
        segments: list(args.named("segments")),
        method: args.named("method").map(String::from),
        // `adjust := ''` declares the empty set.
        adjust: args.named("adjust").map(|a| list(Some(a))),
        mediators: args.named("mediators").map(|m| list(Some(m))),
        instruments: args.named("instruments").map(|m| list(Some(m))),
        instrument_given: list(args.named("instrument_given")),
        spelling: Spelling::Sql,
    };
    Ok(Request {
        spelling: Spelling::Sql,
        diagram: Some(diagram),
        question,
        ..Request::default()
    })
}

fn texts(v: &[String]) -> Value {
    Value::TextList(v.to_vec())
}

fn opt(v: &Option<String>) -> Value {
    v.as_ref().map_or(Value::Null, |s| Value::Text(s.clone()))
}

/// `upshot_identify(diagram, treatment, outcome)`: one row per route.
pub struct Identify;

impl Rows for Identify {
    fn columns() -> Vec<(&'static str, Type)> {
        vec![
            ("question", Type::Text),
            ("kind", Type::Text),
            ("variables", Type::TextList),
            ("given", Type::TextList),
            ("valid", Type::Bool),
            ("chosen", Type::Bool),
            ("why_not", Type::Text),
            ("assumptions", Type::TextList),
        ]
    }
    fn positional() -> Vec<Type> {
        vec![Type::Text; 3]
    }
    fn named() -> Vec<(&'static str, Type)> {
        QUESTION.to_vec()
    }
    fn table(args: &Args, _: &Engine) -> Result<Vec<Vec<Value>>, String> {
        let study = request(args, 0)?
            .study("check")
            .map_err(|e| e.to_string())?;
        let report = identify::check(&study, None).map_err(|e| e.to_string())?;
        Ok(route_rows(&report)
            .into_iter()
            .map(|r| {
                vec![
                    Value::Text(r.question),
                    Value::Text(r.kind),
                    texts(&r.variables),
                    texts(&r.given),
                    Value::Bool(r.valid),
                    Value::Bool(r.chosen),
                    opt(&r.why_not),
                    texts(&r.assumptions),
                ]
            })
            .collect())
    }
}

const ESTIMATION: [(&str, Type); 12] = [
    ("folds", Type::Bigint),
    ("bins", Type::Bigint),
    ("neighbours", Type::Bigint),
    ("caliper", Type::Double),
    ("coarsen", Type::Text),
    ("min_cell", Type::Bigint),
    ("unit", Type::Text),
    ("filter", Type::Text),
    ("clip", Type::Double),
    ("on_null", Type::Text),
    ("squares", Type::Bool),
    ("interactions", Type::Bool),
];

/// The estimation parameters of a request.
fn estimation(mut r: Request, args: &Args) -> Result<Request, String> {
    let number = |name: &str| -> Result<Option<f64>, String> {
        args.named(name)
            .map(|v| {
                v.parse::<f64>()
                    .map_err(|_| format!("{name} :=: `{v}` is not a number"))
            })
            .transpose()
    };
    if let Some(f) = number("folds")? {
        r.folds = f as i64;
    }
    if let Some(c) = number("clip")? {
        r.clip = c;
    }
    if let Some(k) = number("neighbours")? {
        r.neighbours = k as i64;
    }
    r.caliper = number("caliper")?;
    r.bins = number("bins")?.map(|n| n as i64);
    if let Some(k) = number("min_cell")? {
        r.min_cell = k as i64;
    }
    r.unit = args.named("unit").map(String::from);
    r.coarsen = list(args.named("coarsen"));
    r.filter = args.named("filter").map(String::from);
    if let Some(n) = args.named("on_null") {
        r.on_null = n.to_string();
    }
    r.squares = args.named("squares") == Some("true");
    r.interactions = args.named("interactions") == Some("true");
    Ok(r)
}

/// The request of `(source, diagram, treatment, outcome, ...)`: rows in the calling database.
fn source_request(args: &Args) -> Result<Request, String> {
    let mut r = estimation(request(args, 1)?, args)?;
    r.source = Some(required(args, 0, "source")?.to_string());
    r.db = Some(upshot_core::CALLER_DATABASE.to_string());
    Ok(r)
}

/// `upshot_plan(source, diagram, treatment, outcome)`: the passes as rows.
pub struct Plan;

impl Rows for Plan {
    fn columns() -> Vec<(&'static str, Type)> {
        vec![
            ("question", Type::Text),
            ("pass", Type::Bigint),
            ("name", Type::Text),
            ("purpose", Type::Text),
            ("inlines", Type::Text),
            ("repeats", Type::Text),
            ("sql", Type::Text),
        ]
    }
    fn positional() -> Vec<Type> {
        vec![Type::Text; 4]
    }
    fn named() -> Vec<(&'static str, Type)> {
        let mut v = QUESTION.to_vec();
        v.extend(ESTIMATION);
        v.push(("portable", Type::Bool));
        v
    }
    fn table(args: &Args, _: &Engine) -> Result<Vec<Vec<Value>>, String> {
        let r = source_request(args)?;
        let study = r.study("plan").map_err(|e| e.to_string())?;
        let flavor = if args.named("portable") == Some("true") {
            Flavor::plain(&upshot_sql::DuckDb)
        } else {
            Flavor::duckdb()
        };
        let settings = r.settings().map_err(|e| e.to_string())?;
        let resolved =
            upshot_core::resolve(&study, None, &settings, flavor).map_err(|e| e.to_string())?;
        let mut rows = Vec::new();
        for q in &resolved {
            let p = upshot_core::plan(q).map_err(|e| e.to_string())?;
            for (i, pass) in p.passes.iter().enumerate() {
                rows.push(vec![
                    Value::Text(p.question.clone()),
                    Value::Bigint(i as i64 + 1),
                    Value::Text(pass.name.clone()),
                    Value::Text(pass.purpose.clone()),
                    opt(&pass.inlines),
                    opt(&pass.repeats),
                    Value::Text(pass.sql.clone()),
                ]);
            }
        }
        Ok(rows)
    }
}

/// The columns of an estimate row (the CLI's JSON estimate rows, docs/run-output.md).
fn estimate_columns() -> Vec<(&'static str, Type)> {
    vec![
        ("question", Type::Text),
        ("segment", Type::Text),
        ("estimand", Type::Text),
        ("method", Type::Text),
        ("estimate", Type::Double),
        ("std_error", Type::Double),
        ("ci_low", Type::Double),
        ("ci_high", Type::Double),
        ("n_treated", Type::Double),
        ("n_control", Type::Double),
        ("n_used", Type::Double),
        ("adjustment_set", Type::TextList),
        ("warnings", Type::TextList),
    ]
}

/// Runs the request's questions (all, or `only`) on a second connection to the calling
/// database and returns the estimate rows.
fn estimate(
    r: &Request,
    only: Option<&str>,
    verb: &str,
    engine: &Engine,
) -> Result<Vec<Vec<Value>>, String> {
    let study = r.study(verb).map_err(|e| e.to_string())?;
    let settings = r.settings().map_err(|e| e.to_string())?;
    // A call that failed inside leaves the connection usable: take the lock regardless.
    let engine = engine.lock().unwrap_or_else(|p| p.into_inner());
    let engine = &*engine;
    let resolved = upshot_core::resolve(&study, only, &settings, Flavor::plain(engine.dialect()))
        .map_err(|e| e.to_string())?;
    let answers = upshot_core::run(engine, resolved, &mut |_, _| {}).map_err(|e| {
        let m = e.to_string();
        if m.contains("does not exist") {
            format!("{m} (upshot reads through its own connection to this database: it sees committed tables, not TEMP tables or rows of an open transaction; commit first, or use a regular table)")
        } else {
            m
        }
    })?;
    let number = |x: f64| {
        if x.is_finite() {
            Value::Double(x)
        } else {
            Value::Null
        }
    };
    let mut rows = Vec::new();
    for a in &answers {
        for e in &a.estimates {
            rows.push(vec![
                Value::Text(e.question.clone()),
                Value::Text(e.segment.clone()),
                Value::Text(e.estimand.as_str().to_string()),
                Value::Text(e.method.as_str().to_string()),
                number(e.estimate),
                number(e.std_error),
                number(e.ci_low),
                number(e.ci_high),
                e.n_treated.map_or(Value::Null, number),
                e.n_control.map_or(Value::Null, number),
                number(e.n_used),
                texts(&e.adjustment_set),
                texts(&a.summary.diagnostics.warnings),
            ]);
        }
    }
    Ok(rows)
}

/// `upshot_estimate(source, diagram, treatment, outcome)`: one row per segment.
pub struct EstimateRows;

impl Rows for EstimateRows {
    fn columns() -> Vec<(&'static str, Type)> {
        estimate_columns()
    }
    fn positional() -> Vec<Type> {
        vec![Type::Text; 4]
    }
    fn named() -> Vec<(&'static str, Type)> {
        let mut v = QUESTION.to_vec();
        v.extend(ESTIMATION);
        v
    }
    fn table(args: &Args, engine: &Engine) -> Result<Vec<Vec<Value>>, String> {
        estimate(&source_request(args)?, None, "run", engine)
    }
}

/// `upshot_study(path)`: every question of a study file (or `question :=` one), run on the
/// calling database.
pub struct StudyRows;

impl Rows for StudyRows {
    fn columns() -> Vec<(&'static str, Type)> {
        estimate_columns()
    }
    fn positional() -> Vec<Type> {
        vec![Type::Text]
    }
    fn named() -> Vec<(&'static str, Type)> {
        let mut v = vec![("question", Type::Text)];
        v.extend(ESTIMATION);
        v
    }
    fn table(args: &Args, engine: &Engine) -> Result<Vec<Vec<Value>>, String> {
        let path = required(args, 0, "path")?;
        let mut r = estimation(
            Request {
                spelling: Spelling::Sql,
                diagram: Some(upshot_core::DiagramInput::Study(path.into())),
                ..Request::default()
            },
            args,
        )?;
        // The study's questions run on the calling database, whatever database it names.
        r.db = Some(upshot_core::CALLER_DATABASE.to_string());
        estimate(&r, args.named("question"), "run", engine)
    }
}
