//! Pass results read through their builders' typed layouts into the finisher's types: group
//! keys, the moments of a Gram pass, symmetric blocks, logistic sums. No column name of a pass
//! appears outside its builder and layout.

use crate::MethodError;
use nalgebra::{DMatrix, DVector};
use upshot_fit::{LogitSums, Moments};
use upshot_sql::{group_keys, Aggregates, DesignTerm, GramLayout, KeyValue, LogisticLayout};

/// The values of the first `n` group keys of a result row.
pub(crate) fn keys(a: &Aggregates, row: usize, n: usize) -> Result<Vec<KeyValue>, MethodError> {
    Ok(group_keys(a, row, n)?)
}

/// The moments of a Gram pass's row over `terms` (named `names`).
pub(crate) fn moments(
    layout: &GramLayout,
    a: &Aggregates,
    row: usize,
    names: &[String],
    terms: &[DesignTerm],
) -> Result<Moments, MethodError> {
    let (centre, scale): (Vec<f64>, Vec<f64>) = terms.iter().map(|t| t.centre_scale()).unzip();
    Moments::from_upper(
        names.to_vec(),
        layout.n(a, row)?,
        centre,
        scale,
        layout.sums(a, row)?,
        &layout.products(a, row)?,
    )
    .map_err(|e| MethodError::Engine(e.to_string()))
}

/// The symmetric `p × p` matrix of a row-major upper triangle.
pub(crate) fn symmetric(upper: &[f64], p: usize) -> DMatrix<f64> {
    let mut m = DMatrix::zeros(p, p);
    let mut at = 0;
    for i in 0..p {
        for j in i..p {
            m[(i, j)] = upper[at];
            m[(j, i)] = upper[at];
            at += 1;
        }
    }
    m
}

/// The logistic sums of fit `fit` (the single fit, or the one leaving fold `m` out) in a row.
pub(crate) fn logit_sums(
    layout: &LogisticLayout,
    a: &Aggregates,
    row: usize,
    fit: Option<usize>,
) -> Result<LogitSums, MethodError> {
    let r = layout.fit(a, row, fit)?;
    Ok(LogitSums {
        n: r.n,
        information: if r.information.is_empty() {
            DMatrix::zeros(layout.width, layout.width)
        } else {
            symmetric(&r.information, layout.width)
        },
        score: DVector::from_vec(r.score),
        loglik: r.loglik,
        min_p: r.min_p,
        max_p: r.max_p,
    })
}

/// A segment's key values and the result rows that belong to it.
pub(crate) type Grouped = (Vec<KeyValue>, Vec<usize>);

/// Groups the rows of a result by their first `n` keys, in order of appearance.
pub(crate) fn by_segment(a: &Aggregates, n: usize) -> Result<Vec<Grouped>, MethodError> {
    let mut out: Vec<(Vec<KeyValue>, Vec<usize>)> = Vec::new();
    for row in 0..a.rows.len() {
        let k = keys(a, row, n)?;
        match out.iter_mut().find(|(v, _)| *v == k) {
            Some((_, rows)) => rows.push(row),
            None => out.push((k, vec![row])),
        }
    }
    Ok(out)
}

/// The result row whose first keys are `key` (a segment, or a segment and an arm).
pub(crate) fn row_of(a: &Aggregates, key: &[KeyValue]) -> Result<usize, MethodError> {
    (0..a.rows.len())
        .find(|&row| keys(a, row, key.len()).ok().as_deref() == Some(key))
        .ok_or_else(|| MethodError::Engine(format!("the {} pass lost a group", a.pass)))
}
