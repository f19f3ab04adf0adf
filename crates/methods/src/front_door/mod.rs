//! `front-door`: the effect through mediators that carry all of it (Pearl 1995), where the
//! treatment–outcome confounding cannot be adjusted away.
//!
//! - **Discrete mediators** (declared categorical, ordinal or binary, or text columns) and a
//!   0/1 treatment: one cells pass gives, per segment, treatment arm and mediator value, the
//!   rows and the sum and sum of squares of the outcome. In Rust, with `π_tm` the cell shares,
//!   `P(m | t)`, `μ_tm = E[Y | t, m]` and weights `w_t` (ATE: `P(t)`; ATT: the treated arm
//!   only; ATC: the control arm only):
//!   `τ = Σ_m (P(m | 1) − P(m | 0)) Σ_t w_t μ_tm` — the front-door formula, as a difference of
//!   `E[Y | do(1)]` and `E[Y | do(0)]` (for ATT and ATC, of the arm's potential outcomes).
//!   Its standard error is the delta method's, through the influence function of the cell
//!   shares (multinomial) and cell means, which the cells pass's sums give exactly (see
//!   [`cell_formula`]). Decision: the delta method, not replicate weights from a hashed
//!   Poisson bootstrap: it needs no pass beyond the one the estimate needs, is exact for the
//!   smooth function of cell means and shares the estimate is, and repeats to the last digit
//!   on every engine; a bootstrap would add a pass of B replicate columns and Monte Carlo noise.
//! - **One continuous (linear) mediator**: the product of coefficients `τ = α β`, with `α` the
//!   slope of the mediator on the treatment and `β` the slope of the outcome on the mediator
//!   given the treatment, from one Gram pass over `[T, M, Y]`; two residual passes give their
//!   HC1 variances, and `Var τ = β² Var α + α² Var β` (the first-order delta method, Sobel
//!   1982, with the two equations' errors uncorrelated as the linear front-door model implies).
//!   Any numeric treatment; the estimate is a constant effect (ATE only).

use crate::combine::{finish, segment_label, Part};
use crate::crossfit::gram_pass;
use crate::models::{per_segment, placeholder_segments};
use crate::prepare::{is_categorical, numeric_term, Setup};
use crate::read::{by_segment, moments, row_of, symmetric};
use crate::{ask, Estimand, MethodError, Outcome, Runner};
use upshot_fit::{ols, Moments};
use upshot_sql::{
    cells, residuals, Built, CellsLayout, Design, DesignTerm, KeyValue, Models, Pass,
    ResidualLayout,
};

/// Whether the spec's mediators are discrete (every one categorical in the spec's sense).
fn discrete(s: &Setup) -> bool {
    s.spec.mediators.iter().all(|m| is_categorical(s.spec, m))
}

fn cells_pass(s: &Setup) -> Result<Built<CellsLayout>, MethodError> {
    let spec = s.spec;
    let mut keys = spec.segments.clone();
    keys.push(spec.treatment.clone());
    keys.extend(spec.mediators.iter().cloned());
    Ok(cells(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &keys,
        &spec.outcome,
    )?)
}

/// The mediator as a centred, scaled term (the continuous route: one mediator).
fn mediator_term(s: &Setup) -> Result<DesignTerm, MethodError> {
    let m = &s.spec.mediators[0];
    let p = s
        .column(m)
        .ok_or_else(|| MethodError::Engine(format!("mediator `{m}` was not profiled")))?;
    if p.sd == Some(0.0) {
        return Err(MethodError::Input(format!(
            "mediator `{m}` has a single value in the rows used; it cannot carry an effect — check the filter and the source"
        )));
    }
    numeric_term(p)
}

/// The residual pass of the outcome on (T, M) (`outcome_model`) or of the mediator on T.
fn residual_pass(
    s: &Setup,
    outcome_model: bool,
    models: &Models,
) -> Result<Built<ResidualLayout>, MethodError> {
    let spec = s.spec;
    let mut terms = vec![s.treatment_term.clone()];
    let y = if outcome_model {
        terms.push(mediator_term(s)?);
        spec.outcome.clone()
    } else {
        spec.mediators[0].clone()
    };
    let design = Design {
        keys: s.segment_keys(),
        terms,
        extras: vec![("y", y)],
        fold: None,
    };
    Ok(residuals(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &design,
        models,
    )?)
}

