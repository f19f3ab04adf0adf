//! The propensity model shared by the weighting estimators: a logistic regression of the
//! treatment on the covariate terms, fitted per segment by Newton's method over aggregate
//! passes (the current coefficients inlined as literals), and — for cross-fitting — the fits
//! that each leave one fold out.

use crate::combine::segment_label;
use crate::crossfit::{fit_label, fold_sum, folds, row_design, rows_by_fold, segment_row_design};
use crate::models::{fold_models, per_segment};
use crate::prepare::{needs_folds, Setup};
use crate::read::{by_segment, logit_sums};
use crate::{ask, MethodError, Runner};
use upshot_fit::{
    fixed_curvature_settled, logit_many, logit_many_from, relative_step, FitError, Logit,
    LogitSums, NewtonOptions,
};
use upshot_sql::{
    logistic_fits, logistic_fits_with_gram, Aggregates, Built, DesignTerm, First, KeyValue,
    LogisticGramLayout, LogisticLayout, Models, Source, Variants,
};

pub(crate) fn param_names(s: &Setup) -> Vec<String> {
    let mut names = vec!["(intercept)".to_string()];
    names.extend(s.term_names.iter().cloned());
    names
}

pub(crate) fn logistic_pass(
    s: &Setup,
    models: &Models,
) -> Result<Built<LogisticLayout>, MethodError> {
    let spec = s.spec;
    Ok(logistic_fits(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &segment_row_design(s),
        models,
        Variants::Single,
    )?)
}

/// `; N treated and M untreated rows had propensities clipped to [c, 1 - c]`, or nothing.
pub(crate) fn clipping(s: &Setup, clipped1: f64, clipped0: f64) -> String {
    if clipped1 + clipped0 > 0.0 {
        format!(
            "; {clipped1} treated and {clipped0} untreated rows had propensities clipped to [{}, {}]",
            s.spec.clip,
            1.0 - s.spec.clip
        )
    } else {
        String::new()
    }
}

/// Maps a propensity fit error to a message naming the segment.
pub(crate) fn propensity_error(label: &str, e: FitError) -> MethodError {
    let advice = match &e {
        FitError::Separation { .. } => " — propensities reach 0 or 1, so some rows have no comparable rows in the other arm (positivity fails); restrict the rows or drop the named columns",
        _ => "",
    };
    MethodError::Input(format!(
        "{label}: the propensity model cannot be fitted: {e}{advice}"
    ))
}

/// Rows the warm start fits on: the first rows the engine reads (see [`warm_start`]).
const WARM_ROWS: u64 = 100_000;

/// From how many rows on a warm start pays: below, its sample is a large share of the rows.
const WARM_MIN_ROWS: f64 = 4.0 * WARM_ROWS as f64;

/// How closely a warm start fits its sample: well inside the sample's own noise
/// (`1/√100,000 ≈ 3e-3`), so that the fit over all rows starts where Newton converges
/// quadratically.
const WARM_TOLERANCE: f64 = 1e-4;

/// Most passes of a warm start's Newton iterations (over its sample); one that has not
/// settled by then starts its segment from zero instead.
const WARM_ITERATIONS: usize = 10;

/// Propensity coefficients per segment fitted on the first rows, to start the fits on all
/// rows from: Newton converges quadratically, so from the sample's fit (off by about one
/// standard error of the sample, `1/√100,000`) two or three passes over all rows reach the
/// maximum that five to eight reach from zero. The result does not depend on the start: the
/// same convergence test ends the fit on all rows.
pub(crate) struct Warm {
    segs: Vec<Vec<KeyValue>>,
    coefs: Vec<Option<Vec<f64>>>,
}

impl Warm {
    /// The start of segment `key`: its sample fit, or `None` where the sample had no rows of
    /// it or its fit did not settle.
    fn start(&self, key: &[KeyValue]) -> Option<&Vec<f64>> {
        self.segs
            .iter()
            .position(|k| k.as_slice() == key)
            .and_then(|i| self.coefs[i].as_ref())
    }
    /// Each segment's start, zero where the sample gives none.
    fn starts(&self, segs: &[Vec<KeyValue>], k: usize) -> Vec<Vec<f64>> {
        segs.iter()
            .map(|key| self.start(key).cloned().unwrap_or_else(|| vec![0.0; k]))
            .collect()
    }
}

