//! The table functions: SQL arguments bound into a [`Request`], the core's typed results
//! turned into rows.

use crate::rows::{Args, Function, Rows, Type, Value};
use duckdb::Connection;
use upshot_core::identify::{self, route_rows};
use upshot_core::{diagram_argument, Flavor, Request, Spelling};
use upshot_study::QuestionInput;

/// Registers every function.
pub fn register(con: &Connection) -> duckdb::Result<()> {
    con.register_table_function::<Function<Identify>>("upshot_identify")?;
    con.register_table_function::<Function<Plan>>("upshot_plan")?;
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

const QUESTION: [(&str, Type); 4] = [
    ("estimand", Type::Text),
    ("method", Type::Text),
    ("segments", Type::Text),
    ("adjust", Type::Text),
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
        let mut v = QUESTION.to_vec();
        v.extend([
            ("mediators", Type::Text),
            ("instruments", Type::Text),
            ("instrument_given", Type::Text),
        ]);
        v
    }
    fn table(args: &Args) -> Result<Vec<Vec<Value>>, String> {
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

const ESTIMATION: [(&str, Type); 7] = [
    ("folds", Type::Bigint),
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
    r.unit = args.named("unit").map(String::from);
    r.filter = args.named("filter").map(String::from);
    if let Some(n) = args.named("on_null") {
        r.on_null = n.to_string();
    }
    r.squares = args.named("squares") == Some("true");
    r.interactions = args.named("interactions") == Some("true");
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
    fn table(args: &Args) -> Result<Vec<Vec<Value>>, String> {
        let mut r = estimation(request(args, 1)?, args)?;
        r.source = Some(required(args, 0, "source")?.to_string());
        r.db = Some(upshot_core::CALLER_DATABASE.to_string());
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
