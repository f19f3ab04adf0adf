//! Segment estimates combined into the `all` row, and segment labels.

use crate::prepare::Setup;
use crate::{Estimand, Estimate, Segment};
use upshot_sql::KeyValue;

pub(crate) fn segment(s: &Setup, values: &[KeyValue]) -> Segment {
    Segment {
        values: s
            .spec
            .segments
            .iter()
            .zip(values)
            .map(|(c, v)| match s.bins.iter().find(|b| b.alias == *c) {
                Some(b) => (b.column.clone(), b.label(v)),
                None => (c.clone(), v.to_string()),
            })
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

/// One segment's estimate with the size of its target population (all, treated or control
/// rows) and its row counts.
pub(crate) struct Part {
    pub estimate: Estimate,
    pub target_size: f64,
}

impl Part {
    /// A segment's estimate of a 0/1 treatment: `tau` with variance `var` from `n` rows of
    /// which `n1` are treated; the target population's size follows the estimand.
    pub(crate) fn binary(s: &Setup, seg: &[KeyValue], tau: f64, var: f64, n: f64, n1: f64) -> Part {
        let mut e = Estimate::new(s.spec, &segment(s, seg), tau, var.max(0.0).sqrt());
        e.n_treated = Some(n1);
        e.n_control = Some(n - n1);
        e.n_used = n;
        Part {
            estimate: e,
            target_size: target_size(s.spec.estimand, n, n1),
        }
    }
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

/// The size of the target population among `n` rows of which `n1` are treated.
pub(crate) fn target_size(target: Estimand, n: f64, n1: f64) -> f64 {
    match target {
        Estimand::Ate => n,
        Estimand::Att => n1,
        Estimand::Atc => n - n1,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prepare::placeholder;
    use crate::tests::spec;
    use crate::Method;

    /// The `all` row: target-size weighted mean, variance `Σ w² V + Σ w (τ_s − τ)² / N`,
    /// checked against the formula worked by hand.
    #[test]
    fn segments_combine_into_the_all_row() {
        let sp = spec(Method::Regress);
        let s = placeholder(&sp).unwrap();
        let part = |tau: f64, se: f64, n: f64| {
            let mut e = Estimate::new(&sp, &Segment { values: vec![] }, tau, se);
            e.n_used = n;
            e.n_treated = Some(n / 2.0);
            e.n_control = Some(n / 2.0);
            Part {
                estimate: e,
                target_size: n,
            }
        };
        let all = overall(&s, &[part(2.0, 0.5, 100.0), part(5.0, 1.0, 300.0)]);
        // w = 1/4, 3/4; τ = 0.5 + 3.75 = 4.25.
        assert!((all.estimate - 4.25).abs() < 1e-15);
        let var = 0.0625 * 0.25
            + 0.5625 * 1.0
            + (0.25 * 2.25f64.powi(2) + 0.75 * 0.75f64.powi(2)) / 400.0;
        assert!(
            (all.std_error - var.sqrt()).abs() < 1e-15,
            "{}",
            all.std_error
        );
        assert_eq!(all.n_used, 400.0);
        assert_eq!(all.n_treated, Some(200.0));
        assert!((all.ci_high - all.estimate - crate::Z_975 * all.std_error).abs() < 1e-14);
    }
}
