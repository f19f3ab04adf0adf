//! `upshot check`: identification report per question, as text or JSON.

use crate::exit::{Failure, NOT_IDENTIFIED, OK};
use serde::Serialize;
use std::io::Read;
use std::path::{Path, PathBuf};
use upshot_graph::report::{
    self, Declared, Identification, NamedIndependence, NamedMarkovStatement,
};
use upshot_graph::{Kind, Role};
use upshot_study::{Method, Question, QuestionInput, Route, Study};

/// Flags of `upshot check`.
#[derive(clap::Args)]
pub struct Args {
    /// Study file (TOML). Without it, give --graph, --treatment and --outcome.
    study: Option<PathBuf>,
    /// Only this question of the study.
    #[arg(long)]
    question: Option<String>,
    /// Diagram: a file path, `-` for standard input, or inline text such as "z -> t -> y; t <-> y".
    #[arg(long)]
    graph: Option<String>,
    /// Treatment variable(s), comma-separated.
    #[arg(long, value_delimiter = ',')]
    treatment: Vec<String>,
    /// Outcome variable(s), comma-separated.
    #[arg(long, value_delimiter = ',')]
    outcome: Vec<String>,
    /// ATE, ATT or ATC.
    #[arg(long)]
    estimand: Option<String>,
    /// Segment columns for per-segment effects, comma-separated.
    #[arg(long = "segment-by", value_delimiter = ',')]
    segment_by: Vec<String>,
    /// Method key (auto, stratify, regress, weight, doubly-robust, partial-out, iv, front-door, match, coarsen).
    #[arg(long)]
    method: Option<String>,
    /// A fixed adjustment set to check, comma-separated (empty string for the empty set).
    #[arg(long, value_delimiter = ',', num_args = 0..)]
    adjust: Option<Vec<String>>,
    /// Front-door mediators to check, comma-separated.
    #[arg(long, value_delimiter = ',')]
    mediators: Option<Vec<String>>,
    /// Instruments to check, comma-separated.
    #[arg(long, value_delimiter = ',')]
    instruments: Option<Vec<String>>,
    /// Variables the instruments are conditioned on, comma-separated.
    #[arg(long = "instrument-given", value_delimiter = ',')]
    instrument_given: Vec<String>,
    /// Output format: text or json.
    #[arg(long, default_value = "text")]
    format: String,
    /// Do not open the study's source: check names against the diagram only.
    #[arg(long)]
    offline: bool,
}

/// Checks that every observed variable of the diagram is a column of the study's source, when
/// the source is a CSV file or a table in a DuckDB file. Reads the schema only, no rows.
fn check_columns(study: &Study) -> Result<(), Failure> {
    use upshot_engine::{DuckDbEngine, Engine, MEMORY};
    use upshot_study::SourceKind;
    let label = study
        .path
        .as_ref()
        .map(|p| p.display().to_string())
        .unwrap_or_default();
    let (source, what, location) = match (&study.source.rows, &study.source.database) {
        (Some(SourceKind::File(p)), db) => {
            let shown = p.display().to_string();
            let glob = upshot_sql::is_parquet_pattern(&shown);
            if !glob && !p.is_file() {
                return Err(Failure::input(format!("{label}: [source].file: no file {}; fix the path (relative to the study file) or use --offline", p.display())));
            }
            (
                upshot_sql::Source::file(&p.display().to_string()),
                p.display().to_string(),
                db.clone().unwrap_or_else(|| MEMORY.into()),
            )
        }
        (Some(SourceKind::Table(t)), Some(db)) => (
            upshot_sql::Source::table(t)
                .map_err(|e| Failure::input(format!("{label}: [source].table: {e}")))?,
            format!("table {t}"),
            db.clone(),
        ),
        (Some(SourceKind::Query(q)), Some(db)) => (
            upshot_sql::Source::query(q, &upshot_sql::DuckDb)
                .map_err(|e| Failure::input(format!("{label}: [source].query: {e}")))?,
            "the source query".to_string(),
            db.clone(),
        ),
        _ => return Ok(()),
    };
    let engine = DuckDbEngine::open(&location, false)
        .map_err(|e| Failure::input(format!("{label}: [source]: {e}")))?;
    let columns = engine
        .columns(&source)
        .map_err(|e| Failure::input(format!("{label}: [source]: cannot read {what}: {e}")))?;
    let names: Vec<&str> = columns.iter().map(|c| c.name.as_str()).collect();
    for n in study.diagram.nodes() {
        if n.role == Role::Observed && n.confounds.is_none() && !names.contains(&n.name.as_str()) {
            return Err(Failure::input(format!(
                "{label}: the diagram's observed variable `{}` is not a column of {what}; columns: {}. Rename it, or declare it `latent` if it is not recorded",
                n.name,
                names.join(", ")
            )));
        }
    }
    Ok(())
}

