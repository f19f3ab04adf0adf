//! `stratify`: backdoor adjustment over discrete strata (Pearl 2009, eq. 3.19) from one cell
//! table. Strata lacking an arm are excluded and reported with their row share. Cell
//! variances are unbiased (divisor n − 1); a cell with one row of an arm borrows that arm's pooled
//! within-stratum variance.
//!
//! One pass: the cell table runs over every row the filter keeps, NULL keys as groups of their
//! own, and is also the profile (counts, NULLs, the treatment's values, distinct strata), so no
//! profile pass runs before it.

use crate::prepare::{cell_facts, check_schema, prepare_from, Setup};
use crate::{ask_unchecked, MethodError, Outcome, Runner, Spec};
use upshot_sql::{profiled_cells, Built, CellsLayout, Pass, ProfiledCellsLayout};

/// Most distinct values a numeric adjustment column may have to count as discrete.
pub const MAX_STRATUM_VALUES: f64 = 50.0;

/// Most cells (segments × strata × arms, NULL groups included) the cell table may have.
/// upshot's bound: past it the strata are not discrete (at 200,000 cells most hold a row or
/// two), and the table already costs tens of megabytes to read.
pub const MAX_CELLS: u64 = 200_000;

/// The cell keys: segments, strata, treatment.
fn keys(spec: &Spec) -> Vec<String> {
    let mut keys = spec.segments.clone();
    keys.extend(crate::prepare::modelled(spec));
    keys.push(spec.treatment.clone());
    keys
}

/// The cell table over every row the filter keeps: per segment, stratum and arm (NULLs as
/// groups of their own), rows, and the outcome's `n`, `Σ y`, `Σ y²` and range.
fn cells_pass(spec: &Spec) -> Result<Built<ProfiledCellsLayout>, MethodError> {
    Ok(profiled_cells(
        &spec.flavor,
        &spec.source,
        spec.filter.as_ref(),
        &keys(spec),
        &spec.outcome,
        MAX_CELLS,
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    Ok(vec![cells_pass(s.spec)?.pass])
}

/// The refusal of a numeric stratum with too many values to be discrete.
fn too_many_values(c: &str, distinct: f64, more: bool) -> MethodError {
    MethodError::Input(format!(
        "adjustment column `{c}` has {}{distinct} distinct values: stratify needs discrete strata (at most {MAX_STRATUM_VALUES}). Use --method regress, weight or doubly-robust, or bin `{c}` in a source query",
        if more { "at least " } else { "" }
    ))
}

/// The cell table, run once: its groups are the profile the checks read, and its complete
/// cells the estimate's.
pub(crate) fn prepare<'a>(spec: &'a Spec, r: &mut dyn Runner) -> Result<Setup<'a>, MethodError> {
    check_schema(spec)?;
    let cp = cells_pass(spec)?;
    let a = ask_unchecked(r, &cp)?;
    let cells = (0..a.rows.len())
        .map(|row| cp.layout.cell(&a, row))
        .collect::<Result<Vec<_>, _>>()?;
    let keys = keys(spec);
    let facts = cell_facts(spec, &keys, &spec.outcome, &cells);
    let truncated = a.rows.len() as u64 > MAX_CELLS;
    for c in &crate::prepare::modelled(spec) {
        if let Some(p) = facts.columns.iter().find(|p| &p.name == c) {
            // Distinct values are counted for numeric strata only (`counts_distinct`).
            if !spec.categorical.contains(c) && p.distinct > MAX_STRATUM_VALUES {
                return Err(too_many_values(c, p.distinct, truncated));
            }
        }
    }
    if truncated {
        return Err(MethodError::Input(format!(
            "the cell table of ({}) has more than {MAX_CELLS} cells: stratify needs discrete strata with several rows each. Use --method regress, weight or doubly-robust, or coarsen the adjustment columns in a source query",
            keys.join(", ")
        )));
    }
    let mut setup = prepare_from(spec, facts, r)?;
    setup.cells = Some(cp.layout.complete(&a)?);
    Ok(setup)
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let layout = CellsLayout {
        keys: keys(spec).len(),
    };
    let ran;
    let a = match &s.cells {
        Some(a) => a,
        // A setup from elsewhere (not this module's `prepare`): run the table here.
        None => {
            let cp = cells_pass(spec)?;
            ran = cp.layout.complete(&ask_unchecked(r, &cp)?)?;
            &ran
        }
    };
    for row in 0..a.rows.len() {
        let (_, sy, syy) = layout.sums(a, row)?;
        if !sy.is_finite() || !syy.is_finite() {
            // The outcome's range was checked, but its sums can still overflow: one more
            // pass counts what they met.
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
        &layout,
        a,
        crate::prepare::modelled(spec).len(),
        "strata",
    )
}

estimator!(Stratify, crate::Method::Stratify, first_pass_profiles);
