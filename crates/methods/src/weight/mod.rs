//! `weight`: inverse probability weighting with normalised (Hajek) weights and a logistic
//! propensity fitted by Newton's method over aggregate passes (Lunceford & Davidian 2004).
//!
//! The variance treats the propensity as estimated: the weighted arm means and the logistic
//! score are stacked estimating equations, and the influence function of `τ = μ₁ − μ₀` is
//! `ψ₁/a₁ − ψ₀/a₀ + gᵀ I⁻¹ w (t − e)` with `ψₐ` the arms' weighted residuals, `aₐ` their weight
//! sums, `g` the derivative of the means with respect to the propensity coefficients, `I` the
//! logistic information and `w = (1, v)` the design. One pass after the fit returns every sum
//! that the square of that influence function expands into.

mod passes;

use crate::combine::{finish, segment_label, Part};
use crate::crossfit::segment_row_design;
use crate::models::{per_segment, placeholder_segments};
use crate::prepare::Setup;
use crate::propensity::{clipping, fit_propensity, logistic_pass, Finish};
use crate::read::{row_of, symmetric};
use crate::{ask, MethodError, Outcome, Runner};
use nalgebra::DVector;
use passes::{weighting_sums, WeightingLayout};
use upshot_sql::{Built, Models, Pass};

fn weights_pass(s: &Setup, models: &Models) -> Result<Built<WeightingLayout>, MethodError> {
    let spec = s.spec;
    Ok(weighting_sums(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &segment_row_design(s),
        models,
        spec.estimand,
        spec.clip,
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let segs = placeholder_segments(s);
    let zero = vec![vec![0.0; s.terms.len() + 1]];
    let models = per_segment(&segs, &zero);
    Ok(vec![
        logistic_pass(s, &models)?.pass,
        weights_pass(s, &models)?.pass,
    ])
}

/// Below this share of an arm's rows, the weights' effective sample size draws a warning.
const HEAVY_TAIL: f64 = 0.5;

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let k = s.terms.len() + 1;
    let (segs, fits) = fit_propensity(s, r, Finish::Predicted)?;
    let coefs: Vec<Vec<f64>> = fits.iter().map(|f| f.coef.clone()).collect();
    let wp = weights_pass(s, &per_segment(&segs, &coefs))?;
    let w = ask(r, &wp)?;
    let mut out = Outcome {
        estimates: vec![],
        diagnostics: Default::default(),
        rows: None,
    };
    let mut parts = Vec::new();
    for key in &segs {
        let row = row_of(&w, key)?;
        let ws = wp.layout.read(&w, row)?;
        let (n, n1) = (ws.n, ws.n1);
        let (a1, b1, a0, b0) = (ws.a1, ws.b1, ws.a0, ws.b0);
        let (mu1, mu0) = (b1 / a1, b0 / a0);
        let tau = mu1 - mu0;
        let v = |x: &[f64]| DVector::from_column_slice(x);
        let (d1, d1y, d0, d0y) = (v(&ws.d1), v(&ws.d1y), v(&ws.d0), v(&ws.d0y));
        let (c1, c1y, c0, c0y) = (v(&ws.c1), v(&ws.c1y), v(&ws.c0), v(&ws.c0y));
        let ss = symmetric(&ws.s, k);
        let gvec: DVector<f64> = (&d1y - &d1 * mu1) / a1 - (&d0y - &d0 * mu0) / a0;
        let h = symmetric(&ws.h, k)
            .cholesky()
            .map(|c| c.solve(&gvec))
            .ok_or_else(|| {
                MethodError::Input(format!(
                    "{}: the propensity model's information matrix is singular",
                    segment_label(s, key)
                ))
            })?;
        let psi1 = ws.q1yy - 2.0 * mu1 * ws.q1y + mu1 * mu1 * ws.q1;
        let psi0 = ws.q0yy - 2.0 * mu0 * ws.q0y + mu0 * mu0 * ws.q0;
        let cross1 = &c1y - &c1 * mu1;
        let cross0 = -(&c0y - &c0 * mu0);
        let var = psi1 / (a1 * a1)
            + psi0 / (a0 * a0)
            + (h.transpose() * &ss * &h)[0]
            + 2.0 * h.dot(&cross1) / a1
            - 2.0 * h.dot(&cross0) / a0;
        let label = segment_label(s, key);
        let (clipped1, clipped0) = (ws.clipped1, ws.clipped0);
        let (min_e, max_e) = (ws.min_e, ws.max_e);
        let (ess1, ess0) = (a1 * a1 / ws.q1, a0 * a0 / ws.q0);
        out.diagnostics.notes.push(format!(
            "{label}: propensity from {min_e:.4} to {max_e:.4}; effective sample size of the weights: treated {:.0} of {n1}, untreated {:.0} of {}{}",
            ess1,
            ess0,
            n - n1,
            clipping(s, clipped1, clipped0)
        ));
        // Heavy-tailed weights: upshot's own rule, from the coverage benchmark (docs/methods.md):
        // where an arm's effective sample size fell below half its rows, the sandwich intervals
        // covered 0.89 instead of 0.95; on the rows with good overlap they covered 0.945.
        for (ess, rows, arm) in [(ess1, n1, "treated"), (ess0, n - n1, "untreated")] {
            if rows > 0.0 && ess < HEAVY_TAIL * rows {
                out.diagnostics.warnings.push(format!(
                    "{label}: the {arm} rows' weights are heavy-tailed (effective sample size {ess:.0} of {rows}): inverse probability weighting can then be biased, with an interval that is too narrow; prefer doubly-robust with the same adjustment set, or restrict the rows to where both arms are common (--filter)"
                ));
            }
        }
        parts.push(Part::binary(s, key, tau, var, n, n1));
    }
    out.estimates = finish(s, parts);
    Ok(out)
}

estimator!(Weight, crate::Method::Weight);
