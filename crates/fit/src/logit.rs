//! Logistic regression by Newton's method over aggregate passes.
//!
//! Each iteration needs one pass: with the current coefficients inlined as literals, the
//! database returns the score `Σ v (y - p)`, the information `Σ p (1 - p) v vᵀ`, the
//! log-likelihood and the extreme fitted probabilities. The driver here never sees rows: it
//! calls a closure that runs that pass (in tests, the same sums computed in memory).

use crate::FitError;
use nalgebra::{DMatrix, DVector};

/// What one logistic pass returns, for the design `v = (1, v_1, ..., v_k)` (intercept first,
/// the other entries centred and scaled as in a Gram pass).
#[derive(Clone, Debug, PartialEq)]
pub struct LogitSums {
    /// Rows.
    pub n: f64,
    /// `Σ v (y - p)`.
    pub score: DVector<f64>,
    /// `Σ p (1 - p) v vᵀ`.
    pub information: DMatrix<f64>,
    /// `Σ y log p + (1 - y) log(1 - p)`.
    pub loglik: f64,
    /// Smallest fitted probability.
    pub min_p: f64,
    /// Largest fitted probability.
    pub max_p: f64,
}

/// A fitted logistic model, in the centred, scaled coordinates of its pass.
#[derive(Clone, Debug, PartialEq)]
pub struct Logit {
    /// Coefficients on `v` (intercept first).
    pub coef: Vec<f64>,
    /// Inverse information at the optimum: the coefficients' covariance.
    pub covariance: DMatrix<f64>,
    /// Log-likelihood at the optimum.
    pub loglik: f64,
    /// Newton iterations (passes) used.
    pub iterations: usize,
    /// Smallest and largest fitted probability.
    pub p_range: (f64, f64),
    /// The information matrix `Σ p (1 - p) v vᵀ` at the optimum.
    pub information: DMatrix<f64>,
}

/// Options of the Newton driver.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NewtonOptions {
    /// Most passes to run.
    pub max_iterations: usize,
    /// Stop when every step is below `tolerance * (1 + |coef|)`.
    pub tolerance: f64,
    /// A standardised coefficient beyond this signals (quasi-)separation, as do fitted
    /// probabilities within `1e-12` of 0 or 1 when the iterations run out.
    pub max_coefficient: f64,
    /// Run one more pass at the final coefficients, after the step that reached them was
    /// below the tolerance. Without it (the default) a fit ends as soon as its Newton step is
    /// that small, or as soon as the error after the step, predicted from the quadratic
    /// convergence of the last two steps, is: the coefficients after the step, with the
    /// information of the point one step before, which differs from theirs by about the step.
    /// One or two passes fewer per fit.
    pub confirm: bool,
}

impl Default for NewtonOptions {
    fn default() -> Self {
        NewtonOptions {
            max_iterations: 50,
            tolerance: 1e-10,
            max_coefficient: 30.0,
            confirm: false,
        }
    }
}

/// Maximises the logistic likelihood. `names[0]` names the intercept; `pass(coef)` returns the
/// sums at `coef`. Errors name the columns involved in separation or collinearity.
pub fn logit<E, F>(
    names: &[String],
    mut pass: F,
    opts: NewtonOptions,
) -> Result<Result<Logit, FitError>, E>
where
    F: FnMut(&[f64]) -> Result<LogitSums, E>,
{
    let mut fits = logit_many(names, 1, |coefs| Ok(vec![pass(&coefs[0])?]), opts)?;
    Ok(fits.pop().expect("one model"))
}

/// Where one model of [`logit_many`] stands.
enum State {
    /// Still iterating: current coefficients and their sums, the Newton step, its scale.
    Running {
        coef: Vec<f64>,
        sums: LogitSums,
        step: Vec<f64>,
        scale: f64,
        iteration: usize,
    },
    Done(Result<Logit, FitError>),
}

