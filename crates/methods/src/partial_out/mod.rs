//! `partial-out`: the partially linear model `y = θ t + g(x) + ε` by double machine learning
//! (Chernozhukov et al. 2018) with cross-fitted linear nuisances (on an optional basis
//! expansion). One Gram pass grouped by fold fits `E[t | x]` and `E[y | x]` on "all but fold
//! k" (total minus fold k); one score pass returns the sums of products of the residuals:
//! `θ = Σ r_t r_y / Σ r_t²` with influence-function variance
//! `Σ r_t² (r_y − θ r_t)² / (Σ r_t²)²`. With one fold (no cross-fitting) θ is the coefficient
//! of `t` in the full regression (Frisch–Waugh–Lovell) and the standard error is its HC0 error.
//! The treatment may be continuous.

mod passes;

use crate::combine::{segment, Part};
use crate::crossfit::{complement_moments, fit_label, gram_pass, row_design, GramRows};
use crate::models::{fold_models, placeholder};
use crate::prepare::Setup;
use crate::read::{keys, row_of};
use crate::{ask, Estimand, Estimate, MethodError, Outcome, Runner, Segment};
use passes::{partial_out_sums, PartialOutLayout};
use upshot_fit::ols;
use upshot_sql::{Built, KeyValue, Pass};