/// The warm start, where it pays: on an engine where it does
/// ([`upshot_sql::Dialect::warm_starts`]), over more than [`WARM_MIN_ROWS`] rows. Its passes read the first [`WARM_ROWS`] rows that pass the filter.
pub(crate) fn warm_start(s: &Setup, r: &mut dyn Runner) -> Result<Option<Warm>, MethodError> {
    let spec = s.spec;
    if !spec.flavor.dialect.warm_starts() || s.diagnostics.rows_read <= WARM_MIN_ROWS {
        return Ok(None);
    }
    let sample = Source::First(Box::new(First {
        inner: spec.source.clone(),
        filter: s.filter.clone(),
        rows: WARM_ROWS,
    }));
    let pass = |models: &Models| -> Result<Built<LogisticLayout>, MethodError> {
        let mut p = logistic_fits(
            &spec.flavor,
            &sample,
            None,
            &segment_row_design(s),
            models,
            Variants::Single,
        )?;
        p.pass.name = "warm-start".into();
        p.pass.purpose = format!(
            "one Newton step of the propensity model over the first {WARM_ROWS} rows, to start the fit over all rows from"
        );
        Ok(p)
    };
    let k = s.terms.len() + 1;
    let first = pass(&Models::single(vec![0.0; k]))?;
    let layout = first.layout;
    // A warm start only saves passes: where its pass fails, the fit starts from zero.
    let Ok(a) = ask(r, &first) else {
        return Ok(None);
    };
    let segs: Vec<Vec<KeyValue>> = by_segment(&a, s.spec.segments.len())?
        .into_iter()
        .map(|x| x.0)
        .collect();
    if segs.is_empty() {
        return Ok(None);
    }
    let mut cached = Some(a);
    let Ok(fits) = logit_many(
        &param_names(s),
        segs.len(),
        |coefs| {
            let a = match cached.take() {
                Some(a) => a,
                None => ask(r, &pass(&per_segment(&segs, coefs))?.pass)?,
            };
            (0..segs.len())
                .map(|row| logit_sums(&layout, &a, row, None))
                .collect::<Result<Vec<LogitSums>, MethodError>>()
        },
        NewtonOptions {
            max_iterations: WARM_ITERATIONS,
            // The sample's own noise is about 1/√WARM_ROWS; closer is not worth a pass.
            tolerance: WARM_TOLERANCE,
            ..NewtonOptions::default()
        },
    ) else {
        return Ok(None);
    };
    Ok(Some(Warm {
        segs,
        coefs: fits.into_iter().map(|f| f.ok().map(|l| l.coef)).collect(),
    }))
}

/// How far a propensity fit is taken.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Finish {
    /// Until the error after the last step is within the tolerance, predicted from Newton's
    /// quadratic convergence (`NewtonOptions::confirm` off): for estimates that are smooth in
    /// the coefficients.
    Predicted,
    /// Until a step below the tolerance, and one more pass at its end: for estimates that
    /// compare propensities (matching on a grid of logits), which must not depend on the path
    /// the fit took — from zero, or from a warm start, on any engine.
    Confirmed,
}