/// Fits `models` logistic regressions at once, one pass per iteration for all of them (the
/// pass evaluates every model at its own coefficients: per segment, per cross-fitting fold).
/// `pass(coefs)` returns the sums of each model at `coefs[m]`. Each model steps, halves its
/// step and stops on its own; a model that has stopped keeps being evaluated at its final
/// coefficients, which costs nothing extra (the pass runs anyway).
pub fn logit_many<E, F>(
    names: &[String],
    models: usize,
    pass: F,
    opts: NewtonOptions,
) -> Result<Vec<Result<Logit, FitError>>, E>
where
    F: FnMut(&[Vec<f64>]) -> Result<Vec<LogitSums>, E>,
{
    logit_many_from(names, vec![vec![0.0; names.len()]; models], pass, opts)
}

/// [`logit_many`] from given coefficients (a warm start: the fits of a sample) instead of
/// zeros. Newton converges to the same maximum from any start it converges from; a start
/// near it saves iterations (quadratic convergence).
pub fn logit_many_from<E, F>(
    names: &[String],
    starts: Vec<Vec<f64>>,
    mut pass: F,
    opts: NewtonOptions,
) -> Result<Vec<Result<Logit, FitError>>, E>
where
    F: FnMut(&[Vec<f64>]) -> Result<Vec<LogitSums>, E>,
{
    let k = names.len();
    let first = pass(&starts)?;
    let mut states: Vec<State> = first
        .into_iter()
        .zip(starts)
        .map(|(sums, start)| newton_step(names, start, sums, 0, None, &opts))
        .collect();
    loop {
        if states.iter().all(|s| matches!(s, State::Done(_))) {
            break;
        }
        let trial: Vec<Vec<f64>> = states
            .iter()
            .map(|s| match s {
                State::Running {
                    coef, step, scale, ..
                } => coef.iter().zip(step).map(|(c, d)| c + scale * d).collect(),
                State::Done(Ok(f)) => f.coef.clone(),
                State::Done(Err(_)) => vec![0.0; k],
            })
            .collect();
        let results = pass(&trial)?;
        for ((state, next), sums) in states.iter_mut().zip(trial).zip(results) {
            let State::Running {
                coef,
                sums: old,
                step,
                scale,
                iteration,
            } = state
            else {
                continue;
            };
            // Step halving keeps the likelihood from decreasing.
            if sums.loglik < old.loglik - 1e-12 * old.loglik.abs() && *scale >= 1e-6 {
                *scale /= 2.0;
                continue;
            }
            let converged = step
                .iter()
                .zip(coef.iter())
                .all(|(s, c)| (*scale * s).abs() <= opts.tolerance * (1.0 + c.abs()));
            let iteration = *iteration + 1;
            // Diverging standardised coefficients signal separation; extreme fitted
            // probabilities alone do not (a large sample can hold rows with tiny propensities),
            // but they explain a fit that does not settle.
            let extreme = sums.min_p < 1e-12 || sums.max_p > 1.0 - 1e-12;
            let separated = next[1..].iter().any(|c| c.abs() > opts.max_coefficient)
                || (extreme && !converged && iteration >= opts.max_iterations);
            *state = if separated {
                let mut cols: Vec<(f64, String)> = next[1..]
                    .iter()
                    .zip(&names[1..])
                    .map(|(c, n)| (c.abs(), n.clone()))
                    .collect();
                cols.sort_by(|a, b| b.0.total_cmp(&a.0));
                State::Done(Err(FitError::Separation {
                    columns: cols.into_iter().take(3).map(|c| c.1).collect(),
                    p_range: (sums.min_p, sums.max_p),
                }))
            } else if converged {
                let covariance = match sums.information.clone().cholesky() {
                    Some(c) => c.inverse(),
                    None => DMatrix::from_element(k, k, f64::NAN),
                };
                State::Done(Ok(Logit {
                    coef: next,
                    covariance,
                    loglik: sums.loglik,
                    iterations: iteration,
                    p_range: (sums.min_p, sums.max_p),
                    information: sums.information.clone(),
                }))
            } else if iteration >= opts.max_iterations {
                State::Done(Err(FitError::NotConverged {
                    iterations: opts.max_iterations,
                }))
            } else {
                // The step just taken, where it was a full one: the measure of convergence.
                let taken = (*scale == 1.0).then(|| relative_step(step, coef));
                newton_step(names, next, sums, iteration, taken, &opts)
            };
        }
    }
    Ok(states
        .into_iter()
        .map(|s| match s {
            State::Done(r) => r,
            State::Running { .. } => unreachable!("loop ends when all are done"),
        })
        .collect())
}

