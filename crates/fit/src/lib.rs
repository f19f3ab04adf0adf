//! The Rust finisher: small linear algebra on the aggregates that passes return.
//!
//! The primary type is [`Moments`]: the count, sums and sums of products of a centred and
//! scaled design vector, exactly what a Gram pass returns. From it [`ols`] fits least squares
//! with an intercept, undoing the centring and scaling, after a conditioning check that names
//! the collinear or constant columns instead of returning noise; [`logit`] drives Newton's
//! method for logistic regression over one aggregate pass per iteration, with step halving and
//! a separation check; [`two_stage`] fits two-stage least squares (instrumental variables)
//! from the same moments.
//!
//! Key design decision: everything is solved in the centred, scaled coordinates the pass used
//! (a correlation-matrix problem), because forming raw sums of products of uncentred columns
//! loses the digits that ill-conditioned designs (NIST's Longley data) need.
//!
//! This crate does no I/O and knows nothing of SQL: it sees only numbers.
#![deny(missing_docs)]

mod iv;
mod logit;
mod moments;
mod ols;

pub use iv::{chi2_upper, two_stage, FirstStage, IvColumns, OverId, Robust, TwoStage};
pub use logit::{
    fixed_curvature_settled, logit, logit_many, logit_many_from, logit_sums_from_rows,
    relative_step, Logit, LogitSums, NewtonOptions,
};
pub use moments::Moments;
pub use ols::{ols, residual_moments_from_rows, Ols};

/// Why a fit cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    /// Sums of the wrong shape.
    #[error("aggregate shape mismatch: {0}")]
    Shape(String),
    /// Fewer rows than parameters.
    #[error("{n} rows cannot fit {p} parameters; use fewer covariates or more rows")]
    TooFewRows {
        /// Rows.
        n: f64,
        /// Parameters, intercept included.
        p: usize,
    },
    /// A column with no variation.
    #[error("column `{column}` is constant in these rows; drop it from the design")]
    Constant {
        /// The column.
        column: String,
    },
    /// The outcome is perfectly (or almost perfectly) predicted: no finite maximum likelihood.
    #[error("perfect separation: the outcome is (almost) perfectly predicted, mostly by {}; fitted probabilities reach {:.1e} and 1 - {:.1e}; drop or coarsen those columns, or restrict the rows to where both outcomes occur", columns.iter().map(|c| format!("`{c}`")).collect::<Vec<_>>().join(", "), p_range.0, 1.0 - p_range.1)]
    Separation {
        /// Columns with the largest standardised coefficients.
        columns: Vec<String>,
        /// Smallest and largest fitted probability when stopped.
        p_range: (f64, f64),
    },
    /// Newton's method did not converge.
    #[error("the logistic fit did not converge in {iterations} iterations")]
    NotConverged {
        /// Iterations run.
        iterations: usize,
    },
    /// Columns that are (nearly) linear combinations of each other.
    #[error("columns {} are collinear (condition number {condition:.3e}); drop one of them", columns.iter().map(|c| format!("`{c}`")).collect::<Vec<_>>().join(", "))]
    Collinear {
        /// The columns involved, most involved first.
        columns: Vec<String>,
        /// Condition number of their correlation matrix.
        condition: f64,
    },
}

#[cfg(test)]
pub(crate) mod tests {
    /// A reproducible uniform draw in [−0.5, 0.5) (a 64-bit linear congruential generator).
    pub(crate) fn lcg(state: &mut u64) -> f64 {
        *state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((*state >> 11) as f64) / ((1u64 << 53) as f64) - 0.5
    }
}
