//! `regress`: regression adjustment (g-formula with per-arm linear outcome models; Imbens &
//! Wooldridge 2009). One Gram pass grouped by segment and arm gives both arms' least-squares
//! fits; one residual pass gives their HC1 covariances. The effect is the difference of the
//! arms' predictions averaged over the target population's covariate means:
//! `τ = (α₁ − α₀) + (β₁ − β₀)ᵀ x̄`, with variance `c̃ᵀ (V₁ + V₀) c̃ + (β₁ − β₀)ᵀ Σₓ (β₁ − β₀) / N`
//! for `c̃ = (1, x̄)`, HC1 covariances `V`, and the target rows' covariate covariance `Σₓ`.

use crate::combine::{finish, segment, segment_label, Part};
use crate::crossfit::gram_pass;
use crate::outcome::{covariate_moments, fit_arm};
use crate::prepare::Setup;
use crate::read::{by_segment, moments, row_of, symmetric};
use crate::{ask, Estimand, Estimate, MethodError, Outcome, Runner};
use nalgebra::DVector;
use upshot_fit::{Moments, Ols};
use upshot_sql::{
    residuals, Built, Design, Key, KeyValue, Model, Models, Pass, ResidualLayout, Selector,
};

fn residual_design(s: &Setup) -> Design {
    let spec = s.spec;
    let mut keys = s.segment_keys();
    keys.push(Key::Column(spec.treatment.clone()));
    Design {
        keys,
        terms: s.terms.clone(),
        extras: vec![("y", spec.outcome.clone())],
        fold: None,
    }
}

fn residual_pass(s: &Setup, models: &Models) -> Result<Built<ResidualLayout>, MethodError> {
    let spec = s.spec;
    Ok(residuals(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &residual_design(s),
        models,
    )?)
}

/// Placeholder models for `plan`: one per arm, with a placeholder segment.
pub(crate) fn placeholder_models(s: &Setup) -> Models {
    let nseg = s.spec.segments.len();
    let p = s.terms.len() + 1;
    let models = (0..2)
        .map(|arm| {
            let mut key: Vec<KeyValue> = (0..nseg)
                .map(|_| KeyValue::Text("<each segment>".into()))
                .collect();
            key.push(KeyValue::Number(f64::from(arm)));
            Model {
                key,
                coef: vec![0.0; p],
            }
        })
        .collect();
    Models {
        selector: Selector {
            keys: (0..=nseg).collect(),
            fold: false,
        },
        models,
    }
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    Ok(vec![
        gram_pass(s, true, vec![s.outcome_term.clone()])?.pass,
        residual_pass(s, &placeholder_models(s))?.pass,
    ])
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let nseg = spec.segments.len();
    let p = s.terms.len();
    let mut names = s.term_names.clone();
    names.push(spec.outcome.clone());
    let mut terms = s.terms.clone();
    terms.push(s.outcome_term.clone());
    let gp = gram_pass(s, true, vec![s.outcome_term.clone()])?;
    let g = ask(r, &gp)?;
    struct Seg {
        key: Vec<KeyValue>,
        arms: [Moments; 2],
        fits: [Ols; 2],
    }
    let mut segs = Vec::new();
    let mut models = Vec::new();
    for (key, rows) in by_segment(&g, nseg)? {
        let mut arm: [Option<Moments>; 2] = [None, None];
        for row in rows {
            let k = gp.layout.keys(&g, row)?;
            let idx = usize::from(k[nseg] == KeyValue::Number(1.0));
            arm[idx] = Some(moments(&gp.layout, &g, row, &names, &terms)?);
        }
        let label = segment_label(s, &key);
        let get = |i: usize, word: &str| {
            arm[i].clone().ok_or_else(|| {
                MethodError::Input(format!(
                    "{label} has no {word} rows; an effect there cannot be estimated — drop the segment column, or filter the segment out"
                ))
            })
        };
        let m0 = get(0, "untreated (control)")?;
        let m1 = get(1, "treated")?;
        let f0 = fit_arm(s, &m0, &format!("{label}, untreated rows"))?;
        let f1 = fit_arm(s, &m1, &format!("{label}, treated rows"))?;
        let x: Vec<usize> = (0..p).collect();
        for (a, (f, m)) in [(&f0, &m0), (&f1, &m1)].into_iter().enumerate() {
            let mut k = key.clone();
            k.push(KeyValue::Number(a as f64));
            models.push(Model {
                key: k,
                coef: f.design_coefficients(m, &x),
            });
        }
        segs.push(Seg {
            key,
            arms: [m0, m1],
            fits: [f0, f1],
        });
    }
    let models = Models {
        selector: Selector {
            keys: (0..=nseg).collect(),
            fold: false,
        },
        models,
    };
    let rp = residual_pass(s, &models)?;
    let res = ask(r, &rp)?;
    let mut parts = Vec::new();
    for seg in segs {
        let mut cov = Vec::new();
        for a in 0..2 {
            let mut group = seg.key.clone();
            group.push(KeyValue::Number(a as f64));
            let row = row_of(&res, &group)?;
            let meat = symmetric(&rp.layout.meat(&res, row)?, p + 1);
            let x: Vec<usize> = (0..p).collect();
            cov.push(
                seg.fits[a]
                    .hc1_covariance(&seg.arms[a], &x, &meat)
                    .map_err(|e| MethodError::Input(e.to_string()))?,
            );
        }
        let target = match spec.estimand {
            Estimand::Ate => seg.arms[0]
                .plus(&seg.arms[1])
                .map_err(|e| MethodError::Engine(e.to_string()))?,
            Estimand::Att => seg.arms[1].clone(),
            Estimand::Atc => seg.arms[0].clone(),
        };
        let (xbar, sx) = covariate_moments(&target, p);
        let d = DVector::from_fn(p, |i, _| seg.fits[1].coef[i] - seg.fits[0].coef[i]);
        let tau = seg.fits[1].intercept - seg.fits[0].intercept + d.dot(&xbar);
        let mut c = DVector::zeros(p + 1);
        c[0] = 1.0;
        for i in 0..p {
            c[i + 1] = xbar[i];
        }
        let v = (c.transpose() * (&cov[0] + &cov[1]) * &c)[0]
            + (d.transpose() * &sx * &d)[0] / target.n;
        let mut e = Estimate::new(spec, &segment(s, &seg.key), tau, v.sqrt());
        e.n_treated = Some(seg.arms[1].n);
        e.n_control = Some(seg.arms[0].n);
        e.n_used = seg.arms[0].n + seg.arms[1].n;
        parts.push(Part {
            estimate: e,
            target_size: target.n,
        });
    }
    Ok(Outcome {
        estimates: finish(s, parts),
        diagnostics: Default::default(),
        rows: None,
    })
}

estimator!(Regress, crate::Method::Regress);
