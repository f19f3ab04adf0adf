//! `plan`: the passes a method would run, in order, without a database.

use crate::prepare::{levels_pass, placeholder, profile_pass};
use crate::{estimator, segment_bins, MethodError, Spec};
use serde::Serialize;

/// One pass of a plan.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PlannedPass {
    /// Pass name.
    pub name: String,
    /// What it computes.
    pub purpose: String,
    /// Which numbers in it come from earlier passes (shown as placeholders).
    pub inlines: Option<String>,
    /// How often it runs, when more than once.
    pub repeats: Option<String>,
    /// The SQL, rendered for the spec's dialect.
    pub sql: String,
}

/// The passes `spec` runs. Numbers that earlier passes compute appear as placeholders:
/// centres 0, scales 1, coefficients 0, category levels `'<column level i>'`, segment values
/// `'<each segment>'`.
pub fn plan(spec: &Spec) -> Result<Vec<PlannedPass>, MethodError> {
    let est = estimator(spec.method)?;
    spec.check()?;
    let cut = segment_bins::placeholder(spec);
    let binned = cut.as_ref().map_or(spec, |c| &c.spec);
    let mut s = placeholder(binned)?;
    if let Some(c) = &cut {
        c.annotate(&mut s);
    }
    let mut out = Vec::new();
    let planned = |p: upshot_sql::Pass, inlines: Option<&str>, repeats: Option<&str>| PlannedPass {
        sql: p.sql(),
        name: p.name,
        purpose: p.purpose,
        inlines: inlines.map(str::to_string),
        repeats: repeats.map(str::to_string),
    };
    for p in segment_bins::planned(spec)? {
        out.push(planned(p, None, None));
    }
    let bins = cut
        .as_ref()
        .map(|_| "the cut points from the quantiles passes (shown as 1, 2, ...)");
    if !est.profiles_in_first_pass() {
        out.push(planned(profile_pass(binned)?.pass, bins, None));
    }
    if let Some(p) = levels_pass(binned, s.filter.as_ref())? {
        out.push(planned(p.pass, None, None));
    }
    let centres = "centres and scales from the profile pass (shown as 0 and 1), category levels from the levels pass";
    let method = est.passes(&s)?;
    for p in method {
        let (inlines, repeats) = match p.name.as_str() {
            "cells" => (None, None),
            "gram" => (Some(centres.to_string()), None),
            "logistic-step" => (
                Some(format!("{centres}; the current Newton coefficients (shown as 0)")),
                Some("once per Newton iteration until the coefficients settle (typically 4 to 7 times; at most 50); over more than 400,000 rows on DuckDB 2 to 4 times, after Newton passes named `warm-start` over the first 100,000 rows".to_string()),
            ),
            "logistic-scores" => (
                Some(format!("{centres}; the current coefficients of each fold-leaving-out fit (shown as 0)")),
                Some("once per step of the fold-leaving-out fits until they settle (typically 2 to 10 times, ended on the error predicted from the last two steps; at most 30, then Newton passes with the information matrix take over)".to_string()),
            ),
            "residuals" => (
                Some(format!("{centres}; the outcome models' coefficients from the Gram pass (shown as 0)")),
                None,
            ),
            "weights" => (
                Some(format!("{centres}; the fitted propensity coefficients (shown as 0)")),
                None,
            ),
            _ => (
                Some(format!("{centres}; the fitted models' coefficients (shown as 0)")),
                None,
            ),
        };
        let inlines = match (inlines, bins) {
            (Some(i), Some(b)) => Some(format!("{i}; {b}")),
            (i, b) => i.or(b.map(str::to_string)),
        };
        out.push(planned(p, inlines.as_deref(), repeats.as_deref()));
    }
    Ok(out)
}