fn scores_pass(
    s: &Setup,
    segs: &[Vec<KeyValue>],
    ct: &[Vec<Vec<f64>>],
    cy: &[Vec<Vec<f64>>],
) -> Result<Built<PartialOutLayout>, MethodError> {
    let spec = s.spec;
    Ok(partial_out_sums(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &row_design(s),
        &fold_models(s, segs, ct),
        &fold_models(s, segs, cy),
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let (segs, coef) = placeholder(s);
    Ok(vec![
        gram_pass(
            s,
            false,
            vec![s.treatment_term.clone(), s.outcome_term.clone()],
        )?
        .pass,
        scores_pass(s, &segs, &coef, &coef)?.pass,
    ])
}

pub(crate) struct Sums {
    n: f64,
    stt: f64,
    sty: f64,
    s22: f64,
    s31: f64,
    s40: f64,
}

impl Sums {
    fn theta(&self) -> f64 {
        self.sty / self.stt
    }
    fn var(&self, theta: f64) -> f64 {
        ((self.s22 - 2.0 * theta * self.s31 + theta * theta * self.s40) / (self.stt * self.stt))
            .max(0.0)
    }
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    if spec.estimand != Estimand::Ate {
        return Err(MethodError::Input(format!(
            "method `partial-out` estimates one effect per segment (a constant-effect model), not the {}; use --estimand ATE, or --method doubly-robust / regress / weight for the {}",
            spec.estimand.as_str(),
            spec.estimand.as_str()
        )));
    }
    let nseg = spec.segments.len();
    let p = s.terms.len();
    let mut names = s.term_names.clone();
    names.push(spec.treatment.clone());
    names.push(spec.outcome.clone());
    let mut terms = s.terms.clone();
    terms.push(s.treatment_term.clone());
    terms.push(s.outcome_term.clone());
    let gp = gram_pass(
        s,
        false,
        vec![s.treatment_term.clone(), s.outcome_term.clone()],
    )?;
    let g = ask(r, &gp)?;
    let comp = complement_moments(s, GramRows::Keyed(&gp.layout, false), &g, &names, &terms)?;
    let x: Vec<usize> = (0..p).collect();
    let segs: Vec<Vec<KeyValue>> = comp.iter().map(|c| c.0.clone()).collect();
    let (mut ct, mut cy) = (Vec::new(), Vec::new());
    let binary = matches!(
        s.column(&spec.treatment).map(|c| (&c.min, &c.max, c.not01)),
        Some((upshot_sql::Cell::Number(a), upshot_sql::Cell::Number(b), other)) if *a == 0.0 && *b == 1.0 && other == 0.0
    );
    for (seg, per_fold) in &comp {
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for (j, m) in per_fold.iter().enumerate() {
            let what = fit_label(s, seg, j);
            let m = m[0].as_ref().ok_or_else(|| match per_fold.len() {
                1 => MethodError::Input(format!("{what}: no rows to fit the nuisance models")),
                _ => crate::crossfit::one_fold(s, j),
            })?;
            let ft = ols(m, p, &x).map_err(|e| {
                MethodError::Input(format!(
                    "{what}: the treatment model (treatment on covariates) cannot be fitted: {e}"
                ))
            })?;
            if ft.r2 > 1.0 - 1e-10 {
                return Err(MethodError::Input(format!(
                    "{what}: the covariates predict the treatment `{}` exactly (R² = {}); nothing is left to compare — drop the covariates that determine it",
                    spec.treatment, ft.r2
                )));
            }
            let fy = ols(m, p + 1, &x).map_err(|e| {
                MethodError::Input(format!(
                    "{what}: the outcome model (outcome on covariates) cannot be fitted: {e}"
                ))
            })?;
            a.push(ft.design_coefficients(m, &x));
            b.push(fy.design_coefficients(m, &x));
        }
        ct.push(a);
        cy.push(b);
    }
    let sp = scores_pass(s, &segs, &ct, &cy)?;
    let sc = ask(r, &sp)?;
    let mut parts = Vec::new();
    let mut pooled = Sums {
        n: 0.0,
        stt: 0.0,
        sty: 0.0,
        s22: 0.0,
        s31: 0.0,
        s40: 0.0,
    };
    let mut seg_sums = Vec::new();
    for seg in &segs {
        let row = row_of(&sc, seg)?;
        let sums = sp.layout.read(&sc, row)?;
        pooled.n += sums.n;
        pooled.stt += sums.stt;
        pooled.sty += sums.sty;
        pooled.s22 += sums.s22;
        pooled.s31 += sums.s31;
        pooled.s40 += sums.s40;
        seg_sums.push(sums);
    }
    // Treated counts for a 0/1 treatment from the Gram pass (whole segments).
    let counts = |seg: &Vec<KeyValue>| -> Option<(f64, f64)> {
        if !binary {
            return None;
        }
        let mut n1 = 0.0;
        let mut n = 0.0;
        for row in 0..g.rows.len() {
            if keys(&g, row, nseg).ok().as_ref() == Some(seg) {
                let m = crate::read::moments(&gp.layout, &g, row, &names, &terms).ok()?;
                n1 += m.mean(p) * m.n;
                n += m.n;
            }
        }
        Some((n1.round(), (n - n1).round()))
    };
    for (seg, sums) in segs.iter().zip(&seg_sums) {
        let theta = sums.theta();
        let mut e = Estimate::new(spec, &segment(s, seg), theta, sums.var(theta).sqrt());
        if let Some((n1, n0)) = counts(seg) {
            e.n_treated = Some(n1);
            e.n_control = Some(n0);
        }
        e.n_used = sums.n;
        parts.push(Part {
            estimate: e,
            target_size: sums.n,
        });
    }
    let mut estimates = Vec::new();
    if nseg > 0 {
        let theta = pooled.theta();
        let mut e = Estimate::new(
            spec,
            &Segment { values: vec![] },
            theta,
            pooled.var(theta).sqrt(),
        );
        e.n_used = pooled.n;
        if binary {
            e.n_treated = parts.iter().map(|p| p.estimate.n_treated).sum();
            e.n_control = parts.iter().map(|p| p.estimate.n_control).sum();
        }
        estimates.push(e);
    }
    estimates.extend(parts.into_iter().map(|p| p.estimate));
    Ok(Outcome {
        estimates,
        diagnostics: Default::default(),
        rows: None,
    })
}

estimator!(PartialOut, crate::Method::PartialOut);

#[cfg(test)]
mod tests {
    use super::Sums;

    /// θ = Σ r_t r_y / Σ r_t² and its influence-function variance, against direct sums over
    /// residuals (the formula written out per row).
    #[test]
    fn theta_and_variance_from_the_score_sums() {
        let rt = [0.5, -1.25, 2.0, -0.75, 0.1, 1.5];
        let ry = [1.1, -2.0, 3.9, -1.7, 0.4, 2.6];
        let sum = |f: &dyn Fn(f64, f64) -> f64| rt.iter().zip(&ry).map(|(a, b)| f(*a, *b)).sum();
        let s = Sums {
            n: 6.0,
            stt: sum(&|a, _| a * a),
            sty: sum(&|a, b| a * b),
            s22: sum(&|a, b| a * a * b * b),
            s31: sum(&|a, b| a * a * a * b),
            s40: sum(&|a, _| a.powi(4)),
        };
        let theta = s.theta();
        let direct: f64 = sum(&|a, b| a * b) / sum(&|a, _| a * a);
        assert!((theta - direct).abs() < 1e-15);
        let meat: f64 = sum(&|a, b| (a * (b - theta * a)).powi(2));
        let want = meat / s.stt.powi(2);
        assert!(
            (s.var(theta) - want).abs() < 1e-12 * want,
            "{} vs {want}",
            s.var(theta)
        );
        assert_eq!(s.n, 6.0);
    }
}