fn placeholder_models(s: &Setup, width: usize) -> Models {
    per_segment(&placeholder_segments(s), &[vec![0.0; width]])
}

fn gram_terms(s: &Setup) -> Result<Vec<DesignTerm>, MethodError> {
    Ok(vec![
        s.treatment_term.clone(),
        mediator_term(s)?,
        s.outcome_term.clone(),
    ])
}

/// Refuses what the chosen route cannot take.
fn check(s: &Setup) -> Result<(), MethodError> {
    let spec = s.spec;
    if discrete(s) {
        let t = s.column(&spec.treatment);
        let zero_one = t.is_some_and(|p| {
            p.not01 == 0.0
                && matches!((&p.min, &p.max), (upshot_sql::Cell::Number(a), upshot_sql::Cell::Number(b)) if *a == 0.0 && *b == 1.0)
        });
        if !zero_one {
            return Err(MethodError::Input(format!(
                "front-door with discrete mediators needs a 0/1 treatment, but `{}` takes other values; recode it as 0/1",
                spec.treatment
            )));
        }
        return Ok(());
    }
    if spec.mediators.len() > 1 {
        return Err(MethodError::Input(format!(
            "front-door through several mediators ({}) needs them all discrete: declare them categorical (or binary) in the diagram, or name one continuous mediator",
            spec.mediators.join(", ")
        )));
    }
    if spec.estimand != Estimand::Ate {
        return Err(MethodError::Input(format!(
            "front-door through a continuous mediator estimates a constant effect (the product of two linear slopes), not the {}; use --estimand ATE, or declare the mediator categorical for the cell formula",
            spec.estimand.as_str()
        )));
    }
    Ok(())
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    if discrete(s) {
        return Ok(vec![cells_pass(s)?.pass]);
    }
    Ok(vec![
        gram_pass(s, false, gram_terms(s)?)?.pass,
        residual_pass(s, true, &placeholder_models(s, 3))?.pass,
        residual_pass(s, false, &placeholder_models(s, 2))?.pass,
    ])
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    check(s)?;
    if discrete(s) {
        run_cells(s, r)
    } else {
        run_linear(s, r)
    }
}

/// One cell of a segment: arm, mediator values, rows, outcome sum and sum of squares.
#[derive(Clone, Debug)]
pub(crate) struct Cell {
    pub arm: usize,
    pub mediator: Vec<KeyValue>,
    pub n: f64,
    pub sum: f64,
    pub sum_sq: f64,
}

