//! `doubly-robust`: augmented inverse probability weighting (Robins, Rotnitzky & Zhao 1994)
//! with K-fold cross-fitting (Chernozhukov et al. 2018). The nuisances are a logistic
//! propensity and per-arm linear outcome models; the models used for the rows of fold k are
//! fitted on every other fold. For the outcome models that costs no extra scan: one Gram pass
//! grouped by fold gives each fold's sums, and "all but fold k" is the total minus fold k. The
//! K propensity fits run side by side in the same Newton passes. The standard error comes
//! from the influence function (the score's sample variance).

use crate::combine::{
    by_segment, finish, keys, logit_sums, moments, row_of, segment, segment_label, target_size,
    Part,
};
use crate::prepare::{needs_folds, Setup};
use crate::regress::fit_arm;
use crate::weight::{check_arms, param_names, propensity_error};
use crate::{ask, Estimate, MethodError, Outcome, Runner};
use upshot_fit::{logit_many, LogitSums, Moments, NewtonOptions};
use upshot_sql::{
    augmented_sums, design_gram, logistic_fits, Aggregates, Design, Fold, Key, KeyValue, Model,
    Models, Nuisances, Pass, Selector, Variants,
};

/// Folds actually used (1 when cross-fitting is off).
pub(crate) fn folds(s: &Setup) -> u32 {
    if needs_folds(s.spec) {
        s.spec.folds
    } else {
        1
    }
}

fn fold(s: &Setup) -> Option<Fold> {
    needs_folds(s.spec).then(|| Fold {
        unit: s.spec.unit.clone().expect("checked with the schema"),
        folds: s.spec.folds,
    })
}