/// The Newton step from `coef` with its sums, or the end of the model when the information
/// matrix is singular.
fn newton_step(
    names: &[String],
    coef: Vec<f64>,
    sums: LogitSums,
    iteration: usize,
    previous: Option<f64>,
    opts: &NewtonOptions,
) -> State {
    match sums.information.clone().cholesky() {
        Some(c) => {
            let step: Vec<f64> = c.solve(&sums.score).iter().copied().collect();
            let size = relative_step(&step, &coef);
            // Newton converges quadratically near the maximum: the error after this step is
            // about C·size², with C estimated from the last two steps (size = C·previous²).
            // When that prediction is within the tolerance, the coefficients after this step
            // are as good as those the tolerance asks of a step, and the fit ends here.
            let predicted = previous
                .filter(|p| size < *p && size <= QUADRATIC_REGIME)
                .map(|p| size / (p * p) * size * size);
            let small = size <= opts.tolerance
                || predicted.is_some_and(|e| e <= PREDICTED_MARGIN * opts.tolerance);
            if small && !opts.confirm {
                // The coefficients after this step are the converged ones; the pass that
                // would evaluate them only re-confirms it. Their information, log-likelihood
                // and fitted range are taken here, at the point one (small) step before.
                let next: Vec<f64> = coef.iter().zip(&step).map(|(c, s)| c + s).collect();
                if next[1..].iter().all(|c| c.abs() <= opts.max_coefficient) {
                    let covariance = c.inverse();
                    return State::Done(Ok(Logit {
                        coef: next,
                        covariance,
                        loglik: sums.loglik,
                        iterations: iteration,
                        p_range: (sums.min_p, sums.max_p),
                        information: sums.information,
                    }));
                }
            }
            State::Running {
                coef,
                sums,
                step,
                scale: 1.0,
                iteration,
            }
        }
        None => State::Done(Err(if sums.n == 0.0 {
            FitError::TooFewRows {
                n: 0.0,
                p: names.len(),
            }
        } else {
            FitError::Collinear {
                columns: names[1..].to_vec(),
                condition: f64::INFINITY,
            }
        })),
    }
}

/// The predicted error must be this far inside the tolerance: two fits that took different
/// paths (from zero, from a warm start, on engines that sum in other orders) then end within
/// 1e-9 of each other in their estimates; at the tolerance itself they differed by up to
/// 5.7e-10.
const PREDICTED_MARGIN: f64 = 0.01;

/// Below this relative step size, Newton is taken to be in its quadratic regime, where the
/// error after a step is predicted from the last two steps.
const QUADRATIC_REGIME: f64 = 1e-3;

/// Below this ratio of successive steps, a fixed-curvature iteration is taken to contract
/// linearly at that ratio.
const LINEAR_REGIME: f64 = 0.5;

