//! Identification per question, without data: which routes identify the effect, the route
//! and set upshot would use, what a declared set gets wrong, and what an estimate would rest
//! on. `check` reports it; `resolve` builds estimators from it.

use crate::CoreError;
use serde::Serialize;
use upshot_graph::report::{
    self, CheckedSet, Declared, Identification, NamedIndependence, NamedMarkovStatement,
};
use upshot_graph::{Kind, Role};
use upshot_study::{Method, Question, Route, Study};

/// The route upshot would use for a question, and the set it would use.
#[derive(Serialize, Clone, Debug)]
pub struct Chosen {
    /// The route.
    pub route: Route,
    /// Adjustment set, mediators, or instrument.
    pub set: Vec<String>,
    /// Conditioning set of an instrument.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub given: Vec<String>,
    /// Why this set (the rule that picked it).
    pub why: String,
}

/// The identification of one question.
#[derive(Serialize)]
pub struct QuestionReport {
    /// Question name (or variable name).
    pub name: String,
    /// Treatment variables.
    pub treatment: Vec<String>,
    /// Outcome variables.
    pub outcome: Vec<String>,
    /// ATE, ATT or ATC.
    pub estimand: &'static str,
    /// Method key as declared (`auto` included).
    pub method: &'static str,
    /// Segment columns.
    pub segments: Vec<String>,
    /// Whether the route the method needs identifies the effect.
    pub identified: bool,
    /// Every route that identifies the effect.
    pub usable_routes: Vec<Route>,
    /// The route and set upshot would use.
    pub chosen: Option<Chosen>,
    /// What a declared set or method gets wrong, and what would work.
    pub problems: Vec<String>,
    /// What an estimate by the chosen route rests on.
    pub assumptions: Vec<String>,
    /// The full identification (all sets, paths, instruments).
    pub identification: Identification,
}

/// A variable of the diagram.
#[derive(Serialize)]
pub struct Variable {
    /// Question name (or variable name).
    pub name: String,
    /// Observed or latent.
    pub role: Role,
    /// Declared kind (binary, categorical, ...).
    pub kind: Kind,
}

/// The diagram, by name.
#[derive(Serialize)]
pub struct DiagramSummary {
    /// Observed and latent variables.
    pub variables: Vec<Variable>,
    /// Directed edges.
    pub edges: Vec<[String; 2]>,
    /// Pairs with a latent common cause (`<->`).
    pub latent_common_causes: Vec<[String; 2]>,
}

/// What `upshot check` reports (`--format json` serialises it as is; docs/check-output.md).
#[derive(Serialize)]
pub struct CheckReport {
    /// Document format tag.
    pub format: &'static str,
    /// upshot's version.
    pub tool_version: &'static str,
    /// Study file path (none when built from flags).
    pub study: Option<String>,
    /// Study name.
    pub study_name: String,
    /// The diagram.
    pub diagram: DiagramSummary,
    /// Per question.
    pub questions: Vec<QuestionReport>,
    /// Testable independences the diagram implies.
    pub implied_independences: Vec<NamedIndependence>,
    /// Non-adjacent pairs left unexamined for implied independences (large diagrams; see
    /// `upshot_graph::report::MAX_IMPLIED_PAIRS`); absent when every pair was examined.
    #[serde(skip_serializing_if = "is_zero")]
    pub implied_pairs_unexamined: usize,
    /// The local Markov basis, when small enough to print.
    pub local_markov_basis: Option<Vec<NamedMarkovStatement>>,
    /// 0 when every question is identified, else 3.
    pub exit_code: i32,
}

/// The routes that identify the effect.
pub fn usable(id: &Identification) -> Vec<Route> {
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

/// Decides the question's status from the routes and what it declares: whether the route its
/// method needs identifies the effect, the route and set upshot would use, and the problems.
pub fn assess(q: &Question, id: &Identification) -> (bool, Option<Chosen>, Vec<String>) {
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

/// How a route is named in messages.
pub fn route_word(r: Route) -> &'static str {
    match r {
        Route::Adjustment => "adjustment (backdoor)",
        Route::FrontDoor => "front-door",
        Route::Instrument => "instrument",
    }
}

/// What an estimate by the chosen route (and method) rests on.
pub fn assumptions(c: &Option<Chosen>, method: Method) -> Vec<String> {
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
    if method == Method::Match {
        a.push("matching stands a matched row's outcome in for the missing one: rows with close propensity scores are taken as comparable (the balance this buys is only as good as the propensity model, and a wide caliper or few close matches leave bias)".into());
    }
    a
}

/// `{a, b}`.
pub fn set(s: &[String]) -> String {
    format!("{{{}}}", s.join(", "))
}

/// The identification of one question of a study.
pub fn identification(q: &Question, study: &Study) -> Identification {
    let declared = Declared {
        adjust: q.adjust.clone(),
        mediators: q.mediators.clone(),
        instruments: q.instruments.clone(),
        instrument_given: q.instrument_given.clone(),
    };
    report::identify(&study.diagram, &q.treatment, &q.outcome, &declared)
}

/// The questions of `study` that `only` selects (all of them without it).
pub fn questions<'a>(study: &'a Study, only: Option<&str>) -> Result<Vec<&'a Question>, CoreError> {
    let mut qs: Vec<&Question> = study.questions.iter().collect();
    if let Some(name) = only {
        qs.retain(|q| q.name == name);
        if qs.is_empty() {
            let names: Vec<&str> = study.questions.iter().map(|q| q.name.as_str()).collect();
            return Err(CoreError::Input(format!(
                "--question: no question `{name}`; the study has: {}",
                names.join(", ")
            )));
        }
    }
    Ok(qs)
}