/// Fits one propensity model per segment; returns the segments, the treated counts and fits.
pub(crate) fn fit_propensity(
    s: &Setup,
    r: &mut dyn Runner,
    finish: Finish,
) -> Result<(Vec<Vec<KeyValue>>, Vec<Logit>), MethodError> {
    let nseg = s.spec.segments.len();
    let k = s.terms.len() + 1;
    let warm = warm_start(s, r)?;
    let zero = Models::single(vec![0.0; k]);
    let mut first = match &warm {
        Some(w) => ask(
            r,
            &logistic_pass(s, &per_segment(&w.segs, &w.starts(&w.segs, k)))?.pass,
        )?,
        None => ask(r, &logistic_pass(s, &zero)?.pass)?,
    };
    let layout = logistic_pass(s, &zero)?.layout;
    let segs: Vec<Vec<KeyValue>> = by_segment(&first, nseg)?.into_iter().map(|x| x.0).collect();
    // A segment the sample lacked had no model in that pass (its sums are void): from zero.
    let starts = match &warm {
        Some(w) if segs.iter().all(|key| w.segs.contains(key)) => w.starts(&segs, k),
        Some(_) => {
            first = ask(r, &logistic_pass(s, &zero)?.pass)?;
            vec![vec![0.0; k]; segs.len()]
        }
        None => vec![vec![0.0; k]; segs.len()],
    };
    for (row, key) in segs.iter().enumerate() {
        let n = layout.fit(&first, row, None)?.n;
        let n1 = layout.treated(&first, row)?;
        check_arms(s, key, n1.round(), (n - n1).round())?;
    }
    let names = param_names(s);
    let mut cached = Some(first);
    let fits = logit_many_from(
        &names,
        starts,
        |coefs| {
            let a: Aggregates = match cached.take() {
                Some(a) => a,
                None => ask(r, &logistic_pass(s, &per_segment(&segs, coefs))?.pass)?,
            };
            (0..segs.len())
                .map(|row| logit_sums(&layout, &a, row, None))
                .collect::<Result<Vec<LogitSums>, MethodError>>()
        },
        NewtonOptions {
            confirm: finish == Finish::Confirmed,
            ..NewtonOptions::default()
        },
    )?;
    let mut out = Vec::new();
    for (key, f) in segs.iter().zip(fits) {
        out.push(f.map_err(|e| propensity_error(&segment_label(s, key), e))?);
    }
    Ok((segs, out))
}

pub(crate) fn check_arms(s: &Setup, key: &[KeyValue], n1: f64, n0: f64) -> Result<(), MethodError> {
    for (n, word) in [(n1, "treated"), (n0, "untreated (control)")] {
        if n == 0.0 {
            return Err(MethodError::Input(format!(
                "{} has no {word} rows; an effect there cannot be estimated — drop the segment column, or filter the segment out",
                segment_label(s, key)
            )));
        }
    }
    Ok(())
}

/// A logistic pass over the row design (segments, fold, `t`, `y`).
fn row_logistic(
    s: &Setup,
    models: &Models,
    variants: Variants,
) -> Result<Built<LogisticLayout>, MethodError> {
    let spec = s.spec;
    Ok(logistic_fits(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        models,
        variants,
    )?)
}

/// Newton step of every fold-leaving-out fit (or of the one fit without cross-fitting).
pub(crate) fn complement_pass(
    s: &Setup,
    models: &Models,
) -> Result<Built<LogisticLayout>, MethodError> {
    let variants = match needs_folds(s.spec) {
        true => Variants::Complement(s.spec.folds),
        false => Variants::Single,
    };
    row_logistic(s, models, variants)
}

/// Newton step of each segment's fit on all its rows, summed per fold.
pub(crate) fn by_fold_pass(
    s: &Setup,
    models: &Models,
) -> Result<Built<LogisticLayout>, MethodError> {
    row_logistic(s, models, Variants::ByFold)
}

/// The first Newton step of each segment's fit on all its rows (grouped by fold when
/// cross-fitting), grouped by arm as well and carrying the Gram sums of the covariates and the
/// `more` terms per arm: the outcome models' Gram pass in the propensity's first scan.
pub(crate) fn first_pass_with_gram(
    s: &Setup,
    models: &Models,
    more: &[DesignTerm],
) -> Result<Built<LogisticGramLayout>, MethodError> {
    let spec = s.spec;
    let variants = match needs_folds(spec) {
        true => Variants::ByFold,
        false => Variants::Single,
    };
    Ok(logistic_fits_with_gram(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        models,
        variants,
        more,
    )?)
}