pub(crate) fn clean(v: Vec<String>) -> Vec<String> {
    v.into_iter()
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect()
}

pub(crate) fn read_graph(value: &str) -> Result<(String, String), Failure> {
    if value == "-" {
        let mut s = String::new();
        std::io::stdin()
            .read_to_string(&mut s)
            .map_err(|e| Failure::input(format!("--graph -: cannot read standard input: {e}")))?;
        return Ok((s, "--graph (standard input)".into()));
    }
    let p = Path::new(value);
    if p.is_file() {
        let s = std::fs::read_to_string(p)
            .map_err(|e| Failure::input(format!("--graph: cannot read {value}: {e}")))?;
        return Ok((s, value.to_string()));
    }
    if value.contains("->")
        || value.contains("<-")
        || value.trim_start().starts_with("digraph")
        || value.contains(';')
    {
        return Ok((value.to_string(), "--graph".into()));
    }
    Err(Failure::input(format!(
        "--graph: no file `{value}`; give a path to a diagram file, `-` for standard input, or edges such as \"t -> y\""
    )))
}

/// The route upshot would use for a question, and the set it would use.
#[derive(Serialize, Clone, Debug)]
pub(crate) struct Chosen {
    pub route: Route,
    /// Adjustment set, mediators, or instrument.
    pub set: Vec<String>,
    /// Conditioning set of an instrument.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub given: Vec<String>,
    pub why: String,
}

#[derive(Serialize)]
struct QuestionReport {
    name: String,
    treatment: Vec<String>,
    outcome: Vec<String>,
    estimand: &'static str,
    method: &'static str,
    segments: Vec<String>,
    identified: bool,
    usable_routes: Vec<Route>,
    chosen: Option<Chosen>,
    problems: Vec<String>,
    assumptions: Vec<String>,
    identification: Identification,
}

#[derive(Serialize)]
struct Variable {
    name: String,
    role: Role,
    kind: Kind,
}

#[derive(Serialize)]
struct DiagramSummary {
    variables: Vec<Variable>,
    edges: Vec<[String; 2]>,
    latent_common_causes: Vec<[String; 2]>,
}

#[derive(Serialize)]
struct Document {
    format: &'static str,
    tool_version: &'static str,
    study: Option<String>,
    study_name: String,
    diagram: DiagramSummary,
    questions: Vec<QuestionReport>,
    implied_independences: Vec<NamedIndependence>,
    local_markov_basis: Option<Vec<NamedMarkovStatement>>,
    exit_code: i32,
}

fn usable(id: &Identification) -> Vec<Route> {
    let mut r = Vec::new();
    if id.adjustment.exists {
        r.push(Route::Adjustment);
    }
    if !id.front_door.sets.is_empty() {
        r.push(Route::FrontDoor);
    }
    if !id.instrument.found.is_empty() {
        r.push(Route::Instrument);
    }
    r
}

