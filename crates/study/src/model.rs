//! The validated study.

use crate::error::{did_you_mean, Lines, Location, StudyError};
use crate::raw::{Names, RawQuestion, RawStudy};
use std::path::{Path, PathBuf};
use toml::Spanned;
use upshot_graph::{Diagram, DiagramError, Kind};

/// The causal quantity a question asks for.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
pub enum Estimand {
    /// Average effect over all units.
    #[serde(rename = "ATE")]
    Ate,
    /// Average effect over treated units.
    #[serde(rename = "ATT")]
    Att,
    /// Average effect over control units.
    #[serde(rename = "ATC")]
    Atc,
}

impl Estimand {
    /// Every estimand, in documentation order.
    pub const ALL: [Estimand; 3] = [Estimand::Ate, Estimand::Att, Estimand::Atc];

    /// Its name as written in studies and output.
    pub fn as_str(self) -> &'static str {
        match self {
            Estimand::Ate => "ATE",
            Estimand::Att => "ATT",
            Estimand::Atc => "ATC",
        }
    }

    /// Parses `ATE`, `ATT`, `ATC` (any case).
    pub fn parse(s: &str) -> Option<Estimand> {
        Estimand::ALL
            .into_iter()
            .find(|e| e.as_str().eq_ignore_ascii_case(s))
    }
}

/// Which identification route an estimator relies on.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Route {
    /// Adjustment for an observed set (backdoor).
    Adjustment,
    /// Front-door mediators.
    FrontDoor,
    /// An instrument.
    Instrument,
}

/// An estimation method. Names are upshot's own keys (see design notes).
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Chosen from the identification route and column types.
    Auto,
    /// Backdoor adjustment over discrete strata.
    Stratify,
    /// Regression adjustment.
    Regress,
    /// Inverse probability weighting.
    Weight,
    /// Augmented inverse probability weighting, cross-fitted.
    DoublyRobust,
    /// Partially linear double machine learning.
    PartialOut,
    /// Instrumental variables (Wald / two-stage least squares).
    Iv,
    /// Front-door adjustment.
    FrontDoor,
    /// Propensity nearest-neighbour matching.
    Match,
    /// Coarsened exact matching.
    Coarsen,
}

impl Method {
    /// Every method, in documentation order.
    pub const ALL: [Method; 10] = [
        Method::Auto,
        Method::Stratify,
        Method::Regress,
        Method::Weight,
        Method::DoublyRobust,
        Method::PartialOut,
        Method::Iv,
        Method::FrontDoor,
        Method::Match,
        Method::Coarsen,
    ];

    /// Its key.
    pub fn as_str(self) -> &'static str {
        match self {
            Method::Auto => "auto",
            Method::Stratify => "stratify",
            Method::Regress => "regress",
            Method::Weight => "weight",
            Method::DoublyRobust => "doubly-robust",
            Method::PartialOut => "partial-out",
            Method::Iv => "iv",
            Method::FrontDoor => "front-door",
            Method::Match => "match",
            Method::Coarsen => "coarsen",
        }
    }

    /// Parses a key.
    pub fn parse(s: &str) -> Option<Method> {
        Method::ALL.into_iter().find(|m| m.as_str() == s)
    }

    /// The route the method needs (`None` for `auto`: any).
    pub fn route(self) -> Option<Route> {
        match self {
            Method::Auto => None,
            Method::Iv => Some(Route::Instrument),
            Method::FrontDoor => Some(Route::FrontDoor),
            _ => Some(Route::Adjustment),
        }
    }

    /// Whether the method needs a binary (0/1) treatment: the one rule, used when a study is
    /// checked against the diagram's declared kinds and when an estimator checks the data.
    pub fn needs_binary_treatment(self) -> bool {
        matches!(
            self,
            Method::Stratify
                | Method::Regress
                | Method::Weight
                | Method::DoublyRobust
                | Method::Match
                | Method::Coarsen
        )
    }
}

