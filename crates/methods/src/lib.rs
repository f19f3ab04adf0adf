//! Estimators as sequences of aggregate passes.
//!
//! An estimator never sees rows. [`estimate`] drives one: it builds each pass with the kit of
//! `upshot_sql`, hands it to a [`Runner`] (an engine, or a test's in-memory stand-in), reads the
//! few rows that come back, and finishes with `upshot_fit`. The pass sequence of every method
//! is fixed by its key and the spec, so [`plan`] can list the same passes without a database,
//! with placeholders where a pass inlines numbers that earlier passes compute.
//!
//! The seam is the [`Estimator`] trait: one implementation per method, each in a folder of its
//! own (`stratify/`, `regress/`, `weight/`, `doubly_robust/`, `partial_out/`, `iv/`, `front_door/`, `matching/`, `coarsen/`) holding its pass
//! builders (`passes.rs` where it has passes of its own), its math (estimate and variance) and
//! its unit tests; [`ESTIMATORS`] is the one registration point. Shared machinery has modules of
//! its own, used by name: `prepare` (profile and levels passes, input checks, design terms),
//! `outcome` (per-arm linear outcome models), `propensity` (logistic propensity fits, and the
//! fits that leave one fold out), `models` (per-group models: by segment, by segment and
//! fold), `crossfit` (folds, "all but fold k" sums), `read` (typed reading of pass results), `combine` (segments into the `all` row), `strata` (estimates over the strata of a cell table), `segment_bins` (numeric segment columns cut at quantiles computed in the database).
//!
//! Key design decision: an estimator is straight-line code over a `Runner` rather than an
//! explicit state enum; the runner is the only place where a pass leaves the process, so
//! progress display, recording and engines plug in there, and `plan` reuses the same pass
//! builders so that plan and run cannot drift (a test compares their pass lists).
//!
//! This crate does no I/O.
#![deny(missing_docs)]

/// Declares a module's estimator: a unit struct whose [`Estimator`] impl answers to `$method`
/// and calls the module's `passes` and `run` (and, with `first_pass_profiles`, the module's
/// `prepare`, whose first pass is also the profile).
macro_rules! estimator {
    ($name:ident, $method:expr $(, $own:ident)?) => {
        /// This module's estimator (registered in `ESTIMATORS`).
        pub(crate) struct $name;

        impl crate::Estimator for $name {
            fn method(&self) -> crate::Method {
                $method
            }
            $(estimator!(@$own);)?
            fn passes(
                &self,
                s: &crate::prepare::Setup,
            ) -> Result<Vec<upshot_sql::Pass>, crate::MethodError> {
                passes(s)
            }
            fn run(
                &self,
                s: &crate::prepare::Setup,
                r: &mut dyn crate::Runner,
            ) -> Result<crate::Outcome, crate::MethodError> {
                run(s, r)
            }
        }
    };
    (@first_pass_profiles) => {
        fn profiles_in_first_pass(&self) -> bool {
            true
        }
        fn prepare<'a>(
            &self,
            spec: &'a crate::Spec,
            r: &mut dyn crate::Runner,
        ) -> Result<crate::prepare::Setup<'a>, crate::MethodError> {
            prepare(spec, r)
        }
    };
}

mod coarsen;
mod combine;
mod crossfit;
mod doubly_robust;
mod front_door;
#[cfg(test)]
mod golden;
mod iv;
mod matching;
mod models;
mod outcome;
mod partial_out;
mod plan;
mod prepare;
mod propensity;
mod read;
mod regress;
mod segment_bins;
mod strata;
mod stratify;
mod weight;

pub use plan::{plan, PlannedPass};
pub use prepare::Basis;
pub use upshot_study::{Estimand, Method};

use prepare::Setup;
use serde::Serialize;
use upshot_sql::{Aggregates, Expr, Flavor, Pass, Source, SqlError};

/// An estimator: its passes (for `plan`, with placeholders) and its run. Implementations live
/// in one folder each and are registered in [`ESTIMATORS`].
pub(crate) trait Estimator: Sync {
    /// The method key it answers to.
    fn method(&self) -> Method;
    /// Whether its first pass is also the profile, so no profile pass runs (`stratify`).
    fn profiles_in_first_pass(&self) -> bool {
        false
    }
    /// The profile (and levels) passes, the checks of the data, the design terms.
    fn prepare<'a>(&self, spec: &'a Spec, r: &mut dyn Runner) -> Result<Setup<'a>, MethodError> {
        prepare::prepare(spec, r)
    }
    /// The passes after the profile and levels passes, built from a placeholder setup.
    fn passes(&self, s: &Setup) -> Result<Vec<Pass>, MethodError>;
    /// Runs the passes after the profile and levels passes and finishes the estimates.
    fn run(&self, s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError>;
}