/// Decides the question's status from the routes and what it declares.
pub(crate) fn assess(q: &Question, id: &Identification) -> (bool, Option<Chosen>, Vec<String>) {
    let mut problems = Vec::new();
    // With `auto`, a declared set says which route the user means.
    let wanted = q.method.route().or(if q.adjust.is_some() {
        Some(Route::Adjustment)
    } else if q.mediators.is_some() {
        Some(Route::FrontDoor)
    } else if q.instruments.is_some() {
        Some(Route::Instrument)
    } else {
        None
    });
    let adjust = || -> Option<Chosen> {
        if let Some(dc) = &id.adjustment.declared {
            if !dc.valid {
                return None;
            }
            return Some(Chosen {
                route: Route::Adjustment,
                set: dc.set.clone(),
                given: vec![],
                why: "the declared adjustment set is valid".into(),
            });
        }
        if let Some(o) = &id.adjustment.optimal_set {
            return Some(Chosen {
                route: Route::Adjustment,
                set: o.clone(),
                given: vec![],
                why: "optimal adjustment set (smallest asymptotic variance among valid sets; Henckel et al. 2022)".into(),
            });
        }
        id.adjustment.minimal_sets.first().map(|s| Chosen {
            route: Route::Adjustment,
            set: s.clone(),
            given: vec![],
            why: "smallest minimal adjustment set".into(),
        })
    };
    let front = || -> Option<Chosen> {
        if let Some(dc) = &id.front_door.declared {
            return dc.valid.then(|| Chosen {
                route: Route::FrontDoor,
                set: dc.set.clone(),
                given: vec![],
                why: "the declared mediators meet the front-door criterion".into(),
            });
        }
        id.front_door.sets.first().map(|s| Chosen {
            route: Route::FrontDoor,
            set: s.clone(),
            given: vec![],
            why: "smallest front-door mediator set".into(),
        })
    };
    let instrument = || -> Option<Chosen> {
        if !id.instrument.declared.is_empty() {
            return id
                .instrument
                .declared
                .iter()
                .all(|c| c.valid)
                .then(|| Chosen {
                    route: Route::Instrument,
                    set: id
                        .instrument
                        .declared
                        .iter()
                        .flat_map(|c| c.set.clone())
                        .collect(),
                    given: q.instrument_given.clone(),
                    why: "the declared instruments are valid".into(),
                });
        }
        id.instrument.found.first().map(|i| Chosen {
            route: Route::Instrument,
            set: vec![i.instrument.clone()],
            given: i.given.clone(),
            why: "first instrument found".into(),
        })
    };
    for (label, c) in [
        ("adjustment set", &id.adjustment.declared),
        ("front-door mediators", &id.front_door.declared),
    ] {
        if let Some(c) = c {
            if !c.valid {
                problems.push(format!(
                    "declared {label} {{{}}} does not work: {}",
                    c.set.join(", "),
                    c.problems.join("; ")
                ));
            }
        }
    }
    for c in &id.instrument.declared {
        if !c.valid {
            problems.push(format!(
                "declared instrument {} does not work: {}",
                c.set.join(", "),
                c.problems.join("; ")
            ));
        }
    }
    if !id.causal_path {
        return (
            true,
            None,
            vec!["the diagram has no directed path from the treatment to the outcome: the effect is zero by assumption".into()],
        );
    }
    let chosen = match wanted {
        Some(Route::Adjustment) => adjust(),
        Some(Route::FrontDoor) => front(),
        Some(Route::Instrument) => instrument(),
        None => adjust().or_else(front).or_else(instrument),
    };
    if chosen.is_none() {
        if let Some(r) = wanted {
            let works = usable(id).contains(&r);
            if works {
                let instead = match r {
                    Route::Adjustment => id
                        .adjustment
                        .optimal_set
                        .clone()
                        .or_else(|| id.adjustment.minimal_sets.first().cloned())
                        .map(|s| format!("the adjustment set {}", set(&s))),
                    Route::FrontDoor => id
                        .front_door
                        .sets
                        .first()
                        .map(|s| format!("the mediators {}", set(s))),
                    Route::Instrument => id.instrument.found.first().map(|i| {
                        let given = if i.given.is_empty() {
                            String::new()
                        } else {
                            format!(" given {}", set(&i.given))
                        };
                        format!("the instrument {}{given}", i.instrument)
                    }),
                };
                if let Some(instead) = instead {
                    problems.push(format!(
                        "{} works: declare it instead, or drop the declaration",
                        instead
                    ));
                }
            } else {
                let why =
                    match r {
                        Route::Adjustment => id.adjustment.open_path.as_ref().map(|p| {
                            format!("the path {p} cannot be blocked by observed variables")
                        }),
                        Route::FrontDoor => id.front_door.reason.clone(),
                        Route::Instrument => id.instrument.reason.clone(),
                    };
                let others: Vec<&str> = usable(id)
                    .into_iter()
                    .map(|u| match u {
                        Route::Adjustment => {
                            "a backdoor method (regress, weight, doubly-robust, ...)"
                        }
                        Route::FrontDoor => "--method front-door",
                        Route::Instrument => "--method iv",
                    })
                    .collect();
                let hint = if others.is_empty() {
                    String::new()
                } else {
                    format!("; routes that do work: use {}", others.join(" or "))
                };
                let what = if q.method == Method::Auto {
                    "the declared set".to_string()
                } else {
                    format!("method `{}`", q.method.as_str())
                };
                problems.push(format!(
                    "{what} needs the {} route, which does not identify this effect{}{hint}",
                    route_word(r),
                    why.map(|w| format!(": {w}")).unwrap_or_default()
                ));
            }
        }
    }
    (chosen.is_some(), chosen, problems)
}