/// The rows as a study or a flag names them, unparsed (the core library resolves them into an
/// `upshot_sql::Source`, the one source type passes read).
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Rows {
    /// A table or view in the database.
    Table(String),
    /// A single SELECT statement (checked when the plan is built).
    Query(String),
    /// A CSV or Parquet file, resolved against the study file's folder.
    File(PathBuf),
}

/// The `[source]` section: where the rows come from.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct SourceSection {
    /// Engine location (a DuckDB file, `duckdb::memory:`, later URLs); `None` for the default.
    pub database: Option<String>,
    /// The rows.
    pub rows: Option<Rows>,
    /// A SQL boolean expression restricting the rows (parsed as one expression later).
    pub filter: Option<String>,
    /// Unit key column (one row per unit), used for folds and probes.
    pub unit: Option<String>,
}

/// One causal question. Invariants (checked at construction): treatment and outcome are
/// non-empty, observed, disjoint variables of the diagram; every other name is an observed
/// variable distinct from treatment and outcome; segments are not affected by the treatment.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct Question {
    /// Unique name within the study.
    pub name: String,
    /// Treatment variables (usually one).
    pub treatment: Vec<String>,
    /// Outcome variables (usually one).
    pub outcome: Vec<String>,
    /// The estimand.
    pub estimand: Estimand,
    /// Segment columns for conditional effects (CATE per segment).
    pub segments: Vec<String>,
    /// Method key.
    pub method: Method,
    /// Fixed adjustment set, if declared.
    pub adjust: Option<Vec<String>>,
    /// Fixed front-door mediators, if declared.
    pub mediators: Option<Vec<String>>,
    /// Fixed instruments, if declared.
    pub instruments: Option<Vec<String>>,
    /// Variables the instruments are conditioned on.
    pub instrument_given: Vec<String>,
    /// Unit key (overrides the source's).
    pub unit: Option<String>,
}

/// How a surface spells its arguments in messages.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Spelling {
    /// Command-line flags: `--segment-by`.
    #[default]
    Flags,
    /// SQL arguments by name: `diagram`, `segments`, `on_null`.
    Sql,
}

impl Spelling {
    /// The argument whose flag is `--{flag}`, as this surface spells it.
    pub fn arg(self, flag: &str) -> String {
        match self {
            Spelling::Flags => format!("--{flag}"),
            Spelling::Sql => match flag {
                "graph" => "diagram".into(),
                "segment-by" => "segments".into(),
                other => other.replace('-', "_"),
            },
        }
    }
}

/// Question pieces as given on the command line (names unchecked).
#[derive(Clone, Debug, Default)]
pub struct QuestionInput {
    /// How messages name these arguments.
    pub spelling: Spelling,
    /// `--treatment`.
    pub treatment: Vec<String>,
    /// `--outcome`.
    pub outcome: Vec<String>,
    /// `--estimand`.
    pub estimand: Option<String>,
    /// `--segment-by`.
    pub segments: Vec<String>,
    /// `--method`.
    pub method: Option<String>,
    /// `--adjust`.
    pub adjust: Option<Vec<String>>,
    /// `--mediators`.
    pub mediators: Option<Vec<String>>,
    /// `--instruments`.
    pub instruments: Option<Vec<String>>,
    /// `--instrument-given`.
    pub instrument_given: Vec<String>,
}

/// A validated study.
#[derive(Clone, Debug)]
pub struct Study {
    /// Where it was read from (`None` when built from flags).
    pub path: Option<PathBuf>,
    /// Study name.
    pub name: String,
    /// Free text.
    pub description: Option<String>,
    /// The rows.
    pub source: SourceSection,
    /// The diagram.
    pub diagram: Diagram,
    /// The questions, in file order.
    pub questions: Vec<Question>,
}

/// How to report an error about one value: a span in the file, or a flag.
enum At<'a> {
    File(&'a Lines<'a>, usize),
    Flag(String),
}

