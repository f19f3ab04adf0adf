//! What a surface was asked, before it becomes a study and settings: the CLI's flags and the
//! SQL extension's arguments bind into one [`Request`], so both surfaces turn the same input
//! into the same study, with the same checks and the same messages.

use crate::resolve::Settings;
use crate::CoreError;
use std::path::{Path, PathBuf};
use upshot_methods::{Basis, Matching, NullPolicy, MAX_FOLDS, MAX_NEIGHBOURS, MAX_SEGMENT_BINS};
pub use upshot_study::Spelling;
use upshot_study::{looks_like_diagram, QuestionInput, Rows, Study};

/// Where the diagram comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum DiagramInput {
    /// A study file (TOML).
    Study(PathBuf),
    /// Diagram text and the label errors show for it (`--graph`, a file path, ...).
    Text {
        /// The diagram.
        text: String,
        /// Where it came from.
        label: String,
    },
}

/// One request: a study file or a diagram with question arguments, and the source and
/// estimation settings that override the study's.
#[derive(Clone, Debug)]
pub struct Request {
    /// How messages name the arguments.
    pub spelling: Spelling,
    /// The study file or the diagram.
    pub diagram: Option<DiagramInput>,
    /// The question arguments (override a study's questions).
    pub question: QuestionInput,
    /// The database locator.
    pub db: Option<String>,
    /// The rows: a table, a file, or one SELECT.
    pub source: Option<String>,
    /// A row filter.
    pub filter: Option<String>,
    /// The unit key (replaces every question's).
    pub unit: Option<String>,
    /// Cross-fitting folds, as given (checked by [`Request::settings`]).
    pub folds: i64,
    /// Propensity clipping.
    pub clip: f64,
    /// `exclude` or `error`.
    pub on_null: String,
    /// Squares of numeric covariates.
    pub squares: bool,
    /// Pairwise interactions.
    pub interactions: bool,
    /// Fewest rows an estimate row needs in each treatment arm (in all, for a continuous
    /// treatment) to be shown, as given (checked by [`Request::settings`]; 0 = show all).
    pub min_cell: i64,
    /// `coarsen`: `column=bins` overrides of the automatic binning, as given.
    pub coarsen: Vec<String>,
    /// `match`: rows of the other arm per matched row, as given (checked by the spec).
    pub neighbours: i64,
    /// `match`: the caliper, in pooled standard deviations of the logit of the propensity.
    pub caliper: Option<f64>,
    /// Quantile bins for numeric segment columns, as given (checked by the spec).
    pub bins: Option<i64>,
}

impl Default for Request {
    fn default() -> Self {
        Request {
            spelling: Spelling::Flags,
            diagram: None,
            question: QuestionInput::default(),
            db: None,
            source: None,
            filter: None,
            unit: None,
            folds: 5,
            clip: 0.01,
            on_null: "exclude".into(),
            squares: false,
            interactions: false,
            min_cell: DEFAULT_MIN_CELL as i64,
            coarsen: vec![],
            neighbours: 1,
            caliper: None,
            bins: None,
        }
    }
}

/// The default of `min_cell`: segments with fewer rows than this in either arm are suppressed.
/// upshot's choice, after the common practice of statistical agencies of not publishing cells
/// below a threshold (thresholds of 3 to 30 are used; 20 also keeps an arm's mean from resting
/// on a handful of rows).
pub const DEFAULT_MIN_CELL: u32 = 20;

/// Trims names and drops empty ones (`"a, b,"` → `a`, `b`).
pub fn names(v: Vec<String>) -> Vec<String> {
    v.into_iter()
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect()
}

/// A diagram argument (`what` names it in messages, e.g. `--graph`): a path to a diagram
/// file, or diagram text. A file that holds no diagram is refused without quoting it.
pub fn diagram_argument(value: &str, what: &str) -> Result<DiagramInput, CoreError> {
    let p = Path::new(value);
    if p.is_file() {
        let text = std::fs::read_to_string(p)
            .map_err(|e| CoreError::Input(format!("{what}: cannot read {value}: {e}")))?;
        if !looks_like_diagram(&text) {
            return Err(CoreError::Input(format!(
                "{what}: {value} holds no diagram (no edge such as `a -> b` in it); check the path"
            )));
        }
        return Ok(DiagramInput::Text {
            text,
            label: value.to_string(),
        });
    }
    if value.contains("->")
        || value.contains("<-")
        || value.trim_start().starts_with("digraph")
        || value.contains(';')
    {
        return Ok(DiagramInput::Text {
            text: value.to_string(),
            label: what.to_string(),
        });
    }
    Err(CoreError::Input(format!(
        "{what}: no file `{value}`; give a path to a diagram file, or edges such as \"t -> y\""
    )))
}