fn route_word(r: Route) -> &'static str {
    match r {
        Route::Adjustment => "adjustment (backdoor)",
        Route::FrontDoor => "front-door",
        Route::Instrument => "instrument",
    }
}

pub(crate) fn assumptions(c: &Option<Chosen>, method: Method) -> Vec<String> {
    let mut a = vec![
        "the diagram is complete: no unmeasured common cause beyond the latent variables it declares".to_string(),
        "consistency and no interference: each unit's outcome depends only on its own treatment, which is well defined".to_string(),
    ];
    match c.as_ref().map(|c| c.route) {
        Some(Route::Adjustment) => a.push(
            "positivity: within every stratum of the adjustment set both treated and untreated units occur (checked on the data when estimating)".into(),
        ),
        Some(Route::FrontDoor) => {
            a.push("the mediators carry the whole effect, and mediator and outcome share no unmeasured cause".into());
            a.push("positivity: every mediator value occurs under each treatment value".into());
        }
        Some(Route::Instrument) => {
            a.push("exclusion: the instrument reaches the outcome only through the treatment; it shares no unmeasured cause with the outcome".into());
            a.push("relevance is tested on the data (first-stage F; below 10 is weak, common practice after Staiger & Stock 1997)".into());
            a.push("a point estimate needs a constant effect, or monotonicity, in which case it is the effect among compliers (LATE), not the ATE".into());
        }
        None => {}
    }
    if !matches!(method, Method::Stratify | Method::Coarsen) {
        a.push("estimators that fit models (outcome or propensity) assume those models are correctly specified".into());
    }
    a
}

/// Loads a study file, or builds one from --graph and the question flags; flags override.
pub(crate) fn load_study(
    study: Option<&Path>,
    graph: Option<&str>,
    overrides: QuestionInput,
    verb: &str,
) -> Result<Study, Failure> {
    Ok(match (study, graph) {
        (Some(_), Some(_)) => {
            return Err(Failure::input("give either a study file or --graph, not both"));
        }
        (Some(path), None) => Study::load(path)?.with_overrides(&overrides)?,
        (None, Some(g)) => {
            let (text, label) = read_graph(g)?;
            Study::from_parts(&text, &label, overrides)?
        }
        (None, None) => {
            return Err(Failure::input(format!(
                "nothing to {verb}: give a study file (upshot {verb} demo-data/voucher-backdoor.toml) or --graph with --treatment and --outcome"
            )))
        }
    })
}