/// The front-door formula over one segment's cells: the estimate and its delta-method variance.
///
/// With `τ = Σ_m D_m Q_m`, `D_m = P(m|1) − P(m|0)`, `Q_m = Σ_t w_t μ_tm`: the derivative in the
/// cell share `π_sk` is `g_sk = ±(Q_k − Σ_m P(m|s) Q_m) / P(s) + [ATE] Σ_m D_m μ_sm` (+ for the
/// treated arm), in the cell mean `μ_tm` it is `D_m w_t`. A row of cell c has influence
/// `(g_c − Σ π g) + (D_m w_t / π_c)(y − μ_c)`, so `Var τ = Σ_c [n_c a_c² + b_c² SS_c] / n²` with
/// `SS_c` the cell's sum of squared deviations. `Err` names mediator values missing in an arm
/// that the formula needs (positivity).
pub(crate) fn cell_formula(cells: &[Cell], estimand: Estimand) -> Result<(f64, f64), String> {
    let n: f64 = cells.iter().map(|c| c.n).sum();
    let arm_n = |t: usize| {
        cells
            .iter()
            .filter(|c| c.arm == t)
            .map(|c| c.n)
            .sum::<f64>()
    };
    let p = [arm_n(0) / n, arm_n(1) / n];
    if p[0] == 0.0 || p[1] == 0.0 {
        return Err("one treatment arm has no rows".into());
    }
    let mut values: Vec<&Vec<KeyValue>> = Vec::new();
    for c in cells {
        if !values.contains(&&c.mediator) {
            values.push(&c.mediator);
        }
    }
    if values.len() < 2 {
        return Err("the mediators take a single value: they cannot carry an effect".into());
    }
    let cell = |t: usize, m: &Vec<KeyValue>| cells.iter().find(|c| c.arm == t && &c.mediator == m);
    let w = match estimand {
        Estimand::Ate => p,
        Estimand::Att => [0.0, 1.0],
        Estimand::Atc => [1.0, 0.0],
    };
    // Positivity: the outcome mean of every mediator value under each weighted arm.
    let mut missing = Vec::new();
    for m in &values {
        for (t, wt) in w.iter().enumerate() {
            if *wt > 0.0 && cell(t, m).is_none() {
                missing.push(format!(
                    "{} among the {}",
                    m.iter()
                        .map(|v| v.to_string())
                        .collect::<Vec<_>>()
                        .join("/"),
                    if t == 1 { "treated" } else { "untreated" }
                ));
            }
        }
    }
    if !missing.is_empty() {
        let shown: Vec<String> = missing.iter().take(5).cloned().collect();
        return Err(format!(
            "positivity fails: the formula needs the outcome at every mediator value under each treatment arm it averages over, and {} mediator value{} never occur{}: {}{}",
            missing.len(),
            if missing.len() == 1 { "" } else { "s" },
            if missing.len() == 1 { "s" } else { "" },
            shown.join(", "),
            if missing.len() > 5 { ", ..." } else { "" }
        ));
    }
    let mu = |t: usize, m: &Vec<KeyValue>| cell(t, m).map_or(0.0, |c| c.sum / c.n);
    let pm = |t: usize, m: &Vec<KeyValue>| cell(t, m).map_or(0.0, |c| c.n / n) / p[t];
    let d: Vec<f64> = values.iter().map(|m| pm(1, m) - pm(0, m)).collect();
    let q: Vec<f64> = values
        .iter()
        .map(|m| w[0] * mu(0, m) + w[1] * mu(1, m))
        .collect();
    let tau: f64 = d.iter().zip(&q).map(|(a, b)| a * b).sum();
    let mean_q = |s: usize| -> f64 { values.iter().zip(&q).map(|(m, qm)| pm(s, m) * qm).sum() };
    let through = |s: usize| -> f64 {
        if estimand == Estimand::Ate {
            values.iter().zip(&d).map(|(m, dm)| dm * mu(s, m)).sum()
        } else {
            0.0
        }
    };
    let (mq, th) = ([mean_q(0), mean_q(1)], [through(0), through(1)]);
    let g = |c: &Cell, k: usize| {
        let sign = if c.arm == 1 { 1.0 } else { -1.0 };
        sign * (q[k] - mq[c.arm]) / p[c.arm] + th[c.arm]
    };
    let index = |c: &Cell| values.iter().position(|m| *m == &c.mediator).expect("seen");
    let g_bar: f64 = cells.iter().map(|c| c.n / n * g(c, index(c))).sum();
    let mut var = 0.0;
    for c in cells {
        let k = index(c);
        let a = g(c, k) - g_bar;
        let b = d[k] * w[c.arm] / (c.n / n);
        let ss = (c.sum_sq - c.sum * c.sum / c.n).max(0.0);
        var += c.n * a * a + b * b * ss;
    }
    Ok((tau, var / (n * n)))
}

fn run_cells(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let nseg = spec.segments.len();
    let cp = cells_pass(s)?;
    let a = ask(r, &cp)?;
    let mut parts = Vec::new();
    let mut warnings = Vec::new();
    for (key, rows) in by_segment(&a, nseg)? {
        let label = segment_label(s, &key);
        let mut cs = Vec::new();
        for row in rows {
            let keys = cp.layout.keys(&a, row)?;
            let (n, sum, sum_sq) = cp.layout.sums(&a, row)?;
            let arm = match keys.get(nseg) {
                Some(KeyValue::Number(x)) if *x == 1.0 => 1,
                Some(KeyValue::Number(x)) if *x == 0.0 => 0,
                other => {
                    return Err(MethodError::Input(format!(
                        "{label}: treatment value {other:?} is not 0 or 1"
                    )))
                }
            };
            cs.push(Cell {
                arm,
                mediator: keys[nseg + 1..].to_vec(),
                n,
                sum,
                sum_sq,
            });
        }
        let singletons = cs.iter().filter(|c| c.n < 2.0).count();
        if singletons > 0 {
            warnings.push(format!(
                "{label}: {singletons} cell{} of treatment arm and mediator value hold{} a single row; their outcome variance counts as zero, so the error is understated there — coarsen the mediator",
                if singletons == 1 { "" } else { "s" },
                if singletons == 1 { "s" } else { "" }
            ));
        }
        let (tau, var) = cell_formula(&cs, spec.estimand)
            .map_err(|m| MethodError::Input(format!("{label}: {m}")))?;
        let n: f64 = cs.iter().map(|c| c.n).sum();
        let n1: f64 = cs.iter().filter(|c| c.arm == 1).map(|c| c.n).sum();
        parts.push(Part::binary(s, &key, tau, var, n, n1));
    }
    let mut out = Outcome {
        estimates: finish(s, parts),
        diagnostics: Default::default(),
        rows: None,
    };
    out.diagnostics.warnings = warnings;
    Ok(out)
}