impl At<'_> {
    fn err(&self, key: &str, message: String) -> StudyError {
        match self {
            At::File(lines, off) => lines.error(*off, Some(key.to_string()), message),
            At::Flag(f) => StudyError {
                location: Location::Flag(f.clone()),
                key: None,
                message,
            },
        }
    }
}

fn diagram_error(e: &DiagramError, lines: Option<(&Lines, usize)>, label: &str) -> StudyError {
    match (lines, e.span()) {
        (Some((lines, offset)), Some(span)) => StudyError {
            location: lines.relative(offset, span.line, span.col),
            key: Some("diagram".into()),
            message: e.detail(),
        },
        _ => StudyError {
            location: Location::Path(label.to_string()),
            key: Some("diagram".into()),
            message: e.to_string(),
        },
    }
}

impl Study {
    /// Reads and validates a study file.
    pub fn load(path: &Path) -> Result<Study, StudyError> {
        let text = std::fs::read_to_string(path).map_err(|e| StudyError {
            location: Location::Path(path.display().to_string()),
            key: None,
            message: format!("cannot read the study file: {e}"),
        })?;
        let mut s = Study::parse(&text, &path.display().to_string(), path.parent())?;
        s.path = Some(path.to_path_buf());
        Ok(s)
    }

    /// Validates study text; `label` names it in errors, `base` resolves relative paths.
    pub fn parse(text: &str, label: &str, base: Option<&Path>) -> Result<Study, StudyError> {
        let lines = Lines::new(text, label);
        let raw: RawStudy = toml::from_str(text).map_err(|e| {
            let off = e.span().map(|s| s.start).unwrap_or(0);
            let message = e.message().trim().replace('\n', " ");
            let message = if message.contains("missing field `diagram`") {
                "missing section [diagram]: add `[diagram]` with `text = '''a -> b'''` or `file = \"name.graph\"`".to_string()
            } else if message.contains("unknown field") {
                format!("{message}; see docs/study-files.md")
            } else {
                message
            };
            lines.error(off, None, message)
        })?;
        let base = base.unwrap_or_else(|| Path::new("."));

        // Diagram.
        let dspan = raw.diagram.span().start;
        let rd = raw.diagram.into_inner();
        let diagram = match (rd.text, rd.file) {
            (Some(t), None) => {
                let content_offset = string_content_offset(text, t.span().start);
                let value = t.into_inner();
                Diagram::parse(&value).map_err(|e| {
                    diagram_error(
                        &e,
                        content_offset.map(|o| (&lines, o)),
                        &format!("{label} [diagram].text"),
                    )
                })?
            }
            (None, Some(f)) => {
                let off = f.span().start;
                let p = base.join(f.get_ref());
                let dt = std::fs::read_to_string(&p).map_err(|e| {
                    lines.error(
                        off,
                        Some("diagram.file".into()),
                        format!("cannot read {}: {e}", p.display()),
                    )
                })?;
                if !looks_like_diagram(&dt) {
                    return Err(lines.error(
                        off,
                        Some("diagram.file".into()),
                        format!(
                            "{} holds no diagram (no edge such as `a -> b` in it); check the path",
                            p.display()
                        ),
                    ));
                }
                let dl = Lines::new(&dt, &p.display().to_string());
                Diagram::parse(&dt)
                    .map_err(|e| diagram_error(&e, Some((&dl, 0)), &p.display().to_string()))?
            }
            (Some(_), Some(_)) => {
                return Err(lines.error(
                    dspan,
                    Some("diagram".into()),
                    "give either `text` or `file`, not both".into(),
                ))
            }
            (None, None) => {
                return Err(lines.error(
                    dspan,
                    Some("diagram".into()),
                    "empty [diagram]: add `text = '''a -> b'''` or `file = \"name.graph\"`".into(),
                ))
            }
        };

        check_diagram_names(&diagram, label)?;

        // Source.
        let mut source = SourceSection {
            database: None,
            rows: None,
            filter: None,
            unit: None,
        };
        if let Some(rs) = raw.source {
            let sspan = rs.span().start;
            let rs = rs.into_inner();
            let mut kinds = Vec::new();
            if let Some(t) = rs.table {
                kinds.push((
                    "table",
                    t.span().start,
                    Rows::Table(nonempty(&lines, "source.table", t)?),
                ));
            }
            if let Some(q) = rs.query {
                kinds.push((
                    "query",
                    q.span().start,
                    Rows::Query(nonempty(&lines, "source.query", q)?),
                ));
            }
            if let Some(f) = rs.file {
                kinds.push((
                    "file",
                    f.span().start,
                    Rows::File(base.join(nonempty(&lines, "source.file", f)?)),
                ));
            }
            if kinds.len() > 1 {
                return Err(lines.error(
                    kinds[1].1,
                    Some(format!("source.{}", kinds[1].0)),
                    format!(
                        "give one of `table`, `query` or `file`; `{}` is already set",
                        kinds[0].0
                    ),
                ));
            }
            if kinds.is_empty() && (rs.filter.is_some() || rs.unit.is_some()) {
                return Err(lines.error(
                    sspan,
                    Some("source".into()),
                    "add `table`, `query` or `file` to say where the rows are".into(),
                ));
            }
            source.rows = kinds.pop().map(|k| k.2);
            // A database file is relative to the study file, like every path a study names
            // (memory and URL locators are left as they are).
            source.database = rs
                .database
                .map(|d| nonempty(&lines, "source.database", d))
                .transpose()?
                .map(|d| {
                    let p = Path::new(&d);
                    if d.contains("::") || d.contains("://") || p.is_absolute() {
                        d
                    } else {
                        base.join(p).display().to_string()
                    }
                });
            source.filter = rs
                .filter
                .map(|f| nonempty(&lines, "source.filter", f))
                .transpose()?;
            if let Some(u) = rs.unit {
                let off = u.span().start;
                let u = nonempty(&lines, "source.unit", u)?;
                check_unit(&diagram, &u, &At::File(&lines, off), "source.unit")?;
                source.unit = Some(u);
            }
        }

        // Questions.
        if raw.question.is_empty() {
            return Err(lines.error(
                text.len(),
                Some("question".into()),
                "the study asks no question: add a `[[question]]` with `treatment` and `outcome`"
                    .into(),
            ));
        }
        let mut questions = Vec::new();
        for (i, q) in raw.question.into_iter().enumerate() {
            questions.push(question_from_file(&diagram, &lines, i, q)?);
        }
        for (i, q) in questions.iter().enumerate() {
            if questions[..i].iter().any(|p| p.name == q.name) {
                return Err(StudyError {
                    location: Location::Path(label.to_string()),
                    key: Some(format!("question[{}].name", i + 1)),
                    message: format!("two questions are named `{}`; names must be unique", q.name),
                });
            }
        }
        let header = raw.study;
        Ok(Study {
            path: None,
            name: header
                .as_ref()
                .and_then(|h| h.name.clone())
                .unwrap_or_else(|| file_stem(label)),
            description: header.and_then(|h| h.description),
            source,
            diagram,
            questions,
        })
    }