pub fn run(a: Args) -> Result<i32, Failure> {
    let json = match a.format.as_str() {
        "text" => false,
        "json" => true,
        f => {
            return Err(Failure::input(format!(
                "--format: unknown format `{f}`; expected text or json"
            )))
        }
    };
    let overrides = QuestionInput {
        treatment: clean(a.treatment),
        outcome: clean(a.outcome),
        estimand: a.estimand,
        segments: clean(a.segment_by),
        method: a.method,
        adjust: a.adjust.map(clean),
        mediators: a.mediators.map(clean),
        instruments: a.instruments.map(clean),
        instrument_given: clean(a.instrument_given),
    };
    let study = load_study(a.study.as_deref(), a.graph.as_deref(), overrides, "check")?;
    if !a.offline {
        check_columns(&study)?;
    }
    let mut questions: Vec<&Question> = study.questions.iter().collect();
    if let Some(name) = &a.question {
        questions.retain(|q| &q.name == name);
        if questions.is_empty() {
            let names: Vec<&str> = study.questions.iter().map(|q| q.name.as_str()).collect();
            return Err(Failure::input(format!(
                "--question: no question `{name}`; the study has: {}",
                names.join(", ")
            )));
        }
    }
    let d = &study.diagram;
    let mut reports = Vec::new();
    for q in questions {
        let declared = Declared {
            adjust: q.adjust.clone(),
            mediators: q.mediators.clone(),
            instruments: q.instruments.clone(),
            instrument_given: q.instrument_given.clone(),
        };
        let id = report::identify(d, &q.treatment, &q.outcome, &declared);
        let (identified, chosen, problems) = assess(q, &id);
        reports.push(QuestionReport {
            name: q.name.clone(),
            treatment: q.treatment.clone(),
            outcome: q.outcome.clone(),
            estimand: q.estimand.as_str(),
            method: q.method.as_str(),
            segments: q.segments.clone(),
            identified,
            usable_routes: usable(&id),
            assumptions: assumptions(&chosen, q.method),
            chosen,
            problems,
            identification: id,
        });
    }
    let code = if reports.iter().all(|r| r.identified) {
        OK
    } else {
        NOT_IDENTIFIED
    };
    let (edges, pairs) = d.declared_edges();
    let doc = Document {
        format: "upshot-check/1",
        tool_version: env!("CARGO_PKG_VERSION"),
        study: study.path.as_ref().map(|p| p.display().to_string()),
        study_name: study.name.clone(),
        diagram: DiagramSummary {
            variables: d
                .nodes()
                .iter()
                .filter(|n| n.confounds.is_none())
                .map(|n| Variable {
                    name: n.name.clone(),
                    role: n.role,
                    kind: n.kind,
                })
                .collect(),
            edges: edges
                .iter()
                .map(|&(x, y)| [d.name(x).to_string(), d.name(y).to_string()])
                .collect(),
            latent_common_causes: pairs
                .iter()
                .map(|&(x, y)| [d.name(x).to_string(), d.name(y).to_string()])
                .collect(),
        },
        implied_independences: report::implied(d),
        local_markov_basis: report::markov_basis(d),
        questions: reports,
        exit_code: code,
    };
    let out = if json {
        serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))? + "\n"
    } else {
        render(&doc)
    };
    print!("{out}");
    Ok(code)
}

fn set(s: &[String]) -> String {
    format!("{{{}}}", s.join(", "))
}

