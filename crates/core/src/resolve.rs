//! Questions resolved to estimator specs, and their plans.

use crate::identify::{assess, assumptions, identification, questions, Chosen};
use crate::source::source_of;
use crate::CoreError;
use serde::Serialize;
use upshot_graph::Kind;
use upshot_methods::{auto, Basis, Matching, NullPolicy, PlannedPass, Spec};
use upshot_sql::{parse_filter, Flavor};
use upshot_study::{Estimand, Method, Question, Route, Study};

/// How estimates are made, beyond the study: the CLI's flags, a SQL call's named parameters.
#[derive(Clone, Debug, PartialEq)]
pub struct Settings {
    /// Cross-fitting folds (1 = none; at most 20). Cross-fitting also needs a unit key.
    pub folds: u32,
    /// Propensities are clipped to `[clip, 1 - clip]` (0 = none; below 0.5).
    pub clip: f64,
    /// Rows with NULL in a used column: exclude and count them, or refuse.
    pub on_null: NullPolicy,
    /// Basis expansion of numeric covariates.
    pub basis: Basis,
    /// Fewest rows an estimate row needs in each treatment arm (in all, for a continuous
    /// treatment) to be shown; smaller ones are suppressed (0 = show all).
    pub min_cell: u32,
    /// `coarsen`: bins per numeric covariate, overriding the automatic rule.
    pub bins: Vec<(String, u32)>,
    /// `match`: neighbours per row and the caliper.
    pub matching: Matching,
    /// Cut numeric segment columns into this many bins at quantiles computed in the database.
    pub segment_bins: Option<u32>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            bins: vec![],
            matching: Matching::default(),
            segment_bins: None,
            min_cell: crate::request::DEFAULT_MIN_CELL,
            folds: 5,
            clip: 0.01,
            on_null: NullPolicy::Exclude,
            basis: Basis::default(),
        }
    }
}

/// One question, resolved: the route and set, the method, the full spec, the assumptions.
#[derive(Clone)]
pub struct Resolved {
    /// Question name.
    pub question: String,
    /// The estimator's spec (its flavor is replaced by the engine's when it runs).
    pub spec: Spec,
    /// The route and set used, and why.
    pub chosen: Chosen,
    /// What the estimate rests on.
    pub assumptions: Vec<String>,
    /// How the rows are named in output.
    pub source_label: String,
    /// The database locator.
    pub database: String,
    /// Small-cell suppression threshold (see [`Settings::min_cell`]).
    pub min_cell: u32,
}

/// The method of a question: its own, or the `auto` rule's choice — `iv` on the instrument
/// route, else from the treatment's and the adjustment set's declared kinds.
fn method_of(q: &Question, study: &Study, route: Route, adjust: &[String]) -> Method {
    let kind = |n: &str| {
        study
            .diagram
            .index_of(n)
            .map(|i| study.diagram.node(i).kind)
            .unwrap_or(Kind::Unspecified)
    };
    match q.method {
        Method::Auto if route == Route::Instrument => Method::Iv,
        Method::Auto if route == Route::FrontDoor => Method::FrontDoor,
        Method::Auto => {
            let binary = matches!(kind(&q.treatment[0]), Kind::Binary | Kind::Unspecified);
            let discrete = adjust
                .iter()
                .all(|c| matches!(kind(c), Kind::Binary | Kind::Categorical | Kind::Ordinal));
            auto(binary, discrete)
        }
        m => m,
    }
}

