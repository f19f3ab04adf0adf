//! Cross-fitting: rows fall in folds by a portable hash of an integer unit key; models are
//! chosen per row by segment and fold; the sums of "all rows but fold k" are the total minus
//! fold k, so cross-fitting costs no extra scan.

use crate::prepare::{needs_folds, Setup};
use crate::read::{by_segment, logit_sums, moments};
use crate::MethodError;
use upshot_fit::{LogitSums, Moments};
use upshot_sql::{
    Aggregates, Built, Design, Fold, GramLayout, Key, KeyValue, LogisticGramLayout, LogisticLayout,
};

/// Folds actually used (1 when cross-fitting is off).
pub(crate) fn folds(s: &Setup) -> u32 {
    if needs_folds(s.spec) {
        s.spec.folds
    } else {
        1
    }
}

/// How the rows a nuisance model of held-out fold `j` is fitted on are named in messages:
/// `segment x, rows outside fold j` when cross-fitting, the segment's label otherwise.
pub(crate) fn fit_label(s: &Setup, seg: &[KeyValue], j: usize) -> String {
    let label = crate::combine::segment_label(s, seg);
    if folds(s) > 1 {
        format!("{label}, rows outside fold {j}")
    } else {
        label
    }
}

/// The refusal when every row of a group falls in fold `j`, so that the models leaving it out
/// have no rows: the unit key takes too few values.
pub(crate) fn one_fold(s: &Setup, j: usize) -> MethodError {
    MethodError::Input(format!(
        "every row falls in fold {j}: the unit key `{}` takes too few distinct values to spread rows over {} folds; name a key with one value per unit (--unit), or use --folds 1",
        s.spec.unit.as_deref().unwrap_or(""),
        s.spec.folds
    ))
}

/// The fold hash of a cross-fitting spec (`None` without cross-fitting, which includes a
/// spec without a unit key).
fn fold(s: &Setup) -> Option<Fold> {
    let unit = s.spec.unit.clone().filter(|_| needs_folds(s.spec))?;
    Some(Fold {
        unit,
        folds: s.spec.folds,
    })
}

/// The Gram design grouped by segment, fold (when cross-fitting) and, if `by_arm`, arm, over
/// the covariates and then `last` terms.
pub(crate) fn gram_design(s: &Setup, by_arm: bool, last: Vec<upshot_sql::DesignTerm>) -> Design {
    let spec = s.spec;
    let mut keys = s.segment_keys();
    if needs_folds(spec) {
        keys.push(Key::Fold);
    }
    if by_arm {
        keys.push(Key::Column(spec.treatment.clone()));
    }
    let mut terms = s.terms.clone();
    terms.extend(last);
    Design {
        keys,
        terms,
        extras: vec![],
        fold: fold(s),
    }
}

/// The Gram pass over [`gram_design`]: per segment (fold, arm) the centred sums of the
/// covariates and the `last` terms.
pub(crate) fn gram_pass(
    s: &Setup,
    by_arm: bool,
    last: Vec<upshot_sql::DesignTerm>,
) -> Result<Built<GramLayout>, MethodError> {
    let spec = s.spec;
    Ok(upshot_sql::gram(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &gram_design(s, by_arm, last),
    )?)
}

/// [`row_design`] without the fold: for passes of one model per segment (the propensity's
/// Newton steps, the weighting pass).
pub(crate) fn segment_row_design(s: &Setup) -> Design {
    Design {
        fold: None,
        ..row_design(s)
    }
}

/// The row design for passes that evaluate per-segment (and, when cross-fitting, per-fold)
/// models: segment keys, the fold, the treatment `t` and outcome `y`.
pub(crate) fn row_design(s: &Setup) -> Design {
    let spec = s.spec;
    Design {
        keys: s.segment_keys(),
        terms: s.terms.clone(),
        extras: vec![("t", spec.treatment.clone()), ("y", spec.outcome.clone())],
        fold: fold(s),
    }
}

/// The rows of a fold-grouped pass that belong to segment `seg`, with their fold.
pub(crate) fn rows_by_fold(
    layout: &LogisticLayout,
    a: &Aggregates,
    seg: &[KeyValue],
) -> Result<Vec<(usize, usize)>, MethodError> {
    let mut out = Vec::new();
    for row in 0..a.rows.len() {
        if layout.keys(a, row)?.as_slice() == seg {
            out.push((layout.fold(a, row)?, row));
        }
    }
    if out.is_empty() {
        return Err(MethodError::Engine(format!(
            "the {} pass lost a group",
            a.pass
        )));
    }
    Ok(out)
}