/// The identification report of a study's questions (all, or the one `only` names): what
/// `upshot check` prints. `exit_code` is 0 when every question is identified, else 3.
pub fn check(study: &Study, only: Option<&str>) -> Result<CheckReport, CoreError> {
    let d = &study.diagram;
    let mut reports = Vec::new();
    for q in questions(study, only)? {
        let id = identification(q, study);
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
        0
    } else {
        3
    };
    let (edges, pairs) = d.declared_edges();
    let (implied, unexamined) = report::implied(d);
    Ok(CheckReport {
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
        implied_independences: implied,
        implied_pairs_unexamined: unexamined,
        local_markov_basis: report::markov_basis(d),
        questions: reports,
        exit_code: code,
    })
}

fn is_zero(n: &usize) -> bool {
    *n == 0
}

/// One route of one question as a row (the SQL surface's `upshot_identify` rows).
#[derive(Serialize, Clone, Debug, PartialEq)]
pub struct RouteRow {
    /// Question name.
    pub question: String,
    /// `adjustment (minimal)`, `adjustment (optimal)`, `adjustment (declared)`, `front-door`,
    /// `front-door (declared)`, `instrument`, `instrument (declared)`, or `not identified`.
    pub kind: String,
    /// The adjustment set, mediators or instrument.
    pub variables: Vec<String>,
    /// An instrument's conditioning set.
    pub given: Vec<String>,
    /// Whether the set works for its route.
    pub valid: bool,
    /// Whether upshot would use this route and set.
    pub chosen: bool,
    /// Why not (problems, or the open path), when it does not work.
    pub why_not: Option<String>,
    /// What an estimate by this route rests on (the chosen row's; empty on the others).
    pub assumptions: Vec<String>,
}

/// A route before it is a row: kind, route (none for `not identified`), set, conditioning set,
/// and the verdict of a declared set.
type RouteEntry<'a> = (
    &'a str,
    Option<Route>,
    Vec<String>,
    Vec<String>,
    Option<&'a CheckedSet>,
);

/// The routes of every question as rows: each minimal and the optimal adjustment set, each
/// front-door set, each instrument, each declared set with its verdict, and a
/// `not identified` row (with the open path) for a question nothing identifies.
pub fn route_rows(report: &CheckReport) -> Vec<RouteRow> {
    let mut rows = Vec::new();
    for q in &report.questions {
        let id = &q.identification;
        let mut routes: Vec<RouteEntry> = Vec::new();
        let adjustment = Some(Route::Adjustment);
        for s in &id.adjustment.minimal_sets {
            routes.push(("adjustment (minimal)", adjustment, s.clone(), vec![], None));
        }
        if let Some(s) = &id.adjustment.optimal_set {
            routes.push(("adjustment (optimal)", adjustment, s.clone(), vec![], None));
        }
        if let Some(d) = &id.adjustment.declared {
            routes.push((
                "adjustment (declared)",
                adjustment,
                d.set.clone(),
                vec![],
                Some(d),
            ));
        }
        for s in &id.front_door.sets {
            routes.push((
                "front-door",
                Some(Route::FrontDoor),
                s.clone(),
                vec![],
                None,
            ));
        }
        if let Some(d) = &id.front_door.declared {
            routes.push((
                "front-door (declared)",
                Some(Route::FrontDoor),
                d.set.clone(),
                vec![],
                Some(d),
            ));
        }
        for i in &id.instrument.found {
            let set = vec![i.instrument.clone()];
            routes.push((
                "instrument",
                Some(Route::Instrument),
                set,
                i.given.clone(),
                None,
            ));
        }
        for d in &id.instrument.declared {
            routes.push((
                "instrument (declared)",
                Some(Route::Instrument),
                d.set.clone(),
                vec![],
                Some(d),
            ));
        }
        if !q.identified {
            routes.push(("not identified", None, vec![], vec![], None));
        }
        // The chosen route and set is marked once, on the first row that shows it.
        let mut chosen_shown = false;
        for (kind, route, variables, given, declared) in routes {
            let valid = route.is_some() && declared.is_none_or(|d| d.valid);
            let chosen = valid
                && !chosen_shown
                && q.chosen
                    .as_ref()
                    .is_some_and(|c| Some(c.route) == route && c.set == variables);
            chosen_shown |= chosen;
            let why_not = match (route, declared) {
                (None, _) => {
                    let mut why = q.problems.clone();
                    if let Some(p) = &id.adjustment.open_path {
                        why.push(format!("open path: {p}"));
                    }
                    Some(why.join("; "))
                }
                (_, Some(d)) if !d.valid => Some(d.problems.join("; ")),
                _ => None,
            };
            rows.push(RouteRow {
                question: q.name.clone(),
                kind: kind.to_string(),
                variables,
                given,
                valid,
                chosen,
                why_not,
                assumptions: if chosen {
                    q.assumptions.clone()
                } else {
                    vec![]
                },
            });
        }
    }
    rows
}