/// The propensity's first pass over all rows, which also carried the outcome models' Gram
/// sums ([`first_pass_with_gram`]).
pub(crate) struct Started {
    /// The segments, in the pass's order.
    pub segs: Vec<Vec<KeyValue>>,
    /// Its result rows: one per segment, fold and arm.
    pub sums: Aggregates,
    pub layout: LogisticGramLayout,
    /// Each segment's starting coefficients: its warm start's, or zero.
    starts: Vec<Vec<f64>>,
    /// Whether the pass evaluated every segment's fit at `starts`, so that it is the fits'
    /// first Newton pass; not where a segment had no model in it (the warm start's sample
    /// lacked it), and the fits then begin with a pass of their own.
    evaluated: bool,
}

/// Runs [`first_pass_with_gram`] from the warm start where there is one, from zero otherwise.
pub(crate) fn start_with_gram(
    s: &Setup,
    r: &mut dyn Runner,
    more: &[DesignTerm],
) -> Result<Started, MethodError> {
    let k = s.terms.len() + 1;
    let warm = warm_start(s, r)?;
    let models = match &warm {
        Some(w) => per_segment(&w.segs, &w.starts(&w.segs, k)),
        None => Models::single(vec![0.0; k]),
    };
    let pass = first_pass_with_gram(s, &models, more)?;
    let sums = ask(r, &pass)?;
    let segs: Vec<Vec<KeyValue>> = by_segment(&sums, s.spec.segments.len())?
        .into_iter()
        .map(|x| x.0)
        .collect();
    let (starts, evaluated) = match &warm {
        Some(w) => (
            w.starts(&segs, k),
            segs.iter().all(|key| w.segs.contains(key)),
        ),
        None => (vec![vec![0.0; k]; segs.len()], true),
    };
    Ok(Started {
        segs,
        sums,
        layout: pass.layout,
        starts,
        evaluated,
    })
}

/// Scores of the fold-leaving-out fits.
pub(crate) fn scores_pass_only(
    s: &Setup,
    models: &Models,
) -> Result<Built<LogisticLayout>, MethodError> {
    row_logistic(s, models, Variants::ComplementScores(s.spec.folds))
}