fn render(doc: &Document) -> String {
    use std::fmt::Write;
    let mut o = String::new();
    let latent = doc
        .diagram
        .variables
        .iter()
        .filter(|v| v.role == Role::Latent)
        .count();
    let _ = writeln!(
        o,
        "upshot check · {}{}",
        doc.study_name,
        doc.study
            .as_ref()
            .map(|p| format!(" ({p})"))
            .unwrap_or_default()
    );
    let pairs = doc.diagram.latent_common_causes.len();
    let _ = writeln!(
        o,
        "diagram: {} variables ({} latent), {} edge{}{}",
        doc.diagram.variables.len(),
        latent,
        doc.diagram.edges.len(),
        if doc.diagram.edges.len() == 1 {
            ""
        } else {
            "s"
        },
        if pairs > 0 {
            format!(", {pairs} latent common causes (<->)")
        } else {
            String::new()
        }
    );
    for q in &doc.questions {
        let id = &q.identification;
        let _ = writeln!(o);
        let segs = if q.segments.is_empty() {
            String::new()
        } else {
            format!(", per {}", q.segments.join(" × "))
        };
        let _ = writeln!(
            o,
            "── {}: effect of {} on {} ({}{}) · method {}",
            q.name,
            q.treatment.join(" + "),
            q.outcome.join(" + "),
            q.estimand,
            segs,
            q.method
        );
        let status = if q.identified {
            "IDENTIFIED"
        } else {
            "NOT IDENTIFIED"
        };
        match &q.chosen {
            Some(c) => {
                let given = if c.given.is_empty() {
                    String::new()
                } else {
                    format!(" given {}", set(&c.given))
                };
                let _ = writeln!(
                    o,
                    "   {status} — using {} {}{} ({})",
                    route_word(c.route),
                    set(&c.set),
                    given,
                    c.why
                );
            }
            None => {
                let _ = writeln!(o, "   {status}");
            }
        }
        if let Some(p) = &id.example_causal_path {
            let _ = writeln!(o, "   causal path        {p}");
        }
        let a = &id.adjustment;
        let _ = writeln!(o, "   adjustment");
        if a.exists {
            let shown: Vec<String> = a.minimal_sets.iter().take(8).map(|s| set(s)).collect();
            let more = if a.minimal_sets.len() > 8 || !a.complete {
                format!("  (+{} more)", a.minimal_sets.len().saturating_sub(8))
            } else {
                String::new()
            };
            let _ = writeln!(o, "     minimal sets     {}{more}", shown.join("  "));
            match (&a.optimal_set, &a.optimal_note) {
                (Some(s), _) => {
                    let _ = writeln!(o, "     optimal set      {}", set(s));
                }
                (None, Some(n)) => {
                    let _ = writeln!(o, "     optimal set      none: {n}");
                }
                _ => {}
            }
        } else {
            let _ = writeln!(
                o,
                "     none             no observed set blocks every non-causal path"
            );
            if let Some(p) = &a.open_path {
                let _ = writeln!(o, "     open path        {p}");
            }
            if let (Some(m), Some(s)) = (&a.measure_to_adjust, &a.set_if_measured) {
                let _ = writeln!(
                    o,
                    "     would need       measuring {} (then adjust for {})",
                    set(m),
                    set(s)
                );
            }
        }
        if let Some(c) = &a.declared {
            checked_line(&mut o, "declared", c);
        }
        let f = &id.front_door;
        if f.applicable {
            if f.sets.is_empty() {
                let _ = writeln!(
                    o,
                    "   front-door         none: {}",
                    f.reason.clone().unwrap_or_default()
                );
            } else {
                let shown: Vec<String> = f.sets.iter().map(|s| set(s)).collect();
                let _ = writeln!(o, "   front-door         mediators {}", shown.join("  "));
            }
            if let Some(c) = &f.declared {
                checked_line(&mut o, "declared", c);
            }
        }
        let iv = &id.instrument;
        if iv.applicable {
            if iv.found.is_empty() {
                let _ = writeln!(
                    o,
                    "   instrument         none: {}",
                    iv.reason.clone().unwrap_or_default()
                );
            } else {
                let shown: Vec<String> = iv
                    .found
                    .iter()
                    .map(|i| {
                        if i.given.is_empty() {
                            i.instrument.clone()
                        } else {
                            format!("{} given {}", i.instrument, set(&i.given))
                        }
                    })
                    .collect();
                let _ = writeln!(o, "   instrument         {}", shown.join("; "));
            }
            for c in &iv.declared {
                checked_line(&mut o, "declared", c);
            }
        }
        for p in &q.problems {
            let _ = writeln!(o, "   ! {p}");
        }
        if q.identified {
            let _ = writeln!(o, "   rests on");
            for s in &q.assumptions {
                let _ = writeln!(o, "     - {s}");
            }
        }
    }
    let _ = writeln!(o);
    match &doc.local_markov_basis {
        Some(basis) if !basis.is_empty() => {
            let _ = writeln!(
                o,
                "implied independences: local Markov basis ({} statements: each variable is independent of its non-descendants given its parents; together they imply every independence of the diagram)",
                basis.len()
            );
            for b in basis {
                let given = if b.given.is_empty() {
                    String::new()
                } else {
                    format!(" | {}", b.given.join(", "))
                };
                let _ = writeln!(
                    o,
                    "   {} ⊥ {}{given}",
                    b.variable,
                    b.independent_of.join(", ")
                );
            }
            let _ = writeln!(
                o,
                "   ({} pairwise statements with minimal conditioning sets, the tests to run on data: --format json, key implied_independences)",
                doc.implied_independences.len()
            );
        }
        _ if doc.implied_independences.is_empty() => {
            let _ = writeln!(o, "implied independences: none among observed variables");
        }
        _ => {
            let _ = writeln!(
                o,
                "implied independences ({}; pairs of observed variables the diagram separates, each with a minimal conditioning set; testable on data)",
                doc.implied_independences.len()
            );
            for i in &doc.implied_independences {
                let given = if i.given.is_empty() {
                    String::new()
                } else {
                    format!(" | {}", i.given.join(", "))
                };
                let _ = writeln!(o, "   {} ⊥ {}{given}", i.a, i.b);
            }
        }
    }
    o
}

fn checked_line(o: &mut String, label: &str, c: &upshot_graph::report::CheckedSet) {
    use std::fmt::Write;
    if c.valid {
        let _ = writeln!(o, "     {label:<16} {} works", set(&c.set));
    } else {
        let _ = writeln!(o, "     {label:<16} {} does NOT work:", set(&c.set));
        for p in &c.problems {
            let _ = writeln!(o, "       - {p}");
        }
    }
}