/// Whether an iteration that steps with a fixed curvature matrix (which contracts linearly
/// near its fixed point) has settled after a step of relative size `size` (see
/// [`relative_step`]), the step before it having had `previous`: the step is within the
/// tolerance, or the error left after it — predicted from the ratio `ρ` of the two steps as
/// `ρ / (1 - ρ) · size`, the tail of a geometric series — is within the same margin inside
/// the tolerance as Newton's predicted ending. Such a fit keeps the coefficients after that
/// step, with no pass to confirm them.
pub fn fixed_curvature_settled(previous: Option<f64>, size: f64, opts: &NewtonOptions) -> bool {
    let predicted = previous
        .map(|p| size / p)
        .filter(|rho| *rho < LINEAR_REGIME)
        .map(|rho| rho / (1.0 - rho) * size);
    size <= opts.tolerance || predicted.is_some_and(|e| e <= PREDICTED_MARGIN * opts.tolerance)
}

/// The largest entry of `step` relative to `1 + |coef|`: the size of a step that the
/// convergence tests compare with the tolerance.
pub fn relative_step(step: &[f64], coef: &[f64]) -> f64 {
    step.iter()
        .zip(coef)
        .map(|(s, c)| s.abs() / (1.0 + c.abs()))
        .fold(0.0, f64::max)
}

