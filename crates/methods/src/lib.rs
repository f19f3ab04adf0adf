//! Estimators as sequences of aggregate passes.
//!
//! An estimator never sees rows. [`estimate`] drives one: it builds each pass with
//! `upshot_sql`, hands it to a [`Runner`] (an engine, or a test's in-memory stand-in), reads the
//! few rows that come back, and finishes with `upshot_fit`. The pass sequence of every method
//! is fixed by its key and the spec, so [`plan`] can list the same passes without a database,
//! with placeholders where a pass inlines numbers that earlier passes compute.
//!
//! Methods (design notes, estimator table): `stratify` (backdoor adjustment over discrete
//! strata), `regress` (per-arm linear outcome models, HC1), `weight` (Hajek inverse
//! probability weighting, stacked-equation variance), `doubly-robust` (augmented IPW with
//! K-fold cross-fitting), `partial-out` (cross-fitted partially linear model). Every method is
//! grouped by the segment columns in the same passes; an `all` row combines the segments.
//!
//! Key design decision: the driver is written as straight-line code over a `Runner` closure
//! rather than as an explicit state enum; the runner is the only place where a pass leaves the
//! process, so progress display, recording and engines plug in there, and `plan` reuses the
//! same design builders so that plan and run cannot drift (a test compares their pass lists).
//!
//! This crate does no I/O.
#![deny(missing_docs)]

mod combine;
mod doubly_robust;
mod partial_out;
mod plan;
mod prepare;
mod regress;
mod stratify;
mod weight;

pub use plan::{plan, PlannedPass};
pub use prepare::Basis;
pub use upshot_sql::Target;

use serde::Serialize;
use upshot_sql::{Aggregates, Dialect, Expr, Pass, Source, SqlError};

/// The estimators this crate runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Estimator {
    /// Backdoor adjustment over discrete strata.
    Stratify,
    /// Regression adjustment with per-arm linear models.
    Regress,
    /// Inverse probability weighting (Hajek).
    Weight,
    /// Augmented IPW, cross-fitted.
    DoublyRobust,
    /// Cross-fitted partially linear model.
    PartialOut,
}

impl Estimator {
    /// The method key.
    pub fn key(self) -> &'static str {
        match self {
            Estimator::Stratify => "stratify",
            Estimator::Regress => "regress",
            Estimator::Weight => "weight",
            Estimator::DoublyRobust => "doubly-robust",
            Estimator::PartialOut => "partial-out",
        }
    }

    /// Whether the treatment must be 0/1.
    pub fn binary_treatment(self) -> bool {
        !matches!(self, Estimator::PartialOut)
    }
}

/// What happens to rows with NULL in a used column.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum NullPolicy {
    /// Exclude them and report how many (default).
    Exclude,
    /// Refuse to estimate.
    Error,
}

/// A column of the source as the engine reports it.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ColumnType {
    /// Name.
    pub name: String,
    /// Numeric (or boolean) type.
    pub numeric: bool,
    /// Integer type (a unit key for folds must be one).
    pub integer: bool,
}

/// One estimation request, fully resolved (route chosen, sets fixed).
#[derive(Clone)]
pub struct Spec {
    /// The dialect passes are rendered in.
    pub dialect: &'static dyn Dialect,
    /// Question name, for output.
    pub question: String,
    /// The rows.
    pub source: Source,
    /// The user's filter, parsed as one expression.
    pub filter: Option<Expr>,
    /// Treatment column.
    pub treatment: String,
    /// Outcome column.
    pub outcome: String,
    /// Adjustment set (covariates).
    pub adjust: Vec<String>,
    /// Segment columns.
    pub segments: Vec<String>,
    /// ATE, ATT or ATC.
    pub target: Target,
    /// Method.
    pub method: Estimator,
    /// Cross-fitting folds (doubly-robust, partial-out); 1 = no cross-fitting.
    pub folds: u32,
    /// Integer unit key for the fold hash.
    pub unit: Option<String>,
    /// NULL policy.
    pub on_null: NullPolicy,
    /// Propensities are clipped to `[clip, 1 - clip]` (0 = no clipping).
    pub clip: f64,
    /// Columns declared categorical (one-hot even when numeric).
    pub categorical: Vec<String>,
    /// Basis expansion of numeric covariates.
    pub basis: Basis,
    /// The source's columns (from the engine's schema), or `None` when planning offline.
    pub columns: Option<Vec<ColumnType>>,
}

/// Why an estimate cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MethodError {
    /// The data or the request cannot give an estimate; the message says what to change.
    #[error("{0}")]
    Input(String),
    /// A pass failed in the engine.
    #[error("{0}")]
    Engine(String),
    /// A pass could not be built.
    #[error(transparent)]
    Sql(#[from] SqlError),
}

impl From<upshot_sql::ResultError> for MethodError {
    fn from(e: upshot_sql::ResultError) -> Self {
        MethodError::Engine(e.to_string())
    }
}

/// Runs passes: an engine, a recorder, or an in-memory stand-in.
pub trait Runner {
    /// Runs one pass and returns its rows; the error is the engine's message.
    fn run(&mut self, pass: &Pass) -> Result<Aggregates, String>;
}

impl<F: FnMut(&Pass) -> Result<Aggregates, String>> Runner for F {
    fn run(&mut self, pass: &Pass) -> Result<Aggregates, String> {
        self(pass)
    }
}