/// Propensity models per segment and held-out fold by Newton's method, all side by side in
/// the same passes (each pass carries every model's information matrix).
/// Without cross-fitting, `first` is the first pass of these fits (one per segment).
fn newton_complements(
    s: &Setup,
    r: &mut dyn Runner,
    segs: &[Vec<KeyValue>],
    first: Option<Started>,
) -> Result<Vec<Vec<Vec<f64>>>, MethodError> {
    let spec = s.spec;
    let k = folds(s) as usize;
    let param = param_names(s);
    let kp = s.terms.len() + 1;
    let (starts, mut cached) = match first {
        Some(f) if !needs_folds(spec) => {
            let cached = f.evaluated.then_some((f.sums, f.layout.logistic));
            (f.starts, cached)
        }
        _ => (vec![vec![0.0; kp]; segs.len() * k], None),
    };
    let fits = logit_many_from(
        &param,
        starts,
        |flat| {
            let (a, layout) = match cached.take() {
                Some(x) => x,
                None => {
                    let coef: Vec<Vec<Vec<f64>>> = flat.chunks(k).map(|c| c.to_vec()).collect();
                    let pass = complement_pass(s, &fold_models(s, segs, &coef))?;
                    (ask(r, &pass)?, pass.layout)
                }
            };
            let layout = &layout;
            let mut out: Vec<LogitSums> = Vec::new();
            for seg in segs {
                if !needs_folds(spec) {
                    // A segment's rows: one, or one per arm in the first pass.
                    out.push(fold_sum(
                        layout,
                        &a,
                        &rows_by_fold(layout, &a, seg)?,
                        None,
                        None,
                    )?);
                    continue;
                }
                // One row per fold of the segment; fit j adds up the rows of the other folds.
                let rows = rows_by_fold(layout, &a, seg)?;
                for j in 0..k {
                    let mut sums = fold_sum(layout, &a, &rows, Some(j), Some(j)).map_err(|e| {
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
            let label = fit_label(s, seg, j);
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
/// leaving out one fold of K is close to the full fit. It ends once every fit's step, or the
/// error left after it as predicted from the ratio of its last two steps, is within the
/// tolerance ([`fixed_curvature_settled`]): where the fits contract fast (10M rows) one score
/// pass fewer than waiting for a step within it. Returns `None` (and the caller uses full
/// Newton passes) when a fit does not settle within [`SHARED_CURVATURE_PASSES`] or its
/// coefficients run away, which is where separation would show.
fn shared_curvature_complements(
    s: &Setup,
    r: &mut dyn Runner,
    first: Started,
) -> Result<Option<Vec<Vec<Vec<f64>>>>, MethodError> {
    let kp = s.terms.len() + 1;
    let k = folds(s) as usize;
    let segs = &first.segs;
    // Each segment's model on all its rows, by Newton, with the sums grouped by fold; the
    // first pass (grouped by arm too) is the one the Gram sums rode in, unless a segment had
    // no model there.
    let names = param_names(s);
    let starts = first.starts;
    let mut cached = first
        .evaluated
        .then_some((first.sums, first.layout.logistic));
    let mut last: Option<(Aggregates, LogisticLayout)> = None;
    let full = logit_many_from(
        &names,
        starts,
        |coefs| {
            let (a, layout) = match cached.take() {
                Some(x) => x,
                None => {
                    let pass = by_fold_pass(s, &per_segment(segs, coefs))?;
                    (ask(r, &pass)?, pass.layout)
                }
            };
            let mut out = Vec::new();
            for seg in segs {
                let rows = rows_by_fold(&layout, &a, seg)?;
                out.push(fold_sum(&layout, &a, &rows, None, None)?);
            }
            last = Some((a, layout));
            Ok::<_, MethodError>(out)
        },
        NewtonOptions::default(),
    )?;
    let (last, last_layout) = last.expect("Newton runs at least one pass");
    let opts = NewtonOptions::default();
    let mut coef: Vec<Vec<Vec<f64>>> = Vec::new();
    let mut curvature = Vec::new();
    for (seg, fit) in segs.iter().zip(full) {
        let fit = fit.map_err(|e| propensity_error(&segment_label(s, seg), e))?;
        // The last pass evaluated every segment's model at its final coefficients: the sums of
        // the folds other than j are fit j's score and information there, so its first step
        // needs no pass.
        let rows = rows_by_fold(&last_layout, &last, seg)?;
        let mut cs = Vec::new();
        let mut start = Vec::new();
        for j in 0..k {
            let sums = fold_sum(&last_layout, &last, &rows, Some(j), None)?;
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
    // Each fit's last step size: the ratio of two successive ones predicts the error left.
    let mut previous: Vec<Vec<Option<f64>>> = vec![vec![None; k]; segs.len()];
    for _ in 0..SHARED_CURVATURE_PASSES {
        let pass = scores_pass_only(s, &fold_models(s, segs, &coef))?;
        let a = ask(r, &pass)?;
        for (i, seg) in segs.iter().enumerate() {
            let rows = rows_by_fold(&pass.layout, &a, seg)?;
            for j in 0..k {
                let mut score = nalgebra::DVector::<f64>::zeros(kp);
                for (f, row) in &rows {
                    if *f != j {
                        score +=
                            &nalgebra::DVector::from_vec(pass.layout.fit(&a, *row, Some(j))?.score);
                    }
                }
                let step = curvature[i][j].solve(&score);
                let c = &mut coef[i][j];
                let size = relative_step(step.as_slice(), c);
                let small = fixed_curvature_settled(previous[i][j], size, &opts);
                previous[i][j] = Some(size);
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

/// The propensity models per segment and held-out fold (one per segment without
/// cross-fitting): stepped from each segment's full fit with a fixed curvature where that
/// settles, by Newton passes otherwise.
/// `first` is the first pass of each segment's fit ([`start_with_gram`]).
pub(crate) fn cross_fitted_propensity(
    s: &Setup,
    r: &mut dyn Runner,
    first: Started,
) -> Result<Vec<Vec<Vec<f64>>>, MethodError> {
    let segs = first.segs.clone();
    if needs_folds(s.spec) {
        if let Some(c) = shared_curvature_complements(s, r, first)? {
            return Ok(c);
        }
        return newton_complements(s, r, &segs, None);
    }
    newton_complements(s, r, &segs, Some(first))
}