/// The logistic sums of a segment's rows of a fold-grouped pass: all of them, or (with
/// `leave_out`) those of the other folds; `fit` selects a cross-fitting fit's sums.
pub(crate) fn fold_sum(
    layout: &LogisticLayout,
    a: &Aggregates,
    rows: &[(usize, usize)],
    leave_out: Option<usize>,
    fit: Option<usize>,
) -> Result<LogitSums, MethodError> {
    let mut total: Option<LogitSums> = None;
    for (f, row) in rows {
        if Some(*f) == leave_out {
            continue;
        }
        let x = logit_sums(layout, a, *row, fit)?;
        total = Some(match total {
            None => x,
            Some(t) => add_logit_sums(t, &x),
        });
    }
    total.ok_or_else(|| {
        MethodError::Input(format!(
            "every row of a group falls in fold {}: the unit key takes too few distinct values to spread rows over the folds; name a key with one value per unit (--unit), or use --folds 1",
            leave_out.unwrap_or(0)
        ))
    })
}

/// The sums of two disjoint sets of rows.
fn add_logit_sums(a: LogitSums, b: &LogitSums) -> LogitSums {
    LogitSums {
        n: a.n + b.n,
        score: a.score + &b.score,
        information: a.information + &b.information,
        loglik: a.loglik + b.loglik,
        min_p: a.min_p.min(b.min_p),
        max_p: a.max_p.max(b.max_p),
    }
}

/// A segment's key values and, per held-out fold, the moments of each arm outside the fold.
pub(crate) type Complements = (Vec<KeyValue>, Vec<[Option<Moments>; 2]>);

/// Where the rows of a pass with Gram sums keep their fold and arm.
#[derive(Clone, Copy, Debug)]
pub(crate) enum GramRows<'a> {
    /// A pass over [`gram_design`]: after the segments, the fold (when cross-fitting) and, with
    /// `by_arm`, the arm are group keys.
    Keyed(&'a GramLayout, bool),
    /// A propensity pass the Gram sums rode in: fold `f`, arm `t`.
    Riding(&'a LogisticGramLayout),
}

impl GramRows<'_> {
    fn layout(&self) -> &GramLayout {
        match self {
            GramRows::Keyed(layout, _) => layout,
            GramRows::Riding(both) => &both.gram,
        }
    }

    /// The fold (0 without cross-fitting) and arm (0 without arms) of result row `row`.
    fn place(&self, s: &Setup, g: &Aggregates, row: usize) -> Result<(usize, usize), MethodError> {
        let nseg = s.spec.segments.len();
        let crossfit = needs_folds(s.spec);
        Ok(match self {
            GramRows::Keyed(layout, by_arm) => {
                let key = layout.keys(g, row)?;
                let j = match (crossfit, key.get(nseg)) {
                    (true, Some(KeyValue::Number(x))) => *x as usize,
                    _ => 0,
                };
                let arm = *by_arm && key.last() == Some(&KeyValue::Number(1.0));
                (j, usize::from(arm))
            }
            GramRows::Riding(both) => (
                both.logistic.fold(g, row)?,
                usize::from(both.treated_arm(g, row)?),
            ),
        })
    }
}

/// Per segment, per held-out fold: the moments of the rows outside that fold (all rows when
/// cross-fitting is off), for each arm where the rows have arms.
pub(crate) fn complement_moments(
    s: &Setup,
    rows_of: GramRows,
    g: &Aggregates,
    names: &[String],
    terms: &[upshot_sql::DesignTerm],
) -> Result<Vec<Complements>, MethodError> {
    let nseg = s.spec.segments.len();
    let k = folds(s) as usize;
    let crossfit = needs_folds(s.spec);
    let layout = rows_of.layout();
    let mut out = Vec::new();
    for (seg, rows) in by_segment(g, nseg)? {
        // per fold, per arm
        let mut fold_m: Vec<[Option<Moments>; 2]> = vec![[None, None]; k];
        let mut total: [Option<Moments>; 2] = [None, None];
        for row in rows {
            let (j, arm) = rows_of.place(s, g, row)?;
            if j >= k {
                return Err(MethodError::Engine(format!(
                    "the {} pass returned fold {j} of {k}",
                    g.pass
                )));
            }
            let m = moments(layout, g, row, names, terms)?;
            total[arm] = Some(match total[arm].take() {
                None => m.clone(),
                Some(t) => t.plus(&m).map_err(|e| MethodError::Engine(e.to_string()))?,
            });
            fold_m[j][arm] = Some(m);
        }
        let mut comp = Vec::new();
        for f in fold_m.iter().take(k) {
            let mut c: [Option<Moments>; 2] = [None, None];
            for arm in 0..2 {
                c[arm] = match (&total[arm], &f[arm], crossfit) {
                    (Some(t), _, false) => Some(t.clone()),
                    (Some(t), Some(x), true) => {
                        let m = t.minus(x).map_err(|e| MethodError::Engine(e.to_string()))?;
                        (m.n > 0.0).then_some(m)
                    }
                    (Some(t), None, true) => Some(t.clone()),
                    (None, _, _) => None,
                };
            }
            comp.push(c);
        }
        out.push((seg, comp));
    }
    Ok(out)
}
