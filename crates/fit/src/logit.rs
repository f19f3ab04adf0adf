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
}

/// Options of the Newton driver.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NewtonOptions {
    /// Most passes to run.
    pub max_iterations: usize,
    /// Stop when every step is below `tolerance * (1 + |coef|)`.
    pub tolerance: f64,
    /// A standardised coefficient beyond this, or fitted probabilities within `1e-12` of 0 or 1,
    /// signals (quasi-)separation.
    pub max_coefficient: f64,
}

impl Default for NewtonOptions {
    fn default() -> Self {
        NewtonOptions {
            max_iterations: 50,
            tolerance: 1e-10,
            max_coefficient: 30.0,
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
    let k = names.len();
    let mut coef = vec![0.0; k];
    let mut sums = pass(&coef)?;
    for iteration in 1..=opts.max_iterations {
        let step = match sums.information.clone().cholesky() {
            Some(c) => c.solve(&sums.score),
            None => {
                return Ok(Err(FitError::Collinear {
                    columns: names[1..].to_vec(),
                    condition: f64::INFINITY,
                }))
            }
        };
        // Step halving keeps the likelihood from decreasing.
        let mut scale = 1.0;
        let mut next;
        let mut next_sums;
        loop {
            next = coef
                .iter()
                .zip(step.iter())
                .map(|(c, s)| c + scale * s)
                .collect::<Vec<f64>>();
            next_sums = pass(&next)?;
            if next_sums.loglik >= sums.loglik - 1e-12 * sums.loglik.abs() || scale < 1e-6 {
                break;
            }
            scale /= 2.0;
        }
        let converged = step
            .iter()
            .zip(&coef)
            .all(|(s, c)| (scale * s).abs() <= opts.tolerance * (1.0 + c.abs()));
        coef = next;
        sums = next_sums;
        let separated = coef[1..].iter().any(|c| c.abs() > opts.max_coefficient)
            || sums.min_p < 1e-12
            || sums.max_p > 1.0 - 1e-12;
        if separated {
            let mut cols: Vec<(f64, String)> = coef[1..]
                .iter()
                .zip(&names[1..])
                .map(|(c, n)| (c.abs(), n.clone()))
                .collect();
            cols.sort_by(|a, b| b.0.total_cmp(&a.0));
            return Ok(Err(FitError::Separation {
                columns: cols.into_iter().take(3).map(|c| c.1).collect(),
                p_range: (sums.min_p, sums.max_p),
            }));
        }
        if converged {
            let covariance = match sums.information.clone().cholesky() {
                Some(c) => c.inverse(),
                None => DMatrix::from_element(k, k, f64::NAN),
            };
            return Ok(Ok(Logit {
                coef,
                covariance,
                loglik: sums.loglik,
                iterations: iteration,
                p_range: (sums.min_p, sums.max_p),
            }));
        }
    }
    Ok(Err(FitError::NotConverged {
        iterations: opts.max_iterations,
    }))
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
}