fn run_linear(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let nseg = spec.segments.len();
    let gp = gram_pass(s, false, gram_terms(s)?)?;
    let g = ask(r, &gp)?;
    let names = vec![
        spec.treatment.clone(),
        spec.mediators[0].clone(),
        spec.outcome.clone(),
    ];
    let terms = gram_terms(s)?;
    struct Seg {
        key: Vec<KeyValue>,
        m: Moments,
        alpha: upshot_fit::Ols,
        beta: upshot_fit::Ols,
    }
    let mut segs = Vec::new();
    for (key, rows) in by_segment(&g, nseg)? {
        let label = segment_label(s, &key);
        let m = moments(&gp.layout, &g, rows[0], &names, &terms)?;
        let fit = |y: usize, x: &[usize], what: &str| {
            ols(&m, y, x).map_err(|e| {
                MethodError::Input(format!("{label}: the {what} cannot be fitted: {e}"))
            })
        };
        let alpha = fit(1, &[0], "mediator's model (mediator on treatment)")?;
        let beta = fit(
            2,
            &[0, 1],
            "outcome's model (outcome on mediator and treatment)",
        )?;
        segs.push(Seg {
            key,
            m,
            alpha,
            beta,
        });
    }
    let keys: Vec<Vec<KeyValue>> = segs.iter().map(|seg| seg.key.clone()).collect();
    let models = |outcome: bool| {
        let coefs: Vec<Vec<f64>> = segs
            .iter()
            .map(|seg| {
                if outcome {
                    seg.beta.design_coefficients(&seg.m, &[0, 1])
                } else {
                    seg.alpha.design_coefficients(&seg.m, &[0])
                }
            })
            .collect();
        per_segment(&keys, &coefs)
    };
    let yp = residual_pass(s, true, &models(true))?;
    let ya = ask(r, &yp)?;
    let mp = residual_pass(s, false, &models(false))?;
    let ma = ask(r, &mp)?;
    let mut parts = Vec::new();
    for seg in &segs {
        let label = segment_label(s, &seg.key);
        let hc1 = |fit: &upshot_fit::Ols, x: &[usize], meat: nalgebra::DMatrix<f64>| {
            fit.hc1_covariance(&seg.m, x, &meat)
                .map_err(|e| MethodError::Input(format!("{label}: {e}")))
        };
        let yrow = row_of(&ya, &seg.key)?;
        let vb = hc1(
            &seg.beta,
            &[0, 1],
            symmetric(&yp.layout.meat(&ya, yrow)?, 3),
        )?[(2, 2)];
        let mrow = row_of(&ma, &seg.key)?;
        let va = hc1(&seg.alpha, &[0], symmetric(&mp.layout.meat(&ma, mrow)?, 2))?[(1, 1)];
        let (alpha, beta) = (seg.alpha.coef[0], seg.beta.coef[1]);
        let tau = alpha * beta;
        let var = beta * beta * va + alpha * alpha * vb;
        let mut part = Part::binary(s, &seg.key, tau, var, seg.m.n, 0.0);
        part.estimate.n_treated = None;
        part.estimate.n_control = None;
        parts.push(part);
    }
    Ok(Outcome {
        estimates: finish(s, parts),
        diagnostics: Default::default(),
        rows: None,
    })
}

estimator!(FrontDoor, crate::Method::FrontDoor);

#[cfg(test)]
mod tests {
    use super::*;

    fn cell(arm: usize, m: f64, ys: &[f64]) -> Cell {
        Cell {
            arm,
            mediator: vec![KeyValue::Number(m)],
            n: ys.len() as f64,
            sum: ys.iter().sum(),
            sum_sq: ys.iter().map(|y| y * y).sum(),
        }
    }