/// Every estimator, by method: the one place a new estimator is registered.
static ESTIMATORS: [&dyn Estimator; 9] = [
    &stratify::Stratify,
    &regress::Regress,
    &weight::Weight,
    &doubly_robust::DoublyRobust,
    &partial_out::PartialOut,
    &iv::Iv,
    &front_door::FrontDoor,
    &matching::Match,
    &coarsen::Coarsen,
];

/// The methods that have an estimator, in documentation order.
pub fn available() -> Vec<Method> {
    ESTIMATORS.iter().map(|e| e.method()).collect()
}

fn estimator(m: Method) -> Result<&'static dyn Estimator, MethodError> {
    ESTIMATORS
        .iter()
        .copied()
        .find(|e| e.method() == m)
        .ok_or_else(|| {
            MethodError::Input(format!(
                "method `{}` has no estimator in this version of upshot; available: {}",
                m.as_str(),
                available()
                    .iter()
                    .map(|m| m.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            ))
        })
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
    /// The engine's name of its type (for messages).
    pub type_name: String,
    /// Numeric (or boolean) type.
    pub numeric: bool,
    /// Integer type (a unit key for folds must be one).
    pub integer: bool,
    /// Boolean type.
    pub boolean: bool,
}

/// One estimation request, fully resolved (route chosen, sets fixed).
#[derive(Clone)]
pub struct Spec {
    /// What passes are built for: the engine's dialect and the functions its database has.
    pub flavor: Flavor,
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
    /// Adjustment set (covariates); for `iv`, the instruments' conditioning set.
    pub adjust: Vec<String>,
    /// Excluded instruments (`iv` only; empty otherwise).
    pub instruments: Vec<String>,
    /// Mediators (`front-door` only; empty otherwise).
    pub mediators: Vec<String>,
    /// Bins per numeric covariate for `coarsen`, overriding its automatic rule (column, bins).
    pub bins: Vec<(String, u32)>,
    /// How `match` matches (neighbours, caliper); the defaults for every other method.
    pub matching: Matching,
    /// Segment columns.
    pub segments: Vec<String>,
    /// Cut the numeric segment columns into this many bins at quantiles computed in the
    /// database (`None`: segment by their values).
    pub segment_bins: Option<u32>,
    /// ATE, ATT or ATC.
    pub estimand: Estimand,
    /// Method (never `auto`: the core library resolves it first).
    pub method: Method,
    /// Cross-fitting folds (doubly-robust, partial-out); 1 = no cross-fitting. Cross-fitting
    /// needs [`Spec::unit`]: without one, the estimate is made without it (and says so).
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

/// How `match` matches rows.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Matching {
    /// Rows of the other arm matched to each target row (1:k, with replacement).
    pub neighbours: u32,
    /// Matches farther than this many pooled standard deviations of the logit of the
    /// propensity are refused (`None`: no caliper).
    pub caliper: Option<f64>,
}

impl Default for Matching {
    fn default() -> Self {
        Matching {
            neighbours: 1,
            caliper: None,
        }
    }
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

/// Runs a pass whose non-finite values the caller checks by name (the profile).
pub(crate) fn ask_unchecked(r: &mut dyn Runner, pass: &Pass) -> Result<Aggregates, MethodError> {
    r.run(pass)
        .map_err(|m| MethodError::Engine(format!("the {} pass failed: {m}", pass.name)))
}

/// Runs a pass and refuses a non-finite result.
pub(crate) fn ask(r: &mut dyn Runner, pass: &Pass) -> Result<Aggregates, MethodError> {
    let a = ask_unchecked(r, pass)?;
    // A sum that overflowed (or met a non-finite value) must not reach an estimate.
    for (i, name) in a.names.iter().enumerate() {
        if a.rows
            .iter()
            .any(|row| matches!(row.get(i), Some(upshot_sql::Cell::Number(x)) if !x.is_finite()))
        {
            return Err(MethodError::Input(format!(
                "the {} pass gave a non-finite `{name}`: the sums overflowed or met infinite values; rescale the large columns in a source query",
                pass.name
            )));
        }
    }
    Ok(a)
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
    pub estimand: Estimand,
    /// Method.
    pub method: Method,
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
    /// `<k` when the row was suppressed for having fewer than k rows in an arm (its numbers
    /// are then not-a-number, written as null / NULL).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub suppressed: Option<String>,
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
            estimand: spec.estimand,
            method: spec.method,
            estimate,
            std_error: se,
            ci_low: estimate - Z_975 * se,
            ci_high: estimate + Z_975 * se,
            n_treated: None,
            n_control: None,
            n_used: 0.0,
            adjustment_set: spec.adjust.clone(),
            suppressed: None,
        }
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
    /// What an instrumental-variable estimate reports besides the estimate: one per estimate
    /// row, in their order (`iv` only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub instruments: Vec<InstrumentReport>,
}