pub(crate) fn ask(r: &mut dyn Runner, pass: &Pass) -> Result<Aggregates, MethodError> {
    r.run(pass)
        .map_err(|m| MethodError::Engine(format!("the {} pass failed: {m}", pass.name)))
}

/// One estimate: overall (`segment` = `all`) or for one segment.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Estimate {
    /// Question name.
    pub question: String,
    /// `all`, or `column=value, ...`.
    pub segment: String,
    /// Segment column values (empty for `all`), written as a JSON object.
    #[serde(serialize_with = "as_map")]
    pub segment_values: Vec<(String, String)>,
    /// ATE, ATT or ATC.
    pub estimand: &'static str,
    /// Method key.
    pub method: &'static str,
    /// Point estimate.
    pub estimate: f64,
    /// Standard error.
    pub std_error: f64,
    /// Lower end of the 95% interval.
    pub ci_low: f64,
    /// Upper end of the 95% interval.
    pub ci_high: f64,
    /// Treated rows used (`None` for a continuous treatment).
    pub n_treated: Option<f64>,
    /// Control rows used (`None` for a continuous treatment).
    pub n_control: Option<f64>,
    /// Rows used.
    pub n_used: f64,
    /// Adjustment set.
    pub adjustment_set: Vec<String>,
}

fn as_map<S: serde::Serializer>(v: &[(String, String)], s: S) -> Result<S::Ok, S::Error> {
    s.collect_map(v.iter().map(|(a, b)| (a, b)))
}

/// The 97.5% quantile of the standard normal distribution.
pub const Z_975: f64 = 1.959_963_984_540_054;

impl Estimate {
    pub(crate) fn new(spec: &Spec, seg: &Segment, estimate: f64, se: f64) -> Estimate {
        Estimate {
            question: spec.question.clone(),
            segment: seg.label(),
            segment_values: seg.values.clone(),
            estimand: target_name(spec.target),
            method: spec.method.key(),
            estimate,
            std_error: se,
            ci_low: estimate - Z_975 * se,
            ci_high: estimate + Z_975 * se,
            n_treated: None,
            n_control: None,
            n_used: 0.0,
            adjustment_set: spec.adjust.clone(),
        }
    }
}

/// `ATE`, `ATT` or `ATC`.
pub fn target_name(t: Target) -> &'static str {
    match t {
        Target::Ate => "ATE",
        Target::Att => "ATT",
        Target::Atc => "ATC",
    }
}

/// A segment: the values of the segment columns (empty = all rows).
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Segment {
    pub values: Vec<(String, String)>,
}

impl Segment {
    fn label(&self) -> String {
        if self.values.is_empty() {
            "all".into()
        } else {
            self.values
                .iter()
                .map(|(c, v)| format!("{c}={v}"))
                .collect::<Vec<_>>()
                .join(", ")
        }
    }
}

/// What a run found besides the estimates.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct Diagnostics {
    /// Rows after the filter.
    pub rows_read: f64,
    /// Rows excluded for NULLs in a used column.
    pub rows_excluded_null: f64,
    /// Columns with NULLs and their NULL counts.
    pub null_columns: Vec<(String, f64)>,
    /// Rows excluded for another reason (strata lacking an arm), with the reason.
    pub rows_excluded_other: Vec<(String, f64)>,
    /// Findings worth reading (clipping, extreme propensities, many cells).
    pub notes: Vec<String>,
    /// Warnings that may make the estimate unreliable.
    pub warnings: Vec<String>,
    /// Passes run.
    pub passes: usize,
}

/// Estimates and diagnostics of one question.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Outcome {
    /// The overall estimate first, then one per segment.
    pub estimates: Vec<Estimate>,
    /// What was found on the way.
    pub diagnostics: Diagnostics,
}

/// Runs `spec`'s method through `runner`.
pub fn estimate(spec: &Spec, runner: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let mut counted = Counted {
        inner: runner,
        n: 0,
    };
    let setup = prepare::prepare(spec, &mut counted)?;
    let mut out = match spec.method {
        Estimator::Stratify => stratify::run(&setup, &mut counted)?,
        Estimator::Regress => regress::run(&setup, &mut counted)?,
        Estimator::Weight => weight::run(&setup, &mut counted)?,
        Estimator::DoublyRobust => doubly_robust::run(&setup, &mut counted)?,
        Estimator::PartialOut => partial_out::run(&setup, &mut counted)?,
    };
    let mut diag = setup.diagnostics.clone();
    diag.rows_excluded_other
        .append(&mut out.diagnostics.rows_excluded_other);
    diag.notes.append(&mut out.diagnostics.notes);
    diag.warnings.append(&mut out.diagnostics.warnings);
    diag.passes = counted.n;
    out.diagnostics = diag;
    Ok(out)
}

struct Counted<'a> {
    inner: &'a mut dyn Runner,
    n: usize,
}

impl Runner for Counted<'_> {
    fn run(&mut self, pass: &Pass) -> Result<Aggregates, String> {
        self.n += 1;
        self.inner.run(pass)
    }
}

/// The `auto` rule: a binary treatment with no adjustment set, or with only discrete
/// (declared categorical, ordinal or binary) adjustment columns, is stratified; another binary
/// treatment is estimated doubly robust; any other treatment is partialled out.
pub fn auto(treatment_binary: bool, adjust_all_discrete: bool) -> Estimator {
    match (treatment_binary, adjust_all_discrete) {
        (true, true) => Estimator::Stratify,
        (true, false) => Estimator::DoublyRobust,
        (false, _) => Estimator::PartialOut,
    }
}