    /// The formula by hand on a small table: P(m|1) = (1/3, 2/3), P(m|0) = (2/3, 1/3),
    /// P(t) = (1/2, 1/2), cell means 1, 3 (untreated) and 2, 5 (treated):
    /// Q = (1.5, 4), D = (−1/3, 1/3), τ = (4 − 1.5)/3 = 5/6.
    #[test]
    fn the_formula_worked_by_hand() {
        let cells = [
            cell(0, 0.0, &[1.0, 1.0]),
            cell(0, 1.0, &[3.0]),
            cell(1, 0.0, &[2.0]),
            cell(1, 1.0, &[5.0, 5.0]),
        ];
        let (tau, var) = cell_formula(&cells, Estimand::Ate).unwrap();
        assert!((tau - 5.0 / 6.0).abs() < 1e-15, "{tau}");
        assert!(var > 0.0);
        // ATT: Q = μ_1m = (2, 5): τ = (5 − 2)/3 = 1.
        let (att, _) = cell_formula(&cells, Estimand::Att).unwrap();
        assert!((att - 1.0).abs() < 1e-15, "{att}");
    }

    /// The delta-method variance equals a numerical derivative of the same formula
    /// (central differences over cell shares and means, multinomial and mean variances).
    #[test]
    fn the_variance_is_the_delta_method() {
        let cells = [
            cell(0, 0.0, &[1.0, 2.0, 0.5, 1.5]),
            cell(0, 1.0, &[3.0, 4.0, 2.5]),
            cell(0, 2.0, &[6.0, 5.5]),
            cell(1, 0.0, &[2.0, 2.5]),
            cell(1, 1.0, &[5.0, 4.0, 6.0]),
            cell(1, 2.0, &[7.0, 8.0, 6.5, 7.5, 9.0]),
        ];
        for estimand in [Estimand::Ate, Estimand::Att, Estimand::Atc] {
            let (_, var) = cell_formula(&cells, estimand).unwrap();
            let n: f64 = cells.iter().map(|c| c.n).sum();
            let pi: Vec<f64> = cells.iter().map(|c| c.n / n).collect();
            let mu: Vec<f64> = cells.iter().map(|c| c.sum / c.n).collect();
            // τ as a function of (π, μ), through cells with those shares and means.
            let f = |pi: &[f64], mu: &[f64]| {
                let cs: Vec<Cell> = cells
                    .iter()
                    .enumerate()
                    .map(|(i, c)| Cell {
                        n: pi[i] * 1e6,
                        sum: mu[i] * pi[i] * 1e6,
                        ..c.clone()
                    })
                    .collect();
                cell_formula(&cs, estimand).unwrap().0
            };
            let h = 1e-6;
            let grad = |v: &[f64], which: usize, i: usize| {
                let (mut a, mut b) = (v.to_vec(), v.to_vec());
                a[i] += h;
                b[i] -= h;
                if which == 0 {
                    (f(&a, &mu) - f(&b, &mu)) / (2.0 * h)
                } else {
                    (f(&pi, &a) - f(&pi, &b)) / (2.0 * h)
                }
            };
            let gp: Vec<f64> = (0..cells.len()).map(|i| grad(&pi, 0, i)).collect();
            let gm: Vec<f64> = (0..cells.len()).map(|i| grad(&mu, 1, i)).collect();
            let mut v = 0.0;
            for i in 0..cells.len() {
                for j in 0..cells.len() {
                    let cov = if i == j { pi[i] } else { 0.0 } - pi[i] * pi[j];
                    v += gp[i] * gp[j] * cov / n;
                }
                let c = &cells[i];
                let ss = c.sum_sq - c.sum * c.sum / c.n;
                v += gm[i] * gm[i] * ss / (c.n * c.n);
            }
            assert!((var - v).abs() < 1e-7 * v, "{estimand:?}: {var} vs {v}");
        }
    }

    #[test]
    fn positivity_and_single_values_are_refused() {
        let cells = [cell(0, 0.0, &[1.0]), cell(1, 0.0, &[2.0])];
        assert!(cell_formula(&cells, Estimand::Ate)
            .unwrap_err()
            .contains("single value"));
        let cells = [
            cell(0, 0.0, &[1.0]),
            cell(1, 0.0, &[2.0]),
            cell(1, 1.0, &[3.0]),
        ];
        let e = cell_formula(&cells, Estimand::Ate).unwrap_err();
        assert!(e.contains("1 among the untreated"), "{e}");
        // ATT averages over the treated arm only: no untreated outcome at m = 1 is needed.
        assert!(cell_formula(&cells, Estimand::Att).is_ok());
    }
}