/// An instrument's first-stage coefficient.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct InstrumentCoefficient {
    /// The instrument.
    pub instrument: String,
    /// Its coefficient in the regression of the treatment on the covariates and instruments.
    pub coefficient: f64,
    /// Its classical standard error.
    pub std_error: f64,
}

/// A χ² test statistic.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TestStat {
    /// The statistic.
    pub stat: f64,
    /// Degrees of freedom.
    pub df: usize,
    /// Upper-tail probability.
    pub p_value: f64,
}

impl From<&upshot_fit::OverId> for TestStat {
    fn from(o: &upshot_fit::OverId) -> Self {
        TestStat {
            stat: o.stat,
            df: o.df,
            p_value: o.p_value,
        }
    }
}

/// The first stage and the tests of one instrumental-variable estimate row.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct InstrumentReport {
    /// `all`, or the segment.
    pub segment: String,
    /// How the estimate and its error were computed.
    pub estimator: &'static str,
    /// The excluded instruments' first-stage coefficients.
    pub first_stage: Vec<InstrumentCoefficient>,
    /// F statistic of the excluded instruments in the first stage.
    pub partial_f: f64,
    /// Its degrees of freedom.
    pub f_df: (f64, f64),
    /// F below 10 (common practice, Staiger & Stock 1997).
    pub weak: bool,
    /// Classical (homoskedastic) standard error of the 2SLS estimate.
    pub se_unadjusted: f64,
    /// Robust (HC1) standard error of the 2SLS estimate.
    pub se_robust: f64,
    /// Delta-method standard error of the Wald ratio (one 0/1 instrument, no covariates).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub se_delta: Option<f64>,
    /// Sargan's over-identification test (more instruments than treatments).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sargan: Option<TestStat>,
    /// Hansen's J (robust over-identification test).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hansen_j: Option<TestStat>,
    /// Share of compliers (0/1 instrument and treatment, under monotonicity): the difference
    /// in treatment rates between the instrument's two values.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub complier_share: Option<f64>,
}

/// Estimates and diagnostics of one question.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct Outcome {
    /// The overall estimate first, then one per segment.
    pub estimates: Vec<Estimate>,
    /// What was found on the way.
    pub diagnostics: Diagnostics,
    /// The query of one row per unit with its own effect (`match` with a unit key): what a
    /// per-row table is created from, inside the source's database. Never run by the
    /// estimator.
    #[serde(skip)]
    pub rows: Option<Pass>,
}

