//! `upshot check`: identification report per question, as text or JSON.

use crate::exit::{emit, Failure, NOT_IDENTIFIED, OK};
use crate::ENGINES;
use std::io::Read;
use std::path::{Path, PathBuf};
use upshot_core::identify::{self, route_word, set, CheckReport};
use upshot_core::{Access, DiagramInput, Request};
use upshot_graph::Role;
use upshot_study::QuestionInput;

/// Flags of `upshot check`.
#[derive(clap::Args)]
pub struct Args {
    /// Study file (TOML). Without it, give --graph, --treatment and --outcome.
    study: Option<PathBuf>,
    /// Only this question of the study.
    #[arg(long)]
    question: Option<String>,
    /// Diagram: a file path, `-` for standard input, or inline text such as "z -> t -> y; t <-> y".
    #[arg(long, allow_hyphen_values = true)]
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

pub(crate) use upshot_core::request::names as clean;

/// The diagram of `--graph`: standard input for `-`, else a file path or diagram text.
pub(crate) fn read_graph(value: &str) -> Result<DiagramInput, Failure> {
    if value == "-" {
        let mut s = String::new();
        std::io::stdin()
            .read_to_string(&mut s)
            .map_err(|e| Failure::input(format!("--graph -: cannot read standard input: {e}")))?;
        return Ok(DiagramInput::Text {
            text: s,
            label: "--graph (standard input)".into(),
        });
    }
    Ok(upshot_core::diagram_argument(value, "--graph")?)
}

/// The request of a study file or `--graph` and the question flags (flags override).
pub(crate) fn request(
    study: Option<&Path>,
    graph: Option<&str>,
    question: QuestionInput,
) -> Result<Request, Failure> {
    let diagram = match (study, graph) {
        (Some(_), Some(_)) => {
            return Err(Failure::input(
                "give either a study file or --graph, not both",
            ));
        }
        (Some(path), None) => Some(DiagramInput::Study(path.to_path_buf())),
        (None, Some(g)) => Some(read_graph(g)?),
        (None, None) => None,
    };
    Ok(Request {
        diagram,
        question,
        ..Request::default()
    })
}

/// `upshot check`.
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
        spelling: Default::default(),
    };
    let study = request(a.study.as_deref(), a.graph.as_deref(), overrides)?.study("check")?;
    if !a.offline && upshot_core::has_columns_to_check(&study) {
        let engine = upshot_core::connect(
            ENGINES,
            &upshot_core::database_of(&study),
            Access::ReadOnly,
            &upshot_core::files_of(&study),
        )
        .map_err(|e| Failure::input(format!("[source]: {e}")))?;
        upshot_core::check_columns(&study, engine.as_ref())?;
    }
    let doc = identify::check(&study, a.question.as_deref())?;
    let code = if doc.exit_code == 0 {
        OK
    } else {
        NOT_IDENTIFIED
    };
    let out = if json {
        serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))? + "\n"
    } else {
        render(&doc)
    };
    emit(&out)?;
    Ok(code)
}

fn render(doc: &CheckReport) -> String {
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
    if doc.implied_pairs_unexamined > 0 {
        let _ = writeln!(
            o,
            "   ({} more pairs of variables not examined: a diagram this large gets the first {} pairs)",
            doc.implied_pairs_unexamined,
            upshot_graph::report::MAX_IMPLIED_PAIRS
        );
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