    /// Builds a one-question study from command-line pieces. `graph_label` names the diagram's
    /// origin in errors (a path or `--graph`).
    pub fn from_parts(
        graph_text: &str,
        graph_label: &str,
        q: QuestionInput,
    ) -> Result<Study, StudyError> {
        let lines = Lines::new(graph_text, graph_label);
        let diagram = Diagram::parse(graph_text)
            .map_err(|e| diagram_error(&e, Some((&lines, 0)), graph_label))?;
        check_diagram_names(&diagram, graph_label)?;
        let estimand = match &q.estimand {
            None => Estimand::Ate,
            Some(e) => parse_estimand(e, &At::Flag(q.spelling.arg("estimand")), "estimand")?,
        };
        let method = match &q.method {
            None => Method::Auto,
            Some(m) => parse_method(m, &At::Flag(q.spelling.arg("method")), "method")?,
        };
        let spelling = q.spelling;
        let need = |v: &Vec<String>, flag: &str| -> Result<(), StudyError> {
            if v.is_empty() {
                let flag = spelling.arg(flag);
                Err(StudyError {
                    location: Location::Flag(flag.clone()),
                    key: None,
                    message: format!(
                        "{flag} is required with {} (or give a study file)",
                        spelling.arg("graph")
                    ),
                })
            } else {
                Ok(())
            }
        };
        need(&q.treatment, "treatment")?;
        need(&q.outcome, "outcome")?;
        let question = build_question(
            &diagram,
            QuestionParts {
                name: format!("{}->{}", q.treatment.join("+"), q.outcome.join("+")),
                treatment: (q.treatment, At::Flag(q.spelling.arg("treatment"))),
                outcome: (q.outcome, At::Flag(q.spelling.arg("outcome"))),
                estimand,
                segments: (q.segments, At::Flag(q.spelling.arg("segment-by"))),
                method: (method, At::Flag(q.spelling.arg("method"))),
                adjust: q.adjust.map(|a| (a, At::Flag(q.spelling.arg("adjust")))),
                mediators: q
                    .mediators
                    .map(|a| (a, At::Flag(q.spelling.arg("mediators")))),
                instruments: q
                    .instruments
                    .map(|a| (a, At::Flag(q.spelling.arg("instruments")))),
                instrument_given: (
                    q.instrument_given,
                    At::Flag(q.spelling.arg("instrument-given")),
                ),
                unit: None,
            },
        )?;
        Ok(Study {
            path: None,
            name: "command-line".into(),
            description: None,
            source: SourceSection {
                database: None,
                rows: None,
                filter: None,
                unit: None,
            },
            diagram,
            questions: vec![question],
        })
    }
}