fn resolve_one(
    study: &Study,
    q: &Question,
    settings: &Settings,
    flavor: Flavor,
) -> Result<Resolved, CoreError> {
    if q.treatment.len() != 1 || q.outcome.len() != 1 {
        return Err(CoreError::Input(format!(
            "question `{}`: run estimates one treatment and one outcome at a time (found {} and {}); split it into several questions",
            q.name,
            q.treatment.len(),
            q.outcome.len()
        )));
    }
    let id = identification(q, study);
    let (identified, chosen, problems) = assess(q, &id);
    let Some(chosen) = chosen.filter(|_| identified) else {
        return Err(CoreError::NotIdentified(format!(
            "question `{}`: the effect of {} on {} is not identified from the diagram{}; see `upshot check` for the paths and alternatives",
            q.name,
            q.treatment[0],
            q.outcome[0],
            if problems.is_empty() {
                String::new()
            } else {
                format!(": {}", problems.join("; "))
            }
        )));
    };
    // The adjustment set and the instruments the route gives: on the instrument route, the
    // instruments' conditioning set is what the estimator adjusts for.
    let (adjust, instruments, mediators) = match chosen.route {
        Route::Adjustment => (chosen.set.clone(), vec![], vec![]),
        Route::Instrument => (chosen.given.clone(), chosen.set.clone(), vec![]),
        Route::FrontDoor => (vec![], vec![], chosen.set.clone()),
    };
    let method = method_of(q, study, chosen.route, &adjust);
    if !upshot_methods::available().contains(&method) {
        return Err(CoreError::Input(format!(
            "question `{}`: method `{}` is not available in this version of upshot; adjustment methods are: {}",
            q.name,
            method.as_str(),
            upshot_methods::available()
                .iter()
                .map(|m| m.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    let rows = source_of(study, flavor.dialect)?;
    let filter = match &study.source.filter {
        Some(f) => Some(
            parse_filter(f, flavor.dialect)
                .map_err(|e| CoreError::Input(format!("filter: {e}")))?,
        ),
        None => None,
    };
    // Declared categorical and ordinal columns are one-hot encoded; a front-door mediator
    // declared binary is discrete too (the cell formula).
    let categorical = study
        .diagram
        .nodes()
        .iter()
        .filter(|n| {
            matches!(n.kind, Kind::Categorical | Kind::Ordinal)
                || (n.kind == Kind::Binary && mediators.contains(&n.name))
        })
        .map(|n| n.name.clone())
        .collect();
    let spec = Spec {
        flavor,
        question: q.name.clone(),
        source: rows.source,
        filter,
        treatment: q.treatment[0].clone(),
        outcome: q.outcome[0].clone(),
        adjust,
        instruments,
        mediators,
        bins: settings.bins.clone(),
        matching: settings.matching,
        segments: q.segments.clone(),
        segment_bins: settings.segment_bins,
        estimand: q.estimand,
        method,
        folds: settings.folds,
        unit: q.unit.clone().or_else(|| study.source.unit.clone()),
        on_null: settings.on_null,
        clip: settings.clip,
        categorical,
        basis: settings.basis,
        columns: None,
    };
    spec.check()
        .map_err(|e| CoreError::Input(format!("question `{}`: {e}", q.name)))?;
    Ok(Resolved {
        question: q.name.clone(),
        assumptions: assumptions(&Some(chosen.clone()), method),
        spec,
        chosen,
        source_label: rows.label,
        database: rows.database,
        min_cell: settings.min_cell,
    })
}

/// Resolves the study's questions (all, or the one `only` names) for estimation with
/// `flavor` (whose dialect also parses the source query and the filter). Fails on the first
/// question that cannot be estimated, naming it.
pub fn resolve(
    study: &Study,
    only: Option<&str>,
    settings: &Settings,
    flavor: Flavor,
) -> Result<Vec<Resolved>, CoreError> {
    questions(study, only)?
        .into_iter()
        .map(|q| resolve_one(study, q, settings, flavor.clone()))
        .collect()
}

/// The passes of one resolved question.
#[derive(Clone, Debug, Serialize)]
pub struct QuestionPlan {
    /// Question name.
    pub question: String,
    /// Treatment column.
    pub treatment: String,
    /// Outcome column.
    pub outcome: String,
    /// Method.
    pub method: Method,
    /// Estimand.
    pub estimand: Estimand,
    /// Adjustment set (for `iv`: the instruments' conditioning set).
    pub adjustment_set: Vec<String>,
    /// Instruments (`iv` only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub instruments: Vec<String>,
    /// Mediators (`front-door` only).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub mediators: Vec<String>,
    /// The SQL dialect.
    pub dialect: &'static str,
    /// Hash of the plan's SQL: equal hashes run the same passes.
    pub plan_hash: String,
    /// The passes, in order.
    pub passes: Vec<PlannedPass>,
}

/// FNV-1a, 64 bits, of the plan's SQL: stable across runs and machines.
pub(crate) fn plan_hash(spec: &Spec) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    if let Ok(p) = upshot_methods::plan(spec) {
        for pass in p {
            for b in pass.sql.bytes() {
                h ^= u64::from(b);
                h = h.wrapping_mul(0x0100_0000_01b3);
            }
        }
    }
    format!("{h:016x}")
}

/// The passes a resolved question runs, rendered for its spec's flavor, with placeholders
/// where a pass inlines numbers that earlier passes compute.
pub fn plan(r: &Resolved) -> Result<QuestionPlan, CoreError> {
    let passes = upshot_methods::plan(&r.spec)
        .map_err(|e| CoreError::Input(format!("question `{}`: {e}", r.question)))?;
    Ok(QuestionPlan {
        question: r.question.clone(),
        treatment: r.spec.treatment.clone(),
        outcome: r.spec.outcome.clone(),
        method: r.spec.method,
        estimand: r.spec.estimand,
        adjustment_set: r.spec.adjust.clone(),
        instruments: r.spec.instruments.clone(),
        mediators: r.spec.mediators.clone(),
        dialect: r.spec.flavor.dialect.name(),
        plan_hash: plan_hash(&r.spec),
        passes,
    })
}
