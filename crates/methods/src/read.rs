//! Typed reading of pass results: group keys, moments of Gram passes, symmetric blocks and
//! vectors of sums, logistic sums. Column names of a pass are read here and in the pass's own
//! builder, nowhere else.

use crate::MethodError;
use nalgebra::{DMatrix, DVector};
use upshot_fit::{LogitSums, Moments};
use upshot_sql::{Aggregates, Cell, DesignTerm, KeyValue};

pub(crate) fn key_value(c: &Cell) -> KeyValue {
    match c {
        Cell::Number(x) => KeyValue::Number(*x),
        Cell::Text(t) => KeyValue::Text(t.clone()),
        Cell::Null => KeyValue::Text("NULL".into()),
    }
}

/// The values of keys `k0..k{n-1}` of a result row.
pub(crate) fn keys(a: &Aggregates, row: usize, n: usize) -> Result<Vec<KeyValue>, MethodError> {
    (0..n)
        .map(|i| Ok(key_value(a.cell(row, &format!("k{i}"))?)))
        .collect()
}

/// The moments of a Gram pass's row over `terms` (named `names`).
pub(crate) fn moments(
    a: &Aggregates,
    row: usize,
    names: &[String],
    terms: &[DesignTerm],
) -> Result<Moments, MethodError> {
    let k = terms.len();
    let n = a.number(row, "n")?;
    let sum: Vec<f64> = (0..k)
        .map(|i| a.number_or(row, &format!("s{i}"), 0.0))
        .collect::<Result<_, _>>()?;
    let mut upper = Vec::with_capacity(k * (k + 1) / 2);
    for i in 0..k {
        for j in i..k {
            upper.push(a.number_or(row, &format!("g{i}_{j}"), 0.0)?);
        }
    }
    let (centre, scale): (Vec<f64>, Vec<f64>) = terms.iter().map(|t| t.centre_scale()).unzip();
    Moments::from_upper(names.to_vec(), n, centre, scale, sum, &upper)
        .map_err(|e| MethodError::Engine(e.to_string()))
}

/// The symmetric matrix `{prefix}{i}_{j}` (i ≤ j) of size `p` from a result row.
pub(crate) fn upper_matrix(
    a: &Aggregates,
    row: usize,
    prefix: &str,
    p: usize,
) -> Result<DMatrix<f64>, MethodError> {
    let mut m = DMatrix::zeros(p, p);
    for i in 0..p {
        for j in i..p {
            let v = a.number_or(row, &format!("{prefix}{i}_{j}"), 0.0)?;
            m[(i, j)] = v;
            m[(j, i)] = v;
        }
    }
    Ok(m)
}

pub(crate) fn vector(
    a: &Aggregates,
    row: usize,
    prefix: &str,
    p: usize,
) -> Result<DVector<f64>, MethodError> {
    Ok(DVector::from_vec(
        (0..p)
            .map(|i| a.number_or(row, &format!("{prefix}{i}"), 0.0))
            .collect::<Result<_, _>>()?,
    ))
}

/// The logistic sums of model `prefix` (empty, or `m{k}_`) in a result row with `p` parameters.
pub(crate) fn logit_sums(
    a: &Aggregates,
    row: usize,
    prefix: &str,
    p: usize,
) -> Result<LogitSums, MethodError> {
    Ok(LogitSums {
        n: a.number(row, "n")?,
        score: vector(a, row, &format!("{prefix}u"), p)?,
        information: upper_matrix(a, row, &format!("{prefix}h"), p)?,
        loglik: a.number_or(row, &format!("{prefix}loglik"), 0.0)?,
        min_p: a.number_or(row, &format!("{prefix}min_p"), 0.5)?,
        max_p: a.number_or(row, &format!("{prefix}max_p"), 0.5)?,
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
