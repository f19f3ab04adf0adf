//! `doubly-robust`: augmented inverse probability weighting (Robins, Rotnitzky & Zhao 1994)
//! with K-fold cross-fitting (Chernozhukov et al. 2018). The nuisances are a logistic
//! propensity and per-arm linear outcome models; the models used for the rows of fold k are
//! fitted on every other fold. For the outcome models that costs no scan of their own: their
//! Gram sums, per fold and arm, ride in the propensity's first Newton pass (grouped by arm as
//! well), and "all but fold k" is the total minus fold k. The K propensity fits step from each
//! segment's fit on all its rows, side by side in the same passes. The standard error comes
//! from the influence function (the score's sample variance).

mod passes;

use crate::combine::{finish, segment_label, Part};
use crate::crossfit::{complement_moments, fit_label, folds, row_design, GramRows};
use crate::models::{fold_models, per_segment, placeholder};
use crate::outcome::fit_arm;
use crate::prepare::{needs_folds, Setup};
use crate::propensity::{
    by_fold_pass, check_arms, clipping, complement_pass, cross_fitted_propensity,
    first_pass_with_gram, scores_pass_only, start_with_gram,
};
use crate::read::row_of;
use crate::{ask, MethodError, Outcome, Runner};
use passes::{augmented_sums, AugmentedLayout, Nuisances};
use upshot_sql::{Built, KeyValue, Models, Pass};

fn scores_pass(
    s: &Setup,
    e: &Models,
    m1: &Models,
    m0: &Models,
) -> Result<Built<AugmentedLayout>, MethodError> {
    let spec = s.spec;
    Ok(augmented_sums(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        &Nuisances {
            propensity: e,
            treated: m1,
            control: m0,
            target: spec.estimand,
            clip: spec.clip,
        },
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let (segs, coef) = placeholder(s);
    let m = fold_models(s, &segs, &coef);
    // The propensity's first Newton pass, with the outcome models' Gram sums riding in it.
    let whole = per_segment(&segs, &vec![vec![0.0; s.terms.len() + 1]; segs.len()]);
    let first = first_pass_with_gram(s, &whole, std::slice::from_ref(&s.outcome_term))?.pass;
    if !needs_folds(s.spec) {
        return Ok(vec![
            first,
            complement_pass(s, &m)?.pass,
            scores_pass(s, &m, &m, &m)?.pass,
        ]);
    }
    // Cross-fitting: each segment's propensity on all its rows (Newton), then the fits leaving
    // one fold out (scores only; full Newton passes only if those do not settle).
    Ok(vec![
        first,
        by_fold_pass(s, &whole)?.pass,
        scores_pass_only(s, &m)?.pass,
        scores_pass(s, &m, &m, &m)?.pass,
    ])
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let p = s.terms.len();
    let k = folds(s) as usize;
    let mut names = s.term_names.clone();
    names.push(spec.outcome.clone());
    let mut terms = s.terms.clone();
    terms.push(s.outcome_term.clone());
    // The outcome models' Gram sums come from the propensity's first pass.
    let first = start_with_gram(s, r, std::slice::from_ref(&s.outcome_term))?;
    let comp = complement_moments(
        s,
        GramRows::Riding(&first.layout),
        &first.sums,
        &names,
        &terms,
    )?;
    let x: Vec<usize> = (0..p).collect();
    let segs: Vec<Vec<KeyValue>> = comp.iter().map(|c| c.0.clone()).collect();
    let mut coef1 = Vec::new();
    let mut coef0 = Vec::new();
    for (seg, per_fold) in &comp {
        let (mut c1, mut c0) = (Vec::new(), Vec::new());
        for (j, arms) in per_fold.iter().enumerate() {
            let what = fit_label(s, seg, j);
            let n1 = arms[1].as_ref().map_or(0.0, |m| m.n);
            let n0 = arms[0].as_ref().map_or(0.0, |m| m.n);
            if k > 1 && n1 + n0 == 0.0 {
                return Err(crate::crossfit::one_fold(s, j));
            }
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
    let ecoef = cross_fitted_propensity(s, r, first)?;
    let sp = scores_pass(
        s,
        &fold_models(s, &segs, &ecoef),
        &fold_models(s, &segs, &coef1),
        &fold_models(s, &segs, &coef0),
    )?;
    let sc = ask(r, &sp)?;
    let mut out = Outcome {
        estimates: vec![],
        diagnostics: Default::default(),
        rows: None,
    };
    let mut parts = Vec::new();
    for seg in &segs {
        let row = row_of(&sc, seg)?;
        let a = sp.layout.read(&sc, row)?;
        let (n, n1) = (a.n, a.n1);
        let (sn, snn, sdn, sd) = (a.sn, a.snn, a.sdn, a.sd);
        let tau = sn / sd;
        let var = (snn - 2.0 * tau * sdn + tau * tau * sd) / (sd * sd);
        out.diagnostics.notes.push(format!(
            "{}: {}propensity from {:.4} to {:.4}{}",
            segment_label(s, seg),
            if needs_folds(spec) {
                "cross-fitted "
            } else {
                ""
            },
            a.min_e,
            a.max_e,
            clipping(s, a.clipped1, a.clipped0)
        ));
        parts.push(Part::binary(s, seg, tau, var, n, n1));
    }
    out.estimates = finish(s, parts);
    Ok(out)
}

estimator!(DoublyRobust, crate::Method::DoublyRobust);
