//! `stratify`: backdoor adjustment over discrete strata (Pearl 2009, eq. 3.19) from one cell
//! table. Strata lacking an arm are excluded and reported with their row share. Cell
//! variances are unbiased (divisor n − 1); a cell with one row of an arm borrows that arm's pooled
//! within-stratum variance.

use crate::prepare::Setup;
use crate::{ask_unchecked, MethodError, Outcome, Runner};
use upshot_sql::{cells, Built, CellsLayout, Pass};

/// Most distinct values a numeric adjustment column may have to count as discrete.
pub const MAX_STRATUM_VALUES: f64 = 50.0;

/// The cell table: per segment, stratum and arm, `n`, `Σ y`, `Σ y²`.
fn cells_pass(s: &Setup) -> Result<Built<CellsLayout>, MethodError> {
    let spec = s.spec;
    let mut keys = spec.segments.clone();
    keys.extend(crate::prepare::modelled(spec));
    keys.push(spec.treatment.clone());
    Ok(cells(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &keys,
        &spec.outcome,
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    Ok(vec![cells_pass(s)?.pass])
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    for c in &crate::prepare::modelled(spec) {
        if let Some(p) = s.column(c) {
            // Distinct values are counted for numeric strata only (`profile_pass`).
            if !spec.categorical.contains(c) && p.distinct > MAX_STRATUM_VALUES {
                return Err(MethodError::Input(format!(
                    "adjustment column `{c}` has about {} distinct values: stratify needs discrete strata. Use --method regress, weight or doubly-robust, or bin `{c}` in a source query",
                    p.distinct
                )));
            }
        }
    }
    let cp = cells_pass(s)?;
    let a = ask_unchecked(r, &cp)?;
    for row in 0..a.rows.len() {
        let (_, sy, syy) = cp.layout.sums(&a, row)?;
        if !sy.is_finite() || !syy.is_finite() {
            // The profile skips the outcome's range for stratify (it fits no design); its
            // sums tell instead, and one more pass counts what they met.
            return Err(crate::prepare::refuse_extremes(
                spec,
                s.filter.as_ref(),
                std::slice::from_ref(&spec.outcome),
                r,
            ));
        }
    }
    crate::strata::estimate(
        s,
        &cp.layout,
        &a,
        crate::prepare::modelled(spec).len(),
        "strata",
    )
}

estimator!(Stratify, crate::Method::Stratify);