/// The Gram design grouped by segment, fold (when cross-fitting) and, if `by_arm`, arm, over
/// the covariates and then `last` terms.
pub(crate) fn fold_gram_design(
    s: &Setup,
    by_arm: bool,
    last: Vec<upshot_sql::DesignTerm>,
) -> Design {
    let spec = s.spec;
    let mut keys: Vec<Key> = spec
        .segments
        .iter()
        .map(|c| Key::Column(c.clone()))
        .collect();
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

/// The row design for passes that evaluate fold-selected models: segment keys, the fold, the
/// treatment `t` and outcome `y`.
pub(crate) fn row_design(s: &Setup) -> Design {
    let spec = s.spec;
    Design {
        keys: spec
            .segments
            .iter()
            .map(|c| Key::Column(c.clone()))
            .collect(),
        terms: s.terms.clone(),
        extras: vec![("t", spec.treatment.clone()), ("y", spec.outcome.clone())],
        fold: fold(s),
    }
}

/// Models chosen by segment and (when cross-fitting) the row's fold; `coef[i][j]` belongs to
/// segment `i` and held-out fold `j`.
pub(crate) fn fold_models(s: &Setup, segs: &[Vec<KeyValue>], coef: &[Vec<Vec<f64>>]) -> Models {
    let nseg = s.spec.segments.len();
    let crossfit = needs_folds(s.spec);
    let mut models = Vec::new();
    for (seg, per_fold) in segs.iter().zip(coef) {
        for (j, c) in per_fold.iter().enumerate() {
            let mut key = seg.clone();
            if crossfit {
                key.push(KeyValue::Number(j as f64));
            }
            models.push(Model {
                key,
                coef: c.clone(),
            });
        }
    }
    if nseg == 0 && !crossfit {
        return Models::single(models.remove(0).coef);
    }
    Models {
        selector: Selector {
            keys: (0..nseg).collect(),
            fold: crossfit,
        },
        models,
    }
}

/// A logistic pass over the row design (segments, fold, `t`, `y`).
fn row_logistic(s: &Setup, models: &Models, variants: Variants) -> Result<Pass, MethodError> {
    let spec = s.spec;
    Ok(logistic_fits(
        spec.dialect,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        models,
        variants,
    )?)
}

/// Newton step of every fold-leaving-out fit (or of the one fit without cross-fitting).
fn logistic_pass(s: &Setup, models: &Models) -> Result<Pass, MethodError> {
    let variants = match needs_folds(s.spec) {
        true => Variants::Complement(s.spec.folds),
        false => Variants::Single,
    };
    row_logistic(s, models, variants)
}

/// Newton step of each segment's fit on all its rows, summed per fold.
fn by_fold_pass(s: &Setup, models: &Models) -> Result<Pass, MethodError> {
    row_logistic(s, models, Variants::ByFold)
}

/// Scores of the fold-leaving-out fits.
fn scores_pass_only(s: &Setup, models: &Models) -> Result<Pass, MethodError> {
    row_logistic(s, models, Variants::ComplementScores(s.spec.folds))
}

fn gram_pass(s: &Setup) -> Result<Pass, MethodError> {
    let spec = s.spec;
    Ok(design_gram(
        spec.dialect,
        &spec.source,
        s.filter.as_ref(),
        &fold_gram_design(s, true, vec![s.outcome_term.clone()]),
    )?)
}

fn scores_pass(s: &Setup, e: &Models, m1: &Models, m0: &Models) -> Result<Pass, MethodError> {
    let spec = s.spec;
    Ok(augmented_sums(
        spec.dialect,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        &Nuisances {
            propensity: e,
            treated: m1,
            control: m0,
            target: spec.target,
            clip: spec.clip,
        },
    )?)
}

pub(crate) fn placeholder(s: &Setup) -> (Vec<Vec<KeyValue>>, Vec<Vec<Vec<f64>>>) {
    let segs = crate::weight::placeholder_segments(s);
    let k = folds(s) as usize;
    let coef = vec![vec![vec![0.0; s.terms.len() + 1]; k]; segs.len()];
    (segs, coef)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let (segs, coef) = placeholder(s);
    let m = fold_models(s, &segs, &coef);
    if !needs_folds(s.spec) {
        return Ok(vec![
            gram_pass(s)?,
            logistic_pass(s, &m)?,
            scores_pass(s, &m, &m, &m)?,
        ]);
    }
    // Cross-fitting: each segment's propensity on all its rows (Newton), then the fits leaving
    // one fold out (scores only; full Newton passes only if those do not settle).
    let whole = crate::weight::per_segment(&segs, &vec![vec![0.0; s.terms.len() + 1]; segs.len()]);
    Ok(vec![
        gram_pass(s)?,
        by_fold_pass(s, &whole)?,
        scores_pass_only(s, &m)?,
        scores_pass(s, &m, &m, &m)?,
    ])
}

/// Propensity models per segment and held-out fold by Newton's method, all side by side in
/// the same passes (each pass carries every model's information matrix).
fn newton_complements(
    s: &Setup,
    r: &mut dyn Runner,
    segs: &[Vec<KeyValue>],
) -> Result<Vec<Vec<Vec<f64>>>, MethodError> {
    let spec = s.spec;
    let p = s.terms.len();
    let k = folds(s) as usize;
    let param = param_names(s);
    let kp = p + 1;
    let fits = logit_many(
        &param,
        segs.len() * k,
        |flat| {
            let coef: Vec<Vec<Vec<f64>>> = flat.chunks(k).map(|c| c.to_vec()).collect();
            let a = ask(r, &logistic_pass(s, &fold_models(s, segs, &coef))?)?;
            let mut out: Vec<LogitSums> = Vec::new();
            for seg in segs {
                if !needs_folds(spec) {
                    out.push(logit_sums(&a, row_of(&a, seg)?, "", kp)?);
                    continue;
                }
                // One row per fold of the segment; fit j adds up the rows of the other folds.
                let rows = rows_by_fold(&a, seg)?;
                for j in 0..k {
                    let mut sums =
                        fold_sum(&a, &rows, Some(j), &format!("m{j}_"), kp).map_err(|e| {
                            MethodError::Input(format!("{}: {e}", segment_label(s, seg)))
                        })?;
                    sums.n = f64::NAN;
                    out.push(sums);
                }
            }
            Ok::<_, MethodError>(out)
        },
        NewtonOptions::default(),
    )?;
    let mut ecoef = Vec::new();
    for (i, seg) in segs.iter().enumerate() {
        let mut per = Vec::new();
        for j in 0..k {
            let label = if k > 1 {
                format!("{}, rows outside fold {j}", segment_label(s, seg))
            } else {
                segment_label(s, seg)
            };
            let f = fits[i * k + j]
                .clone()
                .map_err(|e| propensity_error(&label, e))?;
            per.push(f.coef);
        }
        ecoef.push(per);
    }
    Ok(ecoef)
}

/// Most score passes of [`shared_curvature_complements`] before it gives way to Newton.
const SHARED_CURVATURE_PASSES: usize = 30;

/// The fold-leaving-out propensity fits, cheaply: each segment's model is fitted on all its
/// rows by Newton, with one small pass per iteration grouped by fold; at its optimum the sums of
/// the folds other than j give fit j's score and information, and fit j then steps from there
/// with that information matrix held fixed, using only the fits' scores, which one pass grouped
/// by fold returns for all of them. The fixed point is the same maximum-likelihood estimate
/// Newton reaches (the score is zero there), and the iteration contracts fast because a fit
/// leaving out one fold of K is close to the full fit. Returns `None` (and the caller uses full
/// Newton passes) when a fit does not settle within [`SHARED_CURVATURE_PASSES`] or its
/// coefficients run away, which is where separation would show.
fn shared_curvature_complements(
    s: &Setup,
    r: &mut dyn Runner,
    segs: &[Vec<KeyValue>],
) -> Result<Option<Vec<Vec<Vec<f64>>>>, MethodError> {
    let kp = s.terms.len() + 1;
    let k = folds(s) as usize;
    // Each segment's model on all its rows, by Newton, with the sums grouped by fold.
    let names = param_names(s);
    let mut last: Option<Aggregates> = None;
    let full = logit_many(
        &names,
        segs.len(),
        |coefs| {
            let a = ask(
                r,
                &by_fold_pass(s, &crate::weight::per_segment(segs, coefs))?,
            )?;
            let mut out = Vec::new();
            for seg in segs {
                let rows = rows_by_fold(&a, seg)?;
                out.push(fold_sum(&a, &rows, None, "", kp)?);
            }
            last = Some(a);
            Ok::<_, MethodError>(out)
        },
        NewtonOptions::default(),
    )?;
    let last = last.expect("Newton runs at least one pass");
    let opts = NewtonOptions::default();
    let mut coef: Vec<Vec<Vec<f64>>> = Vec::new();
    let mut curvature = Vec::new();
    for (seg, fit) in segs.iter().zip(full) {
        let fit = fit.map_err(|e| propensity_error(&segment_label(s, seg), e))?;
        // The last pass evaluated every segment's model at its final coefficients: the sums of
        // the folds other than j are fit j's score and information there, so its first step
        // needs no pass.
        let rows = rows_by_fold(&last, seg)?;
        let mut cs = Vec::new();
        let mut start = Vec::new();
        for j in 0..k {
            let sums = fold_sum(&last, &rows, Some(j), "", kp)?;
            let Some(c) = sums.information.cholesky() else {
                return Ok(None);
            };
            let step = c.solve(&sums.score);
            start.push(
                fit.coef
                    .iter()
                    .zip(step.iter())
                    .map(|(x, d)| x + d)
                    .collect::<Vec<f64>>(),
            );
            cs.push(c);
        }
        curvature.push(cs);
        coef.push(start);
    }
    let mut settled = vec![vec![false; k]; segs.len()];
    for _ in 0..SHARED_CURVATURE_PASSES {
        let a = ask(r, &scores_pass_only(s, &fold_models(s, segs, &coef))?)?;
        for (i, seg) in segs.iter().enumerate() {
            let rows = rows_by_fold(&a, seg)?;
            for j in 0..k {
                let mut score = nalgebra::DVector::<f64>::zeros(kp);
                for (f, row) in &rows {
                    if *f != j {
                        score += crate::combine::vector(&a, *row, &format!("m{j}_u"), kp)?;
                    }
                }
                let step = curvature[i][j].solve(&score);
                let c = &mut coef[i][j];
                let small = step
                    .iter()
                    .zip(c.iter())
                    .all(|(d, x)| d.abs() <= opts.tolerance * (1.0 + x.abs()));
                for (x, d) in c.iter_mut().zip(step.iter()) {
                    *x += d;
                }
                if !c.iter().all(|x| x.is_finite())
                    || c[1..].iter().any(|x| x.abs() > opts.max_coefficient)
                {
                    return Ok(None);
                }
                settled[i][j] = small;
            }
        }
        if settled.iter().flatten().all(|x| *x) {
            return Ok(Some(coef));
        }
    }
    Ok(None)
}

/// The logistic sums of a segment's rows of a fold-grouped pass: all of them, or (with
/// `leave_out`) those of the other folds; `prefix` selects a fit's columns.
fn fold_sum(
    a: &Aggregates,
    rows: &[(usize, usize)],
    leave_out: Option<usize>,
    prefix: &str,
    kp: usize,
) -> Result<LogitSums, MethodError> {
    let mut total: Option<LogitSums> = None;
    for (f, row) in rows {
        if Some(*f) == leave_out {
            continue;
        }
        let x = logit_sums(a, *row, prefix, kp)?;
        total = Some(match total {
            None => x,
            Some(t) => add_logit_sums(t, &x),
        });
    }
    total.ok_or_else(|| {
        MethodError::Input(format!(
            "every row of a segment falls in fold {}; use fewer folds (--folds) or more rows",
            leave_out.unwrap_or(0)
        ))
    })
}

/// The rows of a fold-grouped pass that belong to segment `seg`, with their fold.
fn rows_by_fold(a: &Aggregates, seg: &[KeyValue]) -> Result<Vec<(usize, usize)>, MethodError> {
    let mut out = Vec::new();
    for row in 0..a.rows.len() {
        if keys(a, row, seg.len())?.as_slice() == seg {
            out.push((a.number(row, "f")? as usize, row));
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

/// Per segment, per held-out fold: the moments of the rows outside that fold (all rows when
/// cross-fitting is off), for each group value of the last key when `by_arm`.
pub(crate) fn complement_moments(
    s: &Setup,
    g: &Aggregates,
    names: &[String],
    terms: &[upshot_sql::DesignTerm],
    by_arm: bool,
) -> Result<Vec<Complements>, MethodError> {
    let nseg = s.spec.segments.len();
    let k = folds(s) as usize;
    let crossfit = needs_folds(s.spec);
    let mut out = Vec::new();
    for (seg, rows) in by_segment(g, nseg)? {
        // per fold, per arm
        let mut fold_m: Vec<[Option<Moments>; 2]> = vec![[None, None]; k];
        let mut total: [Option<Moments>; 2] = [None, None];
        for row in rows {
            let key = keys(
                g,
                row,
                g.names.iter().filter(|n| n.starts_with('k')).count(),
            )?;
            let j = if crossfit {
                match key[nseg] {
                    KeyValue::Number(x) => x as usize,
                    _ => 0,
                }
            } else {
                0
            };
            let arm = if by_arm {
                usize::from(key[key.len() - 1] == KeyValue::Number(1.0))
            } else {
                0
            };
            let m = moments(g, row, names, terms)?;
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

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let p = s.terms.len();
    let k = folds(s) as usize;
    let mut names = s.term_names.clone();
    names.push(spec.outcome.clone());
    let mut terms = s.terms.clone();
    terms.push(s.outcome_term.clone());
    let g = ask(r, &gram_pass(s)?)?;
    let comp = complement_moments(s, &g, &names, &terms, true)?;
    let x: Vec<usize> = (0..p).collect();
    let segs: Vec<Vec<KeyValue>> = comp.iter().map(|c| c.0.clone()).collect();
    let mut coef1 = Vec::new();
    let mut coef0 = Vec::new();
    for (seg, per_fold) in &comp {
        let label = segment_label(s, seg);
        let (mut c1, mut c0) = (Vec::new(), Vec::new());
        for (j, arms) in per_fold.iter().enumerate() {
            let what = if k > 1 {
                format!("{label}, rows outside fold {j}")
            } else {
                label.clone()
            };
            let n1 = arms[1].as_ref().map_or(0.0, |m| m.n);
            let n0 = arms[0].as_ref().map_or(0.0, |m| m.n);
            check_arms(s, seg, n1, n0).map_err(|e| match k {
                1 => e,
                _ => MethodError::Input(format!("{what}: {e}")),
            })?;
            let m1 = arms[1].as_ref().expect("checked");
            let m0 = arms[0].as_ref().expect("checked");
            c1.push(fit_arm(s, m1, &format!("{what}, treated"))?.design_coefficients(m1, &x));
            c0.push(fit_arm(s, m0, &format!("{what}, untreated"))?.design_coefficients(m0, &x));
        }
        coef1.push(c1);
        coef0.push(c0);
    }
    // Propensity: nseg × k models. With cross-fitting, each segment's model is first fitted on
    // all its rows, and the fold-leaving-out fits step from it with that fit's curvature.
    let ecoef = match needs_folds(spec) {
        true => match shared_curvature_complements(s, r, &segs)? {
            Some(c) => c,
            None => newton_complements(s, r, &segs)?,
        },
        false => newton_complements(s, r, &segs)?,
    };
    let sc = ask(
        r,
        &scores_pass(
            s,
            &fold_models(s, &segs, &ecoef),
            &fold_models(s, &segs, &coef1),
            &fold_models(s, &segs, &coef0),
        )?,
    )?;
    let mut out = Outcome {
        estimates: vec![],
        diagnostics: Default::default(),
    };
    let mut parts = Vec::new();
    for seg in &segs {
        let row = row_of(&sc, seg)?;
        let g = |n: &str| sc.number_or(row, n, 0.0);
        let (n, n1) = (sc.number(row, "n")?, g("n1")?);
        let (sn, snn, sdn, sd) = (g("sn")?, g("snn")?, g("sdn")?, g("sd")?);
        let tau = sn / sd;
        let var = (snn - 2.0 * tau * sdn + tau * tau * sd) / (sd * sd);
        let (clipped1, clipped0) = (g("clipped1")?, g("clipped0")?);
        out.diagnostics.notes.push(format!(
            "{}: cross-fitted propensity from {:.4} to {:.4}{}",
            segment_label(s, seg),
            g("min_e")?,
            g("max_e")?,
            if clipped1 + clipped0 > 0.0 {
                format!(
                    "; {clipped1} treated and {clipped0} untreated rows had propensities clipped to [{}, {}]",
                    spec.clip,
                    1.0 - spec.clip
                )
            } else {
                String::new()
            }
        ));
        let mut e = Estimate::new(spec, &segment(s, seg), tau, var.max(0.0).sqrt());
        e.n_treated = Some(n1);
        e.n_control = Some(n - n1);
        e.n_used = n;
        let size = target_size(spec.target, n, n1);
        parts.push(Part {
            estimate: e,
            target_size: size,
        });
    }
    out.estimates = finish(s, parts);
    Ok(out)
}