impl Request {
    /// The study: the study file with the question arguments applied, or one built from the
    /// diagram and the question arguments; then the source arguments in place of the study's
    /// (`db` and `source` paths as given; `unit` replaces every question's). `verb` names the
    /// command in the message for a missing diagram.
    pub fn study(&self, verb: &str) -> Result<Study, CoreError> {
        let input = |e: upshot_study::StudyError| CoreError::Input(e.to_string());
        let question = QuestionInput {
            spelling: self.spelling,
            ..self.question.clone()
        };
        let mut study = match &self.diagram {
            Some(DiagramInput::Study(path)) => Study::load(path)
                .and_then(|s| s.with_overrides(&question))
                .map_err(input)?,
            Some(DiagramInput::Text { text, label }) => {
                Study::from_parts(text, label, question).map_err(input)?
            }
            None => {
                return Err(CoreError::Input(format!(
                    "nothing to {verb}: give a study file (upshot {verb} demo-data/voucher-backdoor.toml) or {} with a treatment and an outcome",
                    self.spelling.arg("graph")
                )))
            }
        };
        if let Some(db) = &self.db {
            study.source.database = Some(db.clone());
        }
        if let Some(s) = &self.source {
            if s.trim().is_empty() {
                return Err(CoreError::Input(format!(
                    "{}: empty; name a table, a CSV or Parquet file, or give one SELECT",
                    self.spelling.arg("source")
                )));
            }
            study.source.rows = Some(crate::classify_source(s));
        }
        if let Some(f) = &self.filter {
            study.source.filter = Some(f.clone());
        }
        if let Some(u) = &self.unit {
            if study.diagram.index_of(u).is_some() {
                return Err(CoreError::Input(format!(
                    "{}: `{u}` is a variable of the diagram; the unit key must identify rows (for example customer_id)",
                    self.spelling.arg("unit")
                )));
            }
            study.source.unit = Some(u.clone());
            for q in &mut study.questions {
                q.unit = None;
            }
        }
        if let Some(Rows::Table(t)) = &study.source.rows {
            if t.trim().is_empty() {
                return Err(CoreError::Input(format!(
                    "{}: empty",
                    self.spelling.arg("source")
                )));
            }
        }
        Ok(study)
    }

    /// The estimation settings, checked.
    pub fn settings(&self) -> Result<Settings, CoreError> {
        let on_null = match self.on_null.as_str() {
            "exclude" => NullPolicy::Exclude,
            "error" => NullPolicy::Error,
            other => {
                return Err(CoreError::Input(format!(
                    "{}: unknown policy `{other}`; expected exclude or error",
                    self.spelling.arg("on-null")
                )))
            }
        };
        let folds = u32::try_from(self.folds).map_err(|_| {
            CoreError::Input(format!(
                "{}: {} folds; use 1 (no cross-fitting) to {MAX_FOLDS}",
                self.spelling.arg("folds"),
                self.folds
            ))
        })?;
        let min_cell = u32::try_from(self.min_cell).map_err(|_| {
            CoreError::Input(format!(
                "{}: {} is not a row count; give 0 (show every row) or more",
                self.spelling.arg("min-cell"),
                self.min_cell
            ))
        })?;
        let mut bins = Vec::new();
        for b in &self.coarsen {
            let parsed = b
                .split_once('=')
                .and_then(|(c, n)| Some((c.trim().to_string(), n.trim().parse::<u32>().ok()?)))
                .filter(|(c, n)| !c.is_empty() && (1..=1000).contains(n));
            match parsed {
                Some(p) => bins.push(p),
                None => {
                    return Err(CoreError::Input(format!(
                    "{}: `{b}` is not COLUMN=BINS with 1 to 1000 bins (for example prior_orders=4)",
                    self.spelling.arg("coarsen")
                )))
                }
            }
        }
        // The range and the caliper are checked with the spec (`Spec::check`), as folds are.
        let neighbours = u32::try_from(self.neighbours).map_err(|_| {
            CoreError::Input(format!(
                "{}: {} rows per match; use 1 to {MAX_NEIGHBOURS}",
                self.spelling.arg("neighbours"),
                self.neighbours
            ))
        })?;
        let segment_bins = self
            .bins
            .map(|n| {
                u32::try_from(n).map_err(|_| {
                    CoreError::Input(format!(
                        "{}: {n} bins; use 2 to {MAX_SEGMENT_BINS}",
                        self.spelling.arg("bins")
                    ))
                })
            })
            .transpose()?;
        Ok(Settings {
            segment_bins,
            matching: Matching {
                neighbours,
                caliper: self.caliper,
            },
            folds,
            min_cell,
            bins,
            clip: self.clip,
            on_null,
            basis: Basis {
                squares: self.squares,
                interactions: self.interactions,
            },
        })
    }
}