impl Study {
    /// Applies command-line overrides to every question (a flag replaces the study's value),
    /// re-checking each question against the diagram.
    pub fn with_overrides(mut self, o: &QuestionInput) -> Result<Study, StudyError> {
        let mut out = Vec::new();
        for q in &self.questions {
            let pick = |flag: &Vec<String>, own: &Vec<String>| {
                if flag.is_empty() {
                    own.clone()
                } else {
                    flag.clone()
                }
            };
            let estimand = match &o.estimand {
                Some(e) => parse_estimand(e, &At::Flag(o.spelling.arg("estimand")), "estimand")?,
                None => q.estimand,
            };
            let method = match &o.method {
                Some(m) => parse_method(m, &At::Flag(o.spelling.arg("method")), "method")?,
                None => q.method,
            };
            out.push(build_question(
                &self.diagram,
                QuestionParts {
                    name: q.name.clone(),
                    treatment: (
                        pick(&o.treatment, &q.treatment),
                        At::Flag(o.spelling.arg("treatment")),
                    ),
                    outcome: (
                        pick(&o.outcome, &q.outcome),
                        At::Flag(o.spelling.arg("outcome")),
                    ),
                    estimand,
                    segments: (
                        pick(&o.segments, &q.segments),
                        At::Flag(o.spelling.arg("segment-by")),
                    ),
                    method: (method, At::Flag(o.spelling.arg("method"))),
                    adjust: o
                        .adjust
                        .clone()
                        .or_else(|| q.adjust.clone())
                        .map(|a| (a, At::Flag(o.spelling.arg("adjust")))),
                    mediators: o
                        .mediators
                        .clone()
                        .or_else(|| q.mediators.clone())
                        .map(|a| (a, At::Flag(o.spelling.arg("mediators")))),
                    instruments: o
                        .instruments
                        .clone()
                        .or_else(|| q.instruments.clone())
                        .map(|a| (a, At::Flag(o.spelling.arg("instruments")))),
                    instrument_given: (
                        pick(&o.instrument_given, &q.instrument_given),
                        At::Flag(o.spelling.arg("instrument-given")),
                    ),
                    unit: q
                        .unit
                        .clone()
                        .map(|u| (u, At::Flag(o.spelling.arg("unit")))),
                },
            )?);
        }
        self.questions = out;
        Ok(self)
    }
}

