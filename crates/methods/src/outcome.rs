//! Per-arm linear outcome models: least-squares fits from a Gram pass's moments, with errors
//! that name the rows, and the covariate moments of a target population.

use crate::prepare::Setup;
use crate::MethodError;
use nalgebra::{DMatrix, DVector};
use upshot_fit::{ols, Moments, Ols};

/// A least-squares fit of the outcome (last term) on the covariates, with context in errors.
pub(crate) fn fit_arm(s: &Setup, m: &Moments, what: &str) -> Result<Ols, MethodError> {
    let p = s.terms.len();
    let x: Vec<usize> = (0..p).collect();
    ols(m, p, &x)
        .map_err(|e| MethodError::Input(format!("{what}: the outcome model cannot be fitted: {e}")))
}

/// Covariate means (original units) and covariance (original units, divisor n).
pub(crate) fn covariate_moments(m: &Moments, p: usize) -> (DVector<f64>, DMatrix<f64>) {
    let mean = DVector::from_fn(p, |i, _| m.mean(i));
    let c = m.covariance();
    let cov = DMatrix::from_fn(p, p, |i, j| c[(i, j)] * m.scale[i] * m.scale[j]);
    (mean, cov)
}