/// Runs `spec`'s method through `runner`.
pub fn estimate(spec: &Spec, runner: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let est = estimator(spec.method)?;
    spec.check()?;
    let mut counted = Counted {
        inner: runner,
        n: 0,
    };
    let cut = segment_bins::cut(spec, &mut counted)?;
    let mut setup = est.prepare(cut.as_ref().map_or(spec, |c| &c.spec), &mut counted)?;
    if let Some(c) = &cut {
        c.annotate(&mut setup);
    }
    let mut out = est.run(&setup, &mut counted)?;
    let mut diag = setup.diagnostics.clone();
    diag.rows_excluded_other
        .append(&mut out.diagnostics.rows_excluded_other);
    diag.notes.append(&mut out.diagnostics.notes);
    diag.warnings.append(&mut out.diagnostics.warnings);
    diag.instruments = std::mem::take(&mut out.diagnostics.instruments);
    diag.passes = counted.n;
    out.diagnostics = diag;
    for e in &out.estimates {
        // Never a number that is not finite, nor an error of exactly zero from noise.
        if !e.estimate.is_finite() || !e.std_error.is_finite() || e.std_error <= 0.0 {
            return Err(MethodError::Input(format!(
                "{}: the estimate ({}) or its standard error ({}) is degenerate: the rows leave no variation to estimate from, or their values are too large; check the segment's rows, or rescale large columns",
                if e.segment == "all" { "all rows".to_string() } else { format!("segment {}", e.segment) },
                e.estimate,
                e.std_error
            )));
        }
    }
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

/// Most cross-fitting folds.
pub const MAX_FOLDS: u32 = 20;

pub use matching::MAX_NEIGHBOURS;
pub use segment_bins::MAX_SEGMENT_BINS;

impl Spec {
    /// Checks the values a caller sets directly (plan and run alike): folds, clip, unit key.
    /// A library caller cannot get an estimate from an unchecked value.
    pub fn check(&self) -> Result<(), MethodError> {
        if self.folds == 0 || self.folds > MAX_FOLDS {
            return Err(MethodError::Input(format!(
                "--folds: {} folds; use 1 (no cross-fitting) to {MAX_FOLDS}",
                self.folds
            )));
        }
        if !(0.0..0.5).contains(&self.clip) || self.clip.is_nan() {
            return Err(MethodError::Input(format!(
                "--clip: {} is outside [0, 0.5); propensities are clipped to [c, 1 - c]",
                self.clip
            )));
        }
        if let Some(u) = &self.unit {
            if u.trim().is_empty() {
                return Err(MethodError::Input(
                    "--unit: the unit key column is empty".into(),
                ));
            }
        }
        if self.method == Method::Auto {
            return Err(MethodError::Input(
                "method `auto` must be resolved to an estimator before estimating".into(),
            ));
        }
        self.check_instruments()?;
        self.check_mediators()?;
        self.check_matching()?;
        segment_bins::check(self)
    }

    /// Neighbours and a caliper belong to `match`: 1 to [`MAX_NEIGHBOURS`] neighbours, a
    /// positive, finite caliper.
    fn check_matching(&self) -> Result<(), MethodError> {
        let m = self.matching;
        if self.method != Method::Match {
            if m != Matching::default() {
                return Err(MethodError::Input(
                    "--neighbours and --caliper are used by method `match` only; drop them, or use --method match".into(),
                ));
            }
            return Ok(());
        }
        if !(1..=MAX_NEIGHBOURS).contains(&m.neighbours) {
            return Err(MethodError::Input(format!(
                "--neighbours: {} rows per match; use 1 to {MAX_NEIGHBOURS}",
                m.neighbours
            )));
        }
        if let Some(c) = m.caliper {
            if !(c.is_finite() && c > 0.0) {
                return Err(MethodError::Input(format!(
                    "--caliper: {c} is not a positive number of standard deviations of the logit (0.2 is the usual choice, Austin 2011)"
                )));
            }
        }
        Ok(())
    }

    /// Mediators belong to `front-door`, which needs at least one, distinct from the treatment,
    /// the outcome and the segment columns.
    fn check_mediators(&self) -> Result<(), MethodError> {
        if self.method != Method::FrontDoor {
            if !self.mediators.is_empty() {
                return Err(MethodError::Input(format!(
                    "mediators ({}) are used by method `front-door` only; drop them, or use --method front-door",
                    self.mediators.join(", ")
                )));
            }
            return Ok(());
        }
        if self.mediators.is_empty() {
            return Err(MethodError::Input(
                "method `front-door` needs at least one mediator (--mediators, or the question's `mediators`)".into(),
            ));
        }
        if let Some((m, role)) = self.conflict(&self.mediators, &[]) {
            return Err(MethodError::Input(format!(
                "mediator `{m}` is also {role}; name it once, as a mediator only"
            )));
        }
        Ok(())
    }

    /// The first of `names` that plays another part as well — the treatment, the outcome, a
    /// segment column, one of `others` (with its part), or an earlier entry of `names` — and
    /// that part.
    fn conflict<'a>(
        &self,
        names: &'a [String],
        others: &[(&[String], &'static str)],
    ) -> Option<(&'a str, &'static str)> {
        names.iter().enumerate().find_map(|(i, n)| {
            let role = if *n == self.treatment {
                "the treatment"
            } else if *n == self.outcome {
                "the outcome"
            } else if let Some((_, role)) = others.iter().find(|(set, _)| set.contains(n)) {
                role
            } else if self.segments.contains(n) {
                "a segment column"
            } else if names[..i].contains(n) {
                "named twice"
            } else {
                return None;
            };
            Some((n.as_str(), role))
        })
    }

    /// Instruments belong to `iv`, which needs at least one, distinct from the treatment, the
    /// outcome, the covariates and the segment columns; its estimand is the effect the
    /// instruments move (ATE in the spec's terms).
    fn check_instruments(&self) -> Result<(), MethodError> {
        if self.method != Method::Iv {
            if !self.instruments.is_empty() {
                return Err(MethodError::Input(format!(
                    "instruments ({}) are used by method `iv` only; drop them, or use --method iv",
                    self.instruments.join(", ")
                )));
            }
            return Ok(());
        }
        if self.instruments.is_empty() {
            return Err(MethodError::Input(
                "method `iv` needs at least one instrument (--instruments, or the question's `instruments`)".into(),
            ));
        }
        if let Some((z, role)) = self.conflict(
            &self.instruments,
            &[(
                &self.adjust,
                "a covariate the instruments are conditioned on",
            )],
        ) {
            return Err(MethodError::Input(format!(
                "instrument `{z}` is also {role}; an instrument must be excluded from the outcome equation — name it once, as an instrument only"
            )));
        }
        if self.estimand != Estimand::Ate {
            return Err(MethodError::Input(format!(
                "method `iv` estimates the effect among the units the instruments move (with a 0/1 instrument and treatment: the compliers' local effect), not the {}; use --estimand ATE",
                self.estimand.as_str()
            )));
        }
        Ok(())
    }

    /// Whether this spec cross-fits: a method that does, more than one fold, and a unit key
    /// to hash rows into folds. Without a unit key the estimate is made without
    /// cross-fitting, and its diagnostics say so.
    pub fn cross_fits(&self) -> bool {
        prepare::needs_folds(self)
    }
}

/// The `auto` rule: a binary treatment with no adjustment set, or with only discrete
/// (declared categorical, ordinal or binary) adjustment columns, is stratified; another binary
/// treatment is estimated doubly robust; any other treatment is partialled out.
pub fn auto(treatment_binary: bool, adjust_all_discrete: bool) -> Method {
    match (treatment_binary, adjust_all_discrete) {
        (true, true) => Method::Stratify,
        (true, false) => Method::DoublyRobust,
        (false, _) => Method::PartialOut,
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A spec over a table `t` with treatment `t`, outcome `y` and adjustment `x`.
    pub(crate) fn spec(method: Method) -> Spec {
        Spec {
            flavor: Flavor::duckdb(),
            question: "q".into(),
            source: Source::table("t").unwrap(),
            filter: None,
            treatment: "t".into(),
            outcome: "y".into(),
            adjust: vec!["x".into()],
            instruments: vec![],
            mediators: vec![],
            bins: vec![],
            matching: Matching::default(),
            segments: vec![],
            segment_bins: None,
            estimand: Estimand::Ate,
            method,
            folds: 5,
            unit: None,
            on_null: NullPolicy::Exclude,
            clip: 0.01,
            categorical: vec![],
            basis: Basis::default(),
            columns: None,
        }
    }

    #[test]
    fn unchecked_values_are_refused_for_plan_and_run_alike() {
        for (folds, clip) in [(0, 0.01), (21, 0.01), (5, 0.5), (5, -0.1), (5, f64::NAN)] {
            let mut s = spec(Method::DoublyRobust);
            s.folds = folds;
            s.clip = clip;
            assert!(
                matches!(s.check(), Err(MethodError::Input(_))),
                "{folds} {clip}"
            );
            assert!(plan(&s).is_err(), "{folds} {clip}");
            let mut never = |_: &Pass| -> Result<Aggregates, String> { panic!("no pass may run") };
            assert!(estimate(&s, &mut never).is_err(), "{folds} {clip}");
        }
        let mut auto = spec(Method::Auto);
        auto.folds = 5;
        assert!(auto.check().is_err());
        assert!(plan(&spec(Method::Iv)).is_err());
    }

    #[test]
    fn without_a_unit_key_nothing_is_cross_fitted_and_the_plan_says_one_fit() {
        let s = spec(Method::DoublyRobust);
        assert!(!s.cross_fits());
        let passes = plan(&s).unwrap();
        // profile, the first propensity Newton step with the outcome models' Gram sums, the
        // next steps (repeated), augmented scores.
        let names: Vec<&str> = passes.iter().map(|p| p.name.as_str()).collect();
        assert_eq!(
            names,
            ["profile", "logistic-step-gram", "logistic-step", "scores"]
        );
        let mut with_unit = spec(Method::DoublyRobust);
        with_unit.unit = Some("id".into());
        assert!(with_unit.cross_fits());
        assert!(prepare::no_unit_note(&s).unwrap().contains("--unit"));
        assert!(prepare::no_unit_note(&with_unit).is_none());
    }

    #[test]
    fn the_auto_rule() {
        assert_eq!(auto(true, true), Method::Stratify);
        assert_eq!(auto(true, false), Method::DoublyRobust);
        assert_eq!(auto(false, true), Method::PartialOut);
        assert_eq!(auto(false, false), Method::PartialOut);
        assert_eq!(
            available(),
            [
                Method::Stratify,
                Method::Regress,
                Method::Weight,
                Method::DoublyRobust,
                Method::PartialOut,
                Method::Iv,
                Method::FrontDoor,
                Method::Match,
                Method::Coarsen
            ]
        );
    }
}