/// The first character of `name` that may not stand in a name — a control character (a line
/// break, ESC, NUL: it could break out of a comment in a printed plan or drive a terminal) or an
/// invisible one (zero-width characters make look-alike names) — with its position.
fn bad_char(name: &str) -> Option<(usize, char)> {
    name.chars().enumerate().find(|(_, c)| {
        c.is_control()
            || matches!(
                c,
                '\u{200B}'..='\u{200F}' | '\u{2028}' | '\u{2029}' | '\u{202A}'..='\u{202E}'
                    | '\u{2060}'..='\u{2064}' | '\u{FEFF}'
            )
    })
}

/// The refusal of a name holding such a character, with the name shown escaped.
fn name_error(what: &str, name: &str, at: (usize, char)) -> String {
    format!(
        "{what} \"{}\" holds the character U+{:04X} at position {}; names may not hold control or invisible characters: rename it",
        name.escape_debug(),
        u32::from(at.1),
        at.0 + 1
    )
}

/// Checks every variable name of a diagram (see [`bad_char`]).
fn check_diagram_names(d: &Diagram, label: &str) -> Result<(), StudyError> {
    for n in d.nodes() {
        if let Some(at) = bad_char(&n.name) {
            return Err(StudyError {
                location: Location::Path(label.to_string()),
                key: Some("diagram".into()),
                message: name_error("the diagram's variable", &n.name, at),
            });
        }
    }
    Ok(())
}

/// Whether a file's text may be a diagram at all (it has an edge): a file that is not is
/// refused without quoting any of its lines.
pub fn looks_like_diagram(text: &str) -> bool {
    text.contains("->") || text.contains("<-") || text.contains("--")
}

fn file_stem(label: &str) -> String {
    Path::new(label)
        .file_stem()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_else(|| "study".into())
}

fn nonempty(lines: &Lines, key: &str, v: Spanned<String>) -> Result<String, StudyError> {
    if v.get_ref().trim().is_empty() {
        Err(lines.error(v.span().start, Some(key.into()), "must not be empty".into()))
    } else {
        Ok(v.into_inner())
    }
}

/// Byte offset where a TOML string's content starts, when its raw text equals its value
/// (no escapes), so positions inside it map back to the file.
fn string_content_offset(text: &str, start: usize) -> Option<usize> {
    let rest = &text[start..];
    let (open, literal) = if rest.starts_with("'''") {
        (3, true)
    } else if rest.starts_with("\"\"\"") {
        (3, false)
    } else if rest.starts_with('\'') {
        (1, true)
    } else {
        (1, false)
    };
    let mut off = start + open;
    if open == 3 {
        if text[off..].starts_with("\r\n") {
            off += 2;
        } else if text[off..].starts_with('\n') {
            off += 1;
        }
    }
    if !literal
        && text[off..]
            .split(if open == 3 { "\"\"\"" } else { "\"" })
            .next()?
            .contains('\\')
    {
        return None;
    }
    Some(off)
}

fn parse_estimand(s: &str, at: &At, key: &str) -> Result<Estimand, StudyError> {
    Estimand::parse(s).ok_or_else(|| {
        at.err(
            key,
            format!("unknown estimand `{s}`; expected one of: ATE, ATT, ATC"),
        )
    })
}

fn parse_method(s: &str, at: &At, key: &str) -> Result<Method, StudyError> {
    Method::parse(s).ok_or_else(|| {
        let all: Vec<&str> = Method::ALL.iter().map(|m| m.as_str()).collect();
        let hint = did_you_mean(s, all.iter().copied())
            .map(|m| format!(" (did you mean `{m}`?)"))
            .unwrap_or_default();
        at.err(
            key,
            format!(
                "unknown method `{s}`{hint}; expected one of: {}",
                all.join(", ")
            ),
        )
    })
}

fn check_unit(d: &Diagram, unit: &str, at: &At, key: &str) -> Result<(), StudyError> {
    if d.index_of(unit).is_some() {
        return Err(at.err(
            key,
            format!("`{unit}` is a variable of the diagram; the unit key must identify rows (for example `customer_id`)"),
        ));
    }
    Ok(())
}

