//! Shared reading of pass results and the combination of segment estimates.

use crate::prepare::Setup;
use crate::{Estimate, MethodError, Segment};
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

pub(crate) fn segment(s: &Setup, values: &[KeyValue]) -> Segment {
    Segment {
        values: s
            .spec
            .segments
            .iter()
            .zip(values)
            .map(|(c, v)| (c.clone(), v.to_string()))
            .collect(),
    }
}

pub(crate) fn segment_label(s: &Setup, values: &[KeyValue]) -> String {
    let seg = segment(s, values);
    if seg.values.is_empty() {
        "all rows".into()
    } else {
        format!("segment {}", seg.label())
    }
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

/// One segment's estimate with the size of its target population (all, treated or control
/// rows) and its row counts.
pub(crate) struct Part {
    pub estimate: Estimate,
    pub target_size: f64,
}

/// The overall estimate from independent segments: the target-size weighted mean of segment
/// estimates, with variance `Σ w² V + Σ w (τ_s - τ)² / N` (the second term is the sampling
/// variation of the segment shares; it is what the per-row influence function gives).
pub(crate) fn overall(s: &Setup, parts: &[Part]) -> Estimate {
    let total: f64 = parts.iter().map(|p| p.target_size).sum();
    let tau: f64 = parts
        .iter()
        .map(|p| p.target_size / total * p.estimate.estimate)
        .sum();
    let var: f64 = parts
        .iter()
        .map(|p| {
            let w = p.target_size / total;
            w * w * p.estimate.std_error.powi(2) + w * (p.estimate.estimate - tau).powi(2) / total
        })
        .sum();
    let mut e = Estimate::new(s.spec, &Segment { values: vec![] }, tau, var.sqrt());
    e.n_treated = sum_opt(parts.iter().map(|p| p.estimate.n_treated));
    e.n_control = sum_opt(parts.iter().map(|p| p.estimate.n_control));
    e.n_used = parts.iter().map(|p| p.estimate.n_used).sum();
    e
}

fn sum_opt(it: impl Iterator<Item = Option<f64>>) -> Option<f64> {
    let mut total = 0.0;
    for x in it {
        total += x?;
    }
    Some(total)
}

/// The estimates of a run: with segments, the overall row first, then the segments.
pub(crate) fn finish(s: &Setup, parts: Vec<Part>) -> Vec<Estimate> {
    if s.spec.segments.is_empty() {
        return parts.into_iter().map(|p| p.estimate).collect();
    }
    let mut out = vec![overall(s, &parts)];
    out.extend(parts.into_iter().map(|p| p.estimate));
    out
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

/// The size of the target population among `n` rows of which `n1` are treated.
pub(crate) fn target_size(target: upshot_sql::Target, n: f64, n1: f64) -> f64 {
    match target {
        upshot_sql::Target::Ate => n,
        upshot_sql::Target::Att => n1,
        upshot_sql::Target::Atc => n - n1,
    }
}