/// The sums of one logistic pass computed in memory from rows `[v_1, ..., v_k, y]` (already
/// centred and scaled): the reference the SQL pass must match, and the export-and-fit baseline.
pub fn logit_sums_from_rows(rows: &[Vec<f64>], coef: &[f64]) -> LogitSums {
    let k = coef.len();
    let mut score = DVector::zeros(k);
    let mut information = DMatrix::zeros(k, k);
    let (mut loglik, mut min_p, mut max_p) = (0.0, 1.0f64, 0.0f64);
    let mut v = vec![1.0; k];
    for r in rows {
        v[1..k].copy_from_slice(&r[..k - 1]);
        let y = r[k - 1];
        let eta: f64 = v.iter().zip(coef).map(|(a, b)| a * b).sum();
        let p = 1.0 / (1.0 + (-eta).exp());
        // log(1 + e^eta) without overflow
        let softplus = if eta > 0.0 {
            eta + (-eta).exp().ln_1p()
        } else {
            eta.exp().ln_1p()
        };
        loglik += y * eta - softplus;
        min_p = min_p.min(p);
        max_p = max_p.max(p);
        let w = p * (1.0 - p);
        for i in 0..k {
            score[i] += v[i] * (y - p);
            for j in 0..k {
                information[(i, j)] += w * v[i] * v[j];
            }
        }
    }
    LogitSums {
        n: rows.len() as f64,
        score,
        information,
        loglik,
        min_p,
        max_p,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A linearly contracting iteration (x_{m+1} = ρ·x_m towards 0): it ends within the
    /// tolerance of the fixed point, never later than waiting for a step within the tolerance,
    /// and, contracting by 1e-3 per step from 5e-4, a pass sooner.
    #[test]
    fn a_fixed_curvature_iteration_ends_on_its_predicted_tail() {
        let opts = NewtonOptions::default();
        let run = |rho: f64, predict: bool| {
            let (mut x, mut previous, mut steps) = (5e-4_f64, None, 0);
            loop {
                let step = -(1.0 - rho) * x;
                let size = relative_step(&[step], &[x]);
                let done = if predict {
                    fixed_curvature_settled(previous, size, &opts)
                } else {
                    size <= opts.tolerance
                };
                x += step;
                steps += 1;
                previous = Some(size);
                if done {
                    return (x, steps);
                }
            }
        };
        for rho in [1e-4, 1e-3, 1e-2, 0.1, 0.3] {
            let (x, steps) = run(rho, true);
            let (_, waited) = run(rho, false);
            assert!(x.abs() <= opts.tolerance, "ρ {rho}: {x}");
            assert!(steps <= waited, "ρ {rho}: {steps} vs {waited}");
            if rho == 1e-3 {
                assert!(steps < waited, "ρ {rho}: {steps} vs {waited}");
            }
        }
        // One step alone says nothing of the rate: only a step within the tolerance ends it.
        assert!(!fixed_curvature_settled(None, 1e-9, &opts));
        assert!(fixed_curvature_settled(None, 1e-11, &opts));
        // A ratio too large to trust as linear contraction: no prediction.
        assert!(!fixed_curvature_settled(Some(2e-9), 1.5e-9, &opts));
    }

    #[test]
    fn detects_separation() {
        // y = 1 exactly when x > 0: the likelihood has no maximum.
        let rows: Vec<Vec<f64>> = (-20..20)
            .map(|i| vec![i as f64 / 10.0 + 0.05, f64::from(u8::from(i >= 0))])
            .collect();
        let names = vec!["(intercept)".to_string(), "x".into()];
        let r = logit::<(), _>(
            &names,
            |c| Ok(logit_sums_from_rows(&rows, c)),
            NewtonOptions::default(),
        )
        .unwrap();
        match r {
            Err(FitError::Separation { columns, .. }) => assert_eq!(columns, vec!["x".to_string()]),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn converges_on_overlapping_data() {
        let rows: Vec<Vec<f64>> = (0..200)
            .map(|i| {
                let x = (i % 20) as f64 / 10.0 - 1.0;
                vec![
                    x,
                    f64::from(u8::from((i * 7919) % 13 < 6 + (x * 3.0) as i64)),
                ]
            })
            .collect();
        let names = vec!["(intercept)".to_string(), "x".into()];
        let fit = logit::<(), _>(
            &names,
            |c| Ok(logit_sums_from_rows(&rows, c)),
            NewtonOptions::default(),
        )
        .unwrap()
        .unwrap();
        assert!(fit.iterations < 15, "{fit:?}");
        let s = logit_sums_from_rows(&rows, &fit.coef);
        assert!(s.score.amax() < 1e-8, "score at the optimum {:?}", s.score);
    }

    /// The predicted ending (the default) takes fewer passes than the confirmed one and ends
    /// at the same coefficients to 1e-10; a warm start near the optimum takes fewer still.
    #[test]
    fn the_predicted_ending_and_a_warm_start_save_passes() {
        let rows: Vec<Vec<f64>> = (0..500)
            .map(|i| {
                let x = (i % 25) as f64 / 12.0 - 1.0;
                let z = ((i * 37) % 17) as f64 / 8.0 - 1.0;
                let u = ((i * 7919) % 101) as f64 / 101.0;
                vec![
                    x,
                    z,
                    f64::from(u8::from(u < 1.0 / (1.0 + (-(0.8 * x - 0.5 * z)).exp()))),
                ]
            })
            .collect();
        let names: Vec<String> = ["(intercept)", "x", "z"].map(String::from).to_vec();
        let run = |start: Vec<f64>, confirm: bool| {
            let mut passes = 0;
            let fit = logit_many_from::<(), _>(
                &names,
                vec![start],
                |c| {
                    passes += 1;
                    Ok(vec![logit_sums_from_rows(&rows, &c[0])])
                },
                NewtonOptions {
                    confirm,
                    ..NewtonOptions::default()
                },
            )
            .unwrap()
            .pop()
            .unwrap()
            .unwrap();
            (fit.coef, passes)
        };
        let (exact, confirmed) = run(vec![0.0; 3], true);
        let (predicted, fewer) = run(vec![0.0; 3], false);
        assert!(fewer < confirmed, "{fewer} vs {confirmed}");
        let near: Vec<f64> = exact.iter().map(|c| c * 1.01).collect();
        let (warm, fewest) = run(near, false);
        assert!(fewest < fewer, "{fewest} vs {fewer}");
        for other in [&predicted, &warm] {
            for (a, b) in exact.iter().zip(other.iter()) {
                assert!(
                    (a - b).abs() <= 1e-10 * (1.0 + a.abs()),
                    "{exact:?} vs {other:?}"
                );
            }
        }
    }
}