struct QuestionParts<'a> {
    name: String,
    treatment: (Vec<String>, At<'a>),
    outcome: (Vec<String>, At<'a>),
    estimand: Estimand,
    segments: (Vec<String>, At<'a>),
    method: (Method, At<'a>),
    adjust: Option<(Vec<String>, At<'a>)>,
    mediators: Option<(Vec<String>, At<'a>)>,
    instruments: Option<(Vec<String>, At<'a>)>,
    instrument_given: (Vec<String>, At<'a>),
    unit: Option<(String, At<'a>)>,
}

fn question_from_file(
    d: &Diagram,
    lines: &Lines,
    i: usize,
    q: Spanned<RawQuestion>,
) -> Result<Question, StudyError> {
    let qspan = q.span().start;
    let q = q.into_inner();
    let key = |k: &str| format!("question[{}].{k}", i + 1);
    let at = |s: usize| At::File(lines, s);
    let names = |v: Option<Spanned<Names>>| v.map(|n| (n.span().start, n.into_inner().0));
    let estimand = match &q.estimand {
        None => Estimand::Ate,
        Some(e) => parse_estimand(e.get_ref(), &at(e.span().start), &key("estimand"))?,
    };
    let (method, mspan) = match &q.method {
        None => (Method::Auto, qspan),
        Some(m) => (
            parse_method(m.get_ref(), &at(m.span().start), &key("method"))?,
            m.span().start,
        ),
    };
    let name = match q.name {
        Some(n) => nonempty(lines, &key("name"), n)?,
        None => format!("q{}", i + 1),
    };
    let (tspan, tr) = (q.treatment.span().start, q.treatment.into_inner().0);
    let (ospan, out) = (q.outcome.span().start, q.outcome.into_inner().0);
    let segs = names(q.segments).unwrap_or((qspan, Vec::new()));
    let given = names(q.instrument_given).unwrap_or((qspan, Vec::new()));
    let unit = match q.unit {
        Some(u) => {
            let off = u.span().start;
            Some((nonempty(lines, &key("unit"), u)?, at(off)))
        }
        None => None,
    };
    build_question(
        d,
        QuestionParts {
            name,
            treatment: (tr, at(tspan)),
            outcome: (out, at(ospan)),
            estimand,
            segments: (segs.1, at(segs.0)),
            method: (method, at(mspan)),
            adjust: names(q.adjust).map(|(s, v)| (v, at(s))),
            mediators: names(q.mediators).map(|(s, v)| (v, at(s))),
            instruments: names(q.instruments).map(|(s, v)| (v, at(s))),
            instrument_given: (given.1, at(given.0)),
            unit,
        },
    )
    .map_err(|mut e| {
        if let Some(k) = e.key.take() {
            e.key = Some(if k.starts_with("question[") {
                k
            } else {
                key(&k)
            });
        }
        e
    })
}

fn build_question(d: &Diagram, p: QuestionParts) -> Result<Question, StudyError> {
    if let Some(at) = bad_char(&p.name) {
        return Err(p
            .method
            .1
            .err("name", name_error("the question name", &p.name, at)));
    }
    let variables = || {
        let mut v: Vec<&str> = d
            .nodes()
            .iter()
            .filter(|n| n.confounds.is_none())
            .map(|n| n.name.as_str())
            .collect();
        v.sort();
        v
    };
    let known = |names: &[String], at: &At, key: &str, role: &str| -> Result<(), StudyError> {
        for n in names {
            match d.index_of(n) {
                None => {
                    let hint = did_you_mean(n, variables())
                        .map(|m| format!(" (did you mean `{m}`?)"))
                        .unwrap_or_default();
                    return Err(at.err(
                        key,
                        format!(
                            "`{n}` is not a variable of the diagram{hint}; variables: {}",
                            variables().join(", ")
                        ),
                    ));
                }
                Some(i) if d.is_latent(i) => {
                    return Err(at.err(
                        key,
                        format!("`{n}` is latent (not recorded), so it cannot be used as {role}"),
                    ))
                }
                _ => {}
            }
        }
        let mut seen = std::collections::HashSet::new();
        for n in names {
            if !seen.insert(n) {
                return Err(at.err(key, format!("`{n}` is listed twice")));
            }
        }
        Ok(())
    };
    let (tr, tat) = &p.treatment;
    let (out, oat) = &p.outcome;
    if tr.is_empty() {
        return Err(tat.err("treatment", "name at least one treatment variable".into()));
    }
    if out.is_empty() {
        return Err(oat.err("outcome", "name at least one outcome variable".into()));
    }
    known(tr, tat, "treatment", "a treatment")?;
    known(out, oat, "outcome", "an outcome")?;
    if let Some(n) = out.iter().find(|n| tr.contains(n)) {
        return Err(oat.err("outcome", format!("`{n}` is both treatment and outcome")));
    }
    let ends: Vec<&String> = tr.iter().chain(out.iter()).collect();
    let other = |names: &[String], at: &At, key: &str, role: &str| -> Result<(), StudyError> {
        known(names, at, key, role)?;
        if let Some(n) = names.iter().find(|n| ends.contains(n)) {
            return Err(at.err(
                key,
                format!(
                    "`{n}` is a treatment or outcome of this question and cannot be used as {role}"
                ),
            ));
        }
        Ok(())
    };
    let (segs, sat) = &p.segments;
    other(segs, sat, "segments", "a segment")?;
    let x = d.set_of(tr);
    let dex = d.dag().descendants(&x);
    for s in segs {
        let i = d.index_of(s).expect("checked above");
        if dex.contains(i) {
            let path = d
                .dag()
                .directed_path(&x, &d.dag().set([i]), &d.dag().empty_set())
                .map(|p| d.format_chain(&p))
                .unwrap_or_default();
            return Err(sat.err(
                "segments",
                format!("`{s}` is affected by the treatment ({path}); segment only by variables fixed before treatment"),
            ));
        }
    }
    for (v, role, key) in [
        (&p.adjust, "an adjustment variable", "adjust"),
        (&p.mediators, "a mediator", "mediators"),
        (&p.instruments, "an instrument", "instruments"),
    ] {
        if let Some((names, at)) = v {
            other(names, at, key, role)?;
        }
    }
    let (given, gat) = &p.instrument_given;
    other(
        given,
        gat,
        "instrument_given",
        "an instrument's conditioning variable",
    )?;
    if !given.is_empty() && p.instruments.is_none() {
        return Err(gat.err(
            "instrument_given",
            "`instrument_given` needs `instruments`".into(),
        ));
    }
    let (method, mat) = &p.method;
    if method.needs_binary_treatment() {
        if tr.len() > 1 {
            return Err(mat.err(
                "method",
                format!(
                    "method `{}` takes one binary treatment; {} are given",
                    method.as_str(),
                    tr.len()
                ),
            ));
        }
        let k = d.node(d.index_of(&tr[0]).expect("checked")).kind;
        if !matches!(k, Kind::Binary | Kind::Unspecified) {
            return Err(mat.err(
                "method",
                format!(
                    "method `{}` needs a binary (0/1) treatment, but `{}` is declared {}; use `partial-out` (any numeric treatment)",
                    method.as_str(),
                    tr[0],
                    k.word()
                ),
            ));
        }
    }
    if let Some((u, at)) = &p.unit {
        check_unit(d, u, at, "unit")?;
    }
    Ok(Question {
        name: p.name,
        treatment: tr.clone(),
        outcome: out.clone(),
        estimand: p.estimand,
        segments: segs.clone(),
        method: *method,
        adjust: p.adjust.map(|a| a.0),
        mediators: p.mediators.map(|a| a.0),
        instruments: p.instruments.map(|a| a.0),
        instrument_given: given.clone(),
        unit: p.unit.map(|u| u.0),
    })
}
